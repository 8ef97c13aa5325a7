-- Visits per store and period: distinct receipts with at least one sale line, whatever the
-- category, and the sale lines counted. (Lines of SKUs missing from the catalogue are
-- quarantined by the ingest, so every line here has a category.)
create or replace table market_store_visits as

with

sale_lines as (
    select
        store,
        receipt,
        sold_at,
    from raw_lines
    where line_kind = 'sale'
),

calendar as (
    select
        date,
        period_start,
    from market_calendar
),

lines_in_periods as (
    select
        sale_lines.store,
        calendar.period_start,
        sale_lines.receipt,
    from sale_lines
    inner join calendar on calendar.date = sale_lines.sold_at::date
),

final as (
    select
        store,
        period_start,
        count(distinct receipt) as visits,
        count(*) as sale_lines,
    from lines_in_periods
    group by all
)

select
    store,
    period_start,
    visits,
    sale_lines,
from final
