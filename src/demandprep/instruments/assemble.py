"""Pivot the long instrument rows into iv_ columns and join them to the shares."""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.instruments.columns import require_table
from demandprep.instruments.kept_assembly import (
    merge_instruments,
    merge_share_table,
    plan_assembly,
    store_share_table_state,
)
from demandprep.instruments.periods import store_instrument_values
from demandprep.schemas.instruments import InstrumentColumnsModel
from demandprep.sqlfiles import run_sql
from demandprep.validate import validate_table


def assemble_instruments(ctx: BuildContext) -> None:
    """Store this build's rows per period, build `instrument_columns`, then the rows of
    `instruments` (one per inside product-market) of the periods this build assembles from
    the stored values (`kept_assembly.py`)."""
    store_instrument_values(ctx)
    run_sql(ctx.con, "instruments/082_instrument_columns.sql")
    validate_table(ctx.con, "instrument_columns", InstrumentColumnsModel)
    plan_assembly(ctx)
    run_sql(ctx.con, "instruments/080_iv_values_wide.sql")
    run_sql(ctx.con, "instruments/081_iv_flags_wide.sql")
    run_sql(ctx.con, "instruments/090_instruments.sql")
    merge_instruments(ctx)
    ctx.facts["instrument_columns"] = instrument_column_names(ctx)
    _note_missing_other_market_prices(ctx)


def build_share_table(ctx: BuildContext) -> None:
    """Build `share_table` = shares left join instruments, what export writes per assumption,
    for the periods this build assembles, and record what it was assembled from."""
    require_table(ctx.con, "shares", "the market build's share rows")
    run_sql(ctx.con, "instruments/100_share_table.sql")
    merge_share_table(ctx)
    store_share_table_state(ctx)


def instrument_column_names(ctx: BuildContext, role: str = "instrument") -> list[str]:
    """The iv_ columns of this build with the given role ('instrument' or 'flag'), by name."""
    rows = ctx.con.execute(
        "select column_name from instrument_columns where role = $role order by column_name",
        {"role": role},
    ).fetchall()
    return [name for (name,) in rows]


def _note_missing_other_market_prices(ctx: BuildContext) -> None:
    if "iv_hausman_missing" not in instrument_column_names(ctx, role="flag"):
        return
    row = ctx.con.execute(
        "select count(*) filter (where iv_hausman_missing), count(*) from instruments"
    ).fetchone()
    missing, total = row if row else (0, 0)
    ctx.facts["hausman_missing"] = {"product_markets": int(missing), "of": int(total)}
    if missing:
        ctx.warn(
            f"iv_hausman_price is null (flagged iv_hausman_missing) for {missing} of {total} "
            "product-markets: no other market of the same period sells the product."
        )
