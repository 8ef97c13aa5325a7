"""Stream an ordered warehouse query into a zstd Parquet file, deterministically.

Rows arrive from DuckDB as Arrow batches of uneven size; they are re-cut into row groups of
exactly `row_group_rows` rows so the file layout depends only on the data, never on how the
engine happened to chunk it. Nothing time-dependent is written into the file.
"""

from __future__ import annotations

import os
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb
import pyarrow as pa
import pyarrow.parquet as pq

from demandprep import __version__
from demandprep.memory import memory_shared_with_batches

COMPRESSION = "zstd"
COMPRESSION_LEVEL = 6


@dataclass(frozen=True)
class WrittenTable:
    """What was written: the file, its row count and its Arrow schema."""

    path: Path
    rows: int
    schema: pa.Schema


def write_query_parquet(
    con: duckdb.DuckDBPyConnection,
    sql: str,
    params: Mapping[str, Any],
    path: Path,
    row_group_rows: int,
    column_docs: Mapping[str, Mapping[str, str]],
    table_metadata: Mapping[str, str],
    sort_keys: Sequence[str] = (),
) -> WrittenTable:
    """Write the rows of `sql` to `path`; each column carries its dictionary entry as metadata.

    `sort_keys` names the leading ORDER BY columns of `sql`; they are declared in the file.
    While the rows stream, DuckDB keeps to a share of its memory limit (the batches and the
    Parquet writer's row group live outside it).
    """
    with memory_shared_with_batches(con):
        reader = con.sql(sql, params=dict(params)).to_arrow_reader(row_group_rows)
        try:
            return _write_batches(
                reader, path, row_group_rows, column_docs, table_metadata, sort_keys
            )
        finally:
            reader.close()  # a write that failed mid-stream must not leave the connection busy


def _write_batches(
    reader: pa.RecordBatchReader,
    path: Path,
    row_group_rows: int,
    column_docs: Mapping[str, Mapping[str, str]],
    table_metadata: Mapping[str, str],
    sort_keys: Sequence[str],
) -> WrittenTable:
    schema = documented_schema(reader.schema, column_docs, table_metadata)
    names = schema.names
    sorting = [pq.SortingColumn(names.index(key)) for key in sort_keys]
    rows = 0
    with path.open("wb") as handle:
        writer = pq.ParquetWriter(
            handle,
            schema,
            compression=COMPRESSION,
            compression_level=COMPRESSION_LEVEL,
            write_statistics=True,
            store_schema=True,
            sorting_columns=sorting or None,
        )
        try:
            for group in row_groups(reader, row_group_rows):
                writer.write_table(group, row_group_size=row_group_rows)
                rows += group.num_rows
        finally:
            writer.close()
        handle.flush()
        os.fsync(handle.fileno())
    return WrittenTable(path, rows, schema)


def row_groups(reader: pa.RecordBatchReader, size: int) -> Iterator[pa.Table]:
    """Re-cut a stream of batches into tables of exactly `size` rows (the last may be shorter)."""
    pending: list[pa.RecordBatch] = []
    pending_rows = 0
    for batch in reader:
        pending.append(batch)
        pending_rows += batch.num_rows
        while pending_rows >= size:
            table = pa.Table.from_batches(pending, schema=reader.schema)
            yield table.slice(0, size).combine_chunks()
            rest = table.slice(size)
            pending = rest.to_batches()
            pending_rows = rest.num_rows
    if pending_rows:
        yield pa.Table.from_batches(pending, schema=reader.schema).combine_chunks()


def documented_schema(
    schema: pa.Schema,
    column_docs: Mapping[str, Mapping[str, str]],
    table_metadata: Mapping[str, str],
) -> pa.Schema:
    """`schema` with each field's description, unit and formula and the table's own metadata."""
    fields = []
    for item in schema:
        doc = column_docs.get(item.name, {})
        metadata = {key: str(value) for key, value in sorted(doc.items()) if value}
        fields.append(item.with_metadata(metadata or None))
    metadata = {"demandprep.version": __version__, **dict(sorted(table_metadata.items()))}
    return pa.schema(fields, metadata=metadata)
