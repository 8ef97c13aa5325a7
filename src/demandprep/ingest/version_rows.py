"""Take the rows of file versions out of the warehouse: their accepted rows and their quarantine.

Used when a version leaves without a successor that replaces them row for row: withdrawn
(withdraw.py), or superseded by a reading under new settings that was refused (ledger.py).
The caller holds the transaction.
"""

from __future__ import annotations

import duckdb

from demandprep.ingest.references import REFERENCE_SPECS, table_columns
from demandprep.sqlfiles import quote_identifier


def remove_version_rows(con: duckdb.DuckDBPyConnection, sources: set[str], ids: list[str]) -> None:
    """Delete the accepted and the quarantined rows of the file versions `ids`."""
    for table in row_tables(con, sources):
        con.execute(
            f"delete from {quote_identifier(table)} where list_contains($ids, file_id)",  # noqa: S608
            {"ids": ids},
        )
    con.execute("delete from quarantine where list_contains($ids, file_id)", {"ids": ids})


def row_tables(con: duckdb.DuckDBPyConnection, sources: set[str]) -> list[str]:
    """The tables holding the accepted rows of these sources, as they exist."""
    tables = ["raw_lines"] if "receipts" in sources else []
    tables += [REFERENCE_SPECS[name].storage for name in sorted(sources) if name in REFERENCE_SPECS]
    return [table for table in tables if table_columns(con, table)]
