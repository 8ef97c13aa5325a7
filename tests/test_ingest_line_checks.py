"""The batch's accepted lines are guarded on every row by SQL twins of the RawLines model's
checks, and by pandera itself on a sample; each twin finds what pandera would."""

from __future__ import annotations

from datetime import datetime

import duckdb
import pandera.errors
import pandera.polars as pa
import polars as pl
import pytest

from demandprep.errors import UserError
from demandprep.ingest.line_checks import (
    model_checks,
    sql_check_names,
    validate_raw_lines,
)
from demandprep.schemas.ingest import RawLines
from demandprep.sqlfiles import run_sql

BATCH = {"first_file_id": "F0000002", "last_file_id": "F0000003"}
ROW = "file_id = 'F0000003' and line_no = 3"  # a sale in the batch
MESSAGE_START = "stage output 'raw_lines' breaks its schema RawLines: "


def _warehouse() -> duckdb.DuckDBPyConnection:
    """raw_lines as the ingest makes it, less its NOT NULL constraints (so nulls can be put in),
    with good lines of files F0000001 (before the batch), F0000002 and F0000003."""
    con = duckdb.connect()
    run_sql(con, "ingest/000_ingest_tables.sql")
    con.execute("create table unguarded as from raw_lines")
    con.execute("drop table raw_lines")
    con.execute("alter table unguarded rename to raw_lines")
    rows = []
    for file_number in (1, 2, 3):
        for line_no, kind, quantity, amount in (
            (2, "sale", 1.0, 2.5),
            (3, "sale", 2.0, 5.0),
            (4, "return", -1.0, -2.5),
            (5, "void", 1.0, 2.5),
        ):
            rows.append(
                (
                    f"F000000{file_number}",
                    line_no,
                    f"R{file_number}",
                    line_no - 1,
                    "S1",
                    datetime(2024, 1, file_number, 9, line_no),
                    "sku1",
                    quantity,
                    amount,
                    0.0,
                    None,
                    kind,
                )
            )
    con.executemany("insert into raw_lines values (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", rows)
    return con


def _batch_frame(con: duckdb.DuckDBPyConnection) -> pl.DataFrame:
    sql = "select * from raw_lines where file_id >= $first_file_id and file_id <= $last_file_id"
    frame = pl.from_arrow(con.sql(sql, params=BATCH).to_arrow_table())
    assert isinstance(frame, pl.DataFrame)
    return frame


def _message(con: duckdb.DuckDBPyConnection, **options) -> str:
    with pytest.raises(UserError) as caught:
        validate_raw_lines(con, BATCH, **options)
    return caught.value.one_line()


def test_every_check_of_the_model_has_its_sql_twin():
    # the SQL must enforce each check pandera would, or the sample alone would guard it
    assert model_checks(RawLines) <= sql_check_names()
    assert "line_kind__isin" in model_checks(RawLines)
    assert "sales_have_positive_quantity_and_non_negative_amount" in model_checks(RawLines)


def test_unbroken_lines_pass_and_are_counted():
    assert validate_raw_lines(_warehouse(), BATCH, sample_rows=0) == 8
    assert validate_raw_lines(_warehouse(), BATCH) == 8


BREAKS = [
    ("line_no = null", "line_no: not_nullable"),
    ("line_no = 0", "line_no: greater_than_or_equal_to(1)"),
    ("receipt = null", "receipt: not_nullable"),
    ("store = null", "store: not_nullable"),
    ("sold_at = null", "sold_at: not_nullable"),
    ("sku = null", "sku: not_nullable"),
    ("quantity = null", "quantity: not_nullable"),
    ("amount = null", "amount: not_nullable"),
    ("discount = null", "discount: not_nullable"),
    ("line_kind = null", "line_kind: not_nullable"),
    ("line_kind = 'gift'", "line_kind: isin(['sale', 'return', 'void'])"),
    ("quantity = 0", "sales_have_positive_quantity_and_non_negative_amount"),
    ("amount = -1", "sales_have_positive_quantity_and_non_negative_amount"),
]


@pytest.mark.parametrize(("assignment", "expected"), BREAKS)
def test_a_broken_line_fails_naming_its_check_as_pandera_would(assignment, expected):
    con = _warehouse()
    con.execute(f"update raw_lines set {assignment} where {ROW}")  # noqa: S608
    # reference: pandera itself refuses the batch's lines
    with pytest.raises((pandera.errors.SchemaErrors, pandera.errors.SchemaError)):
        RawLines.validate(_batch_frame(con), lazy=True)
    # no pandera sample: the SQL twins alone must find it
    assert _message(con, sample_rows=0) == (
        f"{MESSAGE_START}{expected} (1 rows) Hint: this is a bad input or a bug in the receipt "
        "rules; the batch was rolled back."
    )


def test_lines_outside_the_batch_are_not_checked():
    con = _warehouse()
    con.execute("update raw_lines set line_kind = 'gift' where file_id = 'F0000001'")
    assert validate_raw_lines(con, BATCH, sample_rows=0) == 8


def test_a_model_with_other_allowed_values_is_twinned_with_them():
    class NoReturns(RawLines):
        line_kind: str = pa.Field(isin=["sale", "void"])

    message = _message(_warehouse(), sample_rows=0, model=NoReturns)
    assert "breaks its schema NoReturns: line_kind: isin(['sale', 'void']) (2 rows)" in message


def test_a_wrong_column_type_fails_in_the_pandera_sample():
    con = _warehouse()
    con.execute("alter table raw_lines alter line_no type integer")
    assert "line_no" in _message(con, sample_rows=2)


def test_the_pandera_sample_names_the_check_but_withholds_the_value():
    con = _warehouse()
    con.execute(f"update raw_lines set line_kind = 'gift' where {ROW}")  # noqa: S608
    # a card id can sit in any column of a table that has cards
    assert _message(con, sample_rows=100) == (
        f"{MESSAGE_START}line_kind: isin(['sale', 'return', 'void']) (value withheld) "
        "Hint: this is a bad input or a bug; the failing rows are shown above."
    )


def test_the_pandera_sample_sees_the_batch_before_its_commit():
    # the ingest validates inside the batch's transaction: a sample read on another connection
    # (a cursor) would see none of the batch's lines and leave the twins alone
    con = _warehouse()
    con.execute("begin transaction")
    con.execute(f"update raw_lines set line_kind = 'gift' where {ROW}")  # noqa: S608
    assert "(value withheld)" in _message(con, sample_rows=100)


def test_an_empty_batch_passes():
    con = _warehouse()
    con.execute("delete from raw_lines where file_id >= 'F0000002'")
    assert validate_raw_lines(con, BATCH) == 0
