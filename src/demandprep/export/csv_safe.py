"""CSV copies of the Parquet files, safe to open in a spreadsheet.

A text cell that starts with = + - @ (or a tab / carriage return) would be run as a formula by
spreadsheet programs; such cells get a leading apostrophe, which spreadsheets show as plain text
(OWASP, "CSV Injection"). Numeric columns are written as numbers and need no escaping. A list
of text (the SKUs of products.parquet) becomes one text cell, its items joined with ';'.
"""

from __future__ import annotations

import os
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

FORMULA_START = r"^[=+\-@\t\r]"
ESCAPE_PREFIX = "'"
BATCH_ROWS = 65_536
LIST_SEPARATOR = ";"


def list_as_text(values: pa.Array | pa.ChunkedArray) -> pa.Array | pa.ChunkedArray:
    """A list-of-text column as text, items joined with ';' (for CSV and Stata copies)."""
    return pc.binary_join(values, LIST_SEPARATOR)


def escape_formula_cells(values: pa.Array | pa.ChunkedArray) -> pa.Array | pa.ChunkedArray:
    """Text values starting like a spreadsheet formula, prefixed with an apostrophe."""
    risky = pc.match_substring_regex(values, FORMULA_START)
    escaped = pc.binary_join_element_wise(ESCAPE_PREFIX, values, "")
    return pc.if_else(risky, escaped, values)


def escape_batch(batch: pa.RecordBatch) -> pa.RecordBatch:
    """The batch with every text column escaped; other columns unchanged."""
    columns = [
        list_as_text(column) if pa.types.is_list(column.type) else column
        for column in batch.columns
    ]
    columns = [
        escape_formula_cells(column) if _is_text(column.type) else column for column in columns
    ]
    return pa.RecordBatch.from_arrays(columns, schema=_plain_schema(batch.schema))


def write_safe_csv(parquet_path: Path, csv_path: Path) -> int:
    """Write `parquet_path` as a formula-safe UTF-8 CSV, streaming; returns the row count."""
    source = pq.ParquetFile(parquet_path)
    schema = _plain_schema(source.schema_arrow)
    rows = 0
    with csv_path.open("wb") as handle:
        with pacsv.CSVWriter(handle, schema, write_options=pacsv.WriteOptions()) as writer:
            for batch in source.iter_batches(batch_size=BATCH_ROWS):
                writer.write_batch(escape_batch(batch))
                rows += batch.num_rows
        handle.flush()
        os.fsync(handle.fileno())
    return rows


def _is_text(data_type: pa.DataType) -> bool:
    return (
        pa.types.is_string(data_type)
        or pa.types.is_large_string(data_type)
        or pa.types.is_string_view(data_type)
    )


def _plain_schema(schema: pa.Schema) -> pa.Schema:
    return pa.schema(
        [pa.field(item.name, _plain_type(item.type), item.nullable) for item in schema]
    )


def _plain_type(data_type: pa.DataType) -> pa.DataType:
    return pa.string() if pa.types.is_list(data_type) else data_type
