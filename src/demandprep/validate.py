"""Guard a warehouse table (or a query's rows) with its pandera model, in batches so large tables
stay out of core."""

from __future__ import annotations

from typing import Any

import duckdb
import pandera.errors
import pandera.polars as pa
import polars as pl

from demandprep.errors import UserError
from demandprep.memory import memory_shared_with_batches
from demandprep.personal import carries_cards
from demandprep.sqlfiles import run_sql

BATCH_ROWS = 1_000_000
SHOWN_FAILURES = 5
# pandera collects one small lazy query per check. polars 2's default engine spends about
# 0.4 ms starting each of them, its in-memory engine about 0.02 ms: on a night's 22 tables the
# checks took half the time (benchmarks/validation_engine.py)
CHECK_ENGINE = "in-memory"


def validate_table(
    con: duckdb.DuckDBPyConnection,
    table: str,
    model: type[pa.DataFrameModel],
    batch_rows: int = BATCH_ROWS,
    shown_as: str | None = None,
) -> int:
    """Validate every row of `table` against `model`; returns the row count, raises on failure.

    A failure names `shown_as` (the table the rows are bound for), else `table`."""
    sql = f"select * from {table}"  # noqa: S608 (our table names)
    return validate_query(con, sql, {}, model, shown_as or table, batch_rows, empty_too=True)


def validate_query(
    con: duckdb.DuckDBPyConnection,
    sql: str,
    params: dict[str, Any],
    model: type[pa.DataFrameModel],
    table: str,
    batch_rows: int = BATCH_ROWS,
    empty_too: bool = False,
) -> int:
    """Validate every row `sql` returns against `model`, batch by batch (never a whole table);
    returns the row count. `empty_too` checks the columns of an empty result as well."""
    rows = 0
    with memory_shared_with_batches(con):
        reader = con.sql(sql, params=params or None).to_arrow_reader(batch_rows)
        # closed on failure too: an open result would refuse the caller's rollback
        try:
            for batch in reader:
                frame = pl.from_arrow(batch)
                assert isinstance(frame, pl.DataFrame)
                validate_frame(frame, model, table, first_row=rows)
                rows += frame.height
            if rows == 0 and empty_too:
                validate_frame(pl.from_arrow(reader.schema.empty_table()), model, table)
        finally:
            reader.close()
    return rows


def validate_frame(
    frame: pl.DataFrame, model: type[pa.DataFrameModel], table: str, first_row: int = 0
) -> None:
    """Validate one frame; a failure names the table, the checks and the first failing rows."""
    try:
        with pl.Config(engine_affinity=CHECK_ENGINE):
            model.validate(frame, lazy=True)
    except (pandera.errors.SchemaErrors, pandera.errors.SchemaError) as error:
        withheld = carries_cards(frame.columns)  # a card id can sit in any of its columns
        raise UserError(
            f"stage output {table!r} breaks its schema {model.__name__}: "
            f"{_summary(error, withheld)}",
            "this is a bad input or a bug; the failing rows are shown above.",
        ) from None


def _summary(error: Exception, withheld: bool) -> str:
    cases = getattr(error, "failure_cases", None)
    if cases is None:
        return "the table's columns do not match" if withheld else str(error).splitlines()[0]
    frame = cases if isinstance(cases, pl.DataFrame) else pl.from_pandas(cases)
    return "; ".join(
        f"{row.get('column')}: {row.get('check')} ({_shown(row.get('failure_case'), withheld)})"
        for row in frame.head(SHOWN_FAILURES).to_dicts()
    )


def _shown(value: object, withheld: bool) -> str:
    return "value withheld" if withheld else f"value {value!r}"


def model_check_names(model: type[pa.DataFrameModel]) -> set[str]:
    """Each check of `model` by its SQL twin's name: <column>__<check> (<column>__not_nullable
    for a column's nulls), or the table check's own name."""
    schema = model.to_schema()
    names = {check.name for check in schema.checks}
    for column_name, column in schema.columns.items():
        names |= {f"{column_name}__{check.name}" for check in column.checks}
        if not column.nullable:
            names.add(f"{column_name}__not_nullable")
    return names


def check_wording(model: type[pa.DataFrameModel]) -> dict[str, str]:
    """Each SQL twin's name -> the words pandera uses for its check ('line_kind: isin([...])')."""
    schema = model.to_schema()
    errors = {check.name: check.error or check.name for check in schema.checks}
    for column_name, column in schema.columns.items():
        for check in column.checks:
            errors[f"{column_name}__{check.name}"] = f"{column_name}: {check.error or check.name}"
        errors[f"{column_name}__not_nullable"] = f"{column_name}: not_nullable"
    return errors


def count_sql_checks(
    con: duckdb.DuckDBPyConnection,
    sql_file: str,
    params: dict[str, object],
    model: type[pa.DataFrameModel],
) -> dict[str, int]:
    """Run a file of SQL twins (one row of counts); a check of `model` it lacks is a bug."""
    result = run_sql(con, sql_file, params)
    names = [column[0] for column in result.description]
    counts = dict(zip(names, result.fetchone(), strict=True))
    missing = model_check_names(model) - set(counts)
    if missing:
        raise RuntimeError(
            f"checks of {model.__name__} without an SQL twin in {sql_file}: {sorted(missing)}"
        )
    return counts
