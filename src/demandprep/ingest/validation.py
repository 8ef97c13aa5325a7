"""Guard the rows a query returns with a pandera model, batch by batch (never a whole table)."""

from __future__ import annotations

from typing import Any

import duckdb
import pandera.polars as pa
import polars as pl

from demandprep.memory import memory_shared_with_batches
from demandprep.validate import BATCH_ROWS, validate_frame


def validate_query(
    con: duckdb.DuckDBPyConnection,
    sql: str,
    params: dict[str, Any],
    model: type[pa.DataFrameModel],
    table: str,
    batch_rows: int = BATCH_ROWS,
) -> int:
    """Validate every row `sql` returns against `model`; returns the row count."""
    rows = 0
    with memory_shared_with_batches(con):
        reader = con.sql(sql, params=params or None).to_arrow_reader(batch_rows)
        try:
            for batch in reader:
                frame = pl.from_arrow(batch)
                assert isinstance(frame, pl.DataFrame)
                validate_frame(frame, model, table, first_row=rows)
                rows += frame.height
        finally:
            reader.close()  # an unread rest would keep the connection busy (no rollback)
    return rows
