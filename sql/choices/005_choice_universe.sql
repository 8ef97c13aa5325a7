-- Products of the market build's universe and whether each is kept as an alternative of its own.
create or replace table choice_universe as

with

universe as (
    select
        cast(product as varchar) as product,
        kept,
    from product_universe
),

final as (
    select
        product,
        bool_or(kept) as kept,
    from universe
    group by product
)

select product, kept from final;
