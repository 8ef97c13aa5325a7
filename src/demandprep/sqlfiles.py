"""Read the static SQL files shipped in `demandprep.sql` and run them with bound parameters."""

from __future__ import annotations

import re
from importlib import resources
from typing import Any

import duckdb

LINE_COMMENT = re.compile(r"--[^\n]*")


def sql_text(name: str) -> str:
    """The text of `sql/<name>` (e.g. "market/010_lines_in_scope.sql")."""
    return resources.files("demandprep.sql").joinpath(name).read_text(encoding="utf-8")


def run_sql(
    con: duckdb.DuckDBPyConnection, name: str, params: dict[str, Any] | None = None
) -> duckdb.DuckDBPyConnection:
    """Execute one static SQL file; user choices arrive only as named parameters."""
    text = sql_text(name)
    code = LINE_COMMENT.sub("", text)  # a $name inside a comment is not a parameter
    used = {key: value for key, value in (params or {}).items() if _mentions(code, key)}
    return con.execute(text, used) if used else con.execute(text)


def _mentions(code: str, key: str) -> bool:
    return re.search(rf"\${re.escape(key)}\b", code) is not None


def quote_identifier(name: str) -> str:
    """A column name quoted for DuckDB; callers check it against the real columns first."""
    return '"' + name.replace('"', '""') + '"'
