"""Files whose accepted rows name a SKU or store the catalogue or stores table no longer lists.

A first read today would quarantine such rows as unknown_sku or unknown_store, so after the
night's files the ingest reads those files again (runner._read_stale_again), the other direction
from the unknown keys that became listed (075). The comparison reads every accepted line, so
it runs only when the current catalogue or stores versions differ from those of the last
comparison (`listed_keys_state`); a warehouse without that record compares once.
"""

from __future__ import annotations

from pathlib import Path

import duckdb

from demandprep.ingest.references import table_columns
from demandprep.sqlfiles import run_sql

REFERENCES = ("catalogue", "stores")
SHELF_PRICE_KEYS = {"sku", "store"}


def files_with_unlisted_keys(con: duckdb.DuckDBPyConnection) -> dict[str, frozenset[Path]]:
    """Source -> paths of current files with rows of a key no longer listed; empty when the
    catalogue and stores versions are those of the last comparison."""
    if _compared_versions(con) == _current_versions(con):
        return {}
    found: dict[str, set[Path]] = {}
    for sql_file in _comparisons(con):
        for source, path in run_sql(con, sql_file).fetchall():
            found.setdefault(source, set()).add(Path(path))
    return {source: frozenset(paths) for source, paths in found.items()}


def remember_listed_keys(con: duckdb.DuckDBPyConnection) -> None:
    """Record the catalogue and stores versions the warehouse's rows now agree with."""
    con.execute("delete from listed_keys_state")
    con.execute("insert into listed_keys_state values (?)", [_current_versions(con)])


def _comparisons(con: duckdb.DuckDBPyConnection) -> list[str]:
    if not (table_columns(con, "catalogue") and table_columns(con, "stores")):
        return []  # before the first references are in, every key is unknown anyway
    files = []
    if table_columns(con, "raw_lines"):
        files.append("ingest/072_unlisted_receipt_keys.sql")
    if set(table_columns(con, "ref_shelf_prices")) >= SHELF_PRICE_KEYS:
        files.append("ingest/073_unlisted_shelf_price_keys.sql")
    return files


def _current_versions(con: duckdb.DuckDBPyConnection) -> str:
    row = con.execute(
        "select coalesce(string_agg(file_id, ',' order by file_id), '') from ledger "
        "where source in ('catalogue', 'stores') and status = 'current'"
    ).fetchone()
    return row[0] if row else ""


def _compared_versions(con: duckdb.DuckDBPyConnection) -> str | None:
    row = con.execute("select reference_versions from listed_keys_state").fetchone()
    return row[0] if row else None
