-- The product universe: every in-scope product sold somewhere, with its total volume, its share
-- of the in-scope volume, the share of markets it sells in, its volume rank (ties broken by
-- product id) and whether it passes every keep rule: rank <= $top_n (when set),
-- volume_share >= $min_volume_share and market_presence >= $min_market_presence.
create or replace table product_universe as

with

sales as (
    select
        market,
        product,
        equivalent_quantity,
    from market_product_sales
    where equivalent_quantity > 0
),

attributes as (
    select * from market_product_attributes
),

market_count as (
    select
        count(distinct market) as markets,
    from sales
),

product_volumes as (
    select
        product,
        sum(equivalent_quantity order by market) as volume,
        count(*) as markets_sold,
    from sales
    group by product
),

category_volume as (
    select
        sum(volume order by product) as volume,
    from product_volumes
),

products_ranked as (
    select
        product_volumes.product,
        product_volumes.volume,
        product_volumes.volume / category_volume.volume as volume_share,
        product_volumes.markets_sold / market_count.markets as market_presence,
        row_number() over (order by product_volumes.volume desc, product_volumes.product) as rank,
    from product_volumes
    cross join category_volume
    cross join market_count
),

products_kept as (
    select
        *,
        ($top_n is null or rank <= $top_n)
            and volume_share >= $min_volume_share
            and market_presence >= $min_market_presence as kept,
    from products_ranked
),

final as (
    select
        products_kept.product,
        attributes.firm,
        attributes.nest,
        attributes.* exclude (product, firm, nest),
        products_kept.volume,
        products_kept.volume_share,
        products_kept.market_presence,
        products_kept.kept,
        products_kept.rank,
    from products_kept
    inner join attributes using (product)
)

-- the characteristic columns vary with the config, hence the star
select * from final
