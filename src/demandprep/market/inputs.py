"""Views over the optional inputs (shelf prices, the user's market-size table, the ledger).

The static SQL reads `market_input_shelf_prices`, `market_input_size_table` and
`market_input_ledger`; each is a view of the ingested table when it exists and an empty view with
the same columns when the source is not configured (or, for the ledger, when a warehouse was
filled by hand), so one SQL text serves both cases.

`market_input_sale_dates` (one row: first and last sale day, for the calendar) comes from the
ledger's first and last sale time of the current receipts files when the ledger accounts for
every stored line (their accepted counts add up to the lines, and every file with lines has its
days): one row per file, so a night does not scan every line of the history for two dates (a
table with deleted rows cannot answer min and max from its statistics). Otherwise, as in a
warehouse filled by hand or a partition's (which keeps only its stores' lines of each file), it
reads the lines.
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


SALE_DATES_FROM_LEDGER = """
create or replace temp view market_input_sale_dates as
select min(first_sold_at)::date as first_date, max(last_sold_at)::date as last_date
from market_input_ledger
where source = 'receipts' and status = 'current'
"""

SALE_DATES_FROM_LINES = """
create or replace temp view market_input_sale_dates as
select min(sold_at)::date as first_date, max(sold_at)::date as last_date
from raw_lines
"""

# true when the current receipts files' ledger rows account for every stored line
LEDGER_COVERS_LINES = """
select
    coalesce(sum(rows_accepted), 0) = (select count(*) from raw_lines)
    and count(*) filter (
        where rows_accepted > 0 and (first_sold_at is null or last_sold_at is null)
    ) = 0
from market_input_ledger
where source = 'receipts' and status = 'current'
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
    create_sale_dates_view(con)


def create_sale_dates_view(con: duckdb.DuckDBPyConnection) -> None:
    """`market_input_sale_dates` from the ledger when it accounts for every line (docstring)."""
    (from_ledger,) = con.execute(LEDGER_COVERS_LINES).fetchone()
    con.execute(SALE_DATES_FROM_LEDGER if from_ledger else SALE_DATES_FROM_LINES)
