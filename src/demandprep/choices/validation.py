"""Guard `choices` with its pandera model: SQL twins of every check on every row, pandera itself
on a sample of whole occasions.

Pandera in Python batches cost as much as building the table, so each check of the model
(`Choices`) has a twin in sql/choices/091_choices_checks.sql that DuckDB evaluates on every row
in a few scans, without sorting; a check without its twin stops the build as a bug. Pandera
validates the first `sample_rows` rows of whole occasions as stored (the build stores them in
key order, so these are the occasions with the smallest ids, a spread of the table): it alone
checks the column types, which are one per column, so the sample covers every row.
"""

from __future__ import annotations

import duckdb
import pandera.polars as pa
import polars as pl

from demandprep.errors import UserError
from demandprep.memory import memory_shared_with_batches
from demandprep.schemas.choices import (
    FRINGE,
    LOYALTY_TOLERANCE,
    OUTSIDE,
    PRICE_SOURCES,
    PSEUDONYM_PATTERN,
    UNPRICED_SOURCES,
    Choices,
)
from demandprep.sqlfiles import run_sql
from demandprep.validate import (
    SHOWN_FAILURES,
    check_wording,
    count_sql_checks,
    model_check_names,
    validate_frame,
)
from demandprep.warehouse import insertion_order_kept

SAMPLE_ROWS = 100_000
CHECKS_FILE = "choices/091_choices_checks.sql"
REPEATED_KEYS_FILE = "choices/092_choices_repeated_keys.sql"
# counts of the SQL checks that are not failures of the model
COUNT_COLUMNS = ("row_count", "rows_out_of_key_order")
# checks counted in occasions, not rows
OCCASION_CHECKS = (
    "one_chosen_per_occasion",
    "rows_match_set_size",
    "occasion_columns_constant",
    "chooser__str_matches",
)


def validate_choices(
    con: duckdb.DuckDBPyConnection, sample_rows: int = SAMPLE_ROWS, checked_from: str = ""
) -> int:
    """Validate the rows of `choices` from occasion `checked_from` on ('': all) against
    `Choices`; returns their count, raises on failure."""
    with insertion_order_kept(con):
        _validate_sample(con, sample_rows, checked_from)
        counts = _sql_check_counts(con, checked_from)
    failures = {name: n for name, n in counts.items() if name not in COUNT_COLUMNS and n}
    if failures:
        raise UserError(
            f"stage output 'choices' breaks its schema {Choices.__name__}: {_summary(failures)}",
            "this is a bad input or a bug; query the warehouse table 'choices' for the rows.",
        )
    return counts["row_count"]


def model_checks(model: type[pa.DataFrameModel] = Choices) -> set[str]:
    """Each check of `model` by its SQL twin's name: <column>__<check>, or the table check's."""
    return model_check_names(model)


def sql_check_names() -> set[str]:
    """The checks sql/choices/091 counts: its result columns, run on an empty `choices`."""
    columns = Choices.to_schema().columns
    empty = pl.DataFrame(schema={name: column.dtype.type for name, column in columns.items()})
    con = duckdb.connect()
    try:
        con.register("empty_choices", empty.to_arrow())
        con.execute("create table choices as select * from empty_choices")
        result = run_sql(con, CHECKS_FILE, _check_parameters())
        return {column[0] for column in result.description} - set(COUNT_COLUMNS)
    finally:
        con.close()


def _validate_sample(con: duckdb.DuckDBPyConnection, sample_rows: int, checked_from: str) -> None:
    with memory_shared_with_batches(con):
        first_rows = {"rows": sample_rows + 1, "checked_from": checked_from}
        rows = con.cursor().sql(
            "select * from choices where occasion >= $checked_from or occasion is null limit $rows",
            params=first_rows,
        )
        sample = pl.from_arrow(rows.to_arrow_table())
    assert isinstance(sample, pl.DataFrame)
    if sample.height > sample_rows:
        # keep whole occasions: the limit cut the last one short
        sample = _without_last_occasion(sample)
    validate_frame(sample, Choices, "choices")


def _without_last_occasion(frame: pl.DataFrame) -> pl.DataFrame:
    others = (frame["occasion"] != frame["occasion"][-1]).to_numpy().nonzero()[0]
    return frame.slice(0, int(others[-1]) + 1 if len(others) else 0)


def _sql_check_counts(con: duckdb.DuckDBPyConnection, checked_from: str) -> dict[str, int]:
    counts = count_sql_checks(con, CHECKS_FILE, _check_parameters(checked_from), Choices)
    if counts["rows_out_of_key_order"]:
        # a repeated pair need not sit next to its twin: group the pairs instead
        counts.update(_repeated_keys(con, checked_from))
    return counts


def _repeated_keys(con: duckdb.DuckDBPyConnection, checked_from: str) -> dict[str, int]:
    result = run_sql(con, REPEATED_KEYS_FILE, {"checked_from": checked_from})
    names = [column[0] for column in result.description]
    return dict(zip(names, result.fetchone(), strict=True))


def _check_parameters(checked_from: str = "") -> dict[str, object]:
    return {
        "checked_from": checked_from,
        "outside": OUTSIDE,
        "fringe": FRINGE,
        "price_sources": list(PRICE_SOURCES),
        "unpriced_sources": list(UNPRICED_SOURCES),
        "pseudonym_pattern": PSEUDONYM_PATTERN,
        "loyalty_max": 1 + LOYALTY_TOLERANCE,
    }


def _summary(failures: dict[str, int]) -> str:
    errors = _check_errors()
    parts = []
    for name, count in list(failures.items())[:SHOWN_FAILURES]:
        unit = "occasions" if name in OCCASION_CHECKS else "rows"
        parts.append(f"{errors.get(name, name)} ({count} {unit})")
    return "; ".join(parts)


def _check_errors() -> dict[str, str]:
    """Each SQL check's name -> the words pandera uses for it ('chooser: str_matches(...)')."""
    return check_wording(Choices)
