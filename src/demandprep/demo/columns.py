"""Column names of every file the demo world writes. They are the *source's* names and differ on
purpose from the pipeline's own (ticket_no vs receipt, shop_id vs store...), so the config's
column mapping is exercised."""

SOURCE_COLUMNS: dict[str, tuple[str, ...]] = {
    "receipts": (
        "ticket_no",
        "row_no",
        "shop_id",
        "scanned_at",
        "item_code",
        "qty",
        "line_value",
        "loyalty_card",
        "discount_value",
        "line_type",
    ),
    "catalogue": (
        "item_code",
        "item_name",
        "category",
        "roaster",
        "firm",
        "format",
        "pack_size",
        "pack_unit",
        "pack_grams",
        "roast_level",
        "organic",
    ),
    "stores": (
        "shop_id",
        "shop_name",
        "region",
        "chain",
        "catchment_population",
        "opened_on",
        "timezone",
    ),
    "households": ("loyalty_card", "household_size", "income_band", "home_shop"),
    "shelf_prices": ("shop_id", "week_start", "item_code", "shelf_price", "on_promo"),
    "market_sizes": ("area", "period_start", "potential_units"),
    "cost_shifters": ("week_start", "firm", "green_coffee_index"),
    # not a source for the pipeline: the true demand shock of each product, store and week
    "truth_shocks": ("shop_id", "week_start", "roaster", "format", "pack_grams", "xi"),
}

# file name of each table written at the top of the world folder (receipts are daily files)
TABLE_FILES: dict[str, str] = {
    "catalogue": "catalogue.csv",
    "stores": "stores.csv",
    "households": "households.csv",
    "shelf_prices": "shelf_prices.csv",
    "market_sizes": "market_sizes.csv",
    "cost_shifters": "cost_shifters.csv",
    "truth_shocks": "truth_shocks.csv",
}
