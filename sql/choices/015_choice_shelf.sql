-- Shelf-price rows of category SKUs that map to an alternative, with promo and extra attributes.
-- No shelf-price file: choice_input_shelf_prices is empty and every choice set comes from the
-- products sold in the store. A file without a promo column gets one, all null.
create or replace table choice_shelf as

with

shelf_rows as (
    from choice_input_shelf_prices
    union all by name
    select null::boolean as promo where false
),

shelf as (
    select
        cast(store as varchar) as store,
        cast(date as date) as date,
        cast(sku as varchar) as sku,
        columns(lambda c: list_contains($shelf_carried, c)),
    from shelf_rows
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
        columns(lambda c: list_contains($shelf_carried, c)),
    from shelf
    join mapped using (sku)
)

select store, date, sku, alternative, columns(lambda c: list_contains($shelf_carried, c))
from final;
