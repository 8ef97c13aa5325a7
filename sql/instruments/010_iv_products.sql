-- The product-markets that get instruments: every inside product of every market.
-- The composite fringe product is left out on purpose: its price and characteristics average
-- many small products, so it is neither instrumented nor counted as anyone's rival.
-- price: the transaction price, null where the product did not sell (a zero-share row kept on
-- the shelf, zero_shares = 'keep' or 'add_one', carries a shelf price in market_products): such
-- a market gives no other-market price (040), and a sale arriving there changes this row (013)
-- $keep_stored: the market build recomputed only the periods in market_slice_periods and kept
-- the rows of the others, which the stored copy (iv_stored_products) was made from, so only
-- the recomputed periods are read from market_products (periods.py, stored_inputs_hold)
create or replace table iv_products as

with

market_products_rows as (
    select
        market,
        geography,
        period_start,
        product,
        firm,
        case when not is_zero_share then price end as price,
        is_fringe,
    from market_products
    where not $keep_stored
        or period_start in (select slice.period_start from market_slice_periods as slice)
),

inside_products as (
    select
        market,
        cast(geography as varchar) as geography,
        period_start,
        product,
        -- a product without a firm is a firm of its own (every other product's rival): a null
        -- firm would make each pair with it neither same-firm nor rival (050, 051, 060)
        coalesce(cast(firm as varchar), 'no firm: ' || product) as firm,
        price,
    from market_products_rows
    where not is_fringe
),

kept_products as (
    select
        market,
        geography,
        period_start,
        product,
        firm,
        price,
    from iv_stored_products
    where $keep_stored
        and period_start not in (select slice.period_start from market_slice_periods as slice)
        -- a stored period the market tables no longer have is not brought back
        and period_start in (select market.period_start from market_products as market)
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
    union all
    select
        market,
        geography,
        period_start,
        product,
        firm,
        price,
    from kept_products
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
