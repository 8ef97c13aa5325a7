"""The export reads the next batch from DuckDB on a thread while pyarrow writes the current one:
same batches, same order, errors reach the writer, and an early stop ends the thread."""

from __future__ import annotations

import threading
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
        assert batches.schema == SCHEMA
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


def test_the_written_file_is_the_one_written_without_read_ahead(tmp_path: Path):
    con = duckdb.connect()
    con.execute("create table t as select range as k, 'x' || range as v from range(300000)")
    sql = "select k, v from t order by k"
    written = write_query_parquet(con, sql, {}, tmp_path / "a.parquet", 131072, {}, {}, ("k",))
    direct = con.sql(sql).to_arrow_reader(131072)
    parquet._write_batches(direct, tmp_path / "b.parquet", 131072, {}, {}, ("k",))
    assert written.path.read_bytes() == (tmp_path / "b.parquet").read_bytes()
    assert pq.read_table(written.path).column("k").to_pylist() == list(range(300000))
