-- SKU -> product for in-scope categories: the catalogue key values joined with '|', in config
-- order (the same ids as the market build's market_skus, used instead when it exists).
create or replace table choice_sku_products as

with

category_skus as (
    select
        cast(sku as varchar) as catalogue_sku,
        columns(lambda c: list_contains($product_keys, c))::varchar,
    from catalogue
    where list_contains($categories, cast(category as varchar))
),

sku_key_values as (
    from category_skus
    unpivot include nulls (key_value for key_name in (columns(* exclude (catalogue_sku))))
),

sku_products as (
    select
        catalogue_sku as sku,
        string_agg(
            coalesce(key_value, ''), '|' order by list_position($product_keys, key_name)
        ) as product,
    from sku_key_values
    group by catalogue_sku
)

select sku, product from sku_products;
