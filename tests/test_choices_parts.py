"""`choices` is written in key ranges of the occasions at once, one cursor and thread each,
committed in key order (`choices/parts.py`)."""

from __future__ import annotations

import threading
import time

import duckdb
import pytest

from demandprep.choices.parts import occasion_bounds, write_in_parts


def _occasions(con: duckdb.DuckDBPyConnection, order: str) -> list[str]:
    con.execute(
        "create or replace table choice_occasion_sets as "
        "select md5(i::varchar) as occasion, i from range(10000) t(i) "  # noqa: S608
        f"order by {order}"
    )
    return [row[0] for row in con.execute("select occasion from choice_occasion_sets").fetchall()]


def _keys_per_range(keys: list[str], bounds: list[tuple[str, str | None]]) -> list[int]:
    return [
        sum(1 for key in keys if key >= first and (after is None or key < after))
        for first, after in bounds
    ]


@pytest.mark.parametrize("parts", [1, 2, 3, 7])
def test_the_ranges_split_sorted_occasions_evenly_in_key_order(parts):
    con = duckdb.connect()
    keys = _occasions(con, "occasion")
    bounds = occasion_bounds(con, parts)
    assert len(bounds) == parts
    assert bounds[0][0] == "" and bounds[-1][1] is None
    assert [after for _, after in bounds[:-1]] == [first for first, _ in bounds[1:]]
    counts = _keys_per_range(keys, bounds)
    assert sum(counts) == len(keys)
    assert max(counts) - min(counts) <= 1


def test_the_ranges_cover_every_occasion_once_when_the_table_is_not_sorted():
    con = duckdb.connect()
    keys = _occasions(con, "i")
    bounds = occasion_bounds(con, 4)
    assert all(after is None or first < after for first, after in bounds)
    assert sum(_keys_per_range(keys, bounds)) == len(keys)


def test_there_are_no_more_ranges_than_occasions():
    con = duckdb.connect()
    con.execute("create table choice_occasion_sets as select 'a' as occasion")
    assert occasion_bounds(con, 4) == [("", None)]


def _numbers_writer(slow_first: bool, fail_at: str | None = None):
    """Writes the numbers of a range of 'k00'..'k99' keys into `parts_out`, the first range
    slowly (so later ranges finish first and must wait), failing at one range if asked."""

    def write(cur: duckdb.DuckDBPyConnection, first: str, after: str | None) -> None:
        if fail_at is not None and first == fail_at:
            raise RuntimeError(f"part from {first!r} failed")
        if slow_first and first == "":
            time.sleep(0.5)
        cur.execute(
            "insert into parts_out select key from keys "
            "where key >= $first and ($after is null or key < $after) order by key",
            {"first": first, "after": after},
        )

    return write


def _parts_warehouse() -> duckdb.DuckDBPyConnection:
    con = duckdb.connect(config={"threads": 1, "preserve_insertion_order": True})
    con.execute(
        "create table keys as select 'k' || lpad(i::varchar, 2, '0') as key from range(100) t(i)"
    )
    con.execute("create table parts_out (key varchar)")
    return con


BOUNDS = [("", "k25"), ("k25", "k50"), ("k50", "k75"), ("k75", None)]


def test_the_parts_commit_in_key_order_whichever_finishes_first():
    con = _parts_warehouse()
    write_in_parts(con, BOUNDS, _numbers_writer(slow_first=True), table="parts_out")
    stored = [row[0] for row in con.execute("select key from parts_out").fetchall()]
    assert stored == [f"k{i:02d}" for i in range(100)]


@pytest.mark.parametrize("fail_at", ["", "k50", "k75"])
def test_a_failing_part_drops_the_table_and_raises_its_error(fail_at):
    con = _parts_warehouse()
    started = time.perf_counter()
    with pytest.raises(RuntimeError, match=f"part from '{fail_at}' failed"):
        write_in_parts(con, BOUNDS, _numbers_writer(True, fail_at), table="parts_out")
    assert time.perf_counter() - started < 30  # no part waits for ever on a failed one
    tables = {row[0] for row in con.execute("select table_name from duckdb_tables()").fetchall()}
    assert "parts_out" not in tables
    assert threading.active_count() < 10


def test_the_parts_run_at_once():
    # each part waits until every part has started: one after the other, none would finish
    con = _parts_warehouse()
    started = threading.Barrier(len(BOUNDS), timeout=20)

    def write(cur: duckdb.DuckDBPyConnection, first: str, after: str | None) -> None:
        started.wait()
        _numbers_writer(slow_first=False)(cur, first, after)

    write_in_parts(con, BOUNDS, write, table="parts_out")
    assert con.execute("select count(*) from parts_out").fetchone()[0] == 100
