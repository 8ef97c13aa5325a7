"""The report's quick logit estimated on a thread of its own while the export writes the data
files.

The estimates read only `share_table`, committed before the export starts, and most of their
time is DuckDB's read and numpy's least squares, which release the GIL; the data files are
DuckDB reads and pyarrow's Parquet writer, which do too. On a 2-core machine the two overlap: at
39.8M receipt lines the quick logit (0.2 s) left the night's critical path. The thread reads
through a cursor of its own (a DuckDB connection is not shared between threads). Inside an open
transaction another cursor would see the last committed tables, so there the estimates run on
the caller's thread. The estimates are the same numbers either way, and warnings are added by
the caller in a fixed order, so the build stays deterministic.
"""

from __future__ import annotations

from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import contextmanager

import duckdb

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.export.quick_logit import LogitEstimate, quick_logit
from demandprep.export.report import market_build_enabled
from demandprep.export.report_data import table_exists


@contextmanager
def estimates_alongside(ctx: BuildContext) -> Iterator[Future[list[LogitEstimate]]]:
    """The quick logit estimates of every assumption, made while the block runs; on leaving,
    the thread is joined and its cursor closed (an error of the estimates is raised by
    `result()`)."""
    if not market_build_enabled(ctx.config) or not table_exists(ctx.con, "share_table"):
        yield _done([])
        return
    if ctx.in_transaction:
        yield _done(quick_logit_estimates(ctx.con, ctx.config))
        return
    cursor = ctx.con.cursor()
    try:
        with ThreadPoolExecutor(max_workers=1, thread_name_prefix="quick-logit") as pool:
            yield pool.submit(quick_logit_estimates, cursor, ctx.config)
    finally:
        cursor.close()


def quick_logit_estimates(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig
) -> list[LogitEstimate]:
    """OLS and IV quick logit estimates for every market-size assumption, in config order."""
    return [e for name in config.market_size for e in quick_logit(con, config, name)]


def warn_on_positive_price(ctx: BuildContext, estimates: list[LogitEstimate]) -> None:
    """A positive price coefficient is a warning."""
    for estimate in estimates:
        if estimate.price_coefficient > 0:
            ctx.warn(
                f"quick logit ({estimate.method.upper()}, assumption {estimate.assumption!r}): "
                f"the price coefficient is positive ({estimate.price_coefficient:.3g})"
            )


def _done(estimates: list[LogitEstimate]) -> Future[list[LogitEstimate]]:
    future: Future[list[LogitEstimate]] = Future()
    future.set_result(estimates)
    return future
