"""A partitioned build (one warehouse per region, then a reduce) against the one-process build.

The map runs in this process here; tests/test_flows_partitioned.py runs it on a Dask cluster.
Builds are the slow part, so two module fixtures each run a sequence of nights on one copy
(chain-wide daily files; files split by region) and record what each night gave; the tests
assert on those records, each on one behaviour.
"""

from __future__ import annotations

import csv
import gzip
import shutil
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import Any

import duckdb
import polars as pl
import pytest
from ingest_fixtures import drop_catalogue_line
from polars.testing import assert_frame_equal

import demandprep.partitioned.map as partition_map
from demandprep.config import ProjectConfig, load_config
from demandprep.errors import UserError
from demandprep.export.folder import latest_build, published_builds
from demandprep.ingest.runner import ingest_all
from demandprep.ingest.withdraw import withdraw_files
from demandprep.partitioned.map import PartitionSummaries, build_partition
from demandprep.partitioned.plan import plan_partitions, summary_path
from demandprep.partitioned.runner import build_partitioned, map_in_process
from demandprep.warehouse import open_warehouse

INGEST_RECORDS = ("ledger", "quarantine")
LAST_DAY = Path("receipts/2024/receipts_2024-02-18.csv.gz")
PARTITIONING = '\n[partitioning]\nby = "region"\n'
# two period ranges: the sample's first three weeks, and the four after them
PERIOD_RANGES = PARTITIONING + 'period_boundaries = ["2024-01-22"]\n'
KEEP_PARTITION_LINES = partition_map.keep_partition_lines


def sample_copy(sample: Path, folder: Path, partitioning: str = "") -> ProjectConfig:
    """A private copy of the committed sample, with `partitioning` appended to its config."""
    shutil.copytree(sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config_path = folder / "demandprep.toml"
    config_path.write_text(config_path.read_text(encoding="utf-8") + partitioning, "utf-8")
    return load_config(config_path)


def region_layout(config: ProjectConfig) -> ProjectConfig:
    """The copy's daily files split by region: `receipts/<region>/receipts_<day>.csv.gz`.

    Lines whose store is in no region (broken lines, unknown stores) go to `receipts/unplaced/`.
    The lines keep their bytes; the config's glob `receipts/*/receipts_*.csv.gz` still matches.
    """
    folder = config.config_path.parent
    with (folder / "stores.csv").open(encoding="utf-8", newline="") as stores:
        regions = {row["shop_id"]: region_folder(row["region"]) for row in csv.DictReader(stores)}
    for daily in sorted((folder / "receipts").glob("*/receipts_*.csv.gz")):
        header, *lines = gzip.decompress(daily.read_bytes()).split(b"\n")
        store_at = header.decode().split(",").index("shop_id")
        split: dict[str, list[bytes]] = {}
        for line in filter(None, lines):
            fields = next(csv.reader([line.decode("utf-8", "replace")]))
            region = regions.get(fields[store_at]) if len(fields) > store_at else None
            split.setdefault(region or "unplaced", []).append(line)
        daily.unlink()
        for region, kept in split.items():
            target = folder / "receipts" / region / daily.name
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(gzip.compress(b"\n".join([header, *kept, b""])))
    return load_config(config.config_path)


def region_folder(region: str) -> str:
    """The folder of a region's files (`Saltmarsh Coast` -> `saltmarsh-coast`)."""
    return region.lower().replace(" ", "-")


def partition_receipts_files(config: ProjectConfig) -> dict[str, list[str]]:
    """The receipts files each partition's own warehouse ingested, by partition folder name."""
    ingested = {}
    for warehouse in sorted(config.partitioning.root.glob("partition-*/warehouse.duckdb")):
        con = duckdb.connect(str(warehouse), read_only=True)
        rows = con.execute(
            "select path from ledger where source = 'receipts' and status = 'current' order by 1"
        ).fetchall()
        con.close()
        ingested[warehouse.parent.name] = [row[0] for row in rows]
    return ingested


def built_tables(folder: Path) -> list[str]:
    """The Parquet files of a build folder that the stages build (not the ingest's records)."""
    names = sorted(path.name for path in folder.glob("*.parquet"))
    return [name for name in names if not name.startswith(INGEST_RECORDS)]


def assert_same_tables(expected: Path, actual: Path) -> None:
    """The built tables of two build folders hold the same rows (floats within 1e-12).

    The ledger and quarantine name each input's absolute path, which differs between copies.
    """
    names = built_tables(expected)
    assert names == built_tables(actual)
    assert any(name.startswith("shares_") for name in names) and "choices.parquet" in names
    for name in names:
        left = pl.read_parquet(expected / name)
        right = pl.read_parquet(actual / name)
        columns = left.columns
        # polars compares floats with rtol 0 and atol 1e-12; other columns exactly
        assert_frame_equal(
            left.sort(columns, nulls_last=True),
            right.sort(columns, nulls_last=True),
            check_exact=False,
            rel_tol=0,
            abs_tol=1e-12,
        )


@pytest.fixture(scope="module")
def single_process_records(single_process_build: Path) -> tuple[list, list, list]:
    """The one-process build's receipts ledger, quarantine and reasons (ingest_records)."""
    return ingest_records(load_config(single_process_build.parents[1] / "demandprep.toml"))


@dataclass
class Nights:
    """What a sequence of nights on one copy gave: outcomes, errors and facts, by name."""

    config: ProjectConfig
    outcomes: dict[str, Any] = field(default_factory=dict)
    errors: dict[str, BaseException] = field(default_factory=dict)
    facts: dict[str, Any] = field(default_factory=dict)


def failing(config: ProjectConfig, error: BaseException):
    """A map that builds the first partition, then fails (a partition lost after its retries)."""

    def second_partition_fails(partitions):
        build_partition(config, partitions[0])
        raise error

    return second_partition_fails


def recording(config: ProjectConfig, mapped: list):
    """The in-process map, recording the labels of the partitions of each round it is given."""

    def recording_map(partitions):
        mapped.append([item.label for item in partitions])
        return map_in_process(config)(partitions)

    return recording_map


@pytest.fixture(scope="module")
def daily_nights(
    coffee_sample: Path, single_process_build: Path, tmp_path_factory: pytest.TempPathFactory
) -> Nights:
    """The sample's chain-wide daily files, partitioned by region, over five nights.

    1 `held_back`: the last day's file held back; 2 `one_more_day`: it arrives; 3 `no_new_files`;
    4 `failed_partition`: forced, the second partition fails; 5 `lost_line`: forced, each
    partition loses a line of the first day's file.
    """
    folder = tmp_path_factory.mktemp("daily")
    nights = Nights(sample_copy(coffee_sample, folder / "sample", PARTITIONING))
    config = nights.config
    last_day = config.config_path.parent / LAST_DAY
    held_back = folder / last_day.name
    shutil.move(last_day, held_back)
    nights.outcomes["held_back"] = build_partitioned(config, map_in_process(config))
    shutil.move(held_back, last_day)
    nights.outcomes["one_more_day"] = build_partitioned(config, map_in_process(config))
    nights.facts["records"] = ingest_records(config)
    with open_warehouse(config.warehouse) as con:
        nights.facts["coordinator_lines"] = con.execute(
            "select count(*) from main.raw_lines"
        ).fetchone()[0]
        nights.facts["partitions"] = plan_partitions(con, config)

    def no_partition_may_run(partitions):
        raise AssertionError("a night without new files mapped partitions")

    nights.outcomes["no_new_files"] = build_partitioned(config, no_partition_may_run)
    nights.facts["published_before_failure"] = published_builds(config.export.root)
    try:
        build_partitioned(config, failing(config, RuntimeError("worker lost")), force=True)
    except RuntimeError as error:
        nights.errors["failed_partition"] = error
    nights.facts["published_after_failure"] = published_builds(config.export.root)
    nights.facts["latest_after_failure"] = latest_build(config.export.root)
    nights.facts["staging_after_failure"] = list((config.export.root / ".staging").glob("*"))
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(partition_map, "keep_partition_lines", keep_and_lose_the_first_line)
        try:
            build_partitioned(config, map_in_process(config), force=True)
        except UserError as error:
            nights.errors["lost_line"] = error
    nights.facts["latest_after_lost_line"] = latest_build(config.export.root)
    return nights


def keep_and_lose_the_first_line(con, partition) -> None:
    """The map's own line keeping, then each partition loses its first line of the first day."""
    KEEP_PARTITION_LINES(con, partition)
    con.execute(
        "with first_file as (select file_id from ledger where path like '%2024-01-01.csv.gz'), "
        "first_line as (select file_id, min(line_no) as line_no from raw_lines "
        "semi join first_file using (file_id) group by all) "
        "delete from raw_lines using first_line "
        "where raw_lines.file_id = first_line.file_id "
        "and raw_lines.line_no = first_line.line_no"
    )


def test_partitioned_build_gives_the_single_process_tables(
    single_process_build: Path, daily_nights: Nights
) -> None:
    outcome = daily_nights.outcomes["one_more_day"]
    assert outcome.folder is not None
    assert daily_nights.facts["published_before_failure"][-1] == outcome.folder
    assert_same_tables(single_process_build, outcome.folder)


def test_the_coordinator_reads_no_receipt_line_and_its_ledger_is_the_single_process_one(
    daily_nights: Nights, single_process_records: tuple[list, list, list]
) -> None:
    assert daily_nights.facts["coordinator_lines"] == 0
    # the ledger adds up per file, and a bad line of a chain-wide file is counted once
    assert daily_nights.facts["records"] == single_process_records


def test_partitions_are_the_regions_and_hold_only_their_stores(
    daily_nights: Nights, single_process_build: Path
) -> None:
    partitions = daily_nights.facts["partitions"]
    single = load_config(single_process_build.parents[1] / "demandprep.toml")
    with open_warehouse(single.warehouse) as con:
        regions = con.execute("select distinct region from stores order by 1").fetchall()
        visits = con.execute("select count(distinct store) from raw_lines").fetchone()[0]
    assert [item.key for item in partitions] == [row[0] for row in regions]
    assert sum(len(item.stores) for item in partitions) == visits
    path = summary_path(daily_nights.config, partitions[0], "market_store_visits")
    stores = pl.read_parquet(path)["store"].unique().sort()
    assert stores.to_list() == sorted(partitions[0].stores)


def test_a_failed_partition_publishes_nothing_and_keeps_latest(daily_nights: Nights) -> None:
    assert str(daily_nights.errors["failed_partition"]) == "worker lost"
    assert (
        daily_nights.facts["latest_after_failure"] == daily_nights.outcomes["one_more_day"].folder
    )
    published = daily_nights.facts["published_after_failure"]
    assert published == daily_nights.facts["published_before_failure"]
    assert daily_nights.facts["staging_after_failure"] == []


def test_a_night_with_one_more_day_recomputes_only_its_week_in_each_partition(
    daily_nights: Nights,
) -> None:
    first = daily_nights.outcomes["held_back"]
    assert first.ctx.facts["build_scope"]["build_mode"] == "full"
    scope = daily_nights.outcomes["one_more_day"].ctx.facts["build_scope"]
    # the day's file holds lines of every region, so every partition recomputes its week
    assert scope["build_mode"] == "incremental"
    assert scope["periods_rebuilt"] == ["2024-02-12"]
    assert scope["partitions_rebuilt"] == ["Harrowfield", "Lindenmoor", "Saltmarsh Coast"]


def test_a_night_without_new_files_keeps_latest(daily_nights: Nights) -> None:
    again = daily_nights.outcomes["no_new_files"]
    assert again.skipped and again.kept == daily_nights.outcomes["one_more_day"].folder


def test_a_line_lost_between_partitions_fails_the_build_before_publishing(
    daily_nights: Nights, single_process_records: tuple[list, list, list]
) -> None:
    config = daily_nights.config
    first_file = config.config_path.parent / "receipts" / "2024" / "receipts_2024-01-01.csv.gz"
    relative = str(first_file).replace(str(config.config_path.parent), "")
    (accepted,) = [row[4] for row in single_process_records[0] if row[0] == relative]
    # every accepted line of a file that feeds several partitions is in exactly one of them
    assert daily_nights.errors["lost_line"].one_line() == (
        f"{first_file}: the coordinator accepted {accepted} lines of this receipts file, but "
        f"the partitions hold {accepted - 3}. Hint: remove the partitions' folders under "
        f"{config.partitioning.root} to rebuild them from their files."
    )
    assert (
        daily_nights.facts["latest_after_lost_line"] == daily_nights.outcomes["one_more_day"].folder
    )


@pytest.fixture(scope="module")
def region_nights(
    coffee_sample: Path, single_process_build: Path, tmp_path_factory: pytest.TempPathFactory
) -> Nights:
    """The sample's files split by region, over five nights.

    1 `held_back`: Lindenmoor's last day held back; 2 `one_more_day`: it arrives; 3 `corrected`:
    that file corrected, its lines now Harrowfield store S01's; 4 `withdrawn`: the corrected
    file withdrawn on the coordinator; 5 `rebuilt`: the partitions' folders removed, every
    partition built again from its files (the file stays withdrawn: what night 4 must give).
    """
    folder = tmp_path_factory.mktemp("region")
    nights = Nights(region_layout(sample_copy(coffee_sample, folder / "sample", PARTITIONING)))
    config = nights.config
    last_day = config.config_path.parent / "receipts" / "lindenmoor" / LAST_DAY.name
    held_back = folder / last_day.name
    shutil.move(last_day, held_back)
    nights.outcomes["held_back"] = build_partitioned(config, map_in_process(config))
    shutil.move(held_back, last_day)
    nights.facts["mapped"] = []
    nights.outcomes["one_more_day"] = build_partitioned(
        config, recording(config, nights.facts["mapped"])
    )
    nights.facts["ingested"] = partition_receipts_files(config)
    with open_warehouse(config.warehouse) as con:
        nights.facts["partitions"] = plan_partitions(con, config)
    move_lines_to_store(last_day, "S01")
    nights.outcomes["corrected"] = build_partitioned(config, map_in_process(config))
    with open_warehouse(config.warehouse) as con:
        nights.facts["partitions_corrected"] = plan_partitions(con, config)
    lindenmoor = next(
        item for item in nights.facts["partitions_corrected"] if item.key == "Lindenmoor"
    )
    warehouse = config.partitioning.root / lindenmoor.name / "warehouse.duckdb"
    con = duckdb.connect(str(warehouse), read_only=True)
    nights.facts["lindenmoor_last_day_stores"] = con.execute(
        "select distinct store from raw_lines where sold_at >= '2024-02-18' order by 1"
    ).fetchall()
    con.close()
    with open_warehouse(config.warehouse) as con:
        withdraw_files(con, config, str(last_day), "recalled by the store")
    nights.facts["mapped_withdrawn"] = []
    nights.outcomes["withdrawn"] = build_partitioned(
        config, recording(config, nights.facts["mapped_withdrawn"])
    )
    nights.facts["withdrawn_in_partitions"] = partition_ledger_rows(config, str(last_day))
    shutil.rmtree(config.partitioning.root)
    # forced: nothing changed since night 4, whose build is current
    nights.outcomes["rebuilt"] = build_partitioned(config, map_in_process(config), force=True)
    return nights


def partition_ledger_rows(config: ProjectConfig, path: str) -> dict[str, tuple]:
    """Per partition warehouse: the file's ledger status and the lines of it still held."""
    rows = {}
    for warehouse in sorted(config.partitioning.root.glob("partition-*/warehouse.duckdb")):
        con = duckdb.connect(str(warehouse), read_only=True)
        statuses = con.execute(
            "select list(status order by file_id) from ledger where path = $path", {"path": path}
        ).fetchone()[0]
        held = con.execute(
            "select count(*) from raw_lines join ledger using (file_id) where path = $path",
            {"path": path},
        ).fetchone()[0]
        con.close()
        rows[warehouse.parent.name] = (statuses, held)
    return rows


def move_lines_to_store(path: Path, store: str) -> None:
    """Rewrite a gzip CSV receipts file with every line's store replaced (a corrected file)."""
    header, *lines = gzip.decompress(path.read_bytes()).decode().split("\n")
    store_at = header.split(",").index("shop_id")
    moved = [line.split(",") for line in filter(None, lines)]
    for fields in moved:
        fields[store_at] = store if len(fields) > store_at else fields[store_at]
    text = "\n".join([header, *(",".join(fields) for fields in moved), ""])
    path.write_bytes(gzip.compress(text.encode()))


def test_per_region_files_feed_only_their_partition_and_give_the_same_tables(
    single_process_build: Path, region_nights: Nights
) -> None:
    partitions = region_nights.facts["partitions"]
    ingested = region_nights.facts["ingested"]
    assert sorted(ingested) == sorted(item.name for item in partitions)
    receipts = region_nights.config.config_path.parent / "receipts"
    for item in partitions:
        # a partition reads its region's 49 daily files and no other region's (nor unplaced)
        assert ingested[item.name] == [
            str(path) for path in sorted((receipts / region_folder(item.key)).glob("*.csv.gz"))
        ]
    assert_same_tables(single_process_build, region_nights.outcomes["one_more_day"].folder)


def test_a_new_file_of_one_region_maps_only_that_regions_partition(region_nights: Nights) -> None:
    assert region_nights.facts["mapped"] == [["Lindenmoor"]]
    scope = region_nights.outcomes["one_more_day"].ctx.facts["build_scope"]
    assert (scope["build_mode"], scope["periods_rebuilt"]) == ("incremental", ["2024-02-12"])
    assert scope["partitions_rebuilt"] == ["Lindenmoor"]


def test_a_corrected_file_leaving_a_partition_takes_its_old_lines_out_of_it(
    region_nights: Nights,
) -> None:
    scope = region_nights.outcomes["corrected"].ctx.facts["build_scope"]
    assert scope["partitions_rebuilt"] == ["Harrowfield", "Lindenmoor"]
    # the corrected version replaced the old one there, and its lines are not Lindenmoor's
    assert region_nights.facts["lindenmoor_last_day_stores"] == []
    corrected = region_nights.config.config_path.parent / "receipts" / "lindenmoor" / LAST_DAY.name
    lindenmoor = next(
        item for item in region_nights.facts["partitions_corrected"] if item.key == "Lindenmoor"
    )
    assert str(corrected) in lindenmoor.files


def test_a_file_withdrawn_on_the_coordinator_leaves_the_partitions_that_read_it(
    region_nights: Nights,
) -> None:
    # both partitions that read the corrected file are mapped again, and withdraw it too
    assert region_nights.facts["mapped_withdrawn"] == [["Harrowfield", "Lindenmoor"]]
    held = region_nights.facts["withdrawn_in_partitions"]
    read_it = {name: rows for name, rows in held.items() if rows[0]}
    assert len(read_it) == 2
    for statuses, lines in read_it.values():
        assert (statuses[-1], lines) == ("withdrawn", 0)
    # the same tables as partitions built afresh from the files that stay
    withdrawn = region_nights.outcomes["withdrawn"]
    scope = withdrawn.ctx.facts["build_scope"]
    # Lindenmoor held none of the corrected file's lines (they are S01's): no period to redo
    assert scope["partitions_rebuilt"] == ["Harrowfield"]
    assert_same_tables(region_nights.outcomes["rebuilt"].folder, withdrawn.folder)
    rebuilt = region_nights.outcomes["rebuilt"]
    assert latest_build(region_nights.config.export.root) == rebuilt.folder


def test_period_ranges_split_each_region_and_give_the_same_tables(
    single_process_build: Path, coffee_sample: Path, tmp_path: Path
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", PERIOD_RANGES)
    outcome = build_partitioned(config, map_in_process(config))
    with open_warehouse(config.warehouse) as con:
        partitions = plan_partitions(con, config)
    boundary = date(2024, 1, 22)
    assert [(item.key, item.first_day, item.after_last_day) for item in partitions] == [
        (region, first, after)
        for region in ("Harrowfield", "Lindenmoor", "Saltmarsh Coast")
        for first, after in ((None, boundary), (boundary, None))
    ]
    ingested = partition_receipts_files(config)
    for item in partitions:
        # the daily files are named by their day: a partition reads only its range's days
        days = {date.fromisoformat(path[-17:-7]) for path in ingested[item.name]}
        in_range = {day for day in days if (day < boundary) == (item.after_last_day == boundary)}
        assert days == in_range and len(days) == (21 if item.first_day is None else 28)
    assert_same_tables(single_process_build, outcome.folder)


def test_partitioning_by_a_column_stores_lack_is_one_line(
    coffee_sample: Path, tmp_path: Path
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", '\n[partitioning]\nby = "county"\n')
    with pytest.raises(UserError) as raised:
        build_partitioned(config, map_in_process(config))
    assert raised.value.one_line() == (
        f"{config.config_path}: key 'partitioning.by' names 'county', which is not a "
        "stores column. Hint: use one of: store, region, chain, population."
    )
    assert latest_build(config.export.root) is None


def test_the_partitioned_command_without_a_partition_key_is_one_line(
    coffee_sample: Path, tmp_path: Path
) -> None:
    from typer.testing import CliRunner

    from demandprep.cli import app

    config = sample_copy(coffee_sample, tmp_path / "sample")
    result = CliRunner().invoke(app, ["partitioned", str(config.config_path)], terminal_width=2000)
    assert result.exit_code == 1, result.output
    assert result.output.strip() == (
        f"error: {config.config_path}: partitioning.by is not set, so there is nothing to "
        'partition. Hint: name a stores column (e.g. by = "region") under [partitioning], '
        "or use `demandprep run`."
    )
    assert not (config.config_path.parent / "warehouse").exists()


def test_receipt_ids_unique_in_the_chain_refuse_partitioning(
    coffee_sample: Path, tmp_path: Path
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", PARTITIONING)
    text = config.config_path.read_text(encoding="utf-8")
    config.config_path.write_text(
        text.replace(
            'categories = ["coffee"]', 'categories = ["coffee"]\nreceipt_ids_unique_per = "chain"'
        ),
        "utf-8",
    )
    config = load_config(config.config_path)
    with pytest.raises(UserError) as raised:
        build_partitioned(config, map_in_process(config))
    assert raised.value.one_line() == (
        f"{config.config_path}: key 'partitioning.by' needs receipt ids unique per store or "
        "store-day, but markets.receipt_ids_unique_per = 'chain' lets a visit span partitions. "
        "Hint: set receipt_ids_unique_per to 'store' or 'store_day', or leave partitioning.by "
        "unset."
    )
    # refused from the config alone: nothing was ingested or partitioned
    assert not config.warehouse.path.exists() and not config.partitioning.root.exists()


def test_a_period_boundary_inside_a_week_is_one_line(coffee_sample: Path, tmp_path: Path) -> None:
    ranges = PARTITIONING + 'period_boundaries = ["2024-01-24"]\n'
    config = sample_copy(coffee_sample, tmp_path / "sample", ranges)
    with pytest.raises(UserError) as raised:
        build_partitioned(config, map_in_process(config))
    assert raised.value.one_line() == (
        f"{config.config_path}: key 'partitioning.period_boundaries' has 2024-01-24, which "
        "does not start a week period, so a market would span two partitions. Hint: give "
        "dates that start a period, such as 2024-01-22."
    )
    assert not config.warehouse.path.exists()


def test_period_ranges_need_receipt_ids_unique_per_store_day(
    coffee_sample: Path, tmp_path: Path
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", PERIOD_RANGES)
    text = config.config_path.read_text(encoding="utf-8")
    config.config_path.write_text(
        text.replace(
            'categories = ["coffee"]', 'categories = ["coffee"]\nreceipt_ids_unique_per = "store"'
        ),
        "utf-8",
    )
    config = load_config(config.config_path)
    with pytest.raises(UserError) as raised:
        build_partitioned(config, map_in_process(config))
    assert raised.value.one_line() == (
        f"{config.config_path}: key 'partitioning.period_boundaries' needs receipt ids unique "
        "per store-day, but markets.receipt_ids_unique_per = 'store' lets a visit span two "
        "period ranges. Hint: set receipt_ids_unique_per to 'store_day', or leave "
        "period_boundaries empty."
    )
    assert not config.warehouse.path.exists()


def ingest_records(config: ProjectConfig) -> tuple[list, list, list]:
    """The warehouse's receipts ledger, quarantine counts and reasons, by path under the copy."""
    folder = str(config.config_path.parent)
    with open_warehouse(config.warehouse) as con:
        ledger = con.execute(
            "select replace(path, $folder, ''), version, status, rows_read, rows_accepted, "
            "rows_quarantined, first_sold_at, last_sold_at, bytes, sha256 from ledger "
            "where source = 'receipts' order by all",
            {"folder": folder},
        ).fetchall()
        quarantine = con.execute(
            "select replace(path, $folder, ''), line_no, reason, detail, original_text "
            "from quarantine where source = 'receipts' order by all",
            {"folder": folder},
        ).fetchall()
        reasons = con.execute(
            "select replace(path, $folder, ''), ledger_reasons.reason, rows from ledger_reasons "
            "join ledger using (file_id) where source = 'receipts' order by all",
            {"folder": folder},
        ).fetchall()
    return ledger, quarantine, reasons


def test_a_file_the_hint_routes_wrongly_still_reaches_its_partitions(
    single_process_build: Path, coffee_sample: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import demandprep.partitioned.routing as routing

    config = region_layout(sample_copy(coffee_sample, tmp_path / "sample", PARTITIONING))

    # the hint sends every new file to Harrowfield alone: the others learn of theirs in round two
    def first_partition_only(con, config, paths, names):
        return dict.fromkeys(paths, names[:1])

    monkeypatch.setattr(routing, "hinted_partitions", first_partition_only)
    rounds = []

    def recording_map(partitions):
        rounds.append([item.label for item in partitions])
        return map_in_process(config)(partitions)

    outcome = build_partitioned(config, recording_map)
    assert rounds == [["Harrowfield"], ["Lindenmoor", "Saltmarsh Coast"]]
    assert_same_tables(single_process_build, outcome.folder)
    ingested = partition_receipts_files(config)
    with open_warehouse(config.warehouse) as con:
        partitions = plan_partitions(con, config)
    receipts = config.config_path.parent / "receipts"
    for item in partitions:
        own = [str(path) for path in sorted((receipts / region_folder(item.key)).glob("*.csv.gz"))]
        # Harrowfield read every file in round one; the others only their region's
        assert set(own) <= set(ingested[item.name])
        assert item.key == "Harrowfield" or ingested[item.name] == own
    ledger = ingest_records(config)[0]
    single = ingest_records(load_config(single_process_build.parents[1] / "demandprep.toml"))[0]
    # the files differ (split by region), the lines do not: every line counted once
    assert all(row[3] == row[4] + row[5] for row in ledger)
    assert [sum(row[n] for row in ledger) for n in (3, 4, 5)] == [
        sum(row[n] for row in single) for n in (3, 4, 5)
    ]


def test_a_partition_mapped_in_both_rounds_reports_what_both_rebuilt() -> None:
    from demandprep.partitioned.plan import Partition
    from demandprep.partitioned.runner import mapped_twice

    partition = Partition("Lindenmoor", ("S05",))
    first = PartitionSummaries(
        partition,
        {},
        {},
        {"build_mode": "full", "periods_rebuilt": ["2024-01-01"], "full_build_reason": "new"},
    )
    second = PartitionSummaries(
        partition,
        {},
        {},
        {"build_mode": "incremental", "periods_rebuilt": ["2024-02-12"], "full_build_reason": None},
    )
    assert mapped_twice(first, second).build_scope == {
        "build_mode": "full",
        "periods_rebuilt": ["2024-01-01", "2024-02-12"],
        "full_build_reason": "new",
    }


def test_files_the_partitions_read_again_are_ledgered_again_by_the_coordinator(
    coffee_sample: Path, tmp_path: Path
) -> None:
    # the catalogue stops listing C0102: the partitions read their files with its lines again
    # (same bytes, new versions) and quarantine those lines; the coordinator must ledger the new
    # versions, as a one-process ingest of the same files does. Before, it kept the old counts
    # and every later build stopped in check_lines_add_up, even after removing the partitions
    config = sample_copy(coffee_sample, tmp_path / "p", PARTITIONING)
    config.config_path.write_text(
        config.config_path.read_text(encoding="utf-8").replace(
            "[choices]\nenabled = true", "[choices]\nenabled = false"
        ),
        encoding="utf-8",
    )
    config = load_config(config.config_path)
    build_partitioned(config, map_in_process(config))
    catalogue = config.config_path.parent / "catalogue.csv"
    drop_catalogue_line(catalogue, "C0102")
    outcome = build_partitioned(config, map_in_process(config))

    assert outcome.folder is not None
    single = sample_copy(coffee_sample, tmp_path / "single")
    shutil.copy2(catalogue, single.config_path.parent / "catalogue.csv")
    with open_warehouse(single.warehouse) as con:
        ingest_all(con, single)
    reasons = (
        "select reason, count(*) from quarantine where source = 'receipts' group by all "
        "order by all"
    )
    accepted = (
        "select sum(rows_accepted) from ledger where source = 'receipts' and status = 'current'"
    )
    with open_warehouse(single.warehouse) as con:
        expected = con.execute(reasons).fetchall(), con.execute(accepted).fetchone()
    with open_warehouse(config.warehouse) as con:
        assert (con.execute(reasons).fetchall(), con.execute(accepted).fetchone()) == expected
    assert ("unknown_sku", 0) not in expected[0]
