"""Checks between the market build's SQL steps: stop on what cannot be right, warn on the rest.

Each check runs a small static query over a table the build just wrote; messages name the config
key, the assumption and a few of the markets or products concerned.
"""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.errors import UserError

SHOWN = 5


def _listed(names: list[str], total: int) -> str:
    shown = ", ".join(names[:SHOWN])
    return f"{shown} and {total - SHOWN} more" if total > SHOWN else shown


def check_skus(ctx: BuildContext) -> None:
    """Every in-scope category has SKUs, and every in-scope SKU converts to equivalent units."""
    con = ctx.con
    missing = [
        row[0]
        for row in con.execute(
            "select category from market_settings_categories "
            "anti join (select distinct category from market_skus) using (category) order by 1"
        ).fetchall()
    ]
    if len(missing) == len(ctx.config.markets.categories):
        raise UserError(
            "config key 'markets.categories': no catalogue SKU has category "
            f"{_listed(missing, len(missing))}.",
            "use the category values of the catalogue file.",
        )
    if missing:
        ctx.warn(
            f"markets.categories: no catalogue SKU has category {_listed(missing, len(missing))}."
        )
    bad = [
        row[0]
        for row in con.execute(
            "select sku from market_skus "
            "where equivalent_per_unit is null or equivalent_per_unit <= 0 order by sku"
        ).fetchall()
    ]
    if bad:
        unit = ctx.config.products.equivalent_unit
        raise UserError(
            f"products.equivalent_unit: {len(bad)} in-scope SKUs have no usable pack size "
            f"({unit.size_column!r} > 0) and unit ({unit.unit_column!r} in g, kg, lb, oz): "
            f"{_listed(bad, len(bad))}.",
            "fix those catalogue rows or use equivalent_unit.kind = 'item'.",
        )


# the in-scope SKUs' key values that hold the separator of the product id (020 joins them)
KEY_SEPARATOR_SQL = """
    with catalogue_rows as (
        select sku as "catalogue sku", columns(*)::varchar from catalogue
    ),
    cells as (
        from catalogue_rows
        unpivot (column_value for column_name in (columns(* exclude ("catalogue sku"))))
    )
    select cells."catalogue sku", column_name, column_value
    from cells
    join market_settings_catalogue_columns as roles using (column_name)
    where roles.role = 'key' and contains(column_value, '|')
        and cells."catalogue sku" in (select sku from market_skus)
    order by 1, roles.position
"""


def check_key_separator(ctx: BuildContext) -> None:
    """No in-scope key value holds '|': ('A|B', 'C') and ('A', 'B|C') would be one product."""
    refuse_key_separators(ctx.con.execute(KEY_SEPARATOR_SQL).fetchall())


def refuse_key_separators(found: list[tuple[str, str, str]]) -> None:
    """Stop on (sku, key column, value) rows of key values holding '|', naming a few SKUs."""
    if not found:
        return
    first = {}
    for sku, column, value in found:
        first.setdefault(sku, f"{sku} ({column} {value!r})")
    shown = list(first.values())
    raise UserError(
        f"config key 'products.keys': {len(shown)} in-scope catalogue SKUs have a key value "
        "holding '|', which joins the key values into the product id: "
        f"{_listed(shown, len(shown))}.",
        "remove the '|' from those catalogue values; two products could otherwise get one id.",
    )


def check_product_attributes(ctx: BuildContext, params: dict) -> None:
    """Warn when SKUs of one product disagree on firm, nest or a characteristic."""
    text = """
        with sku_characteristics as (select columns($characteristic_columns) from catalogue),
        sku_values as (
            select distinct market_skus.product, market_skus.firm, market_skus.nest,
                sku_characteristics.* exclude (sku)
            from market_skus inner join sku_characteristics using (sku)
        )
        select product from sku_values group by product having count(*) > 1 order by product
    """
    products = [
        row[0]
        for row in ctx.con.execute(
            text, {"characteristic_columns": params["characteristic_columns"]}
        ).fetchall()
    ]
    if products:
        ctx.warn(
            f"products: the SKUs of {len(products)} products disagree on firm, nest or a "
            f"characteristic ({_listed(products, len(products))}); each product takes the values "
            "of its first SKU by id. Hint: add the differing column to products.keys."
        )


def check_store_coverage(ctx: BuildContext) -> None:
    """Warn about sale lines of stores without a geography (they fall in no market)."""
    unplaced_stores, unplaced_lines = ctx.con.execute(
        "select count(*), coalesce(sum(sale_lines), 0) from market_store_visits "
        "anti join market_store_geographies using (store)"
    ).fetchone()
    ctx.facts.setdefault("market", {})["sale_lines_without_geography"] = int(unplaced_lines)
    if unplaced_lines:
        ctx.warn(
            f"markets.geography: {unplaced_lines} sale lines come from stores with no "
            f"{ctx.config.markets.geography!r} value in the stores table ({unplaced_stores} "
            "store-periods); they are in no market."
        )


def check_fractional_quantities(ctx: BuildContext) -> None:
    """With one pack as the unit, warn that weight-sold quantities (kg) count as units."""
    if ctx.config.products.equivalent_unit.kind != "item":
        return
    lines, skus = ctx.con.execute(
        "select coalesce(sum(fractional_lines), 0), count(distinct sku) filter "
        "(where fractional_lines > 0) from market_sku_sales"
    ).fetchone()
    if lines:
        ctx.warn(
            f"products.equivalent_unit.kind = 'item': {lines} in-scope lines of {skus} SKUs have "
            "non-integer quantities (weight-sold); each kg counts as one unit. Hint: use "
            "kind = 'weight' or leave weight-sold categories out of markets.categories."
        )


def check_net_demand(ctx: BuildContext) -> None:
    """Warn about market-products where returns exceed sales (they are left out)."""
    rows = ctx.con.execute(
        "select count(*) from market_product_sales where equivalent_quantity < 0"
    ).fetchone()[0]
    if rows:
        ctx.warn(
            f"sources.receipts.returns_in_demand: in {rows} market-products more was returned "
            "than sold; they count as not sold."
        )


def check_universe(ctx: BuildContext) -> None:
    """The universe keeps at least one product, and no kept product is called 'fringe'."""
    kept, clash = ctx.con.execute(
        "select count(*) filter (where kept), count(*) filter (where kept and product = 'fringe') "
        "from product_universe"
    ).fetchone()
    if clash and ctx.config.products.universe.rest == "fringe":
        raise UserError(
            "products.universe.rest = 'fringe': a kept product is itself called 'fringe'.",
            "rename it in the catalogue or set rest = 'outside'.",
        )
    if not kept:
        raise UserError(
            "products.universe: no product passes the keep rules (top_n, min_volume_share, "
            "min_market_presence).",
            "loosen the rules.",
        )
    ctx.facts.setdefault("market", {})["products_kept"] = int(kept)


def check_zero_sales(ctx: BuildContext) -> None:
    """Count the zero-share product-markets; warn that the 'drop' policy leaves them out."""
    count, first = ctx.con.execute(
        "select count(*), list(product || ' in ' || market order by market, product)[:$shown] "
        "from market_zero_sales",
        {"shown": SHOWN},
    ).fetchone()
    ctx.facts.setdefault("market", {})["zero_share_product_markets"] = int(count)
    if count and ctx.config.shares.zero_shares == "drop":
        ctx.warn(
            f"shares.zero_shares = 'drop': {count} product-markets on the shelf without sales "
            f"have no row in the share table ({_listed(first, count)})."
        )


def check_market_sizes(ctx: BuildContext) -> None:
    """Stop when an assumption gives no usable size for some markets, naming them."""
    rows = ctx.con.execute(
        "select assumption, method, list(market order by market), count(*) from market_sizes "
        "where market_size is null or market_size <= 0 or isnan(market_size) "
        "group by all order by assumption limit 1"
    ).fetchall()
    for assumption, method, markets, count in rows:
        raise UserError(
            f"market_size.{assumption} (method {method!r}) has no usable size for {count} "
            f"markets: {_listed(markets, count)}.",
            _size_hint(method),
        )


def _size_hint(method: str) -> str:
    return {
        "population": "give every store of those geographies a positive population.",
        "table": "add one row per geography and period start to the market-size file.",
        "visits": "those markets have no visits: no sale lines, or only receipt ids counted in "
        "an earlier period; check markets.receipt_ids_unique_per.",
    }.get(method, "check the inputs of this assumption.")


def check_outside_shares(ctx: BuildContext) -> None:
    """Stop when a market's inside quantity reaches its size; warn below the outside-share floor."""
    con = ctx.con
    too_small = con.execute(
        "select assumption, list(market order by market), count(*) from markets "
        "where inside_quantity >= market_size group by assumption order by assumption limit 1"
    ).fetchall()
    for assumption, markets, count in too_small:
        raise UserError(
            f"market_size.{assumption} is too small: in {count} markets the inside quantity "
            f"reaches the market size, leaving no outside good: {_listed(markets, count)}.",
            "raise the assumption's parameter (e.g. units_per_visit or multiple).",
        )
    floor = ctx.config.shares.outside_share_floor
    low = con.execute(
        "select assumption, count(*), min(outside_share) from markets "
        "where outside_share < $floor group by assumption order by assumption",
        {"floor": floor},
    ).fetchall()
    for assumption, count, lowest in low:
        ctx.warn(
            f"market_size.{assumption}: {count} markets have an outside share below "
            f"shares.outside_share_floor = {floor:g} (lowest {lowest:.4f})."
        )
    summary = con.execute(
        "select assumption, count(*), min(outside_share), median(outside_share) "
        "from markets group by assumption order by assumption"
    ).fetchall()
    ctx.facts.setdefault("market", {})["assumptions"] = {
        name: {"markets": int(n), "min_outside_share": lo, "median_outside_share": med}
        for name, n, lo, med in summary
    }
