-- One row per market and inside product: the kept products that sold, the composite 'fringe'
-- product of the rest when $rest = 'fringe' (with $rest = 'outside' the rest joins the outside
-- good), and, unless $zero_shares = 'drop', kept products on the shelf that did not sell
-- (market_zero_sales).
-- price = net revenue / equivalent units; a zero-sale row takes the mean shelf price instead.
create or replace table market_products_slice as

with

sales as (
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
    from market_product_sales
    semi join market_slice_periods using (period_start)
    where equivalent_quantity > 0
),

universe as (
    select
        product,
        kept,
    from product_universe
),

unsold_on_shelf as (
    select
        market,
        geography,
        period_start,
        product,
        shelf_price,
    from market_zero_sales
    semi join market_slice_periods using (period_start)
),

attributes as (
    select * from market_product_attributes
),

kept_sales as (
    select
        sales.*,
        false as is_fringe,
        false as is_zero_share,
    from sales
    inner join universe using (product)
    where universe.kept
),

fringe_sales as (
    select
        sales.market,
        sales.geography,
        sales.period_start,
        'fringe' as product,
        sum(sales.units order by sales.product) as units,
        sum(sales.equivalent_quantity order by sales.product) as equivalent_quantity,
        sum(sales.net_revenue order by sales.product) as net_revenue,
        sum(sales.gross_revenue order by sales.product) as gross_revenue,
        sum(sales.promo_units order by sales.product) as promo_units,
        true as is_fringe,
        false as is_zero_share,
    from sales
    inner join universe using (product)
    where not universe.kept and $rest = 'fringe'
    group by all
),

sold_products as (
    select * from kept_sales
    union all by name
    select * from fringe_sales
),

sold_priced as (
    select
        *,
        net_revenue / equivalent_quantity as price,
        gross_revenue / equivalent_quantity as gross_price,
        promo_units / units as promo_share,
    from sold_products
),

zero_sales as (
    select
        market,
        geography,
        period_start,
        product,
        0.0 as units,
        0.0 as equivalent_quantity,
        0.0 as net_revenue,
        0.0 as gross_revenue,
        shelf_price as price,
        shelf_price as gross_price,
        null::double as promo_share,
        false as is_fringe,
        true as is_zero_share,
    from unsold_on_shelf
    where $zero_shares <> 'drop'
),

market_rows as (
    select * exclude (promo_units) from sold_priced
    union all by name
    select * from zero_sales
),

final as (
    select
        market_rows.market,
        market_rows.geography,
        market_rows.period_start,
        market_rows.product,
        attributes.firm,
        attributes.nest,
        attributes.* exclude (product, firm, nest),
        market_rows.units,
        market_rows.equivalent_quantity,
        market_rows.net_revenue,
        market_rows.gross_revenue,
        market_rows.price,
        market_rows.gross_price,
        market_rows.promo_share,
        market_rows.is_fringe,
        market_rows.is_zero_share,
    from market_rows
    left join attributes using (product)
)

-- the characteristic columns vary with the config, hence the star
select * from final
