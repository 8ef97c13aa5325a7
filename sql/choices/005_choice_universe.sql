-- Products of the market build's universe and whether each is kept as an alternative of its own.
-- Without a market build choice_input_product_universe is empty, which 010 reads as "every
-- category product is kept".
create or replace table choice_universe as

with

universe as (
    select
        cast(product as varchar) as product,
        kept,
    from choice_input_product_universe
),

final as (
    select
        product,
        bool_or(kept) as kept,
    from universe
    group by product
)

select product, kept from final;
