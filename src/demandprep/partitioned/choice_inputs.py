"""The coordinator's tables the chooser buckets read, handed over as one small DuckDB file.

After the market reduce the coordinator holds what the choice build reads besides receipt
lines: the reference tables (catalogue, stores, households, shelf prices), the market build's
product universe, SKU map, store geographies and markets, and its receipts ledger (which file
versions are current, to map the partitions' file ids as `attached.py` does). The coordinator
keeps its warehouse open for writing, so the buckets cannot attach it: it copies those tables
into `<partitioning.root>/choice-buckets/inputs.duckdb` (written beside, then renamed), which
every bucket attaches read-only and copies into its own warehouse. DuckDB to DuckDB, so every
column keeps its type exactly. The households table holds card ids: the file is a warehouse
like the partitions' and stays on their storage; nothing of it is exported.
"""

from __future__ import annotations

import os
from pathlib import Path

import duckdb

from demandprep.config import ProjectConfig
from demandprep.partitioned.plan import buckets_folder

# what the choice stages read from the coordinator (an absent optional one stays absent)
CHOICE_INPUT_TABLES = (
    "catalogue",
    "stores",
    "households",
    "shelf_prices",
    "product_universe",
    "market_skus",
    "market_store_geographies",
    "markets",
)
# the coordinator's current receipts file versions, read by attached.PARTITION_LINES
LEDGER_ROWS = "from main.ledger where source = 'receipts' and status = 'current'"
INPUTS_ALIAS = "choice_bucket_inputs"


def choice_inputs_path(config: ProjectConfig) -> Path:
    """Where the coordinator leaves the buckets' inputs."""
    return buckets_folder(config) / "inputs.duckdb"


def write_choice_inputs(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    """Copy the coordinator's tables the choice build reads into the buckets' inputs file."""
    target = choice_inputs_path(config)
    target.parent.mkdir(parents=True, exist_ok=True)
    temporary = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    temporary.unlink(missing_ok=True)
    con.execute(f"attach $path as {INPUTS_ALIAS}", {"path": str(temporary)})
    try:
        # the table names are our constants above, never config text
        for table in present_tables(con, CHOICE_INPUT_TABLES):
            con.execute(f"create table {INPUTS_ALIAS}.{table} as from main.{table}")  # noqa: S608
        con.execute(f"create table {INPUTS_ALIAS}.ledger as {LEDGER_ROWS}")  # noqa: S608
    finally:
        con.execute(f"detach {INPUTS_ALIAS}")
    os.replace(temporary, target)


def copy_choice_inputs(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    """Replace the bucket warehouse's input tables with the coordinator's (absent stay absent)."""
    for table in (*CHOICE_INPUT_TABLES, "ledger"):
        con.execute(f"drop table if exists main.{table}")
    con.execute(
        f"attach $path as {INPUTS_ALIAS} (read_only)", {"path": str(choice_inputs_path(config))}
    )
    try:
        for table in present_tables(con, (*CHOICE_INPUT_TABLES, "ledger"), INPUTS_ALIAS):
            con.execute(f"create table main.{table} as from {INPUTS_ALIAS}.{table}")  # noqa: S608
    finally:
        con.execute(f"detach {INPUTS_ALIAS}")


def present_tables(
    con: duckdb.DuckDBPyConnection, tables: tuple[str, ...], database: str | None = None
) -> list[str]:
    """Those of `tables` that exist (table or view) in the main schema of `database`."""
    present = {
        row[0]
        for row in con.execute(
            "select table_name from information_schema.tables where table_schema = 'main' "
            "and table_catalog = coalesce($database, current_database())",
            {"database": database},
        ).fetchall()
    }
    return [table for table in tables if table in present]
