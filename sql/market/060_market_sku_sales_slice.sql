-- Demand per geography, period and in-scope SKU, summed exactly as decimals so the totals do
-- not depend on the order threads add them. Demand lines: sales, voids (a void cancels a scan
-- of the same visit and carries negative quantities) and, when $returns_in_demand, returns
-- (negative too, so they are netted). Values are signed as ingested.
-- Only the periods in this build's ranges (market_build_ranges) are summed here, reading the
-- lines sold from $scan_from to before $scan_until; the stage merges these rows into the stored
-- summary market_sku_sales.
create or replace table market_sku_sales_slice as

with

lines as (
    select
        store,
        sold_at,
        sku,
        quantity,
        amount,
        discount,
        line_kind,
    from raw_lines
    where sold_at >= $scan_from and sold_at < $scan_until
),

build_ranges as (
    select
        first_period,
        last_period,
    from market_build_ranges
    where summary = 'market_sku_sales'
),

calendar as (
    select
        market_calendar.date,
        market_calendar.period_start,
    from market_calendar
    semi join build_ranges
        on market_calendar.period_start between build_ranges.first_period
        and build_ranges.last_period
),

skus as (
    select
        sku,
        product,
    from market_skus
),

store_geographies as (
    select
        store,
        geography,
    from market_store_geographies
),

demand_lines as (
    select
        store,
        sold_at,
        sku,
        quantity,
        amount,
        discount,
    from lines
    where line_kind in ('sale', 'void')
        or (line_kind = 'return' and $returns_in_demand)
),

lines_in_markets as (
    select
        store_geographies.geography,
        calendar.period_start,
        skus.product,
        demand_lines.sku,
        demand_lines.quantity::decimal(18, 6) as quantity,
        demand_lines.amount::decimal(18, 6) as amount,
        demand_lines.discount::decimal(18, 6) as discount,
        demand_lines.quantity <> round(demand_lines.quantity) as is_fractional,
    from demand_lines
    inner join skus on skus.sku = demand_lines.sku
    inner join store_geographies on store_geographies.store = demand_lines.store
    inner join calendar on calendar.date = demand_lines.sold_at::date
),

final as (
    select
        geography,
        period_start,
        product,
        sku,
        sum(quantity) as units,
        sum(amount) as gross_revenue,
        sum(amount - discount) as net_revenue,
        coalesce(sum(quantity) filter (where discount <> 0), 0) as promo_units,
        count(*) as lines,
        count(*) filter (where is_fractional) as fractional_lines,
    from lines_in_markets
    group by all
)

select
    geography,
    period_start,
    product,
    sku,
    units,
    gross_revenue,
    net_revenue,
    promo_units,
    lines,
    fractional_lines,
from final
