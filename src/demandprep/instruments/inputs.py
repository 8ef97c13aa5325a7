"""Stage 1 of the instruments: check the config against real columns and lay out the inputs.

Creates `iv_products` (inside product-markets), `iv_characteristic_values` (long form of the
characteristics that instrument families use), the empty long tables `instrument_values` and
`instrument_flags` that the family stages append to, and `iv_build_periods` (`periods.py`).
"""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.instruments.columns import require_numeric_columns, require_table
from demandprep.instruments.periods import (
    create_empty_characteristics,
    instrument_build_reason,
    plan_instrument_periods,
    stored_inputs_hold,
)
from demandprep.sqlfiles import run_sql

MARKET_PRODUCT_COLUMNS = ("market", "geography", "period_start", "product", "firm", "price")
RESERVED_NAMES = MARKET_PRODUCT_COLUMNS + ("is_fringe",)


def instrument_characteristics(ctx: BuildContext) -> list[str]:
    """The characteristics any family uses, in config order, without duplicates."""
    settings = ctx.config.instruments
    return list(dict.fromkeys(settings.characteristic_sums + settings.differentiation))


def prepare_instrument_inputs(ctx: BuildContext) -> None:
    """Check configured columns, build iv_products and the characteristic long form, and
    decide which periods the families compute."""
    columns = require_table(ctx.con, "market_products", "the market build's product-markets")
    missing = [name for name in MARKET_PRODUCT_COLUMNS + ("is_fringe",) if name not in columns]
    if missing:
        raise UserError(
            f"table 'market_products' lacks column(s) {', '.join(missing)} that the "
            "instruments need.",
            "this is a bug in the market build; rerun it with the current version.",
        )
    characteristics = instrument_characteristics(ctx)
    _check_characteristics(characteristics, columns)
    reason = instrument_build_reason(ctx)
    keep_stored = stored_inputs_hold(ctx, reason)
    run_sql(ctx.con, "instruments/010_iv_products.sql", {"keep_stored": keep_stored})
    _warn_on_products_without_firm(ctx)
    run_sql(ctx.con, "instruments/011_instrument_values.sql")
    run_sql(ctx.con, "instruments/012_instrument_flags.sql")
    _require_products(ctx)
    if characteristics:
        run_sql(
            ctx.con,
            "instruments/020_iv_characteristic_values.sql",
            {"characteristics": characteristics, "keep_stored": keep_stored},
        )
        _require_complete_characteristics(ctx)
    else:
        create_empty_characteristics(ctx.con)
    plan_instrument_periods(ctx, reason, keep_stored)


def _warn_on_products_without_firm(ctx: BuildContext) -> None:
    rows = ctx.con.execute(
        "select distinct product from market_products "
        "where firm is null and not is_fringe order by product"
    ).fetchall()
    if rows:
        names = [product for (product,) in rows]
        shown = ", ".join(names[:5]) + (f" and {len(names) - 5} more" if len(names) > 5 else "")
        ctx.warn(
            f"instruments: {len(names)} products have no firm (catalogue firm column empty): "
            f"{shown}; each counts as a firm of its own, every other product's rival."
        )


def _check_characteristics(characteristics: list[str], columns: dict[str, str]) -> None:
    reserved = [name for name in characteristics if name in RESERVED_NAMES]
    if reserved:
        raise UserError(
            f"config key 'instruments.characteristic_sums' / 'instruments.differentiation': "
            f"{reserved[0]!r} is a key column, not a product characteristic.",
            "list characteristics such as roast_level from products.characteristics.",
        )
    require_numeric_columns(
        characteristics,
        columns,
        "market_products",
        "instruments.characteristic_sums / instruments.differentiation",
        "list the column in products.characteristics so the market build carries it.",
    )


def _require_products(ctx: BuildContext) -> None:
    count = ctx.con.execute("select count(*) from iv_products").fetchone()
    if not count or count[0] == 0:
        raise UserError(
            "table 'market_products' has no inside product-market to build instruments for.",
            "check the product universe rules and the category filter in the config.",
        )


def _require_complete_characteristics(ctx: BuildContext) -> None:
    # A sum or distance over a missing value has no sensible default, so refuse it here.
    row = ctx.con.execute(
        "select characteristic, product, market from iv_characteristic_values "
        "where value is null order by characteristic, product, market limit 1"
    ).fetchone()
    if row is not None:
        characteristic, product, market = row
        raise UserError(
            f"characteristic {characteristic!r} is missing for product {product!r} in market "
            f"{market!r}; instruments built from it need a value for every inside product.",
            "fill it in the catalogue or drop it from instruments.characteristic_sums / "
            "instruments.differentiation.",
        )
