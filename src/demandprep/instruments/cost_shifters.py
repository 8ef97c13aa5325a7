"""User-supplied cost shifters joined to product-markets by period, firm and/or product."""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.instruments.columns import require_numeric_columns, require_table
from demandprep.instruments.periods import note_every_period
from demandprep.sqlfiles import run_sql

KEY_COLUMNS = ("period", "firm", "product")


def build_cost_shifters(ctx: BuildContext) -> None:
    """Append iv_cost_<column> for each configured shifter column, for every period."""
    settings = ctx.config.instruments.cost_shifters
    if settings is None:
        return
    columns = require_table(ctx.con, "cost_shifters", "instruments.cost_shifters")
    _check_keys(settings.join_on, columns)
    clashes = [name for name in settings.columns if name in KEY_COLUMNS]
    if clashes:
        raise UserError(
            f"config key 'instruments.cost_shifters.columns': {clashes[0]!r} is a join key, "
            "not a shifter value.",
            "list only the value columns, e.g. green_coffee_index.",
        )
    require_numeric_columns(
        settings.columns,
        columns,
        "cost_shifters",
        "instruments.cost_shifters.columns",
        "map the column in sources.cost_shifters.columns.",
    )
    run_sql(
        ctx.con,
        "instruments/070_instrument_values_cost_shifters.sql",
        {
            "columns": settings.columns,
            "join_period": "period" in settings.join_on,
            "join_firm": "firm" in settings.join_on,
            "join_product": "product" in settings.join_on,
            "period": ctx.config.markets.period,
        },
    )
    note_every_period(ctx, "cost_shifters")


def _check_keys(join_on: list[str], columns: dict[str, str]) -> None:
    if not join_on:
        raise UserError(
            "config key 'instruments.cost_shifters.join_on' is empty, so every product-market "
            "would get the same value.",
            "join on at least one of period, firm, product.",
        )
    missing = [key for key in join_on if key not in columns]
    if missing:
        raise UserError(
            f"config key 'instruments.cost_shifters.join_on': the cost_shifters table has no "
            f"{missing[0]!r} column.",
            f"map {missing[0]} in sources.cost_shifters.columns or drop it from join_on.",
        )
