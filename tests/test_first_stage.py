"""First-stage partial F against linearmodels' IV2SLS first-stage diagnostics.

Our statistic is the classic homoskedastic F; linearmodels reports the same number as
``first_stage.diagnostics["f.stat"]`` when fit with cov_type="unadjusted", debiased=True
(its docstring: the Wald statistic / q with the n - k covariance divisor).
"""

from __future__ import annotations

from datetime import date, timedelta

import duckdb
import numpy as np
import pandas as pd
import pytest
from instruments_fixtures import fixture_config
from linearmodels.iv import IV2SLS
from scipy import stats

from demandprep.context import BuildContext
from demandprep.instruments.first_stage import measure_first_stage
from demandprep.instruments.regression import partial_f_test


def linearmodels_first_stage_f(frame: pd.DataFrame, exog: list[str], instruments: list[str]):
    """f.stat of linearmodels' first stage; its dependent variable does not enter the F."""
    model = IV2SLS(frame["outcome"], frame[exog], frame[["price"]], frame[instruments])
    fitted = model.fit(cov_type="unadjusted", debiased=True)
    return float(fitted.first_stage.diagnostics.loc["price", "f.stat"])


def simulated_market(rows: int, seed: int, strength: float = 0.4) -> pd.DataFrame:
    """Price driven by two instruments, a characteristic, period and product effects."""
    rng = np.random.default_rng(seed)
    period = rng.integers(0, 8, rows)
    product = rng.integers(0, 5, rows)
    frame = pd.DataFrame(
        {
            "const": 1.0,
            "sweetness": rng.normal(size=rows),
            "roast_level": (product % 3 + 1).astype(float),  # constant within product
            "iv_a": rng.normal(size=rows),
            "iv_b": rng.normal(size=rows),
            "period": period,
            "product": product,
        }
    )
    noise = rng.normal(size=rows)
    frame["price"] = (
        2.0
        + strength * (frame.iv_a - 0.5 * frame.iv_b)
        + 0.3 * frame.sweetness
        + 0.2 * period
        + 0.5 * product
        + noise
    )
    frame["outcome"] = 1.0 - 2.0 * frame.price + noise + rng.normal(size=rows)
    return frame


def test_partial_f_matches_linearmodels_without_fixed_effects():
    frame = simulated_market(300, seed=1)
    ours = partial_f_test(
        frame.price.to_numpy(),
        frame[["iv_a", "iv_b"]].to_numpy(),
        frame[["sweetness", "roast_level"]].to_numpy(),
    )
    # reference: linearmodels IV2SLS first_stage f.stat (unadjusted, debiased)
    reference = linearmodels_first_stage_f(
        frame, ["const", "sweetness", "roast_level"], ["iv_a", "iv_b"]
    )
    assert ours.partial_f == pytest.approx(reference, abs=1e-6)
    assert (ours.df_num, ours.df_den) == (2, 300 - 5)
    # reference: scipy.stats F distribution, survival function at the statistic
    # (ours is a continued fraction, instruments/f_distribution.py: equal to 1e-12)
    assert ours.p_value == pytest.approx(stats.f.sf(ours.partial_f, 2, 300 - 5), rel=1e-12)


def test_partial_f_with_period_and_product_effects_matches_linearmodels_dummies():
    frame = simulated_market(400, seed=2)
    ours = partial_f_test(
        frame.price.to_numpy(),
        frame[["iv_a", "iv_b"]].to_numpy(),
        # roast_level is constant within product: the product effects absorb it.
        frame[["sweetness", "roast_level"]].to_numpy(),
        [frame.period.to_numpy(), frame["product"].to_numpy()],
    )
    period_dummies = pd.get_dummies(frame.period, prefix="period", drop_first=True, dtype=float)
    product_dummies = pd.get_dummies(
        frame["product"], prefix="product", drop_first=True, dtype=float
    )
    with_dummies = pd.concat([frame, period_dummies, product_dummies], axis=1)
    exog = ["const", "sweetness", *period_dummies.columns, *product_dummies.columns]
    # reference: linearmodels IV2SLS first_stage f.stat with the effects as dummy regressors
    reference = linearmodels_first_stage_f(with_dummies, exog, ["iv_a", "iv_b"])
    assert ours.partial_f == pytest.approx(reference, abs=1e-6)
    assert (ours.df_num, ours.df_den) == (2, 400 - (len(exog) + 2))


def test_collinear_instrument_counts_once():
    frame = simulated_market(200, seed=3)
    frame["iv_twice_a"] = 2.0 * frame.iv_a
    ours = partial_f_test(
        frame.price.to_numpy(),
        frame[["iv_a", "iv_b", "iv_twice_a"]].to_numpy(),
        frame[["sweetness"]].to_numpy(),
    )
    reference = linearmodels_first_stage_f(frame, ["const", "sweetness"], ["iv_a", "iv_b"])
    assert ours.df_num == 2
    assert ours.partial_f == pytest.approx(reference, abs=1e-6)


def share_table_from(frame: pd.DataFrame, con: duckdb.DuckDBPyConnection) -> None:
    """A share_table (two assumptions) and instrument_columns as the instrument stages leave."""
    start = date(2024, 1, 1)
    rows = frame.assign(
        market=[f"S{i % 7}/{i}" for i in range(len(frame))],
        product_id=[f"p{p}" for p in frame["product"]],
        period_start=[start + timedelta(weeks=int(p)) for p in frame.period],
        log_share_ratio=-3.0,
        is_fringe=False,
        organic=frame.sweetness > 0,
    )
    con.register("rows_frame", rows)
    con.execute(
        """
        create table share_table as
        select assumption, market, product_id as product, period_start, price, log_share_ratio,
            is_fringe, roast_level, organic, iv_a as iv_hausman_price, iv_b as iv_cost_index,
            iv_a is null as iv_hausman_missing
        from rows_frame, (values ('visits'), ('peak')) a(assumption)
        """
    )
    con.execute(
        """
        create table instrument_columns as
        select * from (values ('iv_cost_index', 'instrument', 'cost_shifters', 'index'),
            ('iv_hausman_missing', 'flag', 'hausman', 'price'),
            ('iv_hausman_price', 'instrument', 'hausman', 'price'))
            t(column_name, role, family, source)
        """
    )


def test_build_records_first_stage_f_of_rows_with_instruments(tmp_path):
    frame = simulated_market(250, seed=4)
    frame.loc[[3, 17, 40], "iv_a"] = np.nan  # three rows without an other-market price
    con = duckdb.connect()
    share_table_from(frame, con)
    ctx = BuildContext(con=con, config=fixture_config(tmp_path, {}))
    measure_first_stage(ctx)
    facts = ctx.facts["first_stage"]
    complete = frame.dropna(subset=["iv_a"]).assign(organic=lambda f: (f.sweetness > 0) * 1.0)
    # reference: linearmodels IV2SLS first_stage f.stat (unadjusted, debiased)
    reference = linearmodels_first_stage_f(
        complete, ["const", "roast_level", "organic"], ["iv_b", "iv_a"]
    )
    assert facts["partial_f"] == pytest.approx(reference, abs=1e-6)
    assert facts["instruments"] == ["iv_cost_index", "iv_hausman_price"]
    assert facts["exogenous"] == ["roast_level", "organic"]
    assert (facts["rows"], facts["rows_dropped_null"]) == (247, 3)
    assert (facts["df_num"], facts["df_den"]) == (2, 247 - 5)
    assert facts["weak"] is False and not ctx.warnings


def test_weak_instruments_are_flagged_and_warned(tmp_path):
    frame = simulated_market(250, seed=5, strength=0.0)  # the instruments do not move price
    con = duckdb.connect()
    share_table_from(frame, con)
    ctx = BuildContext(con=con, config=fixture_config(tmp_path, {"weak_instrument_f": 10.0}))
    measure_first_stage(ctx)
    facts = ctx.facts["first_stage"]
    # Staiger & Stock (1997) rule of thumb: F below 10 signals weak instruments.
    assert facts["partial_f"] < 10 and facts["weak"] is True
    assert any("weak instruments" in message for message in ctx.warnings)


def test_period_fixed_effects_from_config_match_linearmodels(tmp_path):
    frame = simulated_market(250, seed=6)
    con = duckdb.connect()
    share_table_from(frame, con)
    config = fixture_config(tmp_path, {"first_stage_fixed_effects": ["period"]})
    ctx = BuildContext(con=con, config=config)
    measure_first_stage(ctx)
    dummies = pd.get_dummies(frame.period, prefix="period", drop_first=True, dtype=float)
    data = pd.concat([frame.assign(organic=(frame.sweetness > 0) * 1.0), dummies], axis=1)
    exog = ["const", "roast_level", "organic", *dummies.columns]
    # reference: linearmodels IV2SLS first_stage f.stat with period dummies
    reference = linearmodels_first_stage_f(data, exog, ["iv_b", "iv_a"])
    assert ctx.facts["first_stage"]["partial_f"] == pytest.approx(reference, abs=1e-6)
    assert ctx.facts["first_stage"]["fixed_effects"] == ["period"]
