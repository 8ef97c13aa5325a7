-- the in-scope SKUs' key values that hold '|', which 008 joins them with into the product id
-- (when no market build mapped the SKUs): ('A|B', 'C') and ('A', 'B|C') would be one product
with

category_skus as (
    select
        cast(sku as varchar) as catalogue_sku,
        columns(lambda c: list_contains($product_keys, c))::varchar,
    from catalogue
    where not $from_market and list_contains($categories, cast(category as varchar))
),

sku_key_values as (
    from category_skus
    unpivot (key_value for key_name in (columns(* exclude (catalogue_sku))))
)

select catalogue_sku, key_name, key_value
from sku_key_values
where contains(key_value, '|')
order by catalogue_sku, list_position($product_keys, key_name)
