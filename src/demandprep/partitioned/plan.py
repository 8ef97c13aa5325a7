"""Which partitions a build has, which receipts files feed each, and where each keeps its state.

Partitions come from the stores reference file (one per value of `partitioning.by`, plus one for
stores without a value); a line of a store missing from that file is quarantined by the ingest,
so it belongs to no partition. Each receipts file is routed (`routing.py`) to the partitions
whose stores and days it holds, and to every partition it fed before, so a corrected file that
no longer holds a partition's stores still replaces its old lines there.
"""

from __future__ import annotations

import glob
import hashlib
import json
import os
from dataclasses import dataclass, replace
from datetime import date, timedelta
from pathlib import Path

import duckdb

from demandprep import __version__
from demandprep.config import ProjectConfig
from demandprep.errors import UserError
from demandprep.market.settings import table_columns
from demandprep.market.summaries import SUMMARY_SQL
from demandprep.sqlfiles import quote_identifier, sql_text

SUMMARY_FILES = ("market_store_visits", "market_sku_sales")
# what a partition last built from: its receipts files and the digest of its inputs
ROUTING_RECORD = "routed_files.json"
# the partition of stores without a value in the partitioning column (or without a stores row)
NO_VALUE = "no value"


@dataclass(frozen=True)
class Partition:
    """One value of the partitioning column and the stores whose lines it builds."""

    key: str | None
    stores: tuple[str, ...]
    # the receipts files that hold its stores' lines (absolute paths), and a digest of every
    # input that gives its summaries their meaning (a partition whose digest matches its
    # record needs no map step)
    files: tuple[str, ...] = ()
    inputs: str = ""
    # its period range (partitioning.period_boundaries): sale days from first_day up to the day
    # before after_last_day; None is open-ended
    first_day: date | None = None
    after_last_day: date | None = None

    @property
    def name(self) -> str:
        """A folder name that does not depend on the value's spelling (values are free text)."""
        label = NO_VALUE if self.key is None else f"value:{self.key}"
        if self.first_day is not None or self.after_last_day is not None:
            label += f"|from:{self.first_day}|before:{self.after_last_day}"
        return "partition-" + hashlib.sha256(label.encode()).hexdigest()[:16]

    @property
    def label(self) -> str:
        """The value (and period range) as shown in logs and docs."""
        value = NO_VALUE if self.key is None else self.key
        if self.first_day is None and self.after_last_day is None:
            return value
        return f"{value} [{self.first_day or ''}, {self.after_last_day or ''})"


def partition_folder(config: ProjectConfig, partition: Partition) -> Path:
    """The partition's own folder under `partitioning.root`."""
    return partitioning_root(config) / partition.name


def buckets_folder(config: ProjectConfig) -> Path:
    """The chooser buckets' folder under `partitioning.root` (their inputs and warehouses)."""
    return partitioning_root(config) / "choice-buckets"


def partitioning_root(config: ProjectConfig) -> Path:
    """`partitioning.root`, absolute."""
    root = config.partitioning.root
    if not root.is_absolute() and config.config_path is not None:
        # the default root, when the config has no [partitioning] table to resolve it
        root = config.config_path.parent / root
    return root


def summary_path(config: ProjectConfig, partition: Partition, summary: str) -> Path:
    """Where the partition publishes one period summary as Parquet."""
    return partition_folder(config, partition) / f"{summary}.parquet"


def partition_config(config: ProjectConfig, partition: Partition) -> ProjectConfig:
    """The project's config with the warehouse moved into the partition's folder."""
    return config_with_warehouse_in(config, partition_folder(config, partition))


def config_with_warehouse_in(config: ProjectConfig, folder: Path) -> ProjectConfig:
    """The project's config with its warehouse (and spill folder) in `folder`."""
    warehouse = config.warehouse.model_copy(
        update={"path": folder / "warehouse.duckdb", "temp_directory": folder / "tmp"}
    )
    return config.model_copy(update={"warehouse": warehouse})


def plan_partitions(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    routes: dict[str, set[str]] | None = None,
    files: dict[str, str] | None = None,
) -> list[Partition]:
    """The partitions that have receipts files, each with its files and inputs digest.

    `routes`: partition name to its files (`routing.route_files`), else what each read last
    time; `files`: the receipts files (path to sha256), else the coordinator's current ones.
    """
    require_partition_key(config)
    check_partitioning(con, config)
    files = current_receipts_files(con) if files is None else files
    references = reference_inputs(con)
    candidates = candidate_partitions(con, config)
    if routes is None:
        routes = {item.name: set(recorded_files(config, item)) for item in candidates}
    planned = []
    for item in candidates:
        routed = tuple(sorted(routes.get(item.name, set()) & files.keys()))
        if routed:
            inputs = inputs_digest(config, [(path, files[path]) for path in routed], references)
            planned.append(replace(item, files=routed, inputs=inputs))
    return planned


def candidate_partitions(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[Partition]:
    """Every partition the stores file and the period ranges give, files or not, in order."""
    return [
        Partition(key, tuple(stores), first_day=first, after_last_day=after)
        for key, stores in stores_by_key(con, config)
        for first, after in period_ranges(config)
    ]


def partition_name(key: str | None, first_day: date | None, after_last_day: date | None) -> str:
    """The folder name of the partition of this value and period range."""
    return Partition(key, (), first_day=first_day, after_last_day=after_last_day).name


def period_ranges(config: ProjectConfig) -> list[tuple[date | None, date | None]]:
    """The period ranges between the boundaries (one open range without boundaries)."""
    bounds: list[date | None] = sorted(set(config.partitioning.period_boundaries))
    return list(zip([None, *bounds], [*bounds, None], strict=True))


def stores_by_key(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig
) -> list[tuple[str | None, list[str]]]:
    """Each value of the partitioning column with its stores, from the stores file."""
    # the column was checked against the stores table's real columns (check_partitioning)
    column = quote_identifier(config.partitioning.by)
    return con.execute(
        f"select {column}::varchar as key, list(store order by store) from stores "  # noqa: S608
        "group by all order by 1"
    ).fetchall()


def current_receipts_files(con: duckdb.DuckDBPyConnection) -> dict[str, str]:
    """The coordinator's current receipts files: path to sha256."""
    rows = con.execute(
        "select path, sha256 from ledger where source = 'receipts' and status = 'current'"
    ).fetchall()
    return dict(rows)


def reference_inputs(con: duckdb.DuckDBPyConnection) -> list[tuple[str, str, str]]:
    """The current reference files (source, path, sha256): every partition reads them all."""
    return con.execute(
        "select source, path, sha256 from ledger "
        "where source <> 'receipts' and status = 'current' order by all"
    ).fetchall()


def inputs_digest(
    config: ProjectConfig,
    files: list[tuple[str, str]],
    references: list[tuple[str, str, str]],
) -> str:
    """A digest of what a partition's summaries are built from: config, files, tool and SQL."""
    code = [__version__, *(sql_text(name) for name in SUMMARY_SQL)]
    values = [config.build_hash(), files, references, code]
    return hashlib.sha256(repr(values).encode()).hexdigest()


def recorded_files(config: ProjectConfig, partition: Partition) -> list[str]:
    """The receipts files the partition was built from last time (none without a record)."""
    return read_routing_record(config, partition).get("files", [])


def read_routing_record(config: ProjectConfig, partition: Partition) -> dict:
    """The partition's routing record, or an empty one."""
    path = partition_folder(config, partition) / ROUTING_RECORD
    return json.loads(path.read_text(encoding="utf-8")) if path.is_file() else {}


def write_routing_record(
    config: ProjectConfig, partition: Partition, lines: dict[str, int], placement: dict[str, dict]
) -> None:
    """Record what a finished partition was built from, its lines and placements (atomically)."""
    path = partition_folder(config, partition) / ROUTING_RECORD
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    record = {
        "partition": partition.label,
        "inputs": partition.inputs,
        "files": partition.files,
        "lines": lines,
        "placement": placement,
    }
    temporary.write_text(json.dumps(record, indent=1, sort_keys=True), encoding="utf-8")
    os.replace(temporary, path)


def partition_is_current(config: ProjectConfig, partition: Partition) -> bool:
    """True when the partition's summaries were built from exactly its inputs of tonight."""
    record = read_routing_record(config, partition)
    summaries = [summary_path(config, partition, name) for name in SUMMARY_FILES]
    return record.get("inputs") == partition.inputs and all(path.is_file() for path in summaries)


def routed_config(config: ProjectConfig, partition: Partition) -> ProjectConfig:
    """The config with the receipts source narrowed to the partition's files, for its ingest."""
    receipts = config.sources.receipts
    # the paths are literal: escape any glob character a file name may hold
    narrowed = receipts.model_copy(update={"files": [glob.escape(p) for p in partition.files]})
    sources = config.sources.model_copy(update={"receipts": narrowed})
    return config.model_copy(update={"sources": sources})


def require_partition_key(config: ProjectConfig) -> None:
    """Refuse a partitioned build of a config that names no partition key."""
    if config.partitioning.by is None:
        raise UserError(
            f"{config.config_path}: partitioning.by is not set, so there is nothing to partition.",
            'name a stores column (e.g. by = "region") under [partitioning], or use '
            "`demandprep run`.",
        )


def check_visits_stay_in_stores(config: ProjectConfig) -> None:
    """Refuse receipt ids unique only in the chain: a visit could then span partitions."""
    if config.markets.receipt_ids_unique_per == "chain":
        raise UserError(
            f"{config.config_path}: key 'partitioning.by' needs receipt ids unique per store or "
            "store-day, but markets.receipt_ids_unique_per = 'chain' lets a visit span partitions.",
            "set receipt_ids_unique_per to 'store' or 'store_day', or leave partitioning.by unset.",
        )
    if config.partitioning.period_boundaries:
        check_period_boundaries(config)


def check_period_boundaries(config: ProjectConfig) -> None:
    """Refuse period ranges that could split a market or a visit between partitions."""
    key = "key 'partitioning.period_boundaries'"
    unique_per = config.markets.receipt_ids_unique_per
    if unique_per != "store_day":
        raise UserError(
            f"{config.config_path}: {key} needs receipt ids unique per store-day, but "
            f"markets.receipt_ids_unique_per = {unique_per!r} lets a visit span two period ranges.",
            "set receipt_ids_unique_per to 'store_day', or leave period_boundaries empty.",
        )
    period = config.markets.period
    for boundary in sorted(config.partitioning.period_boundaries):
        start = period_start(boundary, period, config.markets.week_starts_on)
        if start != boundary:
            raise UserError(
                f"{config.config_path}: {key} has {boundary}, which does not start a {period} "
                "period, so a market would span two partitions.",
                f"give dates that start a period, such as {start}.",
            )


WEEKDAYS = ("monday", "tuesday", "wednesday", "thursday", "friday", "saturday", "sunday")


def period_start(day: date, period: str, week_starts_on: str) -> date:
    """The first day of the market period holding `day` (as `sql/market/010` computes it)."""
    if period == "week":
        return day - timedelta(days=(day.weekday() - WEEKDAYS.index(week_starts_on)) % 7)
    if period == "month":
        return day.replace(day=1)
    if period == "quarter":
        return day.replace(month=(day.month - 1) // 3 * 3 + 1, day=1)
    return day


def check_partitioning(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    """Refuse a partitioning that could split a market or a visit between partitions."""
    column = config.partitioning.by
    key = "key 'partitioning.by'"
    if column not in table_columns(con, "stores"):
        raise UserError(
            f"{config.config_path}: {key} names {column!r}, which is not a stores column.",
            f"use one of: {', '.join(table_columns(con, 'stores'))}.",
        )
    check_visits_stay_in_stores(config)
    geography = config.markets.geography
    if geography in ("store", column) or geography not in table_columns(con, "stores"):
        return  # an unknown geography column is the market settings' to report
    # both names were checked: geography by the market settings, column just above
    split = con.execute(
        f"select min({quote_identifier(geography)}) from stores "  # noqa: S608
        f"group by {quote_identifier(geography)} "
        f"having count(distinct {quote_identifier(column)}) > 1 order by 1 limit 1"
    ).fetchone()
    if split is not None:
        raise UserError(
            f"{config.config_path}: {key} = {column!r} splits the market geography "
            f"{split[0]!r} between partitions.",
            "partition by a stores column that holds whole geographies (e.g. a coarser region).",
        )
