-- Demand per market and product (every in-scope product, before the universe rules), in
-- units sold and in equivalent units. Decimal sums are exact; the one floating-point sum
-- (equivalent units over a product's SKUs) runs in SKU order so it is the same every run.
create or replace table market_product_sales_slice as

with

sku_sales as (
    select
        geography,
        period_start,
        product,
        sku,
        units,
        gross_revenue,
        net_revenue,
        promo_units,
    from market_sku_sales
    semi join market_slice_periods using (period_start)
),

skus as (
    select
        sku,
        equivalent_per_unit,
    from market_skus
),

sku_sales_converted as (
    select
        sku_sales.*,
        sku_sales.units::double * skus.equivalent_per_unit as equivalent_quantity,
    from sku_sales
    inner join skus using (sku)
),

final as (
    select
        geography || '/' || strftime(period_start, '%Y-%m-%d') as market,
        geography,
        period_start,
        product,
        sum(units)::double as units,
        sum(equivalent_quantity order by sku) as equivalent_quantity,
        sum(net_revenue)::double as net_revenue,
        sum(gross_revenue)::double as gross_revenue,
        sum(promo_units)::double as promo_units,
    from sku_sales_converted
    group by all
)

select
    market,
    geography,
    period_start,
    product,
    units,
    equivalent_quantity,
    net_revenue,
    gross_revenue,
    promo_units,
from final
