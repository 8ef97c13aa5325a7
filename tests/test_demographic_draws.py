"""demographics_<assumption>.parquet: per market, seeded draws of household demographics from
the households that visited the market, weighted by visits, with fallbacks; checked on the sample
against a visit-weighted distribution computed here from the warehouse's raw lines."""

from __future__ import annotations

import math
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
import pytest
from sample_builds import build_sample, copy_sample
from scipy import stats

from demandprep.config import load_config
from demandprep.pipeline import run_build

DRAWS = 400
MIN_HOUSEHOLDS = 40
SECTION = f"""
[demographic_draws]
draws = {DRAWS}
seed = 11
min_households = {MIN_HOUSEHOLDS}
"""
# family-wise error rate of each statistical check below
ALPHA = 1e-3


@pytest.fixture(scope="module")
def drawn(tmp_path_factory: pytest.TempPathFactory, coffee_sample: Path):
    config = copy_sample(coffee_sample, tmp_path_factory.mktemp("draws") / "sample")
    config.write_text(config.read_text() + SECTION)
    folder, loaded = build_sample(config)
    return folder, loaded


def _visit_weights(warehouse: Path) -> pl.DataFrame:
    """Visits per card, store and Monday week, from raw lines (sale lines, store-day receipts)."""
    with duckdb.connect(str(warehouse), read_only=True) as con:
        lines = con.sql(
            "select store, receipt, sold_at, card from raw_lines "
            "where line_kind = 'sale' and card is not null"
        ).pl()
        households = con.sql("select card, household_size, income_band from households").pl()
    lines = lines.with_columns(day=pl.col("sold_at").dt.date())
    visits = lines.group_by("store", "day", "receipt").agg(pl.col("card").min())
    visits = visits.with_columns(
        week=pl.col("day") - pl.duration(days=pl.col("day").dt.weekday() - 1)
    )
    visits = visits.with_columns(
        market=pl.col("store") + "/" + pl.col("week").dt.strftime("%Y-%m-%d")
    )
    counted = visits.group_by("market", "store", "card").agg(visits=pl.len())
    return counted.join(households, on="card", how="inner")


def _pool(weights: pl.DataFrame, level: str, market: str) -> pl.DataFrame:
    if level == "market":
        rows = weights.filter(pl.col("market") == market)
    elif level == "geography":
        rows = weights.filter(pl.col("store") == market.split("/")[0])
    else:
        rows = weights
    return rows.group_by("card", "household_size", "income_band").agg(pl.col("visits").sum())


def test_draws_have_one_row_per_market_and_draw_and_no_household_id(drawn) -> None:
    folder, _config = drawn
    draws = pl.read_parquet(folder / "demographics_visits.parquet")
    markets = pl.read_parquet(folder / "markets_visits.parquet")
    assert draws.columns == [
        "assumption",
        "market",
        "draw",
        "weight",
        "draw_level",
        "household_size",
        "income_band",
    ]
    assert sorted(set(draws["market"])) == sorted(markets["market"])
    assert draws.group_by("market").len()["len"].unique().to_list() == [DRAWS]
    assert draws["weight"].unique().to_list() == [1 / DRAWS]
    assert set(draws["draw_level"]) <= {"market", "geography", "all"}


def test_draw_levels_follow_the_household_threshold(drawn) -> None:
    folder, config = drawn
    weights = _visit_weights(config.warehouse.path)
    in_market = dict(weights.group_by("market").agg(pl.col("card").n_unique()).iter_rows())
    in_store = dict(weights.group_by("store").agg(pl.col("card").n_unique()).iter_rows())
    levels = (
        pl.read_parquet(folder / "demographics_visits.parquet")
        .group_by("market")
        .agg(pl.col("draw_level").first())
    )
    for market, level in levels.iter_rows():
        if in_market.get(market, 0) >= MIN_HOUSEHOLDS:
            expected = "market"
        elif in_store.get(market.split("/")[0], 0) >= MIN_HOUSEHOLDS:  # markets are stores
            expected = "geography"
        else:
            expected = "all"
        assert level == expected, market
    assert set(levels["draw_level"]) == {"market", "geography", "all"}  # the sample has each


def test_draws_match_the_visit_weighted_households_within_sampling_error(drawn) -> None:
    folder, config = drawn
    weights = _visit_weights(config.warehouse.path)
    draws = pl.read_parquet(folder / "demographics_visits.parquet")
    markets = draws["market"].unique().sort().to_list()
    # Bonferroni over markets and the two columns
    alpha = ALPHA / (2 * len(markets))
    # Dvoretzky-Kiefer-Wolfowitz (Massart 1990): P(sup|F_n - F| > eps) <= 2 exp(-2 n eps^2)
    eps = math.sqrt(math.log(2 / alpha) / (2 * DRAWS))
    chi_square = 0.0
    for market in markets:
        sample = draws.filter(pl.col("market") == market)
        pool = _pool(weights, sample["draw_level"][0], market)
        p = (pool["visits"] / pool["visits"].sum()).to_numpy()
        for column in ("household_size", "income_band"):
            values = pool[column].to_numpy()
            support = np.unique(values)
            truth = np.array([p[values <= v].sum() for v in support])
            drawn_values = sample[column].to_numpy()
            empirical = np.array([(drawn_values <= v).mean() for v in support])
            assert np.max(np.abs(empirical - truth)) <= eps, (market, column)
        # CLT: the mean of N draws has sd sigma / sqrt(N); summed squares ~ chi-square(markets)
        sizes = pool["household_size"].to_numpy().astype(float)
        mu = float(p @ sizes)
        sigma = math.sqrt(float(p @ (sizes - mu) ** 2))
        mean = float(sample["household_size"].mean())
        chi_square += ((mean - mu) / (sigma / math.sqrt(DRAWS))) ** 2
    # reference: scipy.stats.chi2 quantile of the summed squared z-scores
    assert chi_square <= stats.chi2.ppf(1 - ALPHA, len(markets))


def test_draws_are_byte_identical_on_a_rebuild_with_other_threads(drawn) -> None:
    folder, config = drawn
    one_thread = config.model_copy(
        update={"warehouse": config.warehouse.model_copy(update={"threads": 1})}
    )
    again, _ctx = run_build(one_thread)
    for name in ("demographics_visits.parquet", "demographics_peak.parquet"):
        assert (again / name).read_bytes() == (folder / name).read_bytes()


def test_a_config_asking_for_draws_without_demographics_is_refused(
    coffee_sample: Path, tmp_path: Path
) -> None:
    config = copy_sample(coffee_sample, tmp_path / "sample")
    text = config.read_text().replace(
        'demographics = ["household_size", "income_band"]', "demographics = []"
    )
    config.write_text(text + SECTION)
    with pytest.raises(Exception) as caught:
        load_config(config)
    assert caught.value.message == (
        f"{config}: key 'demographic_draws.draws' needs demographic columns: "
        "choices.demographics is empty."
    )


def test_check_asks_for_the_drawn_columns_even_without_the_choice_build(
    coffee_sample: Path, tmp_path: Path
) -> None:
    from demandprep.preflight import role_problems

    config = copy_sample(coffee_sample, tmp_path / "sample")
    text = config.read_text().replace("[choices]\nenabled = true", "[choices]\nenabled = false")
    text = text.replace('"household_size", "income_band"]', '"household_size", "pets"]')
    config.write_text(text + SECTION)
    (problem,) = role_problems(load_config(config))
    assert problem.message == (
        "config key 'choices.demographics' names 'pets', which sources.households.columns does "
        "not map (it maps card, household_size, income_band)."
    )
