"""Fixed effects of the first stage and the quick logit: market effects and geography level x
period effects, checked against linearmodels' IV2SLS with the same effects as dummy columns."""

from __future__ import annotations

import tomllib
from datetime import date, timedelta
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from instruments_fixtures import fixture_config
from linearmodels.iv import IV2SLS

from demandprep.config import ConfigInvalid, parse_config
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.export.quick_logit import quick_logit
from demandprep.instruments.first_stage import measure_first_stage
from demandprep.instruments.fixed_effects import _codes

STORES = {f"S{i:02d}": ("north", "east", "south")[i % 3] for i in range(9)}
WEEKS, PRODUCTS = 6, 5
ALPHA = 1.5
TEMPLATE = Path(__file__).resolve().parents[1] / "src" / "demandprep" / "templates" / "demo.toml"


def simulated_share_table(seed: int = 11) -> pd.DataFrame:
    """Store-week markets with product, market and region-week shocks; price is endogenous."""
    rng = np.random.default_rng(seed)
    stores = sorted(STORES)
    rows = [(s, w, p) for s in stores for w in range(WEEKS) for p in range(PRODUCTS)]
    frame = pd.DataFrame(rows, columns=["geography", "week", "product_index"])
    n = len(frame)
    region_week = {(r, w): rng.normal() for r in set(STORES.values()) for w in range(WEEKS)}
    market_shock = {(s, w): rng.normal() for s in stores for w in range(WEEKS)}
    frame["region"] = frame.geography.map(STORES)
    frame["period_start"] = [date(2024, 1, 1) + timedelta(weeks=int(w)) for w in frame.week]
    frame["market"] = [
        f"{g}/{d.isoformat()}" for g, d in zip(frame.geography, frame.period_start, strict=True)
    ]
    frame["product"] = [f"p{i}" for i in frame.product_index]
    frame["roast_level"] = (frame.product_index % 3 + 1).astype(float)
    frame["organic"] = frame.product_index % 2 == 0
    frame["iv_hausman_price"] = rng.normal(size=n)
    xi = rng.normal(scale=0.5, size=n)
    shocks = np.array(
        [
            region_week[(r, w)] + market_shock[(s, w)]
            for r, s, w in zip(frame.region, frame.geography, frame.week, strict=True)
        ]
    )
    frame["price"] = (
        6.0
        + 0.8 * frame.iv_hausman_price
        + 0.4 * frame.product_index
        + 0.5 * shocks
        + 0.8 * xi
        + rng.normal(scale=0.3, size=n) * (1 + frame.product_index)  # heteroskedastic
    )
    frame["log_share_ratio"] = -2.0 + 0.6 * frame.product_index - ALPHA * frame.price + shocks + xi
    frame["share"] = 0.02
    assert (frame.price > 0).all()  # the quick logit leaves non-positive prices out
    return frame


def load_share_table(con: duckdb.DuckDBPyConnection, frame: pd.DataFrame) -> None:
    """share_table, instrument_columns and stores as the instrument stages leave them."""
    con.register("frame", frame)
    con.execute(
        """
        create table share_table as
        select 'visits' as assumption, market, geography, period_start, product, price, share,
            log_share_ratio, false as is_fringe, roast_level, organic, iv_hausman_price,
            false as iv_hausman_missing
        from frame
        """
    )
    con.execute(
        """
        create table instrument_columns as
        select * from (values ('iv_hausman_missing', 'flag', 'hausman', 'price'),
            ('iv_hausman_price', 'instrument', 'hausman', 'price'))
            t(column_name, role, family, source)
        """
    )
    con.execute("create table stores (store varchar, region varchar)")
    con.executemany("insert into stores values (?, ?)", list(STORES.items()))


@pytest.fixture()
def world(tmp_path: Path):
    frame = simulated_share_table()
    con = duckdb.connect()
    load_share_table(con, frame)
    yield con, frame, tmp_path
    con.close()


def with_dummies(frame: pd.DataFrame, effect_column: str) -> tuple[pd.DataFrame, list[str]]:
    """The frame with a constant, organic as 0/1 and one dummy per level but the first."""
    dummies = pd.get_dummies(frame[effect_column], prefix="fe", drop_first=True, dtype=float)
    data = pd.concat([frame.assign(const=1.0, organic=frame.organic * 1.0), dummies], axis=1)
    return data, list(dummies.columns)


def reference_fit(frame: pd.DataFrame, effect_column: str, exog: list[str], cov_type: str):
    data, dummies = with_dummies(frame, effect_column)
    model = IV2SLS(
        data.log_share_ratio,
        data[["const", *exog, *dummies]],
        data[["price"]],
        data[["iv_hausman_price"]],
    )
    return model.fit(cov_type=cov_type, debiased=True)


@pytest.mark.parametrize(
    ("effect", "column"),
    [("market", "market"), ("region:period", "region_period"), ("store:period", "market")],
)
def test_first_stage_f_with_market_and_level_period_effects_matches_linearmodels(
    world, effect, column
) -> None:
    con, frame, tmp_path = world
    frame = frame.assign(region_period=frame.region + "/" + frame.period_start.astype(str))
    config = fixture_config(tmp_path, {"first_stage_fixed_effects": [effect]})
    ctx = BuildContext(con=con, config=config)
    measure_first_stage(ctx)
    facts = ctx.facts["first_stage"]
    # reference: linearmodels IV2SLS first_stage f.stat, effects as dummy columns
    classic = reference_fit(frame, column, ["roast_level", "organic"], "unadjusted")
    robust = reference_fit(frame, column, ["roast_level", "organic"], "robust")
    assert facts["partial_f"] == pytest.approx(
        classic.first_stage.diagnostics.loc["price", "f.stat"], rel=1e-6
    )
    assert facts["partial_f_robust"] == pytest.approx(
        robust.first_stage.diagnostics.loc["price", "f.stat"], rel=1e-6
    )
    assert facts["fixed_effects"] == [effect]


def test_quick_logit_uses_product_effects_and_matches_linearmodels(world) -> None:
    con, frame, tmp_path = world
    config = fixture_config(tmp_path, {"first_stage_fixed_effects": ["product"]})
    ols, iv = quick_logit(con, config, "visits")
    # roast_level and organic are constant within a product: the product effects absorb them.
    classic = reference_fit(frame, "product", [], "unadjusted")
    robust = reference_fit(frame, "product", [], "robust")
    # reference: linearmodels IV2SLS with product dummies, unadjusted and robust covariance
    assert iv.fixed_effects == ["product"]
    assert iv.names == ["price"]
    assert iv.price_coefficient == pytest.approx(classic.params["price"], rel=1e-8)
    assert iv.price_std_error == pytest.approx(classic.std_errors["price"], rel=1e-8)
    assert iv.first_stage_f == pytest.approx(
        classic.first_stage.diagnostics.loc["price", "f.stat"], rel=1e-6
    )
    assert iv.first_stage_f_robust == pytest.approx(
        robust.first_stage.diagnostics.loc["price", "f.stat"], rel=1e-6
    )
    assert ols.fixed_effects == ["product"]


def test_quick_logit_ols_with_market_effects_matches_statsmodels(world) -> None:
    import statsmodels.formula.api as smf

    con, frame, tmp_path = world
    config = fixture_config(tmp_path, {"first_stage_fixed_effects": ["market", "product"]})
    [ols, _] = quick_logit(con, config, "visits")
    # reference: statsmodels OLS with market and product dummies from the formula
    reference = smf.ols("log_share_ratio ~ price + C(market) + C(product)", frame).fit()
    assert ols.price_coefficient == pytest.approx(reference.params["price"], rel=1e-8)
    assert ols.price_std_error == pytest.approx(reference.bse["price"], rel=1e-8)
    assert ols.rows == reference.nobs


def test_level_the_stores_source_does_not_map_is_one_line(world) -> None:
    con, _, tmp_path = world
    config = fixture_config(tmp_path, {"first_stage_fixed_effects": ["chain:period"]})
    ctx = BuildContext(con=con, config=config)
    with pytest.raises(UserError) as caught:
        measure_first_stage(ctx)
    assert caught.value.message == (
        "config key 'instruments.first_stage_fixed_effects': 'chain:period' names 'chain', "
        "which is not a column of the stores table (columns: store, region)."
    )
    assert "first_stage" not in ctx.facts


def test_unknown_fixed_effect_name_is_refused_by_the_config(tmp_path: Path) -> None:
    raw = tomllib.loads(TEMPLATE.read_text(encoding="utf-8"))
    raw["instruments"]["first_stage_fixed_effects"] = ["period", "region"]
    with pytest.raises(ConfigInvalid) as caught:
        parse_config(raw, tmp_path / "demandprep.toml", check_files=False)
    assert caught.value.message == (
        f"{tmp_path / 'demandprep.toml'}: key 'instruments.first_stage_fixed_effects[1]': "
        "'region' is not a fixed effect; use period, product, market or <stores level>:period "
        "(e.g. region:period) (got 'region')."
    )


def test_market_and_level_period_effects_are_accepted_by_the_config(tmp_path: Path) -> None:
    raw = tomllib.loads(TEMPLATE.read_text(encoding="utf-8"))
    effects = ["market", "product", "region:period", "store:period"]
    raw["instruments"]["first_stage_fixed_effects"] = effects
    config = parse_config(raw, tmp_path / "demandprep.toml", check_files=False)
    assert config.instruments.first_stage_fixed_effects == effects


def _same_grouping(left: np.ndarray, right: list[tuple[object, ...]]) -> bool:
    """True when two rows share a code exactly when they share a key (codes are labels only)."""
    pairs = set(zip(left.tolist(), right, strict=True))
    return len(pairs) == len(set(left.tolist())) == len(set(right))


def test_group_codes_group_rows_by_their_key_tuples_nulls_apart() -> None:
    # the reference is Python's own tuple equality, with None a value of its own: a null level
    # value is not the text 'None' and not the empty text
    rng = np.random.default_rng(3)
    texts = np.asarray(
        [["a", "b", "None", "", None, "a\x1fb"][i] for i in rng.integers(0, 6, 500)],
        dtype=object,
    )
    days = np.asarray(
        [
            np.datetime64("2024-01-01") + np.timedelta64(7 * int(i), "D")
            for i in rng.integers(0, 4, 500)
        ]
    )
    words = np.asarray([["a", "b\x1f", "a\x1fb"][i] for i in rng.integers(0, 3, 500)], dtype=object)
    masked = np.ma.masked_array(rng.integers(0, 3, 500), mask=rng.integers(0, 2, 500) == 1)

    for columns in ([texts], [days], [texts, days], [words, texts], [masked, days]):
        codes = _codes(*columns)
        keys = list(
            zip(
                *[
                    np.ma.asarray(c).astype(object).filled(None)
                    if np.ma.isMaskedArray(c)
                    else c.tolist()
                    for c in columns
                ],
                strict=True,
            )
        )
        assert codes.shape == (500,)
        assert codes.min() == 0 and codes.max() == len(set(keys)) - 1
        assert _same_grouping(codes, keys)
