"""The map step: one partition's ingest and period summaries, in its own warehouse.

It ingests only the receipts files routed to the partition (`plan.py`; a file holding several
partitions' stores is read by each of them, which keep their own lines). It runs the
single-process build's own stages, up to and including the two scans of raw lines (`050`/`060`),
so the summaries stay incremental per partition; then it writes them as Parquet (sorted, so a
partition that recomputed nothing writes the same bytes again).
"""

from __future__ import annotations

import glob
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import pyarrow.parquet as pq

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.ingest.runner import ensure_tables, ingest_all
from demandprep.ingest.withdraw import withdraw_files
from demandprep.market.stages import MARKET_STAGES
from demandprep.memory import memory_shared_with_batches
from demandprep.partitioned.plan import (
    SUMMARY_FILES,
    Partition,
    partition_config,
    partition_name,
    period_ranges,
    read_routing_record,
    routed_config,
    summary_path,
    write_routing_record,
)
from demandprep.sqlfiles import quote_identifier
from demandprep.stage import Stage, run_stage
from demandprep.warehouse import open_warehouse

# the partition's ledger reason for a file withdrawn on the coordinator
UNROUTED_REASON = "withdrawn on the coordinator"
# the stages a partition runs: the market build up to its last scan of raw lines
LAST_MAP_STAGE = "market_sku_sales"
BATCH_ROWS = 65_536


@dataclass(frozen=True)
class PartitionSummaries:
    """What a finished partition hands the reduce: its summary files and what it rebuilt."""

    partition: Partition
    files: dict[str, Path]
    rows: dict[str, int]
    build_scope: dict[str, Any] = field(default_factory=dict)
    # the partition's accepted lines per receipts file (path): the reduce checks they add up
    lines: dict[str, int] = field(default_factory=dict)
    # per receipts file it read: checksum and accepted lines per partition (routing.py)
    placement: dict[str, dict] = field(default_factory=dict)


def map_stages() -> tuple[Stage, ...]:
    """The market stages from the settings to the last period summary, in order."""
    names = [stage.name for stage in MARKET_STAGES]
    return MARKET_STAGES[: names.index(LAST_MAP_STAGE) + 1]


def build_partition(config: ProjectConfig, partition: Partition) -> PartitionSummaries:
    """Ingest the partition's files, keep its stores' lines, build and write its summaries."""
    own = partition_config(config, partition)
    with open_warehouse(own.warehouse) as con:
        ensure_tables(con)
        withdraw_unrouted_files(con, own, partition)
        last_file_id = last_ingested_file_id(con)
        set_line_scope(con, partition)
        ingest_all(con, routed_config(own, partition))
        placement = placement_of_files_since(con, config, last_file_id)
        keep_partition_lines(con, partition)
        lines = lines_per_file(con)
        # the stages see the project's receipts globs, not tonight's routed list (the
        # summaries' fingerprint, `build_hash`, leaves file patterns out in any case)
        ctx = BuildContext(con=con, config=own)
        for stage in map_stages():
            run_stage(stage, ctx)
        files = {name: summary_path(config, partition, name) for name in SUMMARY_FILES}
        rows = {name: write_summary(con, name, path) for name, path in files.items()}
    # a file's placement is kept while the partition reads the same version of it
    recorded = read_routing_record(config, partition).get("placement", {})
    placement = {path: recorded[path] for path in partition.files if path in recorded} | placement
    write_routing_record(config, partition, lines, placement)
    scope = ctx.facts.get("build_scope", {})
    return PartitionSummaries(partition, files, rows, scope, lines, placement)


def withdraw_unrouted_files(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, partition: Partition
) -> None:
    """Withdraw the receipts files the partition holds but the coordinator no longer builds from.

    A partition is routed every current file it read before (routing.py), so a file it holds
    that is not routed left the coordinator's current files: withdrawn there. Its lines leave
    the partition the same way (and its periods are recomputed, as for a file withdrawn in one
    process).
    """
    routed = set(partition.files)
    held = con.execute(
        "select path from ledger where source = 'receipts' and status = 'current' order by path"
    ).fetchall()
    for (path,) in held:
        if path not in routed:
            # escaped: the path is matched as written, whatever glob characters it holds
            withdraw_files(con, config, glob.escape(path), UNROUTED_REASON)


def kept_summaries(config: ProjectConfig, partition: Partition) -> PartitionSummaries:
    """The summaries of a partition whose inputs did not change, as its last map wrote them."""
    files = {name: summary_path(config, partition, name) for name in SUMMARY_FILES}
    rows = {name: pq.read_metadata(path).num_rows for name, path in files.items()}
    record = read_routing_record(config, partition)
    return PartitionSummaries(
        partition, files, rows, lines=record.get("lines", {}), placement=record.get("placement", {})
    )


def last_ingested_file_id(con: duckdb.DuckDBPyConnection) -> str:
    """The highest file id of the ledger ('' when empty): later ids are this run's files."""
    return con.execute("select coalesce(max(file_id), '') from ledger").fetchone()[0]


def placement_of_files_since(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, last_file_id: str
) -> dict[str, dict]:
    """Per receipts file read in this run: its checksum and accepted lines per partition name.

    Counted before the partition deletes other partitions' lines, from the stores file and the
    period ranges, so the coordinator learns every partition a file feeds (routing.py).
    """
    files = con.execute(
        "select path, sha256 from ledger where source = 'receipts' and file_id > $last",
        {"last": last_file_id},
    ).fetchall()
    placement: dict[str, dict] = {path: {"sha256": sha, "lines": {}} for path, sha in files}
    ranges = period_ranges(config)
    # the column was checked against the stores table's real columns by the coordinator
    column = quote_identifier(config.partitioning.by)
    rows = con.execute(
        f"with keyed as (select store, {column}::varchar as key from stores) "  # noqa: S608
        "select ledger.path, keyed.key, "
        "len(list_filter($bounds, lambda bound: bound <= raw_lines.sold_at::date)), count(*) "
        "from raw_lines join ledger using (file_id) join keyed using (store) "
        "where ledger.file_id > $last and ledger.status = 'current' group by all",
        {"last": last_file_id, "bounds": sorted(set(config.partitioning.period_boundaries))},
    ).fetchall()
    for path, key, index, count in rows:
        placement[path]["lines"][partition_name(key, *ranges[index])] = count
    return placement


def lines_per_file(con: duckdb.DuckDBPyConnection) -> dict[str, int]:
    """The partition's lines per receipts file, by the file's path."""
    rows = con.execute(
        "select ledger.path, count(*) from raw_lines join ledger using (file_id) "
        "where ledger.status = 'current' group by all"
    ).fetchall()
    return dict(rows)


def set_line_scope(con: duckdb.DuckDBPyConnection, partition: Partition) -> None:
    """Tell the ingest which lines this warehouse keeps (`ingest_line_scope`, 030): a line of
    another partition's stores or days is judged there, never as a duplicate here, where its
    earlier copies were deleted (keep_partition_lines) and a file read again may meet a later
    copy first."""
    con.execute("delete from ingest_line_scope")
    con.execute(
        "insert into ingest_line_scope values ($stores, $first_day, $after_last_day)",
        {
            "stores": list(partition.stores),
            "first_day": partition.first_day,
            "after_last_day": partition.after_last_day,
        },
    )


def keep_partition_lines(con: duckdb.DuckDBPyConnection, partition: Partition) -> None:
    """Delete the lines of other partitions' stores and periods (the warehouse is its own)."""
    con.execute(
        "delete from raw_lines where not list_contains($stores, store) "
        "or sold_at::date < coalesce($first_day, sold_at::date) "
        "or sold_at::date >= coalesce($after_last_day, sold_at::date + 1)",
        {
            "stores": list(partition.stores),
            "first_day": partition.first_day,
            "after_last_day": partition.after_last_day,
        },
    )


def write_summary(con: duckdb.DuckDBPyConnection, summary: str, path: Path) -> int:
    """Write one summary, sorted, to `path` (via a temporary file and a rename); returns rows."""
    # the table names are ours (SUMMARY_FILES), never the user's
    return write_query(con, f"from {summary} order by all", path)  # noqa: S608


def write_query(con: duckdb.DuckDBPyConnection, query: str, path: Path) -> int:
    """Write a query's rows to `path` as zstd Parquet (a temporary file, then a rename)."""
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    rows = 0
    # a cursor of its own: the stages' last statement may still hold the connection's result
    with con.cursor() as cursor, memory_shared_with_batches(cursor):
        reader = cursor.sql(query).to_arrow_reader(BATCH_ROWS)
        with pq.ParquetWriter(temporary, reader.schema, compression="zstd") as writer:
            for batch in reader:
                writer.write_batch(batch)
                rows += batch.num_rows
    os.replace(temporary, path)
    return rows
