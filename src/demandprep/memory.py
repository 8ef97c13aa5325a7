"""Share the warehouse memory limit between DuckDB and the Python batches it hands out.

The configured limit is the whole process's: DuckDB's budget is the limit less a reserve for
the Python interpreter and its libraries (`duckdb_budget`), so that the process peaks near the
limit rather than a reserve above it.

DuckDB keeps its buffer pool (cached table blocks included) up to `memory_limit`; a batch that
Python validates lives outside that pool. While batches are read, DuckDB is held to a share of
the limit so that DuckDB and the batch together stay near the configured figure; afterwards
the configured limit is set again, exactly, from the value `warehouse.connect` remembered.
A connection opened elsewhere has no remembered value and keeps its limit untouched (DuckDB
reports its limit rounded, so it could not be set back exactly).

The share never goes above the configured limit: below twice DuckDB's per-thread floor
(a configured limit under 256 MiB) DuckDB keeps the configured limit while batches are read,
rather than being raised past what the user allowed. When DuckDB runs out of memory, the
stage reports one line naming itself, the limit and the way out (`out_of_memory_reported`).
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from contextlib import contextmanager, suppress

import duckdb

from demandprep.config import WarehouseSection
from demandprep.errors import UserError

LIMIT_VARIABLE = "demandprep_memory_limit"
# the interpreter with demandprep's libraries holds about 0.17 GiB when the warehouse opens;
# the rest covers what DuckDB allocates outside its buffer pool (measured: 0.2 to 0.45 GiB)
PROCESS_RESERVE_BYTES = 256 * 2**20
BATCH_READ_SHARE = 0.5  # DuckDB's share while batches are read; a scan needs little of it
SCAN_FLOOR_BYTES = 128 * 2**20  # DuckDB's documented minimum per thread is about 128 MB
BYTE_UNITS = {
    "B": 1,
    "KB": 10**3,
    "MB": 10**6,
    "GB": 10**9,
    "TB": 10**12,
    "KIB": 2**10,
    "MIB": 2**20,
    "GIB": 2**30,
    "TIB": 2**40,
}
SIZE_PATTERN = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*([KMGT]?I?B)\s*$", re.IGNORECASE)


def parse_bytes(text: str) -> int:
    """'2GB' -> 2_000_000_000, '1.8 GiB' -> bytes (DuckDB: GB = 1000^3, GiB = 1024^3)."""
    match = SIZE_PATTERN.match(text)
    if match is None:
        raise ValueError(f"not a memory size: {text!r} (expected e.g. '2GB' or '512MiB')")
    number, unit = match.groups()
    return int(float(number) * BYTE_UNITS[unit.upper()])


def duckdb_budget(configured: str) -> str:
    """DuckDB's limit for a configured process limit: less the reserve, at most half of it."""
    configured_bytes = parse_bytes(configured)
    return f"{configured_bytes - min(PROCESS_RESERVE_BYTES, configured_bytes // 2)}B"


def remember_memory_limit(con: duckdb.DuckDBPyConnection, configured: str) -> None:
    """Keep the configured limit on the connection, so it can be set back without rounding."""
    _set(con, f"set variable {LIMIT_VARIABLE} = $limit", configured)


def remembered_memory_limit(con: duckdb.DuckDBPyConnection) -> str | None:
    """The limit `warehouse.connect` set on this connection, or None."""
    # fetchall, not fetchone: a result read to its end leaves the connection free
    return con.execute("select getvariable($name)", {"name": LIMIT_VARIABLE}).fetchall()[0][0]


@contextmanager
def memory_shared_with_batches(
    con: duckdb.DuckDBPyConnection, share: float = BATCH_READ_SHARE
) -> Iterator[None]:
    """Within the block DuckDB may use `share` of its limit; the rest is left to the batches."""
    configured = remembered_memory_limit(con)
    if configured is None:
        yield
        return
    reduced = shared_limit_bytes(parse_bytes(configured), share)
    _set_limit(con, f"{reduced}B")
    try:
        yield
    except BaseException:
        # Why: if setting the limit back fails too, the reason the block failed must still show
        with suppress(duckdb.Error):
            _set_limit(con, configured)
        raise
    _set_limit(con, configured)


def shared_limit_bytes(configured_bytes: int, share: float = BATCH_READ_SHARE) -> int:
    """DuckDB's limit while batches are read: `share` of the limit, at least the scan floor,
    never more than the configured limit itself."""
    return min(configured_bytes, max(SCAN_FLOOR_BYTES, int(configured_bytes * share)))


@contextmanager
def out_of_memory_reported(
    stage: str, settings: WarehouseSection, again: str = "build again"
) -> Iterator[None]:
    """Within the block, DuckDB running out of memory becomes `out_of_memory_error`'s line."""
    try:
        yield
    except duckdb.OutOfMemoryException as error:
        raise out_of_memory_error(stage, settings, again) from error


def out_of_memory_error(
    stage: str, settings: WarehouseSection, again: str = "build again"
) -> UserError:
    """The one line for DuckDB running out of memory in `stage`, with the way out."""
    return UserError(
        f"stage {stage}: DuckDB ran out of memory within warehouse.memory_limit = "
        f"{settings.memory_limit}.",
        f"raise warehouse.memory_limit, or give warehouse.temp_directory "
        f"({settings.temp_directory}) room to spill, and {again}.",
    )


def _set_limit(con: duckdb.DuckDBPyConnection, limit: str) -> None:
    # Why a cursor: the limit is the database's, and a reader still open on `con` (a block
    # that failed mid-stream) would refuse the statement with "connection has an open result"
    cursor = con.cursor()
    try:
        _set(cursor, "set memory_limit = $limit", limit)
    finally:
        cursor.close()


def _set(con: duckdb.DuckDBPyConnection, statement: str, limit: str) -> None:
    # fetched, so no unfinished result holds the connection (a streamed read may follow)
    con.execute(statement, {"limit": limit}).fetchall()
