"""Files whose accepted rows name a SKU or store the catalogue or stores table no longer lists.

A first read today would quarantine such rows as unknown_sku or unknown_store, so after the
night's files the ingest reads those files again (runner._read_stale_again), the other direction
from the unknown keys that became listed (075). The comparison reads every accepted row, so it
runs only when a SKU or store recorded in `listed_keys` at the last comparison is no longer
listed (a catalogue delivered again with the same SKUs costs nothing), or when no key is
recorded (a warehouse made before that record, or the first ingest): then once.
"""

from __future__ import annotations

from pathlib import Path

import duckdb

from demandprep.ingest.references import table_columns
from demandprep.sqlfiles import run_sql

SHELF_PRICE_KEYS = {"sku", "store"}


def files_with_unlisted_keys(con: duckdb.DuckDBPyConnection) -> dict[str, frozenset[Path]]:
    """Source -> paths of current files with rows of a key no longer listed; empty when every
    key listed at the last comparison is still listed."""
    comparisons = _comparisons(con)
    if not comparisons:
        return {}
    run_sql(con, "ingest/072_listed_keys_views.sql")
    if not _keys_left_the_list(con):
        return {}
    found: dict[str, set[Path]] = {}
    for sql_file in comparisons:
        for source, path in run_sql(con, sql_file).fetchall():
            found.setdefault(source, set()).add(Path(path))
    return {source: frozenset(paths) for source, paths in found.items()}


def remember_listed_keys(con: duckdb.DuckDBPyConnection, keep_dropped: bool = False) -> None:
    """Record the SKUs and stores the warehouse's rows now agree with. `keep_dropped`: a file
    with rows of a key no longer listed was not read again and kept (refused, failed, waiting
    after a refusal, or not in its folder), so the keys recorded before stay recorded too and
    the next ingest compares again."""
    if not _references_in(con):
        return
    run_sql(con, "ingest/072_listed_keys_views.sql")
    if not keep_dropped:
        con.execute("delete from listed_keys")
    con.execute(
        "insert into listed_keys select kind, value from ingest_current_keys "
        "except select kind, value from listed_keys"
    )


def _keys_left_the_list(con: duckdb.DuckDBPyConnection) -> bool:
    row = con.execute(
        "select (select count(*) from listed_keys), (select count(*) from ingest_dropped_keys)"
    ).fetchone()
    recorded, dropped = row if row else (0, 0)
    return recorded == 0 or dropped > 0


def _comparisons(con: duckdb.DuckDBPyConnection) -> list[str]:
    if not _references_in(con):
        return []  # before the first references are in, every key is unknown anyway
    files = []
    if table_columns(con, "raw_lines"):
        files.append("ingest/073_unlisted_receipt_keys.sql")
    if set(table_columns(con, "ref_shelf_prices")) >= SHELF_PRICE_KEYS:
        files.append("ingest/074_unlisted_shelf_price_keys.sql")
    return files


def _references_in(con: duckdb.DuckDBPyConnection) -> bool:
    return bool(table_columns(con, "catalogue") and table_columns(con, "stores"))
