"""Characteristic-based instruments: sums over own-firm and rival products (Berry, Levinsohn &
Pakes 1995) and differentiation measures (Gandhi & Houde 2019)."""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.instruments.near_periods import plan_near_counts
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

    Squared distances for the build's periods; near-rival counts for those and for the periods
    where a moved spread changes a count (`near_periods.py`)."""
    characteristics = ctx.config.instruments.differentiation
    if not characteristics:
        return
    plan_near_counts(ctx, characteristics)
    run_sql(
        ctx.con,
        "instruments/060_instrument_values_differentiation.sql",
        {"characteristics": characteristics},
    )
