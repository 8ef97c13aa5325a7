"""Views over the optional inputs (shelf prices, the user's market-size table, the ledger).

The static SQL reads `market_input_shelf_prices`, `market_input_size_table` and
`market_input_ledger`; each is a view of the ingested table when it exists and an empty view with
the same columns when the source is not configured (or, for the ledger, when a warehouse was
filled by hand), so one SQL text serves both cases.
"""

from __future__ import annotations

import duckdb

from demandprep.market.settings import table_columns

SHELF_PRICES_VIEW = """
create or replace view market_input_shelf_prices as
select store::varchar as store, date::date as date, sku::varchar as sku, price::double as price
from shelf_prices
"""

EMPTY_SHELF_PRICES_VIEW = """
create or replace view market_input_shelf_prices as
select null::varchar as store, null::date as date, null::varchar as sku, null::double as price
where false
"""

SIZE_TABLE_VIEW = """
create or replace view market_input_size_table as
select geography::varchar as geography, period::date as period, size::double as size
from market_size_table
"""

EMPTY_SIZE_TABLE_VIEW = """
create or replace view market_input_size_table as
select null::varchar as geography, null::date as period, null::double as size
where false
"""


LEDGER_VIEW = """
create or replace view market_input_ledger as
select file_id, source, path, sha256, status, rows_accepted, first_sold_at, last_sold_at
from ledger
"""

EMPTY_LEDGER_VIEW = """
create or replace view market_input_ledger as
select
    null::varchar as file_id, null::varchar as source, null::varchar as path,
    null::varchar as sha256, null::varchar as status, null::bigint as rows_accepted,
    null::timestamp as first_sold_at, null::timestamp as last_sold_at
where false
"""


def has_ledger(con: duckdb.DuckDBPyConnection) -> bool:
    """True when the warehouse has the ingest's ledger (hand-filled test warehouses may not)."""
    return bool(table_columns(con, "ledger"))


def create_input_views(con: duckdb.DuckDBPyConnection) -> None:
    """Create the optional-input views, empty when their table is absent."""
    has_shelf = bool(table_columns(con, "shelf_prices"))
    con.execute(SHELF_PRICES_VIEW if has_shelf else EMPTY_SHELF_PRICES_VIEW)
    has_sizes = bool(table_columns(con, "market_size_table"))
    con.execute(SIZE_TABLE_VIEW if has_sizes else EMPTY_SIZE_TABLE_VIEW)
    con.execute(LEDGER_VIEW if has_ledger(con) else EMPTY_LEDGER_VIEW)
