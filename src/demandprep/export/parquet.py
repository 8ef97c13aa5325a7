"""Stream an ordered warehouse query into a zstd Parquet file, deterministically.

Rows arrive from DuckDB as Arrow batches of uneven size; they are re-cut into row groups of
exactly `row_group_rows` rows so the file layout depends only on the data, never on how the
engine happened to chunk it. Nothing time-dependent is written into the file.

A table stored in its key order is read as stored (no sort), and each row group is checked to
continue the keys' strictly rising order; at the first row out of order the file is started
again from the sorted query. Either way the file holds the same rows in the same order.
"""

from __future__ import annotations

import os
import queue
import threading
from collections.abc import Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager, suppress
from dataclasses import dataclass
from itertools import chain
from pathlib import Path
from typing import Any

import duckdb
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from demandprep import __version__
from demandprep.export.parquet_parts import write_row_groups
from demandprep.memory import memory_shared_with_batches
from demandprep.warehouse import insertion_order_kept, threads_of

COMPRESSION = "zstd"
# Level 1: the export is bound by this writer's one thread. On the 1M-occasion choice table of
# benchmarks/choices_scale.py (15M rows, 26 columns) level 1 wrote in 5.4 s against 8.3 s at
# level 6 (6.1 s at 3), and the file was 0.2% larger (83.8 against 83.6 MiB).
COMPRESSION_LEVEL = 1
# Row groups encoded at once (`parquet_parts.py`). Each holds its rows and their encoding in
# Python's memory, outside DuckDB's limit: two encoders raised the export's peak by 0.15 to
# 0.2 GB on the 13.1M-line world's choices file, so more threads do not mean more encoders.
ENCODERS_AT_MOST = 2


@dataclass(frozen=True)
class WrittenTable:
    """What was written: the file, its row count and its Arrow schema."""

    path: Path
    rows: int
    schema: pa.Schema
    sha256: str | None = None  # set by a writer that hashed the bytes it wrote
    # where each row group's entry begins in the footer's encoding (and the last ends), when
    # the writer knows (`parquet_parts.write_row_groups`): the next splice reads the footer by them
    footer_bounds: list[int] | None = None


class RowsOutOfKeyOrder(Exception):
    """The rows read as stored do not rise strictly by the sort keys."""


def write_query_parquet(
    con: duckdb.DuckDBPyConnection,
    sql: str,
    params: Mapping[str, Any],
    path: Path,
    row_group_rows: int,
    column_docs: Mapping[str, Mapping[str, str]],
    table_metadata: Mapping[str, str],
    sort_keys: Sequence[str] = (),
    stored_order_sql: str | None = None,
) -> WrittenTable:
    """Write the rows of `sql` to `path`; each column carries its dictionary entry as metadata.

    `sort_keys` names the leading ORDER BY columns of `sql`; they are declared in the file.
    `stored_order_sql` is `sql` without its sort, for a table stored in the order of its unique
    sort keys: it is tried first, and `sql` runs only if a row comes out of that order.
    While the rows stream, DuckDB keeps to a share of its memory limit (the batches and the
    Parquet writer's row group live outside it).
    """
    layout = (path, row_group_rows, column_docs, table_metadata, sort_keys)
    if stored_order_sql is not None and sort_keys:
        with suppress(RowsOutOfKeyOrder), insertion_order_kept(con):
            return _write_query(con, stored_order_sql, params, *layout, check_order=True)
    return _write_query(con, sql, params, *layout, check_order=False)


def _write_query(
    con: duckdb.DuckDBPyConnection,
    sql: str,
    params: Mapping[str, Any],
    path: Path,
    row_group_rows: int,
    column_docs: Mapping[str, Mapping[str, str]],
    table_metadata: Mapping[str, str],
    sort_keys: Sequence[str],
    check_order: bool,
) -> WrittenTable:
    # as many row groups encoded at once as DuckDB may use threads, up to ENCODERS_AT_MOST
    encoders = max(1, min(threads_of(con), ENCODERS_AT_MOST))
    with memory_shared_with_batches(con):
        reader = con.sql(sql, params=dict(params)).to_arrow_reader(row_group_rows)
        try:
            return _write_batches(
                reader,
                path,
                row_group_rows,
                column_docs,
                table_metadata,
                sort_keys,
                sort_keys if check_order else (),
                encoders,
            )
        finally:
            reader.close()  # a write that failed mid-stream must not leave the connection busy


class _Ahead:
    """An iterable's items, made by a thread at most one item ahead of the consumer."""

    def __init__(self, items: Iterable[Any]) -> None:
        self._items = items
        self._queue: queue.Queue[Any] = queue.Queue(maxsize=1)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._fetch, name="parquet-read-ahead")

    def _fetch(self) -> None:
        try:
            for item in self._items:
                if not self._put(item):
                    return
        except BaseException as error:  # noqa: BLE001 - handed to the consumer, raised there
            self._put(error)
            return
        self._put(_END)

    def _put(self, item: object) -> bool:
        while not self._stop.is_set():
            with suppress(queue.Full):
                self._queue.put(item, timeout=0.05)
                return True
        return False

    def __iter__(self) -> Iterator[Any]:
        while (item := self._queue.get()) is not _END:
            if isinstance(item, BaseException):
                raise item
            yield item


_END = object()


@contextmanager
def read_ahead(items: Iterable[Any]) -> Iterator[_Ahead]:
    """The items in order, the next one made on a thread while the current one is written.

    The export hands it the row groups: the thread fetches DuckDB's batches, cuts them into row
    groups and checks their key order while pyarrow's Parquet writer encodes the previous group
    on the caller's thread (DuckDB, pyarrow's compute and its writer release the GIL). Order and
    bytes do not change. An error on the thread reaches the consumer at that item. On exit the
    thread is stopped and joined, so the reader is idle when its caller closes it.
    """
    ahead = _Ahead(items)
    ahead._thread.start()
    try:
        yield ahead
    finally:
        ahead._stop.set()
        ahead._thread.join()


def _write_batches(
    reader: pa.RecordBatchReader,
    path: Path,
    row_group_rows: int,
    column_docs: Mapping[str, Mapping[str, str]],
    table_metadata: Mapping[str, str],
    sort_keys: Sequence[str],
    checked_keys: Sequence[str] = (),
    encoders: int = 1,
) -> WrittenTable:
    """The reader's rows in row groups of `row_group_rows`, cut (and their `checked_keys`
    checked) on a thread while this one writes (`read_ahead`): on the 10M-occasion choice table
    the cutting and the checks took 7 of the export's 59 s on the writer's thread. `encoders`
    row groups are encoded at once (`parquet_parts.py`)."""
    schema = documented_schema(reader.schema, column_docs, table_metadata)
    groups = checked_row_groups(reader, row_group_rows, checked_keys)
    with read_ahead(groups) as ahead:
        return _write_groups(iter(ahead), path, schema, sort_keys, encoders)


def checked_row_groups(
    reader: pa.RecordBatchReader, size: int, checked_keys: Sequence[str]
) -> Iterator[pa.Table]:
    """`row_groups`, each checked to continue the strictly rising order of `checked_keys`."""
    last_keys: tuple | None = None
    for group in row_groups(reader, size):
        if checked_keys:
            last_keys = _keys_rising(group, checked_keys, last_keys)
        yield group


def _write_groups(
    groups: Iterator[pa.Table],
    path: Path,
    schema: pa.Schema,
    sort_keys: Sequence[str],
    encoders: int,
) -> WrittenTable:
    """The groups as the file's row groups, `encoders` of them encoded at once
    (`parquet_parts.py`): the same bytes as one writer's."""
    names = schema.names
    sorting = [pq.SortingColumn(names.index(key)) for key in sort_keys]
    options = {
        "compression": COMPRESSION,
        "compression_level": COMPRESSION_LEVEL,
        "write_statistics": True,
        "store_schema": True,
        "sorting_columns": sorting or None,
    }
    # the first group before the file opens: rows not stored in order mostly show in it, and
    # then no byte is written before the sorted query takes over
    first = next(groups, None)
    with path.open("wb") as handle:
        if first is None:
            pq.ParquetWriter(handle, schema, **options).close()  # no rows: the schema alone
            rows, bounds = 0, None
        else:
            rows, bounds = write_row_groups(
                handle, chain([first], groups), schema, options, encoders
            )
        handle.flush()
        os.fsync(handle.fileno())
    return WrittenTable(path, rows, schema, footer_bounds=bounds)


def _keys_rising(group: pa.Table, keys: Sequence[str], before: tuple | None) -> tuple | None:
    """The group's last keys, if its keys rise strictly from `before` on; else raise."""
    columns = [group.column(key) for key in keys]
    if group.num_rows == 0:
        return before
    first = tuple(column[0].as_py() for column in columns)
    # Python compares str by code point, the byte order of UTF-8, as DuckDB's sort does
    if None in first or (before is not None and not before < first):
        raise RowsOutOfKeyOrder
    later = [column.slice(1) for column in columns]
    earlier = [column.slice(0, group.num_rows - 1) for column in columns]
    rising = pa.repeat(False, group.num_rows - 1)
    tied = pa.repeat(True, group.num_rows - 1)
    for after, prior in zip(later, earlier, strict=True):
        rising = pc.or_(rising, pc.and_(tied, pc.greater(after, prior)))
        tied = pc.and_(tied, pc.equal(after, prior))
    if not pc.all(pc.fill_null(rising, False)).as_py():
        raise RowsOutOfKeyOrder
    return tuple(column[-1].as_py() for column in columns)


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
