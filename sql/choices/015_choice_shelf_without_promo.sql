-- Shelf-price rows as in 015_choice_shelf.sql, for a shelf file without a promo column.
create or replace table choice_shelf as

with

shelf as (
    select
        cast(store as varchar) as store,
        cast(date as date) as date,
        cast(sku as varchar) as sku,
        cast(null as boolean) as promo,
        columns(lambda c: list_contains($shelf_carried, c)),
    from shelf_prices
),

mapped as (
    select sku, alternative from choice_alternative_map where alternative is not null
),

final as (
    select
        store,
        date,
        sku,
        alternative,
        promo,
        columns(lambda c: list_contains($shelf_carried, c)),
    from shelf
    join mapped using (sku)
)

select store, date, sku, alternative, promo, columns(lambda c: list_contains($shelf_carried, c))
from final;
