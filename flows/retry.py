"""Which ingest failures are worth a retry: reading a file, yes; a schema violation, never."""

from __future__ import annotations

from typing import Any

import duckdb

from demandprep.errors import UserError
from demandprep.ingest.results import PROBLEM_STATUSES, FileResult

# Failures of the world around a file (a share dropped, a file still being copied), not of its
# content. EOFError covers a gzip file cut short while it is still being written.
READ_ERRORS: tuple[type[BaseException], ...] = (OSError, EOFError, duckdb.IOException)


class InputUnreadable(OSError):
    """An input file the ingest could not open or decode (it was ledgered as failed)."""


class InputRejected(UserError):
    """An input file the ingest read but refused: its columns or values break the schema."""


def is_read_error(error: BaseException) -> bool:
    """True when `error` is a failure to read, which a later attempt may not meet."""
    return isinstance(error, READ_ERRORS) and not isinstance(error, UserError)


def retry_read_errors(task: Any, task_run: Any, state: Any) -> bool:
    """Prefect retry condition: retry a task only when it failed reading a file."""
    error = state.result(raise_on_failure=False)
    return isinstance(error, BaseException) and is_read_error(error)


def raise_if_failed(result: FileResult) -> FileResult:
    """Pass a file's ingest result through; a failed or refused file raises (a read error, or
    a rejection that no retry can mend), so the night fails and `latest` stays."""
    if result.status not in PROBLEM_STATUSES:
        return result
    error = result.error or "no reason given"
    if result.unreadable:
        raise InputUnreadable(error)
    raise InputRejected(f"{result.path}: rejected by the ingest: {error}")
