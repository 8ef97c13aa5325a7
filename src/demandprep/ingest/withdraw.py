"""Withdraw files on purpose: their rows leave the warehouse, their ledger rows say why.

`withdraw_files` matches the current ledger rows by path (an exact path or a glob, relative
paths against the config's folder; the file itself need not exist any more) and, in one
transaction, deletes the files' accepted rows (raw_lines or ref_<table>) and quarantined
lines and marks their ledger rows `withdrawn` with the reason. A withdrawn file is not read
again while its checksum stays the same; `ingest --reload` brings it back explicitly.
"""

from __future__ import annotations

from fnmatch import fnmatch
from pathlib import Path

import duckdb

from demandprep.config import ProjectConfig
from demandprep.errors import UserError
from demandprep.ingest.results import FileResult
from demandprep.ingest.version_rows import remove_version_rows
from demandprep.sqlfiles import run_sql


def withdraw_files(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, pattern: str, reason: str
) -> list[FileResult]:
    """Remove the rows of every current file matching `pattern` and ledger them withdrawn."""
    matched = _matching_current_files(con, config, pattern)
    if not matched:
        raise UserError(
            f"withdraw {pattern!r}: no current file in the ledger matches it.",
            "give the path as ingested (absolute, or relative to the config's folder) or a glob.",
        )
    ids = [file_id for _source, _path, file_id, _rows in matched]
    con.execute("begin transaction")
    try:
        remove_version_rows(con, {source for source, *_ in matched}, ids)
        run_sql(con, "ingest/077_withdrawn_departures.sql", {"ids": ids})
        con.execute(
            "update ledger set status = 'withdrawn', reason = $reason "
            "where list_contains($ids, file_id)",
            {"ids": ids, "reason": reason},
        )
        con.execute("commit")
    except BaseException:
        con.execute("rollback")
        raise
    return [
        FileResult(source, Path(path), "withdrawn", file_id, rows_read=rows)
        for source, path, file_id, rows in matched
    ]


def _matching_current_files(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, pattern: str
) -> list[tuple[str, str, str, int]]:
    base = config.config_path.parent if config.config_path else Path.cwd()
    glob = str(Path(pattern) if Path(pattern).is_absolute() else base / pattern)
    rows = con.execute(
        "select source, path, file_id, rows_accepted from ledger where status = 'current' "
        "order by path"
    ).fetchall()
    return [row for row in rows if row[1] == glob or fnmatch(row[1], glob)]
