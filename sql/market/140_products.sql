-- One row per product id of the build: every product of the universe (kept or not) and, with
-- $rest = 'fringe', the composite 'fringe'. Each product-key part is its own column, named
-- after products.keys and holding the text the id is made of (the id is those parts joined
-- with '|'), then firm, nest, the characteristics that are not key parts (catalogue types, from
-- the product's first SKU, as in the share table) and the SKUs the product gathers.
-- $product_keys: the bound list products.keys; $product_characteristics: ['product', the
-- characteristics that are not keys] and $product_owners: ['product', 'firm', 'nest' less any
-- key of that name] ('product' first: DuckDB refuses an empty COLUMNS list).
create or replace table products as

with

skus as (
    select
        sku,
        product,
    from market_skus
),

universe as (
    select
        product,
        kept,
    from product_universe
),

owners as (
    select
        columns($product_owners),
    from product_universe
),

key_parts as (
    select
        sku as "catalogue sku",
        -- the same text as the id's parts (sql/market/020: values as varchar, '' for null)
        coalesce(columns($product_keys)::varchar, ''),
    from catalogue
),

characteristics as (
    select
        columns($product_characteristics),
    from market_product_attributes
),

first_skus as (
    select
        product,
        sku,
    from skus
    qualify row_number() over (partition by product order by sku) = 1
),

product_skus as (
    select
        skus.product,
        count(*) as sku_count,
        list(skus.sku order by skus.sku) as skus,
    from skus
    inner join universe using (product)
    group by skus.product
),

fringe_skus as (
    select
        'fringe' as product,
        count(*) as sku_count,
        list(skus.sku order by skus.sku) as skus,
    from skus
    inner join universe using (product)
    where not universe.kept and $rest = 'fringe'
    having count(*) > 0
),

universe_products as (
    select
        universe.product,
        replace(universe.product, '|', ' ') as display_name,
        key_parts.* exclude ("catalogue sku"),
        owners.* exclude (product),
        characteristics.* exclude (product),
        product_skus.sku_count,
        product_skus.skus,
        universe.kept,
        false as is_fringe,
    from universe
    inner join first_skus using (product)
    inner join key_parts on key_parts."catalogue sku" = first_skus.sku
    inner join product_skus using (product)
    inner join owners using (product)
    left join characteristics using (product)
),

fringe_product as (
    select
        product,
        'other products (fringe)' as display_name,
        sku_count,
        skus,
        false as kept,
        true as is_fringe,
    from fringe_skus
),

final as (
    select * from universe_products
    union all by name
    select * from fringe_product
)

-- the key and characteristic columns vary with the config, hence the star
select * from final
