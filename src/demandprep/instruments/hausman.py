"""Other-market prices (Hausman 1996): leave-own-market-out (or own-region-out) mean prices."""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.instruments.columns import require_table
from demandprep.sqlfiles import run_sql

STORE_LEVEL = "store"


def build_hausman_prices(ctx: BuildContext) -> None:
    """Append iv_hausman_price and the iv_hausman_missing flag, when the family is enabled."""
    settings = ctx.config.instruments.hausman
    if not settings.enabled:
        return
    geography = ctx.config.markets.geography
    exclude_same = settings.exclude_same
    levels = _store_levels(ctx, geography, exclude_same)
    run_sql(
        ctx.con,
        "instruments/030_iv_market_groups.sql",
        {"levels": levels, "geography": geography, "exclude_same": exclude_same},
    )
    if exclude_same is not None:
        _require_one_group_per_market(ctx, geography, exclude_same)
    run_sql(ctx.con, "instruments/040_iv_hausman.sql")
    run_sql(ctx.con, "instruments/041_instrument_values_hausman.sql")
    run_sql(ctx.con, "instruments/042_instrument_flags_hausman.sql")


def _store_levels(ctx: BuildContext, geography: str, exclude_same: str | None) -> list[str]:
    """The stores columns the exclusion groups are read from, checked against the table."""
    columns = require_table(ctx.con, "stores", "instruments.hausman (market geography map)")
    if exclude_same is None:
        return []
    checked = (("markets.geography", geography), ("instruments.hausman.exclude_same", exclude_same))
    for key, name in checked:
        if name != STORE_LEVEL and name not in columns:
            raise UserError(
                f"config key {key!r}: {name!r} is not a column of the stores table "
                f"(columns: {', '.join(columns)}).",
                "name a geography column mapped in sources.stores.columns, e.g. region.",
            )
    return [name for name in dict.fromkeys((geography, exclude_same)) if name != STORE_LEVEL]


def _require_one_group_per_market(ctx: BuildContext, geography: str, exclude_same: str) -> None:
    # A market must sit inside one exclusion group: its geography is store or finer than it.
    row = ctx.con.execute(
        "select market, group_count from iv_market_groups "
        "where group_count <> 1 order by market limit 1"
    ).fetchone()
    if row is None:
        return
    market, group_count = row
    if group_count == 0:
        raise UserError(
            f"config key 'instruments.hausman.exclude_same': market {market!r} has no "
            f"{exclude_same!r} value in the stores table.",
            f"fill {exclude_same} for its stores, or drop exclude_same.",
        )
    raise UserError(
        f"config key 'instruments.hausman.exclude_same': geography level {geography!r} is not "
        f"finer than {exclude_same!r} (market {market!r} spans {group_count} {exclude_same} "
        "values).",
        f"use a geography at or below {exclude_same}, or drop exclude_same.",
    )
