-- SKU -> product -> alternative. Kept products are alternatives of their own; the rest become
-- the composite fringe when products.universe.rest = 'fringe', else no alternative (a purchase
-- of theirs counts as no category purchase).
create or replace table choice_alternative_map as

with

sku_products as (
    select sku, product from choice_sku_products
),

universe_size as (
    select count(*) as products from choice_universe
),

sku_kept as (
    select
        sku_products.sku,
        sku_products.product,
        -- without a market build (empty universe) every product is kept
        coalesce(choice_universe.kept, universe_size.products = 0) as kept,
    from sku_products
    cross join universe_size
    left join choice_universe using (product)
),

final as (
    select
        sku,
        product,
        kept,
        case
            when kept then product
            when $rest = 'fringe' then $fringe
        end as alternative,
    from sku_kept
)

select sku, product, kept, alternative from final;
