"""Open the embedded DuckDB warehouse with the configured settings, one writer at a time.

A second process that wants to write the same warehouse waits up to `lock_timeout_seconds`
on an advisory lock file beside the database, then stops with a clear message.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import AbstractContextManager, contextmanager
from pathlib import Path

import duckdb

from demandprep.config import WarehouseSection
from demandprep.errors import UserError
from demandprep.file_lock import pid_file_lock
from demandprep.memory import duckdb_budget, remember_memory_limit

DEFAULT_MEMORY_LIMIT = WarehouseSection.model_fields["memory_limit"].default


def lock_path(database: Path) -> Path:
    """The advisory lock file that guards writes to `database`."""
    return database.with_name(database.name + ".lock")


@contextmanager
def writer_lock(database: Path, timeout_seconds: float) -> Iterator[None]:
    """Hold the warehouse's writer lock, waiting at most `timeout_seconds` for it."""

    def busy(holder: str) -> UserError:
        return UserError(
            f"{database}: another demandprep process (pid {holder}) is writing this "
            f"warehouse; waited {timeout_seconds:g} s.",
            "wait for it to finish or raise warehouse.lock_timeout_seconds.",
        )

    with pid_file_lock(lock_path(database), timeout_seconds, busy):
        yield


def connect(settings: WarehouseSection, read_only: bool = False) -> duckdb.DuckDBPyConnection:
    """A DuckDB connection to the warehouse file with memory, threads and spill folder set."""
    settings.path.parent.mkdir(parents=True, exist_ok=True)
    settings.temp_directory.mkdir(parents=True, exist_ok=True)
    budget = duckdb_budget(settings.memory_limit)
    config = {
        "memory_limit": budget,
        "threads": settings.threads,
        "temp_directory": str(settings.temp_directory),
        "preserve_insertion_order": False,
    }
    try:
        con = duckdb.connect(str(settings.path), read_only=read_only, config=config)
        remember_memory_limit(con, budget)
    except duckdb.IOException as error:
        raise UserError(
            f"{settings.path}: cannot open the warehouse ({str(error).splitlines()[0]}).",
            "another program may hold it open; close it and retry.",
        ) from None
    except duckdb.OutOfMemoryException:
        raise UserError(
            f"{settings.path}: DuckDB cannot open the warehouse within "
            f"warehouse.memory_limit = {settings.memory_limit}.",
            f"raise warehouse.memory_limit (the default is {DEFAULT_MEMORY_LIMIT}).",
        ) from None
    return con


@contextmanager
def open_warehouse(settings: WarehouseSection) -> Iterator[duckdb.DuckDBPyConnection]:
    """The warehouse opened for writing, holding the writer lock until the block ends."""
    with writer_lock(settings.path, settings.lock_timeout_seconds):
        con = connect(settings)
        try:
            yield con
        finally:
            con.close()


@contextmanager
def transaction(con: duckdb.DuckDBPyConnection) -> Iterator[None]:
    """The block in one transaction: committed when it ends, rolled back when it raises."""
    con.execute("begin transaction")
    try:
        yield
    except BaseException:
        con.execute("rollback")
        raise
    con.execute("commit")


def threads_of(con: duckdb.DuckDBPyConnection) -> int:
    """How many threads DuckDB may use on this connection now (`warehouse.threads` unless a
    block changed it)."""
    # fetchall, not fetchone: a result read to its end leaves the connection free
    return int(con.execute("select current_setting('threads')").fetchall()[0][0])


def one_thread(con: duckdb.DuckDBPyConnection) -> AbstractContextManager[None]:
    """Within the block, DuckDB runs each statement on one thread (then the threads set before).

    With insertion order kept, one thread writes rows in the order its plan streams them, also
    through a join whose probe does not keep order on several threads."""
    return _setting_within(con, "threads", 1)


def join_sides_kept(con: duckdb.DuckDBPyConnection) -> AbstractContextManager[None]:
    """Within the block, DuckDB probes a hash join with its left side as written.

    Its optimizer otherwise builds the hash table on the side it estimates smaller, and a left
    join turned right streams the other side's order: a range of few occasions joined to many
    store-day maps came out in the maps' order."""
    return _setting_within(con, "disabled_optimizers", "build_side_probe_side")


def insertion_order_kept(con: duckdb.DuckDBPyConnection) -> AbstractContextManager[None]:
    """Within the block, DuckDB stores and scans rows in the order they were written."""
    return _setting_within(con, "preserve_insertion_order", True)


@contextmanager
def _setting_within(
    con: duckdb.DuckDBPyConnection, name: str, value: bool | int | str
) -> Iterator[None]:
    """DuckDB setting `name` (one of ours, never user text) at `value` within the block."""
    before = con.execute("select current_setting($name)", {"name": name}).fetchone()[0]
    con.execute(f"set {name} = {_setting_literal(value)}")
    try:
        yield
    finally:
        con.execute(f"set {name} = {_setting_literal(before)}")


def _setting_literal(value: bool | int | str) -> str:
    if isinstance(value, str):
        return "'" + value.replace("'", "''") + "'"
    return ("true" if value else "false") if isinstance(value, bool) else str(int(value))
