"""Views over the choice build's optional input tables, so each step has one SQL file.

The static SQL of `sql/choices/` reads `choice_input_<table>`: a view of the warehouse table when
it exists, else an empty view with the columns the steps read (households and shelf prices not
configured, no market build). Optional columns of a present table (shelf promo, store region)
are added by the step itself with `union all by name`. The views are TEMP: they die with the
connection and never shadow a warehouse table.
"""

from __future__ import annotations

import duckdb

from demandprep.choices.settings import table_columns

# our table -> an empty relation with the columns the steps read when the table is absent
EMPTY_INPUTS = {
    "households": "select null::varchar as card where false",
    "shelf_prices": (
        "select null::varchar as store, null::date as date, null::varchar as sku, "
        "null::double as price, null::boolean as promo where false"
    ),
    "product_universe": "select null::varchar as product, null::boolean as kept where false",
    "market_skus": "select null::varchar as sku, null::varchar as product where false",
    "market_store_geographies": (
        "select null::varchar as store, null::varchar as geography where false"
    ),
    "markets": (
        "select null::varchar as market, null::varchar as geography, null::date as period_start "
        "where false"
    ),
}
INPUT_VIEWS = tuple(f"choice_input_{table}" for table in EMPTY_INPUTS)


# Tables of the market build: read as empty in a choice-only project, even when left from before.
MARKET_INPUTS = ("product_universe", "market_skus", "market_store_geographies", "markets")


def create_input_views(con: duckdb.DuckDBPyConnection, market_build: bool = True) -> None:
    """Create `choice_input_<table>` for each optional input, empty when the table is absent."""
    # the table names are our own constants above, never config text
    for table, empty in EMPTY_INPUTS.items():
        present = table_columns(con, table) is not None
        if table in MARKET_INPUTS and not market_build:
            present = False
        source = f"select * from {table}" if present else empty  # noqa: S608
        con.execute(f"create or replace temp view choice_input_{table} as {source}")


def drop_input_views(con: duckdb.DuckDBPyConnection) -> None:
    """Drop the TEMP input views."""
    for view in INPUT_VIEWS:
        con.execute(f"drop view if exists temp.main.{view}")
