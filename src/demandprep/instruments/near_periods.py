"""Which periods' near-rival counts a build counts (Gandhi & Houde 2019 differentiation).

A rival is near when its gap (the absolute difference of the characteristic) is at most the
characteristic's spread over every product-market (`058_iv_spreads.sql`). Nearly every night
moves the spread a little, yet a count changes only where a rival gap lies between the stored
spread and the new one. So each build stores the distinct rival gaps of the periods it computes
(`057_iv_rival_gaps.sql`, kept in `iv_stored_gaps` beside the values, `periods.py`) and counts
again only the periods it computes and those with a stored gap between the two spreads
(`059_iv_near_periods.sql`): a small per-period summary instead of every rival pair of history.
"""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.instruments.periods import is_full_build, note_every_period
from demandprep.sqlfiles import run_sql


def plan_near_counts(ctx: BuildContext, characteristics: list[str]) -> None:
    """Write this build's rival gaps, spreads and near-count periods (`iv_near_periods`), and
    record the periods counted again beyond the computed ones."""
    params = {"characteristics": characteristics}
    run_sql(ctx.con, "instruments/057_iv_rival_gaps.sql", params)
    run_sql(ctx.con, "instruments/058_iv_spreads.sql", params)
    every_period = is_full_build(ctx) or spread_left_the_numbers(ctx)
    run_sql(ctx.con, "instruments/059_iv_near_periods.sql", {"every_period": every_period})
    scope = ctx.facts["instrument_scope"]
    scope["near_counts_recounted"] = _recounted_periods(ctx)
    if _counts_every_period(ctx):
        note_every_period(ctx, "differentiation")


def spread_left_the_numbers(ctx: BuildContext) -> bool:
    """True when a spread moved to or from a missing or non-finite value (or a characteristic
    has a spread on one side only): no gap range tells which counts that moves."""
    row = ctx.con.execute(
        "select count(*) from iv_spreads "
        "full join iv_stored_spreads as stored using (characteristic) "
        "where iv_spreads.spread is distinct from stored.spread "
        "and not (coalesce(isfinite(iv_spreads.spread), false) "
        "and coalesce(isfinite(stored.spread), false))"
    ).fetchone()
    return bool(row and row[0])


def _recounted_periods(ctx: BuildContext) -> list[str]:
    rows = ctx.con.execute(
        "select period_start from iv_near_periods "
        "anti join iv_build_periods using (period_start) order by period_start"
    ).fetchall()
    return [period.isoformat() for (period,) in rows]


def _counts_every_period(ctx: BuildContext) -> bool:
    row = ctx.con.execute(
        "select (select count(*) from iv_near_periods) "
        "= (select count(distinct period_start) from iv_products)"
    ).fetchone()
    return bool(row and row[0])
