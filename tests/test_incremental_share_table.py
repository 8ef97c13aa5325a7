"""The instruments and share tables kept per period: a night rewrites the periods whose shares
or instrument values changed, keeps the other periods' rows, and its Parquet files are byte for
byte those of a full build of the same inputs."""

from __future__ import annotations

import gzip
import shutil
from pathlib import Path

import duckdb
import pytest
from test_incremental_build import (
    EARLY_DAY,
    LAST_DAY,
    RECEIPTS,
    assert_same_parquet,
    build,
    build_dies_in,
    distinct_in_period,
    fresh_build,
    full_rebuild,
    move_spread_and_plant_near_counts,
    rewrite_receipts,
    withdraw_early_day,
    without_peak_sizes,
)

from demandprep.config import load_config
from demandprep.sqlfiles import run_sql
from demandprep.warehouse import open_warehouse

# these tests are about bytes, not plots: a one-line report keeps them fast
pytestmark = pytest.mark.usefixtures("one_line_report")

KEPT_WEEK = "2024-01-15"
OTHER_KEPT_WEEK = "2024-01-22"
NIGHT_WEEK = "2024-02-12"  # the week of the held-back day


@pytest.fixture()
def world(tmp_path: Path, coffee_sample: Path) -> Path:
    """A private copy of the sample, choices off, no peak_multiple size (so the held-back day
    slices the market tables), with its last day's file held back."""
    folder = tmp_path / "world"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config = folder / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    config.write_text(text.replace("[choices]\nenabled = true", "[choices]\nenabled = false"))
    (folder / RECEIPTS / LAST_DAY).rename(tmp_path / LAST_DAY)
    return without_peak_sizes(folder)


def share_table_scope(manifest: dict) -> dict:
    """Which periods of `instruments` and `share_table` the build rewrote (manifest facts)."""
    return manifest["facts"]["share_table_scope"]


def plant(world: Path, *periods: str) -> None:
    """Set net revenue and the Hausman price to 7777 (a value no build makes) in the stored
    share and instrument rows of `periods`."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "update share_table set net_revenue = 7777 where period_start in $periods::date[]",
            {"periods": list(periods)},
        )
        con.execute(
            "update instruments set iv_hausman_price = 7777 where market in "
            "(select market from markets where period_start in $periods::date[])",
            {"periods": list(periods)},
        )


def planted(world: Path, period: str) -> tuple[bool, bool]:
    """Whether the planted value is still in `period`'s share rows and instrument rows."""
    shares = distinct_in_period(world, "share_table", "net_revenue", period)
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        instruments = con.execute(
            "select distinct iv_hausman_price from instruments where market in "
            "(select market from markets where period_start = $period::date)",
            {"period": period},
        ).fetchall()
    return 7777 in shares, (7777,) in instruments


def add_the_held_back_day(world: Path) -> None:
    shutil.copy(world.parent / LAST_DAY, world / RECEIPTS / LAST_DAY)


def test_the_first_build_assembles_every_period_and_says_why(world):
    _folder, manifest = build(world)
    assert share_table_scope(manifest) == {
        "build_mode": "full",
        "full_build_reason": "no instruments or share table are stored yet",
        "periods_rebuilt": manifest["periods_rebuilt"],
    }


def test_one_more_day_rewrites_the_share_rows_of_its_week_and_keeps_the_others(world):
    build(world)
    plant(world, KEPT_WEEK, NIGHT_WEEK)
    add_the_held_back_day(world)
    _folder, manifest = build(world)
    assert share_table_scope(manifest) == {
        "build_mode": "incremental",
        "full_build_reason": None,
        "periods_rebuilt": [NIGHT_WEEK],
    }
    assert planted(world, KEPT_WEEK) == (True, True)
    assert planted(world, NIGHT_WEEK) == (False, False)


def test_one_more_day_with_kept_share_rows_equals_a_full_build(world, tmp_path):
    build(world)
    add_the_held_back_day(world)
    night, manifest = build(world)
    assert share_table_scope(manifest)["build_mode"] == "incremental"
    assert_same_parquet(night, full_rebuild(world))
    assert_same_parquet(night, fresh_build(world, tmp_path))


def test_a_corrected_early_file_rewrites_the_weeks_of_its_old_and_new_lines(world):
    # the correction keeps the first half of a Tuesday's lines and dates them a week later
    build(world)
    plant(world, OTHER_KEPT_WEEK, NIGHT_WEEK)
    early = world / RECEIPTS / EARLY_DAY
    with gzip.open(early, "rt", encoding="utf-8") as handle:
        half = (len(handle.read().splitlines()) - 1) // 2
    rewrite_receipts(
        early,
        lambda number, line: (
            line.replace(",2024-01-16 ", ",2024-01-23 ") if number < half else None
        ),
    )
    _corrected, manifest = build(world)
    assert share_table_scope(manifest) == {
        "build_mode": "incremental",
        "full_build_reason": None,
        "periods_rebuilt": [KEPT_WEEK, OTHER_KEPT_WEEK],
    }
    assert planted(world, OTHER_KEPT_WEEK) == (False, False)
    assert planted(world, NIGHT_WEEK) == (True, True)


def test_a_corrected_early_file_equals_a_full_build(world):
    build(world)
    early = world / RECEIPTS / EARLY_DAY
    rewrite_receipts(early, lambda number, line: None if number % 3 == 0 else line)
    corrected, manifest = build(world)
    assert share_table_scope(manifest)["build_mode"] == "incremental"
    assert KEPT_WEEK in share_table_scope(manifest)["periods_rebuilt"]
    assert_same_parquet(corrected, full_rebuild(world))


def test_a_withdrawn_file_rewrites_its_week_and_equals_a_full_build(world, tmp_path):
    build(world)
    withdraw_early_day(world, tmp_path)
    withdrawn, manifest = build(world)
    assert share_table_scope(manifest)["build_mode"] == "incremental"
    assert KEPT_WEEK in share_table_scope(manifest)["periods_rebuilt"]
    assert_same_parquet(withdrawn, full_rebuild(world))


def test_an_instrument_value_that_moved_in_a_kept_week_rewrites_that_week(world):
    # the cost shifters are computed for every period each night: a stored value that differs
    # from the night's puts its week among the rewritten ones, a week whose values agree stays
    build(world)
    plant(world, KEPT_WEEK, OTHER_KEPT_WEEK)
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "update iv_stored_values set value = 7777 where family = 'cost_shifters' "
            "and period_start = $period::date",
            {"period": KEPT_WEEK},
        )
    add_the_held_back_day(world)
    _folder, manifest = build(world)
    assert share_table_scope(manifest)["periods_rebuilt"] == [KEPT_WEEK, NIGHT_WEEK]
    assert planted(world, KEPT_WEEK) == (False, False)
    assert planted(world, OTHER_KEPT_WEEK) == (True, True)


def test_a_moved_spread_rewrites_every_week_whose_counts_changed(world):
    # the near-rival counts of every period are recomputed when the spread moves; planted
    # counts differ from the night's in every week, so every week's rows are rewritten
    build(world)
    move_spread_and_plant_near_counts(world)
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        weeks = [
            row[0].isoformat()
            for row in con.execute("select distinct period_start from shares order by 1").fetchall()
        ]
    plant(world, KEPT_WEEK)
    moved, manifest = build(world)
    assert share_table_scope(manifest)["periods_rebuilt"] == weeks
    assert planted(world, KEPT_WEEK) == (False, False)
    assert_same_parquet(moved, full_rebuild(world))


def night_after(world: Path, statement: str) -> tuple[Path, dict]:
    """Build, plant a value in a kept week, run `statement` on the warehouse, then build once
    more with the held-back day; returns that night's folder and manifest."""
    build(world)
    plant(world, KEPT_WEEK)
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute(statement)
    add_the_held_back_day(world)
    return build(world)


def test_share_rows_made_from_other_instrument_values_are_rewritten_whole(world):
    # the kept rows were assembled from instrument values other than those this night merged
    # into (a build that stored the values but died before the share table, say)
    night, manifest = night_after(
        world, "update share_table_state set instrument_generation = 'another generation'"
    )
    assert share_table_scope(manifest)["full_build_reason"] == (
        "the stored share table was assembled from other instrument values or market tables"
    )
    assert planted(world, KEPT_WEEK) == (False, False)
    assert_same_parquet(night, full_rebuild(world))


def test_market_tables_rebuilt_whole_rebuild_the_share_table_whole(world):
    _night, manifest = night_after(world, "delete from market_slice_state")
    assert manifest["facts"]["market_tables"]["build_mode"] == "full"
    assert share_table_scope(manifest)["build_mode"] == "full"
    assert share_table_scope(manifest)["full_build_reason"] == (
        "the market tables or the instrument values were recomputed for every period"
    )
    assert planted(world, KEPT_WEEK) == (False, False)


def test_a_crash_before_the_share_table_state_is_written_keeps_the_tables_as_they_were(
    world, monkeypatch
):
    from demandprep.instruments import assemble

    build(world)
    plant(world, KEPT_WEEK, NIGHT_WEEK)
    add_the_held_back_day(world)
    # the crash comes after both tables were merged, before their state is written
    build_dies_in(world, monkeypatch, assemble, "store_share_table_state")
    # the stages' one transaction rolled back: the night's week still has its planted rows
    assert planted(world, NIGHT_WEEK) == (True, True)
    _night, manifest = build(world)
    assert share_table_scope(manifest)["periods_rebuilt"] == [NIGHT_WEEK]
    assert planted(world, NIGHT_WEEK) == (False, False)
    assert planted(world, KEPT_WEEK) == (True, True)


def changed_periods(stored: float, fresh: float) -> list[str]:
    """The periods 076 lists when one stored instrument value of week 2024-01-08 is `stored`
    and the build computed `fresh` for it (nothing else differs)."""
    con = duckdb.connect()
    con.execute(
        "create table iv_products as select 'S01/2024-01-08' as market, "
        "date '2024-01-08' as period_start, 'P1' as product"
    )
    con.execute("create table iv_build_periods (period_start date)")
    for table, column, value in (
        ("iv_stored_values", "instrument", stored),
        ("instrument_values", "instrument", fresh),
    ):
        con.execute(
            f"create table {table} as select market, product, period_start, "  # noqa: S608
            f"'iv_cost_index' as {column}, $value::double as value from iv_products",
            {"value": value},
        )
    for table in ("iv_stored_flags", "instrument_flags"):
        con.execute(
            f"create table {table} (market varchar, product varchar, period_start date, "
            "flag varchar, value boolean)"
        )
    run_sql(con, "instruments/076_iv_changed_periods.sql")
    rows = con.execute("select period_start from iv_changed_periods order by 1").fetchall()
    return [row[0].isoformat() for row in rows]


def test_a_value_computed_again_counts_as_changed_only_when_its_bits_differ():
    assert changed_periods(1.5, 1.5) == []
    assert changed_periods(1.5, 1.25) == ["2024-01-08"]
    # equal as numbers, but a Parquet file holds the sign: the full build would write -0.0
    assert changed_periods(0.0, -0.0) == ["2024-01-08"]
