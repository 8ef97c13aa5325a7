"""Guard the batch's accepted receipt lines with RawLines: SQL twins of every check on every row,
pandera itself on a sample.

Pandera over every line meant fetching the whole batch into Python as Arrow; each check of the
model has a twin in sql/ingest/070_raw_lines_checks.sql that DuckDB counts in one scan instead,
and a check without its twin stops the ingest as a bug. The twins read the allowed line kinds
and the smallest line number from the model, so a model with other values is twinned with them.
Pandera validates the batch's first `sample_rows` lines as stored: it alone checks the column
types and the strict column set, which are the table's, one per column, so the sample covers
every row.
"""

from __future__ import annotations

from typing import Any

import duckdb
import pandera.polars as pa
import polars as pl

from demandprep.errors import UserError
from demandprep.memory import memory_shared_with_batches
from demandprep.schemas.ingest import RawLines
from demandprep.sqlfiles import run_sql
from demandprep.validate import (
    SHOWN_FAILURES,
    check_wording,
    count_sql_checks,
    model_check_names,
    validate_frame,
)

SAMPLE_ROWS = 100_000
CHECKS_FILE = "ingest/070_raw_lines_checks.sql"
COUNT_COLUMNS = ("row_count",)  # counts of the SQL checks that are not failures of the model
IN_BATCH = "where file_id >= $first_file_id and file_id <= $last_file_id"


def validate_raw_lines(
    con: duckdb.DuckDBPyConnection,
    id_range: dict[str, str],
    sample_rows: int = SAMPLE_ROWS,
    model: type[pa.DataFrameModel] = RawLines,
) -> int:
    """Validate the batch's lines (file ids in `id_range`) against `model`; returns their count."""
    _validate_sample(con, id_range, sample_rows, model)
    counts = _sql_check_counts(con, id_range, model)
    failures = {name: n for name, n in counts.items() if name not in COUNT_COLUMNS and n}
    if failures:
        raise UserError(
            f"stage output 'raw_lines' breaks its schema {model.__name__}: "
            f"{_summary(failures, model)}",
            "this is a bad input or a bug in the receipt rules; the batch was rolled back.",
        )
    return counts["row_count"]


def model_checks(model: type[pa.DataFrameModel]) -> set[str]:
    """Each check of `model` by its SQL twin's name: <column>__<check>, or the table check's."""
    return model_check_names(model)


def sql_check_names() -> set[str]:
    """The checks sql/ingest/070 counts: its result columns, run on an empty `raw_lines`."""
    con = duckdb.connect()
    try:
        run_sql(con, "ingest/000_ingest_tables.sql")
        params = {"first_file_id": "", "last_file_id": "", **_check_parameters(RawLines)}
        result = run_sql(con, CHECKS_FILE, params)
        return {column[0] for column in result.description} - set(COUNT_COLUMNS)
    finally:
        con.close()


def _validate_sample(
    con: duckdb.DuckDBPyConnection,
    id_range: dict[str, str],
    sample_rows: int,
    model: type[pa.DataFrameModel],
) -> None:
    if sample_rows <= 0:
        return
    with memory_shared_with_batches(con):
        sql = f"select * from raw_lines {IN_BATCH} limit $rows"  # noqa: S608 (static text)
        # on `con` itself, not a cursor: the batch's lines are not committed yet
        rows = con.sql(sql, params={**id_range, "rows": sample_rows})
        sample = pl.from_arrow(rows.to_arrow_table())
    assert isinstance(sample, pl.DataFrame)
    if sample.height:
        validate_frame(sample, model, "raw_lines")


def _sql_check_counts(
    con: duckdb.DuckDBPyConnection, id_range: dict[str, str], model: type[pa.DataFrameModel]
) -> dict[str, int]:
    return count_sql_checks(con, CHECKS_FILE, {**id_range, **_check_parameters(model)}, model)


def _check_parameters(model: type[pa.DataFrameModel]) -> dict[str, Any]:
    """The values the twins compare with, read from the model's own checks."""
    columns = model.to_schema().columns
    return {
        "line_kinds": _statistic(columns["line_kind"], "isin", "allowed_values"),
        "min_line_no": _statistic(columns["line_no"], "greater_than_or_equal_to", "min_value"),
    }


def _statistic(column: Any, check_name: str, statistic: str) -> Any:
    (check,) = [check for check in column.checks if check.name == check_name]
    return check.statistics[statistic]


def _summary(failures: dict[str, int], model: type[pa.DataFrameModel]) -> str:
    errors = check_wording(model)
    return "; ".join(
        f"{errors.get(name, name)} ({count} rows)"
        for name, count in list(failures.items())[:SHOWN_FAILURES]
    )
