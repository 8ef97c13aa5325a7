-- The inside alternatives available in each store-day: the shelf-price snapshot where there is
-- one, else every alternative the store sold on one of the $set_window_days days before (earlier
-- days only, so a later purchase never changes an earlier set). Only the store-days of the
-- occasions this build recomputes (056: all, or those from $rebuilt_from on).
create or replace table choice_set_candidates as

with

store_days as (
    select store, day, snapshot_date from choice_store_days
    where $every_occasion or day >= $rebuilt_from
),

shelf_members as (
    select distinct
        store_days.store,
        store_days.day,
        choice_shelf.alternative,
    from store_days
    join choice_shelf
        on choice_shelf.store = store_days.store
        and choice_shelf.date = store_days.snapshot_date
),

sales_days as (
    select store, day from store_days where snapshot_date is null
),

store_alternatives as (
    select distinct store, alternative from choice_store_day_sales
),

sales_day_alternatives as (
    select sales_days.store, sales_days.day, store_alternatives.alternative
    from sales_days
    join store_alternatives using (store)
),

last_sales as (
    select
        sales_day_alternatives.store,
        sales_day_alternatives.day,
        sales_day_alternatives.alternative,
        choice_store_day_sales.day as last_sale_day,
    from sales_day_alternatives
    asof join choice_store_day_sales
        on choice_store_day_sales.store = sales_day_alternatives.store
        and choice_store_day_sales.alternative = sales_day_alternatives.alternative
        and sales_day_alternatives.day > choice_store_day_sales.day
),

sold_members as (
    select store, day, alternative
    from last_sales
    where day - last_sale_day <= $set_window_days
),

final as (
    select store, day, alternative, true as from_shelf from shelf_members
    union all
    select store, day, alternative, false as from_shelf from sold_members
)

select store, day, alternative, from_shelf from final;
