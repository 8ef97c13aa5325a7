"""Which partitions a build has, which receipts files feed each, and where each keeps its state.

Partitions come from the stores reference file (one per value of `partitioning.by`, plus one for
stores without a value); a line of a store missing from that file is quarantined by the ingest,
so it belongs to no partition. Each receipts file is routed to the partitions whose stores it
holds (the coordinator's own lines say which), and to every partition it fed before, so a
corrected file that no longer holds a partition's stores still replaces its old lines there.
"""

from __future__ import annotations

import glob
import hashlib
import json
import os
from dataclasses import dataclass
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

    @property
    def name(self) -> str:
        """A folder name that does not depend on the value's spelling (values are free text)."""
        label = NO_VALUE if self.key is None else f"value:{self.key}"
        return "partition-" + hashlib.sha256(label.encode()).hexdigest()[:16]

    @property
    def label(self) -> str:
        """The value as shown in logs and docs."""
        return NO_VALUE if self.key is None else self.key


def partition_folder(config: ProjectConfig, partition: Partition) -> Path:
    """The partition's own folder under `partitioning.root`."""
    root = config.partitioning.root
    if not root.is_absolute() and config.config_path is not None:
        # the default root, when the config has no [partitioning] table to resolve it
        root = config.config_path.parent / root
    return root / partition.name


def summary_path(config: ProjectConfig, partition: Partition, summary: str) -> Path:
    """Where the partition publishes one period summary as Parquet."""
    return partition_folder(config, partition) / f"{summary}.parquet"


def partition_config(config: ProjectConfig, partition: Partition) -> ProjectConfig:
    """The project's config with the warehouse moved into the partition's folder."""
    folder = partition_folder(config, partition)
    warehouse = config.warehouse.model_copy(
        update={"path": folder / "warehouse.duckdb", "temp_directory": folder / "tmp"}
    )
    return config.model_copy(update={"warehouse": warehouse})


def plan_partitions(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[Partition]:
    """The partitions that have receipts files, from the stores file, each with its files."""
    require_partition_key(config)
    check_partitioning(con, config)
    current = current_receipts_files(con)
    references = reference_inputs(con)
    partitions = []
    for key, stores, holding in partition_stores_and_files(con, config):
        partition = Partition(key, tuple(stores))
        files = sorted((set(holding) | set(recorded_files(config, partition))) & current.keys())
        if files:
            inputs = inputs_digest(config, [(path, current[path]) for path in files], references)
            partitions.append(Partition(key, tuple(stores), tuple(files), inputs))
    return partitions


def partition_stores_and_files(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig
) -> list[tuple[str | None, list[str], list[str]]]:
    """Per value of the partitioning column: its stores and the files holding their lines."""
    # the column was checked against the stores table's real columns (check_partitioning)
    column = quote_identifier(config.partitioning.by)
    return con.execute(
        f"with keyed as (select store, {column}::varchar as key from stores), "  # noqa: S608
        "line_files as (select distinct raw_lines.store, ledger.path from raw_lines "
        "join ledger using (file_id) where ledger.status = 'current') "
        "select keyed.key, list(distinct keyed.store order by keyed.store), "
        "coalesce(list(distinct line_files.path order by line_files.path) "
        "filter (where line_files.path is not null), []) "
        "from keyed left join line_files using (store) group by keyed.key order by keyed.key"
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
    values = [config.config_hash(), files, references, code]
    return hashlib.sha256(repr(values).encode()).hexdigest()


def recorded_files(config: ProjectConfig, partition: Partition) -> list[str]:
    """The receipts files the partition was built from last time (none without a record)."""
    return read_routing_record(config, partition).get("files", [])


def read_routing_record(config: ProjectConfig, partition: Partition) -> dict:
    """The partition's routing record, or an empty one."""
    path = partition_folder(config, partition) / ROUTING_RECORD
    return json.loads(path.read_text(encoding="utf-8")) if path.is_file() else {}


def write_routing_record(config: ProjectConfig, partition: Partition) -> None:
    """Record the files and inputs digest a finished partition was built from (atomically)."""
    path = partition_folder(config, partition) / ROUTING_RECORD
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    record = {"partition": partition.label, "inputs": partition.inputs, "files": partition.files}
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
