"""Near-rival counts when the spread moves: a rival is near when its gap (the absolute difference
of the characteristic) is at most the spread, so a count changes only in a period with a rival
gap between the old spread and the new one (Gandhi & Houde 2019 define the count; which counts a
moved threshold changes is plain arithmetic). A night recounts those periods, keeps the other
periods' counts, and its Parquet files equal a full build's."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import duckdb
import pytest
from test_incremental_build import (
    LAST_DAY,
    RECEIPTS,
    assert_same_parquet,
    build,
    full_rebuild,
    instrument_scope,
    private_world,
    stored_instrument,
)

from demandprep.config import load_config
from demandprep.warehouse import open_warehouse

# these tests are about bytes, not plots: a one-line report keeps them fast
pytestmark = pytest.mark.usefixtures("one_line_report")

NEAR = "iv_diff_near_roast_level"
KEPT_WEEK = "2024-01-15"
PLANTED = -7.0  # a count no build makes


@pytest.fixture()
def world(tmp_path: Path, coffee_sample: Path) -> Path:
    """A private copy of the sample with choices off and its last day's file held back."""
    return private_world(tmp_path, coffee_sample)


def rival_gaps(world: Path) -> dict[str, set[float]]:
    """Every rival pair's roast-level gap, by period, counted here from the characteristic
    values (not from what the build stores)."""
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    try:
        rows = con.execute(
            "with chosen as (select * from iv_characteristic_values "
            "where characteristic = 'roast_level') "
            "select distinct own.period_start::varchar, abs(other.value - own.value) "
            "from chosen as own join chosen as other "
            "on other.market = own.market and other.firm <> own.firm"
        ).fetchall()
    finally:
        con.close()
    gaps: dict[str, set[float]] = {}
    for period, gap in rows:
        gaps.setdefault(period, set()).add(gap)
    return gaps


def stored_spread(world: Path) -> float:
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    try:
        (spread,) = con.execute(
            "select spread from iv_stored_spreads where characteristic = 'roast_level'"
        ).fetchone()
        return spread
    finally:
        con.close()


def store_spread_and_plant(world: Path, spread: float, period: str | None = None) -> None:
    """Store `spread` as the one the stored counts were made with, and plant PLANTED in the
    stored near-rival counts (of `period`, or of every period)."""
    with _stored_spread_set(world, spread) as con:
        con.execute(
            "update iv_stored_values set value = $planted where instrument = $near "
            "and ($period::date is null or period_start = $period::date)",
            {"planted": PLANTED, "near": NEAR, "period": period},
        )


def test_a_spread_moving_past_no_rival_gap_keeps_every_stored_near_count(world):
    build(world)
    spread = stored_spread(world)
    every_gap = set().union(*rival_gaps(world).values())
    above = min(gap for gap in every_gap if gap > spread)
    moved = (spread + above) / 2
    assert not [gap for gap in every_gap if spread < gap <= moved]
    store_spread_and_plant(world, moved, KEPT_WEEK)
    _folder, manifest = build(world)
    assert instrument_scope(manifest)["near_counts_recounted"] == []
    assert "differentiation" not in instrument_scope(manifest)["every_period"]
    assert {value for _m, _p, value in stored_instrument(world, NEAR, KEPT_WEEK)} == {PLANTED}


@pytest.mark.parametrize("offset", [1.0, -0.5], ids=["spread_was_higher", "spread_was_lower"])
def test_a_spread_moving_past_rival_gaps_recounts_the_periods_with_such_a_gap(world, offset):
    build(world)
    spread = stored_spread(world)
    earlier = spread + offset
    low, high = sorted((spread, earlier))
    expected = sorted(
        period
        for period, gaps in rival_gaps(world).items()
        if any(low < gap <= high for gap in gaps)
    )
    assert expected
    store_spread_and_plant(world, earlier)
    _folder, manifest = build(world)
    assert instrument_scope(manifest)["near_counts_recounted"] == expected
    periods = sorted(rival_gaps(world))
    recounted = {period: _near_rows(world, period) for period in periods}
    full_rebuild(world)
    for period in periods:
        if period in expected:
            assert recounted[period] == _near_rows(world, period)
        else:
            assert {value for _m, _p, value in recounted[period]} == {PLANTED}


def test_one_more_day_with_a_spread_past_a_gap_equals_a_full_build(world, tmp_path):
    # the night's own rows move the spread; the stored one is set so that a gap lies between
    # them and every stored count is the one that stored spread gives: the recount must land on
    # the full build's counts
    build(world)
    spread = stored_spread(world)
    _store_consistent_counts(world, spread + 1.0)
    (tmp_path / LAST_DAY).rename(world / RECEIPTS / LAST_DAY)
    night, manifest = build(world)
    assert instrument_scope(manifest)["near_counts_recounted"]
    assert_same_parquet(night, full_rebuild(world))


def _near_rows(world: Path, period: str) -> list[tuple]:
    return stored_instrument(world, NEAR, period)


def _store_consistent_counts(world: Path, spread: float) -> None:
    """Store `spread` with the near-rival counts it gives (as a build with it would have)."""
    with _stored_spread_set(world, spread) as con:
        con.execute(
            "with chosen as (select * from iv_characteristic_values "
            "where characteristic = 'roast_level'), "
            "counts as (select own.market, own.product, own.period_start, "
            "count(other.product) filter (where abs(other.value - own.value) <= $spread) as n "
            "from chosen as own left join chosen as other "
            "on other.market = own.market and other.firm <> own.firm group by all) "
            "update iv_stored_values as stored set value = counts.n from counts "
            "where stored.instrument = $near and stored.market = counts.market "
            "and stored.product = counts.product and stored.period_start = counts.period_start",
            {"spread": spread, "near": NEAR},
        )


@contextmanager
def _stored_spread_set(world: Path, spread: float) -> Iterator[duckdb.DuckDBPyConnection]:
    """The warehouse, open, with `spread` stored as the roast level's spread."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "update iv_stored_spreads set spread = $spread where characteristic = 'roast_level'",
            {"spread": spread},
        )
        yield con
