"""Check config-named columns against the warehouse tables before any SQL uses them."""

from __future__ import annotations

import duckdb

from demandprep.errors import UserError

NUMERIC_TYPE_PREFIXES = (
    "TINYINT",
    "SMALLINT",
    "INTEGER",
    "BIGINT",
    "HUGEINT",
    "UTINYINT",
    "USMALLINT",
    "UINTEGER",
    "UBIGINT",
    "UHUGEINT",
    "FLOAT",
    "DOUBLE",
    "DECIMAL",
    "BOOLEAN",
)


def table_columns(con: duckdb.DuckDBPyConnection, table: str) -> dict[str, str]:
    """Column name -> DuckDB type of a warehouse table; empty when the table does not exist."""
    rows = con.execute(
        "select column_name, data_type from information_schema.columns "
        "where table_name = $table order by ordinal_position",
        {"table": table},
    ).fetchall()
    return {name: data_type for name, data_type in rows}


def require_table(con: duckdb.DuckDBPyConnection, table: str, needed_by: str) -> dict[str, str]:
    """The columns of `table`, or a UserError saying which step needed it."""
    columns = table_columns(con, table)
    if not columns:
        raise UserError(
            f"the instruments step needs the warehouse table {table!r} ({needed_by}), "
            "but it does not exist.",
            "run ingest first and make sure the market build ran before the instruments.",
        )
    return columns


def is_numeric_type(data_type: str) -> bool:
    """Whether a DuckDB type can be cast to double as a number (booleans count as 0/1)."""
    return data_type.upper().startswith(NUMERIC_TYPE_PREFIXES)


def require_numeric_columns(
    names: list[str], columns: dict[str, str], table: str, key: str, hint: str
) -> None:
    """Every name must be a numeric or boolean column of `table`, else a UserError on `key`."""
    for name in names:
        if name not in columns:
            raise UserError(
                f"config key {key!r}: {name!r} is not a column of table {table!r} "
                f"(columns: {', '.join(columns)}).",
                hint,
            )
        if not is_numeric_type(columns[name]):
            raise UserError(
                f"config key {key!r}: column {name!r} of table {table!r} has type "
                f"{columns[name]}, not a number or boolean.",
                "instruments are numeric; choose a numeric column or recode it in the source.",
            )
