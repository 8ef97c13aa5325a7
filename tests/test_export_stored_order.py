"""A table the build stores in its file's key order (choices) is written as stored, without a
sort, and gives the same bytes as the sorted query; rows found out of that order while writing
send the writer back to the sorted query."""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest
from export_fixtures import export_config, fill_warehouse

from demandprep.export.parquet import write_query_parquet
from demandprep.export.tables import output_query, output_table

ROW_GROUP_ROWS = 1024  # the fixture's 60 occasions make 420 rows; 100 make 700
NO_SUCH_QUERY = "select * from no_such_table"  # fails if the writer ever runs it


@pytest.fixture
def con() -> duckdb.DuckDBPyConnection:
    con = duckdb.connect(config={"preserve_insertion_order": False})
    fill_warehouse(con, occasions=60)
    return con


def _store(con: duckdb.DuckDBPyConnection, order: str) -> None:
    con.execute("set preserve_insertion_order = true")
    con.execute(f"create or replace table choices as select * from choices order by {order}")  # noqa: S608
    con.execute("set preserve_insertion_order = false")


def _stored_sql(con: duckdb.DuckDBPyConnection, folder: Path) -> str | None:
    return output_query(con, output_table("choices"), export_config(folder)).stored_order_sql


def _write(con, sql: str, path: Path, stored_order_sql: str | None, rows=ROW_GROUP_ROWS) -> bytes:
    query = output_query(con, output_table("choices"), export_config(path.parent))
    write_query_parquet(
        con,
        sql if sql != "sorted" else query.sql,
        query.params,
        path,
        rows,
        {},
        {"demandprep.table": "choices"},
        ("occasion", "alternative"),
        stored_order_sql=stored_order_sql,
    )
    return path.read_bytes()


def test_choices_read_as_stored_has_no_sort_and_the_sorted_query_stays(tmp_path: Path, con):
    query = output_query(con, output_table("choices"), export_config(tmp_path))
    assert "order by" in query.sql
    assert query.stored_order_sql is not None
    assert "order by" not in query.stored_order_sql
    assert query.stored_order_sql == query.sql[: query.sql.index(" order by")]
    assert (
        output_query(con, output_table("choosers"), export_config(tmp_path)).stored_order_sql
        is None
    )


def test_rows_stored_in_key_order_are_written_as_stored_with_the_same_bytes(tmp_path: Path, con):
    sorted_bytes = _write(con, "sorted", tmp_path / "sorted.parquet", None)
    _store(con, "occasion, alternative")
    stored_sql = output_query(
        con, output_table("choices"), export_config(tmp_path)
    ).stored_order_sql
    # the sorted query cannot run: the file must come from the rows as stored
    stored = _write(con, NO_SUCH_QUERY, tmp_path / "stored.parquet", stored_sql)
    assert stored == sorted_bytes
    # several row groups: the order is checked across their boundaries too
    assert _write(con, NO_SUCH_QUERY, tmp_path / "small.parquet", stored_sql, rows=100) == _write(
        con, "sorted", tmp_path / "small_sorted.parquet", None, rows=100
    )


THIRTY_FIRST_OCCASION = (
    "(select occasion from (select distinct occasion from choices) order by occasion offset 30 "
    "limit 1)"
)


@pytest.mark.parametrize(
    "order",
    [
        "hash(occasion, alternative)",  # shuffled
        "occasion, alternative desc",  # alternatives reversed within each occasion
        # two sorted runs of 30 occasions (210 rows, three row groups of 70) each, the second
        # starting below the first's end: only the boundary between two groups is out of order
        f"occasion < {THIRTY_FIRST_OCCASION}, occasion, alternative",
    ],
)
def test_rows_stored_out_of_key_order_fall_back_to_the_sorted_query(tmp_path: Path, con, order):
    sorted_bytes = _write(con, "sorted", tmp_path / "sorted.parquet", None, rows=70)
    _store(con, order)
    stored_sql = output_query(
        con, output_table("choices"), export_config(tmp_path)
    ).stored_order_sql
    assert _write(con, "sorted", tmp_path / "again.parquet", stored_sql, rows=70) == sorted_bytes
