-- Zero-share product-markets: universe products on the shelf in a market (one that sold
-- something) where they sold nothing, whatever the zero-share policy. market_products adds them
-- as rows unless $zero_shares = 'drop'; the build counts them either way.
create or replace table market_zero_sales_slice as

with

sales as (
    select
        market,
        geography,
        period_start,
        product,
    from market_product_sales
    semi join market_slice_periods using (period_start)
    where equivalent_quantity > 0
),

availability as (
    select
        market,
        product,
        shelf_price,
    from market_availability
),

markets as (
    select distinct
        market,
        geography,
        period_start,
    from sales
),

final as (
    select
        markets.market,
        markets.geography,
        markets.period_start,
        availability.product,
        availability.shelf_price,
    from availability
    inner join markets using (market)
    anti join sales using (market, product)
)

select
    market,
    geography,
    period_start,
    product,
    shelf_price,
from final
