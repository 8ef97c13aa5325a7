-- One row per product: firm, nest and the configured characteristics (with their catalogue
-- types), taken from the product's first SKU by id so the choice never depends on row order.
-- $characteristic_columns is the bound list ['sku', <characteristics>...].
create or replace table market_product_attributes as

with

skus as (
    select
        sku,
        product,
        firm,
        nest,
    from market_skus
),

sku_characteristics as (
    select
        columns($characteristic_columns),
    from catalogue
),

first_skus as (
    select
        sku,
        product,
        firm,
        nest,
    from skus
    qualify row_number() over (partition by product order by sku) = 1
),

final as (
    select
        first_skus.product,
        first_skus.firm,
        first_skus.nest,
        sku_characteristics.* exclude (sku),
    from first_skus
    inner join sku_characteristics using (sku)
)

-- the characteristic columns vary with the config, hence the star
select * from final
