-- SKU -> product for in-scope categories, as the market build mapped them.
create or replace table choice_sku_products as

with

final as (
    select
        cast(sku as varchar) as sku,
        product,
    from market_skus
)

select sku, product from final;
