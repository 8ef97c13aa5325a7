"""The market-level build: receipt lines to the share table, one static SQL file per step.

Stages, in order; each runs sql/market/<NNN>_<table>.sql, which writes the table it is named
for, then the table's pandera model (demandprep.schemas.market) guards it:

  market_settings            check config columns against the warehouse, write settings tables
  market_calendar            010  date -> period start, days in period
  market_skus                020  in-scope SKU -> product, firm, nest, equivalent units per unit
  market_product_attributes  030  product -> firm, nest, characteristics (from its first SKU)
  market_store_geographies   040  store -> geography
  market_build_periods       042  each receipts file's first and last period
                             045  the period ranges this build recomputes (market/summaries.py)
  market_store_visits        050  visits per store and period (all categories): this build's
                                  periods into market_store_visits_slice, merged into the
                                  stored summary
  market_sku_sales           060  exact (decimal) demand sums per geography, period and SKU,
                                  likewise (market_sku_sales_slice)
  market_product_sales       070  demand per market and product (*)
  product_universe           080  keep rules: top N, volume share, market presence
  market_availability        090  universe products on the shelf (for zero shares; kept as
                                  stored while the per-market tables are sliced)
  market_zero_sales          095  zero-share product-markets (on the shelf, no sales), any
                                  policy (*)
  market_products            100  inside products per market: kept, fringe, zero-sale rows (*)
  market_sizes               105  each geography's peak volume (106: did a kept size's move?)
                             110  every assumption's size per market, side by side (*)
  markets                    120  size, inside quantity, outside share (stops when s_0 <= 0) (*)
  shares                     130  the share table, long over assumptions (*)
  products                   140  one row per product id: key parts, firm, nest, SKUs gathered
  market_geography_levels    150  stores columns holding one value per geography
  geographies                160  one row per geography with those levels and its store count

(*) per-market tables kept between builds: the SQL writes `<table>_slice` for this build's
periods and market/slices.py merges it (every period when it cannot slice).

Choices made here, so that they are written down once:
- demand lines are sales and voids (a void cancels a re-scan of the same visit and carries
  negative quantities, so leaving it out would count the re-scan); returns join only when
  sources.receipts.returns_in_demand; a market-product with net demand <= 0 counts as not sold;
- with equivalent_unit.kind = 'item', a weight-sold line's kg count as units (with a warning);
- the fringe product has no firm, nest or characteristics (nulls); its price is its revenue
  over its equivalent units;
- zero-sale rows exist only where the shelf-price file shows the product in the market; their
  price is the mean shelf price per equivalent unit and promo_share is null; they are counted
  (facts, and a warning when zero_shares = 'drop' leaves them out) whatever the policy;
- zero_shares = 'add_one' uses s_j = (q_j + 1) / (M + J + 1) and s_0 = (M - Q + 1) / (M + J + 1)
  in every market (J inside products, Q their total), a Laplace-type rule after Gandhi, Lu &
  Shi, recalled from memory and not checked against the paper;
- products and geographies are lookup tables for joins: a product's key parts hold the text its
  id is made of (so joining them with '|' gives the id back), and a geography carries every
  stores column that has one value in it (a null counts as a value);
- sums that could depend on thread order are exact decimals or ordered sums, so a rebuild gives
  identical tables.
"""

from __future__ import annotations

from collections.abc import Callable

from demandprep.context import BuildContext
from demandprep.market import checks, slices, summaries
from demandprep.market.inputs import create_input_views
from demandprep.market.settings import check_inputs, market_params, table_columns, write_settings
from demandprep.schemas.market import MARKET_MODELS
from demandprep.sqlfiles import run_sql
from demandprep.stage import Stage, run_stage
from demandprep.validate import validate_table

SQL_FILES: dict[str, str] = {
    "market_calendar": "market/010_market_calendar.sql",
    "market_skus": "market/020_market_skus.sql",
    "market_product_attributes": "market/030_market_product_attributes.sql",
    "market_store_geographies": "market/040_market_store_geographies.sql",
    "market_store_visits": "market/050_market_store_visits_slice.sql",
    "market_sku_sales": "market/060_market_sku_sales_slice.sql",
    "market_product_sales": "market/070_market_product_sales.sql",
    "product_universe": "market/080_product_universe.sql",
    "market_availability": "market/090_market_availability.sql",
    "market_zero_sales": "market/095_market_zero_sales.sql",
    "market_products": "market/100_market_products.sql",
    "market_sizes": "market/110_market_sizes.sql",
    "markets": "market/120_markets.sql",
    "shares": "market/130_shares.sql",
    "products": "market/140_products.sql",
    "market_geography_levels": "market/150_market_geography_levels.sql",
    "geographies": "market/160_geographies.sql",
}
# Columns of the geographies table that a stores column may not bring in a second time.
GEOGRAPHY_TABLE_COLUMNS = ("store", "geography", "store_count")


Check = Callable[[BuildContext], None]


def build_table(ctx: BuildContext, table: str, checks_first: tuple[Check, ...] = ()) -> int:
    """Run the SQL file that writes `table`, run `checks_first`, validate; returns its rows."""
    run_sql(ctx.con, SQL_FILES[table], market_params(ctx.config))
    for check in checks_first:
        check(ctx)
    return validate_table(ctx.con, table, MARKET_MODELS[table])


def settings_stage(ctx: BuildContext) -> None:
    """Check the config's columns against the warehouse and write the settings tables."""
    check_inputs(ctx.con, ctx.config)
    write_settings(ctx.con, ctx.config)
    create_input_views(ctx.con)


def _table_stage(table: str, *after: Check, first: tuple[Check, ...] = ()) -> Check:
    def run(ctx: BuildContext) -> None:
        rows = build_table(ctx, table, first)
        ctx.facts.setdefault("market", {}).setdefault("rows", {})[table] = rows
        for check in after:
            check(ctx)

    run.__name__ = f"build_{table}"
    run.__doc__ = f"Build and validate the {table} table."
    return run


def _summary_stage(table: str, *after: Check) -> Check:
    def run(ctx: BuildContext) -> None:
        params = market_params(ctx.config) | summaries.scan_params(ctx.con, table)
        run_sql(ctx.con, SQL_FILES[table], params)
        rows = summaries.store_summary(ctx, table, MARKET_MODELS[table])
        ctx.facts.setdefault("market", {}).setdefault("rows", {})[table] = rows
        for check in after:
            check(ctx)

    run.__name__ = f"build_{table}"
    run.__doc__ = f"Recompute this build's periods of the {table} summary and store them."
    return run


def _sliced_stage(
    table: str, *after: Check, first: tuple[Check, ...] = (), prepare: Check | None = None
) -> Check:
    def run(ctx: BuildContext) -> None:
        if prepare is not None:
            prepare(ctx)
        slices.prepare_slice(ctx)
        run_sql(ctx.con, SQL_FILES[table], market_params(ctx.config))
        recomputed = slices.merge_slice(ctx, table)
        for check in first:
            check(ctx)
        rows = slices.validate_merged(ctx, table, recomputed, MARKET_MODELS[table])
        ctx.facts.setdefault("market", {}).setdefault("rows", {})[table] = rows
        for check in after:
            check(ctx)

    run.__name__ = f"build_{table}"
    run.__doc__ = f"Recompute this build's periods of the {table} table and store them."
    return run


def _store_slice_state(ctx: BuildContext) -> None:
    # after the last sliced table (shares): every one is stored now
    slices.store_slice_state(ctx)


def plan_periods(ctx: BuildContext) -> None:
    """Which periods the summaries and the per-market tables recompute."""
    summaries.plan_build_periods(ctx)
    slices.plan_slices(ctx)


def build_universe(ctx: BuildContext) -> None:
    """Build and validate the product universe; kept products that changed make the
    per-market tables after it recompute every period."""
    stored = slices.kept_products(ctx.con)
    _table_stage("product_universe", checks.check_universe)(ctx)
    slices.note_universe(ctx, stored)


def build_availability(ctx: BuildContext) -> None:
    """Build and validate the shelf availability, unless the stored one still holds."""
    if not slices.availability_holds(ctx):
        _table_stage("market_availability")(ctx)
        return
    rows = ctx.con.execute("select count(*) from market_availability").fetchone()[0]
    ctx.facts.setdefault("market", {}).setdefault("rows", {})["market_availability"] = rows


def _check_attributes(ctx: BuildContext) -> None:
    checks.check_product_attributes(ctx, market_params(ctx.config))


def _check_characteristics(ctx: BuildContext) -> None:
    # the SQL carries characteristics by star; make sure each configured one arrived
    columns = [row[0] for row in ctx.con.execute("describe shares").fetchall()]
    missing = [c for c in ctx.config.products.characteristics if c not in columns]
    if missing:
        raise AssertionError(f"shares lost characteristic columns {missing}")


def geography_levels(ctx: BuildContext) -> list[str]:
    """The stores columns with one value per geography, in stores order (not the geography)."""
    rows = ctx.con.execute("select column_name from market_geography_levels").fetchall()
    found = {row[0] for row in rows}
    skipped = {*GEOGRAPHY_TABLE_COLUMNS, ctx.config.markets.geography}
    return [c for c in table_columns(ctx.con, "stores") if c in found and c not in skipped]


def build_geographies(ctx: BuildContext) -> None:
    """Build and validate the geographies table from the level columns found before."""
    run_sql(ctx.con, SQL_FILES["geographies"], {"level_columns": ["store", *geography_levels(ctx)]})
    rows = validate_table(ctx.con, "geographies", MARKET_MODELS["geographies"])
    ctx.facts.setdefault("market", {}).setdefault("rows", {})["geographies"] = rows


MARKET_STAGES: tuple[Stage, ...] = (
    Stage("market_settings", settings_stage),
    Stage("market_calendar", _table_stage("market_calendar")),
    Stage(
        "market_skus", _table_stage("market_skus", checks.check_skus, checks.check_key_separator)
    ),
    Stage(
        "market_product_attributes", _table_stage("market_product_attributes", _check_attributes)
    ),
    Stage("market_store_geographies", _table_stage("market_store_geographies")),
    Stage("market_build_periods", plan_periods),
    Stage(
        "market_store_visits", _summary_stage("market_store_visits", checks.check_store_coverage)
    ),
    Stage(
        "market_sku_sales", _summary_stage("market_sku_sales", checks.check_fractional_quantities)
    ),
    Stage("market_product_sales", _sliced_stage("market_product_sales", checks.check_net_demand)),
    Stage("product_universe", build_universe),
    Stage("market_availability", build_availability),
    Stage("market_zero_sales", _sliced_stage("market_zero_sales", checks.check_zero_sales)),
    Stage("market_products", _sliced_stage("market_products")),
    Stage(
        "market_sizes",
        _sliced_stage("market_sizes", checks.check_market_sizes, prepare=slices.plan_peak_volumes),
    ),
    # the outside-share check names the markets; it runs before the schema's generic check
    Stage("markets", _sliced_stage("markets", first=(checks.check_outside_shares,))),
    Stage("shares", _sliced_stage("shares", _check_characteristics, _store_slice_state)),
    Stage("products", _table_stage("products")),
    Stage("market_geography_levels", _table_stage("market_geography_levels")),
    Stage("geographies", build_geographies),
)


def run_market_stages(ctx: BuildContext) -> None:
    """Run every market stage in order (what tests and benchmarks call directly)."""
    for stage in MARKET_STAGES:
        run_stage(stage, ctx)
