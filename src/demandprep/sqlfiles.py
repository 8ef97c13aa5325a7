"""Read the static SQL files shipped in `demandprep.sql` and run them with bound parameters."""

from __future__ import annotations

from importlib import resources
from typing import Any

import duckdb


def sql_text(name: str) -> str:
    """The text of `sql/<name>` (e.g. "market/010_lines_in_scope.sql")."""
    return resources.files("demandprep.sql").joinpath(name).read_text(encoding="utf-8")


def run_sql(
    con: duckdb.DuckDBPyConnection, name: str, params: dict[str, Any] | None = None
) -> duckdb.DuckDBPyConnection:
    """Execute one static SQL file; user choices arrive only as named parameters."""
    text = sql_text(name)
    used = {key: value for key, value in (params or {}).items() if f"${key}" in text}
    return con.execute(text, used) if used else con.execute(text)


def quote_identifier(name: str) -> str:
    """A column name quoted for DuckDB; callers check it against the real columns first."""
    return '"' + name.replace('"', '""') + '"'
