"""Characteristic-based instruments: sums over own-firm and rival products (Berry, Levinsohn &
Pakes 1995) and differentiation measures (Gandhi & Houde 2019)."""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.instruments.periods import note_every_period, spread_moved
from demandprep.sqlfiles import run_sql


def build_characteristic_sums(ctx: BuildContext) -> None:
    """Append iv_firm_sum_<c>, iv_rival_sum_<c>, iv_firm_count and iv_rival_count."""
    characteristics = ctx.config.instruments.characteristic_sums
    if not characteristics:
        return
    run_sql(
        ctx.con,
        "instruments/050_instrument_values_characteristic_sums.sql",
        {"characteristics": characteristics},
    )
    run_sql(ctx.con, "instruments/051_instrument_values_product_counts.sql")


def build_differentiation(ctx: BuildContext) -> None:
    """Append iv_diff_sq_<c> and iv_diff_near_<c> for each configured characteristic.

    Only the build's periods, unless a spread moved: then every near-rival count may move."""
    characteristics = ctx.config.instruments.differentiation
    if not characteristics:
        return
    params = {"characteristics": characteristics}
    run_sql(ctx.con, "instruments/059_iv_spreads.sql", params)
    every_period = spread_moved(ctx)
    if every_period:
        note_every_period(ctx, "differentiation")
    run_sql(
        ctx.con,
        "instruments/060_instrument_values_differentiation.sql",
        params | {"every_period": every_period},
    )
