-- The instruments of every inside product-market of the periods the build assembles
-- (`assembly_periods`), one row each: market, product, then the iv_ columns of the configured
-- families (the set depends on the config, hence the stars). Merged into `instruments`
-- (instruments/kept_assembly.py).
create or replace table instruments_slice as

with

products as (
    select
        market,
        product,
    from iv_products
    semi join assembly_periods using (period_start)
),

final as (
    select
        products.market,
        products.product,
        values_wide.* exclude (market, product),
        flags_wide.* exclude (market, product),
    from products
    left join iv_values_wide as values_wide using (market, product)
    left join iv_flags_wide as flags_wide using (market, product)
)

select * from final
order by market, product
