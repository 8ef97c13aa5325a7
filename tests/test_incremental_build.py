"""Incremental builds: a night recomputes only the periods its files touch, and its Parquet
files are byte for byte those of a full build of the same inputs."""

from __future__ import annotations

import gzip
import json
import shutil
import subprocess
import sys
from pathlib import Path

import duckdb
import pytest

from demandprep import pipeline
from demandprep.config import load_config
from demandprep.export.folder import latest_build
from demandprep.ingest.withdraw import withdraw_files
from demandprep.warehouse import open_warehouse

# these tests are about bytes, not plots: a one-line report keeps them fast
pytestmark = pytest.mark.usefixtures("one_line_report")

RECEIPTS = Path("receipts") / "2024"
LAST_DAY = "receipts_2024-02-18.csv.gz"  # a Sunday: the last day of the week of 2024-02-12
EARLY_DAY = "receipts_2024-01-16.csv.gz"  # a Tuesday in the week of 2024-01-15


@pytest.fixture()
def world(tmp_path: Path, coffee_sample: Path) -> Path:
    """A private copy of the sample with choices off and its last day's file held back."""
    return private_world(tmp_path, coffee_sample)


def private_world(tmp_path: Path, coffee_sample: Path) -> Path:
    """The `world` fixture's folder (for modules that share it)."""
    folder = tmp_path / "world"
    shutil.copytree(coffee_sample, folder)
    config = folder / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    config.write_text(text.replace("[choices]\nenabled = true", "[choices]\nenabled = false"))
    (folder / RECEIPTS / LAST_DAY).rename(tmp_path / LAST_DAY)
    return folder


def build(world: Path) -> tuple[Path, dict]:
    """Ingest what is new and build; returns the build folder and its manifest."""
    config = load_config(world / "demandprep.toml")
    pipeline.run_ingest(config)
    folder, _ctx = pipeline.run_build(config)
    return folder, json.loads((folder / "manifest.json").read_text(encoding="utf-8"))


def full_rebuild(world: Path) -> Path:
    """A full build of the same warehouse: the stored summaries are dropped first."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute("drop table market_summary_state")
        con.execute("drop table if exists instrument_state")
    folder, manifest = build(world)
    assert manifest["build_mode"] == "full"
    assert instrument_scope(manifest)["build_mode"] == "full"
    return folder


def instrument_scope(manifest: dict) -> dict:
    """Which periods the instrument stages recomputed (the manifest's facts)."""
    return manifest["facts"]["instrument_scope"]


def stored_instrument(world: Path, instrument: str, period: str) -> list[tuple]:
    """The stored values of one instrument in one period, in (market, product) order."""
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    try:
        return con.execute(
            "select market, product, value from iv_stored_values "
            "where instrument = $instrument and period_start = $period::date order by all",
            {"instrument": instrument, "period": period},
        ).fetchall()
    finally:
        con.close()


def fresh_build(world: Path, tmp_path: Path) -> Path:
    """A full build of the same files on a new warehouse (the old one moved aside)."""
    warehouse = world / "warehouse"
    warehouse.rename(tmp_path / "old_warehouse")
    folder, manifest = build(world)
    assert manifest["build_mode"] == "full"
    return folder


def parquet_bytes(folder: Path, leave_out: tuple[str, ...] = ()) -> dict[str, bytes]:
    return {
        path.relative_to(folder).as_posix(): path.read_bytes()
        for path in sorted(folder.rglob("*.parquet"))
        if not path.name.startswith(leave_out)
    }


def assert_same_parquet(left: Path, right: Path, leave_out: tuple[str, ...] = ()) -> None:
    first, second = parquet_bytes(left, leave_out), parquet_bytes(right, leave_out)
    assert sorted(first) == sorted(second)
    assert len(first) > 5
    differing = [name for name in first if first[name] != second[name]]
    assert differing == []


def rewrite_receipts(path: Path, change) -> None:
    """Rewrite a gzip receipts file: `change(number, line)` gives a data line's new text or None."""
    with gzip.open(path, "rt", encoding="utf-8") as handle:
        header, *lines = handle.read().splitlines()
    changed = [change(number, line) for number, line in enumerate(lines)]
    with gzip.open(path, "wt", encoding="utf-8") as handle:
        handle.write("\n".join([header, *(line for line in changed if line is not None)]) + "\n")


def summary_files(world: Path) -> set[tuple[str, str]]:
    config = load_config(world / "demandprep.toml")
    con = duckdb.connect(str(config.warehouse.path), read_only=True)
    try:
        return set(con.execute("select summary, file_id from market_summary_files").fetchall())
    finally:
        con.close()


def test_one_more_day_rebuilds_its_week_only_and_equals_a_full_build(world, tmp_path):
    _first, manifest = build(world)
    assert manifest["build_mode"] == "full"
    assert manifest["full_build_reason"] == "no period summaries are stored yet"
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    incremental, manifest = build(world)
    assert manifest["build_mode"] == "incremental"
    assert manifest["full_build_reason"] is None
    assert manifest["periods_rebuilt"] == ["2024-02-12"]
    assert instrument_scope(manifest)["build_mode"] == "incremental"
    assert instrument_scope(manifest)["periods_rebuilt"] == ["2024-02-12"]
    assert_same_parquet(incremental, full_rebuild(world))
    assert_same_parquet(incremental, fresh_build(world, tmp_path))


def test_first_build_stores_the_instruments_and_says_why_it_was_full(world):
    _folder, manifest = build(world)
    assert instrument_scope(manifest) == {
        "build_mode": "full",
        "periods_rebuilt": manifest["periods_rebuilt"],
        "full_build_reason": "no instrument values are stored yet",
        "every_period": ["cost_shifters", "differentiation"],
        "near_counts_recounted": [],
        "inputs_read": "every period",
    }
    assert len(stored_instrument(world, "iv_firm_sum_roast_level", "2024-01-15")) > 3


def test_one_more_day_reuses_the_stored_instruments_of_the_other_weeks(world, tmp_path):
    build(world)
    config = load_config(world / "demandprep.toml")
    # a planted value in an untouched week survives: the night did not recompute that week
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "update iv_stored_values set value = -7 where instrument = 'iv_firm_sum_roast_level' "
            "and period_start in ('2024-01-15', '2024-02-12')"
        )
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    build(world)
    kept = stored_instrument(world, "iv_firm_sum_roast_level", "2024-01-15")
    recomputed = stored_instrument(world, "iv_firm_sum_roast_level", "2024-02-12")
    assert {value for _market, _product, value in kept} == {-7}
    assert -7 not in {value for _market, _product, value in recomputed}


def test_a_night_without_new_files_rebuilds_no_period(world):
    build(world)
    same, manifest = build(world)
    assert manifest["build_mode"] == "incremental"
    assert manifest["periods_rebuilt"] == []
    assert instrument_scope(manifest)["periods_rebuilt"] == []
    assert instrument_scope(manifest)["every_period"] == ["cost_shifters"]
    assert_same_parquet(same, full_rebuild(world))


def move_spread_and_plant_near_counts(world: Path) -> None:
    """Move every stored spread by one and plant -7 (a count no build makes) in every stored
    near-rival count: the next build must count them all again."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute("update iv_stored_spreads set spread = spread + 1")
        con.execute(
            "update iv_stored_values set value = -7 where instrument = 'iv_diff_near_roast_level'"
        )


def withdraw_early_day(world: Path, tmp_path: Path) -> None:
    """Withdraw the early Tuesday's receipts file and move it out of the world."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        withdraw_files(con, config, str(RECEIPTS / EARLY_DAY), "sent twice by the till vendor")
    (world / RECEIPTS / EARLY_DAY).rename(tmp_path / EARLY_DAY)


def test_a_spread_moved_past_a_gap_of_every_period_recounts_every_period(world):
    # Gandhi & Houde (2019): the near-rival count uses the characteristic's spread over every
    # product-market; a spread one higher passes a roast-level gap of every week (the sample's
    # levels are whole numbers), so no stored count can be kept (test_near_rival_recount.py
    # has the periods a smaller move recounts)
    build(world)
    move_spread_and_plant_near_counts(world)
    moved, manifest = build(world)
    assert instrument_scope(manifest)["periods_rebuilt"] == []
    assert instrument_scope(manifest)["every_period"] == ["cost_shifters", "differentiation"]
    assert_same_parquet(moved, full_rebuild(world))


def test_a_moved_spread_keeps_the_squared_distances_of_untouched_periods(world):
    # the squared distance to rivals reads only its own market: the spread does not enter it
    build(world)
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute("update iv_stored_spreads set spread = spread + 1")
        # distances and counts must not be negative (InstrumentsModel): plant a large one
        con.execute(
            "update iv_stored_values set value = 7777 where family = 'differentiation' "
            "and period_start = '2024-01-15'"
        )
    build(world)
    near = stored_instrument(world, "iv_diff_near_roast_level", "2024-01-15")
    squared = stored_instrument(world, "iv_diff_sq_roast_level", "2024-01-15")
    assert 7777 not in {value for _market, _product, value in near}
    assert {value for _market, _product, value in squared} == {7777}


def build_dies_in(world: Path, monkeypatch, module, name: str) -> None:  # noqa: ANN001
    """Build once with `module.name` raising, as a power cut there would stop it."""

    def crash(*_args, **_kwargs):
        raise RuntimeError("power cut")

    with monkeypatch.context() as patch:
        patch.setattr(module, name, crash)
        with pytest.raises(RuntimeError, match="power cut"):
            build(world)


def test_crash_while_storing_instruments_keeps_the_old_ones_and_the_next_build_is_right(
    world, tmp_path, monkeypatch
):
    from demandprep.instruments import periods

    build(world)
    before = stored_instrument(world, "iv_hausman_price", "2024-02-12")
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    # the crash comes after the period rows were replaced, before the state is written
    build_dies_in(world, monkeypatch, periods, "store_instrument_state")
    assert stored_instrument(world, "iv_hausman_price", "2024-02-12") == before
    recovered, manifest = build(world)
    assert instrument_scope(manifest)["periods_rebuilt"] == ["2024-02-12"]
    assert_same_parquet(recovered, full_rebuild(world))


@pytest.mark.parametrize("killed_in", ["write_staged_build", "publish"])
def test_a_build_killed_before_publishing_leaves_its_periods_to_the_next_manifest(
    world, tmp_path, monkeypatch, killed_in
):
    from demandprep.export import folder

    build(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)

    def killed(*_args, **_kwargs):
        raise RuntimeError("killed")

    # the summaries and instruments of the new week are stored; no build shows them yet
    with monkeypatch.context() as patch:
        patch.setattr(folder, killed_in, killed)
        with pytest.raises(RuntimeError, match="killed"):
            build(world)
    recovered, manifest = build(world)
    # nothing is recomputed now, but the published build differs from the last one there
    assert manifest["build_mode"] == "incremental"
    assert manifest["periods_rebuilt"] == ["2024-02-12"]
    assert manifest["facts"]["build_scope"]["periods_rebuilt"] == ["2024-02-12"]
    # once published, a build owes nothing more
    _same, after = build(world)
    assert after["periods_rebuilt"] == []
    assert_same_parquet(recovered, full_rebuild(world))


def test_corrected_file_recomputes_the_periods_of_its_old_and_new_lines(world, tmp_path):
    build(world)
    # the correction keeps half of the day's lines and dates them a week later: the old
    # lines' week loses them, the next week gains them
    early = world / RECEIPTS / EARLY_DAY
    with gzip.open(early, "rt", encoding="utf-8") as handle:
        half = (len(handle.read().splitlines()) - 1) // 2

    def moved_a_week(number: int, line: str) -> str | None:
        return line.replace(",2024-01-16 ", ",2024-01-23 ") if number < half else None

    rewrite_receipts(early, moved_a_week)
    corrected, manifest = build(world)
    assert manifest["build_mode"] == "incremental"
    assert manifest["periods_rebuilt"] == ["2024-01-15", "2024-01-22"]
    assert_same_parquet(corrected, full_rebuild(world))
    # a new warehouse has no superseded version of the file: its ledger differs on purpose
    assert_same_parquet(corrected, fresh_build(world, tmp_path), leave_out=("ledger", "quarantine"))


def test_withdrawn_file_recomputes_the_periods_its_lines_were_in(world, tmp_path):
    build(world)
    withdraw_early_day(world, tmp_path)
    withdrawn, manifest = build(world)
    assert manifest["build_mode"] == "incremental"
    assert manifest["periods_rebuilt"] == ["2024-01-15"]
    assert_same_parquet(withdrawn, full_rebuild(world))
    assert_same_parquet(withdrawn, fresh_build(world, tmp_path), leave_out=("ledger", "quarantine"))


def test_changed_config_forces_a_full_build_and_says_why(world):
    build(world)
    config = world / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    config.write_text(text.replace("outside_share_floor = 0.05", "outside_share_floor = 0.04"))
    _folder, manifest = build(world)
    assert manifest["build_mode"] == "full"
    assert manifest["full_build_reason"] == "the config changed since the summaries were built"
    assert instrument_scope(manifest)["full_build_reason"] == (
        "the config changed since the instrument values were stored"
    )


def test_changed_reference_table_forces_a_full_build_and_says_why(world):
    build(world)
    stores = world / "stores.csv"
    header, *rows = stores.read_text(encoding="utf-8").splitlines()
    stores.write_text("\n".join([header, *reversed(rows)]) + "\n", encoding="utf-8")
    _folder, manifest = build(world)
    assert manifest["build_mode"] == "full"
    assert manifest["full_build_reason"] == (
        "a reference file (catalogue, stores, shelf prices, ...) changed since the summaries "
        "were built"
    )


def test_receipt_ids_unique_per_store_rebuild_every_period_each_night(world, tmp_path):
    # a visit may then span days, and periods: its first line decides its period
    config = world / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    config.write_text(
        text.replace(
            'categories = ["coffee"]', 'categories = ["coffee"]\nreceipt_ids_unique_per = "store"'
        )
    )
    build(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    _folder, manifest = build(world)
    assert manifest["build_mode"] == "full"
    assert manifest["full_build_reason"] == (
        "markets.receipt_ids_unique_per = 'store' lets a visit span periods"
    )
    assert len(manifest["periods_rebuilt"]) == 7


def test_crash_while_storing_summaries_keeps_the_old_ones_and_the_next_build_is_right(
    world, tmp_path, monkeypatch
):
    from demandprep.market import summaries

    build(world)
    before = summary_files(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)

    def crash(*_args, **_kwargs):
        raise RuntimeError("power cut")

    # the crash comes after the period rows were replaced, before the state is written
    with monkeypatch.context() as patch:
        patch.setattr(summaries, "store_summary_state", crash)
        with pytest.raises(RuntimeError, match="power cut"):
            build(world)
    assert summary_files(world) == before
    config = load_config(world / "demandprep.toml")
    recovered, manifest = build(world)
    assert manifest["build_mode"] == "incremental"
    assert manifest["periods_rebuilt"] == ["2024-02-12"]
    assert latest_build(config.export.root) == recovered
    assert_same_parquet(recovered, full_rebuild(world))


def stored_state(world: Path) -> dict[str, list[tuple]]:
    """What a build keeps between nights: summaries' files and the stored instrument inputs."""
    config = load_config(world / "demandprep.toml")
    con = duckdb.connect(str(config.warehouse.path), read_only=True)
    try:
        return {
            table: con.execute(f"select * from {table} order by all").fetchall()  # noqa: S608
            for table in ("market_summary_files", "market_sku_sales", "iv_stored_products")
        }
    finally:
        con.close()


def test_a_stage_failing_late_leaves_the_stored_periods_as_they_were(world, tmp_path, monkeypatch):
    from demandprep.instruments import assemble

    build(world)
    before = stored_state(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)

    def crash(*_args, **_kwargs):
        raise RuntimeError("power cut")

    # share_table comes after the summaries and the instrument values were stored
    with monkeypatch.context() as patch:
        patch.setattr(assemble, "require_table", crash)
        with pytest.raises(RuntimeError, match="power cut"):
            build(world)
    assert stored_state(world) == before
    recovered, manifest = build(world)
    assert manifest["periods_rebuilt"] == ["2024-02-12"]
    assert instrument_scope(manifest)["periods_rebuilt"] == ["2024-02-12"]
    assert_same_parquet(recovered, full_rebuild(world))


def test_run_opens_the_warehouse_once_for_ingest_and_build(world, monkeypatch):
    from typer.testing import CliRunner

    from demandprep import warehouse
    from demandprep.cli import app

    opened = []
    connect = warehouse.connect

    def counted(*args, **kwargs):
        opened.append(args)
        return connect(*args, **kwargs)

    monkeypatch.setattr(warehouse, "connect", counted)
    result = CliRunner().invoke(app, ["run", str(world / "demandprep.toml")])
    assert result.exit_code == 0, result.output
    assert "built" in result.output
    assert len(opened) == 1


def test_a_skipped_night_imports_no_build_step(world):
    build(world)
    # a fresh interpreter, so that no other test has imported the steps already
    probe = (
        "import sys\n"
        "from demandprep.config import load_config\n"
        "from demandprep.pipeline import build_unless_current\n"
        f"outcome = build_unless_current(load_config({str(world / 'demandprep.toml')!r}))\n"
        "loaded = ('scipy', 'demandprep.stages', 'demandprep.export.build', 'pandas')\n"
        "print(outcome.skipped, [name for name in loaded if name in sys.modules])\n"
    )
    result = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, check=True
    )
    assert result.stdout.strip() == "True []"


def stored_zero_signs(world: Path, period: str) -> set[bool]:
    """The sign bits of the stored organic values that are zero in one period."""
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    try:
        rows = con.execute(
            "select distinct signbit(value) from iv_stored_characteristics "
            "where characteristic = 'organic' and value = 0 and period_start = $period::date",
            {"period": period},
        ).fetchall()
        return {row[0] for row in rows}
    finally:
        con.close()


def test_one_more_day_rewrites_the_stored_instrument_inputs_of_its_week_only(world, tmp_path):
    build(world)
    config = load_config(world / "demandprep.toml")
    # -0.0 equals 0.0, so the planted copy still matches the week's inputs: only a rewrite of
    # that week's stored rows (a night that did not touch it) would turn it back into 0.0
    with open_warehouse(config.warehouse) as con:
        zero = (
            "from iv_stored_characteristics where characteristic = 'organic' and value = 0 "
            "and period_start in ('2024-01-15', '2024-02-12')"
        )
        # an update would write 0.0 back: the rows are deleted and inserted again
        con.execute(
            f"create temp table planted as select * replace (-(0.0::double) as value) {zero}"
        )
        con.execute(f"delete {zero}")
        con.execute("insert into iv_stored_characteristics by name from planted")
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    incremental, manifest = build(world)
    assert instrument_scope(manifest)["periods_rebuilt"] == ["2024-02-12"]
    assert stored_zero_signs(world, "2024-01-15") == {True}
    assert stored_zero_signs(world, "2024-02-12") == {False}
    with open_warehouse(config.warehouse) as con:
        differing = con.execute(
            "select count(*) from (select market, product, period_start, firm, price "
            "from iv_products except select market, product, period_start, firm, price "
            "from iv_stored_products)"
        ).fetchone()[0]
    assert differing == 0
    assert_same_parquet(incremental, full_rebuild(world))


def test_a_week_that_left_drops_its_stored_instrument_inputs(world):
    build(world)
    config = load_config(world / "demandprep.toml")
    # a stored week that no current product-market has (its files were withdrawn, say)
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "insert into iv_stored_products select market, geography, period_start - 700, "
            "product, firm, price from iv_stored_products where period_start = '2024-01-15'"
        )
    build(world)
    with open_warehouse(config.warehouse) as con:
        left = con.execute(
            "select count(*) from iv_stored_products where period_start < '2024-01-01'"
        ).fetchone()[0]
    assert left == 0


def plant_in_slice(monkeypatch, summary: str, statement: str) -> None:
    """Run `statement` on the warehouse right after `summary`'s slice is written."""
    from demandprep.market import stages

    slice_file = stages.SQL_FILES[summary]
    real_run_sql = stages.run_sql

    def run_sql_then_plant(con, name, params=None):
        result = real_run_sql(con, name, params)
        if name == slice_file:
            con.execute(statement)
        return result

    monkeypatch.setattr(stages, "run_sql", run_sql_then_plant)


def test_a_bad_row_in_a_recomputed_week_is_refused_and_nothing_is_stored(
    world, tmp_path, monkeypatch
):
    from demandprep.errors import UserError

    build(world)
    before = summary_files(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    plant_in_slice(
        monkeypatch, "market_store_visits", "update market_store_visits_slice set visits = -3"
    )
    with pytest.raises(UserError) as refused:
        build(world)
    assert refused.value.message.startswith(
        "stage output 'market_store_visits' breaks its schema MarketStoreVisits: visits: "
        "greater_than_or_equal_to(0) (value '-3')"
    )
    assert summary_files(world) == before


def first_store(world: Path) -> str:
    """The first store (in order) of the stored visits of the week of 2024-01-15."""
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    try:
        return con.execute(
            "select min(store) from market_store_visits where period_start = '2024-01-15'"
        ).fetchone()[0]
    finally:
        con.close()


def test_a_recomputed_row_that_repeats_a_kept_key_is_refused_and_nothing_is_stored(
    world, tmp_path, monkeypatch
):
    from demandprep.errors import UserError

    build(world)
    before = summary_files(world)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    # a row of a week the night keeps, written again by the recomputed week's slice
    plant_in_slice(
        monkeypatch,
        "market_store_visits",
        "insert into market_store_visits_slice by name select * from market_store_visits "
        "where period_start = '2024-01-15' order by store limit 1",
    )
    with pytest.raises(UserError) as refused:
        build(world)
    assert refused.value.message == (
        "stage output 'market_store_visits' breaks its schema MarketStoreVisits: "
        f"2 rows for one key: store {first_store(world)!r}, period_start '2024-01-15'"
    )
    assert summary_files(world) == before


def test_a_recomputed_market_row_that_repeats_a_kept_key_is_refused(world, tmp_path, monkeypatch):
    from demandprep.errors import UserError

    build(without_peak_sizes(world))
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    # a row of a week the night keeps, written again by the recomputed week's slice: the key
    # check looks only at the keys of the recomputed rows, and this is one of them
    plant_in_slice(
        monkeypatch,
        "market_products",
        "insert into market_products_slice by name select * from market_products "
        "where period_start = '2024-01-15' order by market, product limit 1",
    )
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    market, product = con.execute(
        "select market, product from market_products where period_start = '2024-01-15' "
        "order by market, product limit 1"
    ).fetchone()
    con.close()
    with pytest.raises(UserError) as refused:
        build(world)
    assert refused.value.message == (
        "stage output 'market_products' breaks its schema MarketProducts: "
        f"2 rows for one key: market {market!r}, product {product!r}"
    )


def test_a_changed_summary_model_rebuilds_the_summaries_whole(world, monkeypatch):
    from demandprep.schemas import market

    build(world)

    # the kept periods passed the old model only: a new check must see every row again
    class StricterVisits(market.MarketStoreVisits):
        """Visits of a store and period, with a check the stored rows never met."""

    monkeypatch.setitem(market.MARKET_MODELS, "market_store_visits", StricterVisits)
    _folder, manifest = build(world)
    assert manifest["build_mode"] == "full"
    assert manifest["full_build_reason"] == (
        "demandprep or its SQL changed since the summaries were built"
    )


def test_a_new_pseudonym_key_rebuilds_and_says_every_id_changed(
    tmp_path: Path, coffee_sample: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # before: a night with another key was "nothing new" and skipped, and the next build
    # re-keyed every chooser and occasion id without a word
    folder = tmp_path / "world"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config = load_config(folder / "demandprep.toml")
    monkeypatch.setenv(config.choices.pseudonym_key_env, "first-key-0123456789abcdef")
    pipeline.run_ingest(config)
    first = pipeline.build_unless_current(config)
    assert not first.skipped
    assert pipeline.build_unless_current(config).skipped
    monkeypatch.setenv(config.choices.pseudonym_key_env, "second-key-0123456789abcdef")
    second = pipeline.build_unless_current(config)
    assert not second.skipped
    manifests = [
        json.loads((item.folder / "manifest.json").read_text(encoding="utf-8"))
        for item in (first, second)
    ]
    keys = [manifest["pseudonym_key_fingerprint"] for manifest in manifests]
    assert len(set(keys)) == 2 and all(len(key) == 16 for key in keys)
    assert "first-key" not in json.dumps(manifests[0])
    assert any("pseudonym key" in text for text in manifests[1]["warnings"])
    assert not any("pseudonym key" in text for text in manifests[0]["warnings"])


def market_tables(manifest: dict) -> dict:
    """Whether the per-market tables (market_product_sales to shares) were sliced, and why not."""
    return manifest["facts"]["market_tables"]


PEAK_SIZES = '[market_size.peak]\nmethod = "peak_multiple"\nmultiple = 3.0\n'


def without_peak_sizes(world: Path) -> Path:
    """The world with no peak_multiple size: the held-back day moves store S07's peak week."""
    config = world / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    assert PEAK_SIZES in text
    config.write_text(text.replace(PEAK_SIZES, ""), encoding="utf-8")
    return world


def distinct_in_period(world: Path, table: str, column: str, period: str) -> set:
    """The distinct values of a warehouse table's column in the rows of one period."""
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    try:
        rows = con.execute(
            f"select distinct {column} from {table} where period_start = $period::date",  # noqa: S608
            {"period": period},
        ).fetchall()
        return {row[0] for row in rows}
    finally:
        con.close()


def stored_net_revenues(world: Path, period: str) -> set[float]:
    """The distinct net revenues of the stored share table's rows of one period."""
    return distinct_in_period(world, "shares", "net_revenue", period)


def plant_net_revenue(world: Path, *periods: str) -> None:
    """Set every stored share row's net revenue of `periods` to 7777 (a value no build makes)."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "update shares set net_revenue = 7777 where period_start in $periods::date[]",
            {"periods": list(periods)},
        )


def test_one_more_day_keeps_the_stored_market_rows_of_the_other_weeks(world, tmp_path):
    _folder, manifest = build(without_peak_sizes(world))
    assert market_tables(manifest) == {
        "build_mode": "full",
        "full_build_reason": "the period summaries were rebuilt whole",
    }
    plant_net_revenue(world, "2024-01-15", "2024-02-12")
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "update market_availability set shelf_price = 7777 where market = 'S01/2024-01-15'"
        )
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    _folder, manifest = build(world)
    assert market_tables(manifest) == {"build_mode": "incremental", "full_build_reason": None}
    # the night rewrote its own week's rows and left the others as stored
    assert stored_net_revenues(world, "2024-01-15") == {7777}
    assert 7777 not in stored_net_revenues(world, "2024-02-12")
    # the shelf availability reads no receipt: kept as stored
    with open_warehouse(config.warehouse) as con:
        kept = con.execute(
            "select distinct shelf_price from market_availability where market = 'S01/2024-01-15'"
        ).fetchall()
    assert kept == [(7777,)]


def test_one_more_day_without_peak_sizes_equals_a_full_build(world, tmp_path):
    build(without_peak_sizes(world))
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    night, manifest = build(world)
    assert market_tables(manifest)["build_mode"] == "incremental"
    # the instruments read the market build's week and take the other weeks' stored inputs
    assert instrument_scope(manifest)["inputs_read"] == "market build's periods"
    assert instrument_scope(manifest)["periods_rebuilt"] == ["2024-02-12"]
    assert_same_parquet(night, full_rebuild(world))
    assert_same_parquet(night, fresh_build(world, tmp_path))


def plant_stored_price(world: Path, period: str) -> None:
    """Set the stored instrument input price of `period`'s product-markets to 7777."""
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "update iv_stored_products set price = 7777 where period_start = $period::date",
            {"period": period},
        )


def current_prices(world: Path, period: str) -> set[float]:
    """The distinct prices of the last build's instrument inputs in `period`."""
    return distinct_in_period(world, "iv_products", "price", period)


def test_instrument_inputs_of_kept_weeks_come_from_their_stored_copy(world, tmp_path):
    build(without_peak_sizes(world))
    plant_stored_price(world, "2024-01-15")
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    _night, manifest = build(world)
    assert instrument_scope(manifest)["inputs_read"] == "market build's periods"
    # a kept week is its stored copy (the market build did not touch it); the night's is read
    assert current_prices(world, "2024-01-15") == {7777}
    assert 7777 not in current_prices(world, "2024-02-12")


def test_stored_inputs_of_other_market_tables_are_read_again_whole(world, tmp_path):
    # the stored copy was made from market tables other than the ones this night merges into
    # (a build that stored the market tables but not the instruments, say): every week is read
    build(without_peak_sizes(world))
    plant_stored_price(world, "2024-01-15")
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute("update instrument_state set market_generation = 'another generation'")
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    night, manifest = build(world)
    assert market_tables(manifest)["build_mode"] == "incremental"
    assert instrument_scope(manifest)["inputs_read"] == "every period"
    assert instrument_scope(manifest)["periods_rebuilt"] == ["2024-01-15", "2024-02-12"]
    assert 7777 not in current_prices(world, "2024-01-15")
    assert_same_parquet(night, full_rebuild(world))


def assert_night_rebuilds_every_market_row(world: Path, tmp_path: Path, reason: str) -> None:
    """The held-back day's night rebuilds its week's summaries and every per-market row, for
    `reason`: a planted row of another week is gone, and the files are a full build's."""
    plant_net_revenue(world, "2024-01-15")
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    night, manifest = build(world)
    assert manifest["periods_rebuilt"] == ["2024-02-12"]
    assert market_tables(manifest) == {"build_mode": "full", "full_build_reason": reason}
    assert instrument_scope(manifest)["inputs_read"] == "every period"
    assert 7777 not in stored_net_revenues(world, "2024-01-15")
    assert_same_parquet(night, full_rebuild(world))


def test_a_changed_universe_recomputes_every_market_row_after_it(world, tmp_path):
    # which products are kept decides every market's inside products and fringe
    build(without_peak_sizes(world))
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        con.execute(
            "update product_universe set kept = not kept "
            "where product = (select min(product) from product_universe where kept)"
        )
    assert_night_rebuilds_every_market_row(
        world, tmp_path, "the product universe's kept products changed"
    )


def test_a_day_that_moves_a_peak_volume_recomputes_every_market_size(world, tmp_path):
    # a peak_multiple size is the geography's largest period volume times the multiple: the
    # held-back day makes its week store S07's largest, which moves S07's size in every week
    build(world)
    assert_night_rebuilds_every_market_row(
        world, tmp_path, "a geography's peak volume moved (peak_multiple sizes)"
    )


def test_a_crash_before_the_market_tables_state_is_written_keeps_them_as_they_were(
    world, tmp_path, monkeypatch
):
    from demandprep.market import slices

    build(without_peak_sizes(world))
    before = stored_net_revenues(world, "2024-02-12")
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    # every sliced table is merged when the state is written
    build_dies_in(world, monkeypatch, slices, "store_slice_state")
    assert stored_net_revenues(world, "2024-02-12") == before
    recovered, manifest = build(world)
    assert market_tables(manifest) == {"build_mode": "incremental", "full_build_reason": None}
    assert_same_parquet(recovered, full_rebuild(world))


def test_a_changed_sliced_step_rebuilds_the_market_tables_whole(world, tmp_path, monkeypatch):
    from demandprep.market import slices

    build(without_peak_sizes(world))
    plant_net_revenue(world, "2024-01-15")
    changed = (*slices.SLICED_SQL, "market/080_product_universe.sql")
    monkeypatch.setattr(slices, "SLICED_SQL", changed)
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    _night, manifest = build(world)
    assert market_tables(manifest)["full_build_reason"] == slices.FINGERPRINT_CHANGED
    assert 7777 not in stored_net_revenues(world, "2024-01-15")
