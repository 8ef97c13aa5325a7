-- the product-key values of each in-scope catalogue SKU, one row per key (none when the market
-- build mapped the SKUs, $from_market): 008 joins them into the product id, 009 looks in them
-- for the separator
create or replace table choice_sku_key_values as

with

category_skus as (
    select
        cast(sku as varchar) as catalogue_sku,
        columns(lambda c: list_contains($product_keys, c))::varchar,
    from catalogue
    where not $from_market and list_contains($categories, cast(category as varchar))
)

from category_skus
unpivot include nulls (key_value for key_name in (columns(* exclude (catalogue_sku))))
