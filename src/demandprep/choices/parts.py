"""`choices` written in parts of the occasions at once, each part on one DuckDB thread.

090 joins each occasion to its store-day's map, and a hash join's probe keeps its input's order
only on one thread (warehouse.one_thread). So the occasions (choice_occasion_sets, stored sorted
by occasion) are cut into as many key ranges as DuckDB had threads; each range is written by a
connection of its own (a cursor: the same database, a transaction of its own) in a Python
thread of its own, all at once (DuckDB lets go of the GIL while it runs), and the transactions
commit in key order, so the table holds its rows in (occasion, alternative) order. A part that
fails keeps the parts after it from committing; the table is then dropped and the first error
(in key order) raised.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import duckdb

# how often a part that is done looks whether the part before it committed or failed
WAIT_SECONDS = 0.05

# writes one key range [first, after) (after None: to the last occasion) on the given cursor
PartWriter = Callable[[duckdb.DuckDBPyConnection, str, str | None], None]


def occasion_bounds(con: duckdb.DuckDBPyConnection, parts: int) -> list[tuple[str, str | None]]:
    """Key ranges [first, after) of about equal numbers of occasions, in key order.

    Together they cover every occasion: the first starts at '' (no key sorts before it) and
    the last is open. The bounds are the keys stored at equal steps of choice_occasion_sets,
    which 062 stores sorted; they are sorted again, so a table stored otherwise still gives
    ranges that cover every key once (only its rows would not come out in order).
    """
    occasions = con.execute("select count(*) from choice_occasion_sets").fetchone()[0]
    parts = max(1, min(parts, occasions))
    inner = {
        con.execute(
            "select occasion from choice_occasion_sets where rowid = $row",
            {"row": occasions * part // parts},
        ).fetchone()[0]
        for part in range(1, parts)
    }
    firsts = ["", *sorted(inner - {""})]
    return list(zip(firsts, [*firsts[1:], None], strict=True))


def write_in_parts(
    con: duckdb.DuckDBPyConnection,
    bounds: list[tuple[str, str | None]],
    write_part: PartWriter,
    table: str = "choices",
) -> None:
    """Run `write_part` for each key range on a cursor of its own, all at once, and commit the
    parts in the order of `bounds`; on any failure drop `table` and raise the first error."""
    committed = [threading.Event() for _ in bounds]
    failed = threading.Event()

    def run(index: int) -> None:
        first, after = bounds[index]
        cursor = con.cursor()
        try:
            cursor.execute("begin transaction")
            try:
                write_part(cursor, first, after)
                if index and not _turn_came(committed[index - 1], failed):
                    cursor.execute("rollback")
                    return
                cursor.execute("commit")
            except BaseException:
                failed.set()
                cursor.execute("rollback")
                raise
            committed[index].set()
        finally:
            cursor.close()

    with ThreadPoolExecutor(max_workers=len(bounds), thread_name_prefix="demandprep-part") as pool:
        futures = [pool.submit(run, index) for index in range(len(bounds))]
    errors = [future.exception() for future in futures if future.exception() is not None]
    if errors:
        # `table` is ours (never user text); the parts before the failed one have committed
        con.execute(f"drop table if exists {table}")
        raise errors[0]


def _turn_came(before: threading.Event, failed: threading.Event) -> bool:
    """Wait until the part before has committed (True) or a part has failed (False)."""
    while not before.wait(WAIT_SECONDS):
        if failed.is_set():
            return False
    return True
