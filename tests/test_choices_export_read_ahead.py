"""The export makes the next row group on a thread (DuckDB's batches fetched, cut and their key
order checked) while pyarrow writes the current one: same items, same order, same bytes, errors
reach the writer, and an early stop ends the thread."""

from __future__ import annotations

import threading
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from demandprep.export import parquet
from demandprep.export.parquet import read_ahead, write_query_parquet

SCHEMA = pa.schema([("k", pa.int64())])


def _reader(batches: int, fetched_on: list[str], fail_at: int | None = None):
    def generate():
        for n in range(batches):
            fetched_on.append(threading.current_thread().name)
            if n == fail_at:
                raise ValueError("broken batch")
            yield pa.record_batch([pa.array([n, n], pa.int64())], schema=SCHEMA)

    return pa.RecordBatchReader.from_batches(SCHEMA, generate())


def test_batches_are_fetched_on_another_thread_in_order():
    fetched_on: list[str] = []
    with read_ahead(_reader(5, fetched_on)) as batches:
        values = [batch.column(0).to_pylist() for batch in batches]
    assert values == [[n, n] for n in range(5)]
    assert threading.current_thread().name not in fetched_on


def test_a_failed_fetch_reaches_the_writer():
    with read_ahead(_reader(5, [], fail_at=2)) as batches:
        stream = iter(batches)
        next(stream)
        next(stream)
        with pytest.raises(ValueError, match="broken batch"):
            next(stream)


def test_an_early_stop_ends_the_fetching_thread():
    before = threading.active_count()
    with read_ahead(_reader(1000, [])) as batches:
        next(iter(batches))
    assert threading.active_count() == before


@contextmanager
def _in_line(items: Iterable) -> Iterator[Iterable]:
    # the items made on the consumer's own thread, one by one
    yield items


@pytest.mark.parametrize("stored_order", [False, True])
def test_the_written_file_is_the_one_written_without_read_ahead(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, stored_order: bool
):
    con = duckdb.connect()
    con.execute("create table t as select range as k, 'x' || range as v from range(300000)")
    sql = "select k, v from t order by k"
    stored = "select k, v from t" if stored_order else None

    def write(name: str) -> bytes:
        path = tmp_path / name
        write_query_parquet(con, sql, {}, path, 131072, {}, {}, ("k",), stored_order_sql=stored)
        return path.read_bytes()

    ahead = write("ahead.parquet")
    monkeypatch.setattr(parquet, "read_ahead", _in_line)
    assert write("in_line.parquet") == ahead
    assert pq.read_table(tmp_path / "ahead.parquet").column("k").to_pylist() == list(range(300000))


def test_row_groups_are_cut_and_checked_on_the_other_thread(monkeypatch: pytest.MonkeyPatch):
    checked_on: list[str] = []
    keys_rising = parquet._keys_rising

    def watched(*args):  # noqa: ANN002, ANN202 - passes through to the real check
        checked_on.append(threading.current_thread().name)
        return keys_rising(*args)

    monkeypatch.setattr(parquet, "_keys_rising", watched)
    con = duckdb.connect()
    con.execute("create table t as select range as k from range(1000)")
    reader = con.sql("select k from t").to_arrow_reader(100)
    groups = parquet.checked_row_groups(reader, 300, ("k",))
    with read_ahead(groups) as ahead:
        sizes = [group.num_rows for group in ahead]
    assert sizes == [300, 300, 300, 100]
    assert checked_on and threading.current_thread().name not in checked_on
