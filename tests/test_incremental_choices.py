"""Incremental choice builds: a night recomputes the choice rows of the periods its files touch
and keeps the earlier ones, and its Parquet files are byte for byte a full build's."""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import duckdb
import polars as pl
import pytest
from test_incremental_build import (
    EARLY_DAY,
    LAST_DAY,
    RECEIPTS,
    assert_same_parquet,
    build,
    fresh_build,
    rewrite_receipts,
    withdraw_early_day,
)

from demandprep.choices import scope
from demandprep.choices.settings import loyalty_block_size
from demandprep.config import load_config
from demandprep.sqlfiles import run_sql
from demandprep.warehouse import open_warehouse

pytestmark = pytest.mark.usefixtures("one_line_report")


@pytest.fixture()
def world(tmp_path: Path, coffee_sample: Path) -> Path:
    """A private copy of the sample (choices on) with its last day's file held back."""
    folder = tmp_path / "world"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    (folder / RECEIPTS / LAST_DAY).rename(tmp_path / LAST_DAY)
    return folder


def choice_scope(manifest: dict) -> dict:
    """What the choice build recomputed (the manifest's facts)."""
    return manifest["facts"]["choice_scope"]


def full_choice_rebuild(world: Path) -> Path:
    """A full build of the same warehouse: every stored state is dropped first."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        for table in ("choice_state", "market_summary_state", "instrument_state"):
            con.execute(f"drop table {table}")
    folder, manifest = build(world)
    assert choice_scope(manifest)["full_build_reason"] == scope.NO_STATE
    return folder


def kept_choices(world: Path, before: str) -> pl.DataFrame:
    """The warehouse's choice rows of the occasions before a day, as stored."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        rows = con.sql("select * from choices where occasion < $before", params={"before": before})
        frame = pl.from_arrow(rows.to_arrow_table())
    assert isinstance(frame, pl.DataFrame)
    return frame


def test_occasion_ids_start_with_their_day_so_key_order_is_time_order(world):
    folder, _manifest = build(world)
    choices = pl.read_parquet(folder / "choices.parquet")
    assert choices.height > 1000
    days = choices["occasion_at"].dt.date().cast(pl.String)
    assert (choices["occasion"].str.slice(0, 10) == days).all()
    assert (choices["occasion"].str.slice(10, 1) == ":").all()
    assert choices["occasion"].str.slice(11).str.contains(r"^[0-9a-f]{32}(/\d+)?$").all()


def test_first_build_is_full_and_says_why(world):
    _folder, manifest = build(world)
    assert choice_scope(manifest) == {
        "build_mode": "full",
        "first_day_rebuilt": None,
        "full_build_reason": scope.NO_STATE,
    }


def test_one_more_day_rebuilds_its_week_of_choices_only_and_equals_a_full_build(world, tmp_path):
    build(world)
    config = load_config(world / "demandprep.toml")
    # a planted value in an untouched week survives: the night kept those rows
    with open_warehouse(config.warehouse) as con:
        con.execute("update choices set spend = 777.0 where spend is not null")
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    _folder, manifest = build(world)
    assert choice_scope(manifest) == {
        "build_mode": "incremental",
        "first_day_rebuilt": "2024-02-12",
        "full_build_reason": None,
    }
    kept = kept_choices(world, "2024-02-12").filter(pl.col("spend").is_not_null())
    assert kept.height > 100
    assert set(kept["spend"]) == {777.0}
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        recomputed = con.execute(
            "select count(*), count_if(spend = 777.0) from choices "
            "where chosen and occasion >= '2024-02-12'"
        ).fetchone()
    assert recomputed[0] > 100
    assert recomputed[1] == 0
    assert rows_stored_out_of_key_order(world) == 0


def rows_stored_out_of_key_order(world: Path) -> int:
    """Rows of the warehouse's `choices` not after the row stored before them in key order
    (the export then sorts the whole table instead of streaming it)."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute("set preserve_insertion_order = true")
        return con.execute(
            "select count_if((occasion, alternative) <= (previous, previous_alternative)) "
            "from (select occasion, alternative, lag(occasion) over () as previous, "
            "lag(alternative) over () as previous_alternative from choices) "
            "where previous is not null"
        ).fetchone()[0]


def with_choice_settings(config: Path, settings: str) -> None:
    """The config's [choices] section with `settings` (TOML lines) in place of its own lines
    for those keys."""
    text = config.read_text(encoding="utf-8")
    for line in settings.splitlines():
        key = line.split("=")[0].strip()
        text = re.sub(rf"(?m)^{key} = .*\n", "", text)
    config.write_text(text.replace("[choices]\n", f"[choices]\n{settings}"), encoding="utf-8")


@pytest.mark.parametrize(
    "settings",
    [
        "",
        # one occasion per product of a visit (ids with /n) and sampled sets
        'multiple_purchases = "split"\nsampled_alternatives = 3\n',
    ],
    ids=["demo", "split_and_sampled"],
)
def test_one_more_day_writes_the_bytes_of_a_fresh_full_build(world, tmp_path, settings):
    with_choice_settings(world / "demandprep.toml", settings)
    build(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    incremental, manifest = build(world)
    assert choice_scope(manifest)["first_day_rebuilt"] == "2024-02-12"
    assert_same_parquet(incremental, fresh_build(world, tmp_path))


def test_sets_and_prices_read_from_the_kept_days_before_the_rebuilt_week(world, tmp_path):
    # a two-day set window, a one-day price window and shelf prices for one store only: the
    # other stores' sets on the rebuilt week's first day come from the last two kept days, the
    # first a night's sales table holds, and some alternatives offered are priced by their
    # last sale or, failing that, the region's median of the week
    with_choice_settings(
        world / "demandprep.toml", "choice_set_window_days = 2\nprice_window_days = 1\n"
    )
    shelf = world / "shelf_prices.csv"
    lines = shelf.read_text(encoding="utf-8").splitlines(keepends=True)
    shelf.write_text(
        "".join(lines[:1] + [x for x in lines[1:] if x.startswith("S01,")]), encoding="utf-8"
    )
    build(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    incremental, manifest = build(world)
    assert choice_scope(manifest)["first_day_rebuilt"] == "2024-02-12"
    rebuilt = pl.read_parquet(incremental / "choices.parquet").filter(
        pl.col("occasion") >= "2024-02-12"
    )
    sources = set(rebuilt["price_source"])
    assert {"store_last_observed", "region_period_median"} <= sources
    assert_same_parquet(incremental, fresh_build(world, tmp_path))


def test_a_corrected_older_day_rebuilds_from_its_week_on(world, tmp_path):
    build(world)
    # the correction drops every fifth line of a Tuesday in the week of 2024-01-15
    rewrite_receipts(
        world / RECEIPTS / EARLY_DAY, lambda number, line: None if number % 5 == 0 else line
    )
    corrected, manifest = build(world)
    assert choice_scope(manifest) == {
        "build_mode": "incremental",
        "first_day_rebuilt": "2024-01-15",
        "full_build_reason": None,
    }
    assert_same_parquet(corrected, full_choice_rebuild(world))
    # a fresh warehouse's ledger has never seen the file's first version
    assert_same_parquet(corrected, fresh_build(world, tmp_path), leave_out=("ledger", "quarantine"))


def test_a_withdrawn_file_rebuilds_from_the_week_its_lines_were_in(world, tmp_path):
    build(world)
    withdraw_early_day(world, tmp_path)
    withdrawn, manifest = build(world)
    assert choice_scope(manifest)["first_day_rebuilt"] == "2024-01-15"
    assert_same_parquet(withdrawn, full_choice_rebuild(world))


def test_a_night_without_new_files_rebuilds_no_choice_row(world, tmp_path):
    build(world)
    same, manifest = build(world)
    assert choice_scope(manifest) == {
        "build_mode": "incremental",
        "first_day_rebuilt": None,
        "full_build_reason": None,
    }
    assert_same_parquet(same, fresh_build(world, tmp_path))


def test_a_changed_choice_setting_rebuilds_every_choice_row(world, tmp_path):
    build(world)
    config = world / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    config.write_text(text.replace("loyalty_smoothing = 0.8", "loyalty_smoothing = 0.7"))
    changed, manifest = build(world)
    assert choice_scope(manifest) == {
        "build_mode": "full",
        "first_day_rebuilt": None,
        "full_build_reason": scope.CONFIG_CHANGED,
    }
    assert_same_parquet(changed, fresh_build(world, tmp_path))


def test_a_new_pseudonym_key_rebuilds_every_choice_row(world, monkeypatch):
    build(world)
    monkeypatch.setenv("DEMANDPREP_PSEUDONYM_KEY", "another-test-key-not-secret")
    _folder, manifest = build(world)
    assert choice_scope(manifest)["full_build_reason"] == scope.KEY_CHANGED


def test_a_build_that_dies_while_writing_choices_leaves_a_full_build_next(
    world, tmp_path, monkeypatch
):
    from demandprep.choices import build as choice_build

    build(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)

    def crash(*_args, **_kwargs):
        raise RuntimeError("power cut")

    # the crash comes after the touched rows were deleted, before the new ones are written
    with monkeypatch.context() as patch:
        patch.setattr(choice_build, "write_in_parts", crash)
        with pytest.raises(RuntimeError, match="power cut"):
            build(world)
    recovered, manifest = build(world)
    assert choice_scope(manifest)["full_build_reason"] == scope.NO_STATE
    assert_same_parquet(recovered, fresh_build(world, tmp_path))


def test_a_running_loyalty_sum_depends_on_earlier_purchases_only():
    # an incremental build keeps the loyalty of earlier occasions, so later purchases must not
    # move an earlier purchase's running sum (047) by a bit; DuckDB's windowed sum did, in its
    # last bits, once the partitions and the rows sorted around them grew
    con = duckdb.connect()
    params = {"smoothing": 0.8, "loyalty_block": loyalty_block_size(0.8)}

    def block_sums(purchases_per_chooser: int) -> dict[tuple, float]:
        con.execute(
            "create or replace table choice_visit_history as "
            "select chooser * 1000 + rank as visit_number, chooser as chooser_number, "
            "rank as loyalty_rank, true as is_purchase, false as burn_in "
            "from range(2000) as c(chooser), range($purchases) as r(rank)",
            {"purchases": purchases_per_chooser},
        )
        con.execute(
            "create or replace table choice_occasions as "
            "select visit_number, 'alt' || (hash(visit_number) % 3) as chosen_alternative, "
            "1.0 / (1 + hash(visit_number) % 2) as history_weight from choice_visit_history"
        )
        run_sql(con, "choices/047_choice_loyalty_events.sql", params)
        rows = con.execute(
            "select chooser_number, alternative, purchase_rank, block_sum "
            "from choice_loyalty_events"
        ).fetchall()
        return {tuple(row[:3]): row[3] for row in rows}

    earlier, later = block_sums(100), block_sums(130)
    assert len(earlier) == 200_000
    assert {key: later[key] for key in earlier} == earlier


RUN_SETTINGS_CHANGED = {
    # where and how the build runs, not what it computes
    'memory_limit = "2GB"': 'memory_limit = "3GB"',
    "threads = 2": "threads = 1",
    "lock_timeout_seconds = 30": "lock_timeout_seconds = 60",
    'root = "builds"': 'root = "nightly_builds"',
    "keep_last = 5": "keep_last = 9",
    'description = "Committed': 'description = "Moved',
    'cron = "30 2 * * *"': 'cron = "15 3 * * *"',
}


@pytest.mark.parametrize("change", ["folder_moved", "run_settings_changed"])
def test_moving_the_project_or_changing_how_it_runs_keeps_the_night_incremental(
    world, tmp_path, change
):
    build(world)
    if change == "folder_moved":
        world = Path(shutil.move(world, tmp_path / "moved" / "world"))
    else:
        config = world / "demandprep.toml"
        text = config.read_text(encoding="utf-8")
        for old, new in RUN_SETTINGS_CHANGED.items():
            assert old in text
            text = text.replace(old, new)
        config.write_text(text, encoding="utf-8")
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    night, manifest = build(world)
    assert manifest["full_build_reason"] is None
    assert manifest["facts"]["instrument_scope"]["full_build_reason"] is None
    assert choice_scope(manifest) == {
        "build_mode": "incremental",
        "first_day_rebuilt": "2024-02-12",
        "full_build_reason": None,
    }
    assert_same_parquet(night, full_choice_rebuild(world))


def test_one_more_day_keeps_the_card_visits_of_earlier_weeks(world, tmp_path):
    build(world)
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        columns = {row[0] for row in con.execute("describe choice_state_visits").fetchall()}
        # a planted flag on the visits before the week the night touches survives it
        planted = con.execute(
            "update choice_state_visits set several_cards = true where day < '2024-02-12'"
        ).fetchone()[0]
    assert not columns & {"card", "receipt"}
    assert planted > 100
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    _folder, manifest = build(world)
    with open_warehouse(config.warehouse) as con:
        kept = con.execute(
            "select count_if(several_cards), count_if(day >= '2024-02-12' and several_cards), "
            "count_if(day >= '2024-02-12') from choice_state_visits where day >= '2024-01-01'"
        ).fetchone()
    assert kept[0] - kept[1] == planted
    assert kept[2] > 100  # the touched week's visits were made again, unflagged
    assert manifest["facts"]["choices"]["receipts_with_several_cards"] == kept[0]


TOUCHED_WEEK = "2024-02-12"  # the week of the held-back day


def planted_then_night(world: Path, tmp_path: Path, table: str, column: str, value: int):
    """Build, plant `value` in `column` of the state `table`'s rows before the touched week,
    add the held-back day and build again; returns how many rows were planted, and after the
    night: planted rows before the week, planted rows in it, and rows in it."""
    build(world)
    config = load_config(world / "demandprep.toml")
    before, planted = f"day < '{TOUCHED_WEEK}'", f"{column} = {value}"
    with open_warehouse(config.warehouse) as con:
        count = con.execute(f"update {table} set {planted} where {before}").fetchone()[0]
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    build(world)
    with open_warehouse(config.warehouse) as con:
        kept = con.execute(
            f"select count_if({before} and {planted}), count_if(not ({before}) and {planted}), "
            f"count_if(not ({before})) from {table}"
        ).fetchone()
    return count, kept


def test_one_more_day_reads_the_category_lines_of_its_week_only(world, tmp_path):
    # a planted amount on the lines before the week the night touches survives it
    planted, kept = planted_then_night(world, tmp_path, "choice_state_sales", "net_amount", 7777)
    assert planted > 1000
    assert kept[0] == planted
    assert kept[1] == 0 and kept[2] > 1000  # the touched week's lines were read again


def test_a_full_choice_build_reads_every_category_line_again(world, tmp_path):
    build(world)
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute("update choice_state_sales set net_amount = 7777")
    full_choice_rebuild(world)
    with open_warehouse(config.warehouse) as con:
        planted = con.execute(
            "select count_if(net_amount = 7777) from choice_state_sales"
        ).fetchone()[0]
    assert planted == 0


def test_one_more_day_counts_what_a_full_build_counts(world, tmp_path):
    build(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    _folder, night = build(world)
    full = full_choice_rebuild(world)
    counted = json.loads((full / "manifest.json").read_text(encoding="utf-8"))
    assert night["facts"]["choices"] == counted["facts"]["choices"]
    assert night["facts"]["choices"]["card_visits"] > 1000


def working_rows(world: Path) -> dict[str, int]:
    """Rows of the working tables a night may restrict to its occasions, and choosers with a
    purchase rank, of the last build (the test keeps the working tables a build drops)."""
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    try:
        counts = {
            table: con.execute(f"select count(*) from {table}").fetchone()[0]  # noqa: S608
            for table in ("choice_loyalty_values", "choice_alternative_prices")
        }
        counts["store_day_maps"] = con.execute(
            "select count(*) from choice_store_day_info where alternative_info is not null"
        ).fetchone()[0]
        counts["ranked_choosers"] = con.execute(
            # the history is kept for the next build, under its state name
            "select count(distinct chooser_number) from choice_state_visit_history "
            "where not burn_in"
        ).fetchone()[0]
        return counts
    finally:
        con.close()


def test_one_more_day_makes_loyalty_and_prices_only_for_its_occasions(world, tmp_path, monkeypatch):
    # each loyalty value is a closed form of the chooser's block sums (048) and each price a
    # value of its own store-day (070, 078), so leaving out what no recomputed occasion reads
    # changes nothing it reads
    from demandprep.choices import build as choice_build

    # a short burn-in, so most of the sample's seven weeks have loyalty
    config = world / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    assert "loyalty_burn_in_days = 56" in text
    config.write_text(text.replace("loyalty_burn_in_days = 56", "loyalty_burn_in_days = 7"))
    with monkeypatch.context() as patch:
        patch.setattr(choice_build, "drop_intermediate_tables", lambda ctx: None)
        build(world)
        full = working_rows(world)
        shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
        night, manifest = build(world)
        made = working_rows(world)
    assert choice_scope(manifest)["build_mode"] == "incremental"
    assert full["ranked_choosers"] > 50
    # one week of seven: its choosers' ranks from their first one that week on (6,915 of
    # 16,977 loyalty rows when written), its store-days' prices and maps
    assert 0 < made["choice_loyalty_values"] < full["choice_loyalty_values"] / 2
    for table in ("choice_alternative_prices", "store_day_maps"):
        assert 0 < made[table] < full[table] / 4
    assert_same_parquet(night, full_choice_rebuild(world))


def stored_history(world: Path) -> list[tuple]:
    """The kept visit history by chooser pseudonym (its numbers are only keys), in order."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        return con.execute(
            "select n.chooser, h.visit_number, h.day, h.is_purchase, h.burn_in, "
            "h.purchase_count, h.days_since_last_purchase, list_sort(h.previous_alternatives), "
            "h.loyalty_rank, list_sort(h.purchase_alternatives) "
            "from choice_state_visit_history h "
            "join choice_state_chooser_numbers n using (chooser_number) order by all"
        ).fetchall()


def test_one_more_day_keeps_the_history_of_earlier_visits(world, tmp_path):
    # a planted count on the visits before the week the night touches survives it
    planted, kept = planted_then_night(
        world, tmp_path, "choice_state_visit_history", "purchase_count", -7
    )
    assert planted > 100
    assert kept[0] == planted
    assert kept[1] == 0 and kept[2] > 100  # the touched week's visits got their history again


def test_one_more_day_makes_the_history_a_full_build_makes(world, tmp_path):
    # the touched week's history starts from each chooser's kept rows: first day, purchases
    # before and after the burn-in, the latest purchase's day and alternatives
    config = world / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    assert "loyalty_burn_in_days = 56" in text
    config.write_text(text.replace("loyalty_burn_in_days = 56", "loyalty_burn_in_days = 7"))
    build(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    build(world)
    night = stored_history(world)
    full_choice_rebuild(world)
    full = stored_history(world)
    assert night == full
    late = [row for row in night if str(row[2]) >= "2024-02-12"]
    assert sum(1 for row in late if row[3] and row[5] > 0 and row[7]) > 100
    assert sum(1 for row in late if row[8] > 0) > 100
