-- SKU -> product for in-scope categories: as the market build mapped them ($from_market, when
-- market_skus exists), else the catalogue key values joined with '|', in config order (the same
-- ids as the market build's).
create or replace table choice_sku_products as

with

market_sku_products as (
    select
        cast(sku as varchar) as sku,
        product,
    from choice_input_market_skus
    where $from_market
),

sku_key_values as (
    select catalogue_sku, key_name, key_value, from choice_sku_key_values
),

catalogue_sku_products as (
    select
        catalogue_sku as sku,
        string_agg(
            coalesce(key_value, ''), '|' order by list_position($product_keys, key_name)
        ) as product,
    from sku_key_values
    group by catalogue_sku
),

final as (
    select sku, product from market_sku_products
    union all
    select sku, product from catalogue_sku_products
)

select sku, product from final;
