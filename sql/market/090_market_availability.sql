-- Which universe products were on the shelf in each market (any store of the geography, any
-- shelf-price date in the period), with their mean shelf price per equivalent unit. Read only
-- to add zero-share rows; empty when the shelf-price file is not configured.
create or replace table market_availability as

with

shelf_prices as (
    select
        store,
        date,
        sku,
        price,
    from market_input_shelf_prices
    where price is not null
),

calendar as (
    select
        date,
        period_start,
    from market_calendar
),

skus as (
    select
        sku,
        product,
        equivalent_per_unit,
    from market_skus
),

store_geographies as (
    select
        store,
        geography,
    from market_store_geographies
),

kept_products as (
    select
        product,
    from product_universe
    where kept
),

shelf_in_markets as (
    select
        store_geographies.geography || '/' || strftime(calendar.period_start, '%Y-%m-%d') as market,
        skus.product,
        shelf_prices.store,
        shelf_prices.date,
        shelf_prices.sku,
        shelf_prices.price / skus.equivalent_per_unit as shelf_price,
    from shelf_prices
    inner join skus on skus.sku = shelf_prices.sku
    inner join kept_products on kept_products.product = skus.product
    inner join store_geographies on store_geographies.store = shelf_prices.store
    inner join calendar on calendar.date = shelf_prices.date
),

final as (
    select
        market,
        product,
        -- ordered sum: the mean is the same whatever order the rows arrive in
        sum(shelf_price order by store, date, sku, shelf_price) / count(*) as shelf_price,
    from shelf_in_markets
    group by all
)

select
    market,
    product,
    shelf_price,
from final
