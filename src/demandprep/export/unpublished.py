"""The periods recomputed by builds that were never published, owed to the next manifest.

A build commits its period summaries and instrument values with its market-level stages. When
it dies after that (in the choice build, the export, before publishing: killed, out of memory,
power cut), the next night finds nothing to recompute, yet its build differs from the last
published one in the periods the lost build recomputed. So a stage after the instruments
(`unpublished_periods`, committed with the summaries) records the build's `periods_rebuilt` in
the warehouse and widens it to those of every build since the last publish, and a publish
forgets them: the manifest's `periods_rebuilt` names every period whose rows may differ from
the previous published build. A crash between publishing and forgetting only makes the next
manifest list some periods again.
"""

from __future__ import annotations

import duckdb

from demandprep.context import BuildContext

TABLE_DDL = "create table if not exists unpublished_periods (period_start date not null)"


def record_unpublished_periods(ctx: BuildContext) -> None:
    """Store this build's `periods_rebuilt` and widen it to every unpublished build's."""
    scope = ctx.facts.get("build_scope")
    if scope is None:  # no market stages: no periods
        return
    con = ctx.con
    con.execute(TABLE_DDL)
    con.execute(
        "insert into unpublished_periods select unnest($periods::date[]) "
        "except select period_start from unpublished_periods",
        {"periods": scope["periods_rebuilt"]},
    )
    scope["periods_rebuilt"] = unpublished_periods(con)


def unpublished_periods(con: duckdb.DuckDBPyConnection) -> list[str]:
    """The recorded periods, as ISO dates, in order."""
    rows = con.execute("select distinct period_start from unpublished_periods order by 1")
    return [row[0].isoformat() for row in rows.fetchall()]


def forget_unpublished_periods(con: duckdb.DuckDBPyConnection) -> None:
    """After a publish: the published build shows every recorded period."""
    con.execute(TABLE_DDL)
    con.execute("delete from unpublished_periods")
