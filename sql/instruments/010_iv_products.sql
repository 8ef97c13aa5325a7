-- The product-markets that get instruments: every inside product of every market.
-- The composite fringe product is left out on purpose: its price and characteristics average
-- many small products, so it is neither instrumented nor counted as anyone's rival.
create or replace table iv_products as

with

market_products_rows as (
    select
        market,
        geography,
        period_start,
        product,
        firm,
        price,
        is_fringe,
    from market_products
),

inside_products as (
    select
        market,
        cast(geography as varchar) as geography,
        period_start,
        product,
        cast(firm as varchar) as firm,
        price,
    from market_products_rows
    where not is_fringe
),

final as (
    select
        market,
        geography,
        period_start,
        product,
        firm,
        price,
    from inside_products
)

select
    market,
    geography,
    period_start,
    product,
    firm,
    price,
from final
order by market, product
