-- Price, promo flag and shelf attributes of each alternative in each store-day it is offered,
-- from the first source that has a price:
--   shelf                 the shelf-price snapshot (mean over the alternative's SKUs);
--   store_period_median   median net unit price paid in the store and market period;
--   store_last_observed   median net unit price on the store's last day with a sale of it,
--                         if at most $price_window_days days before;
--   region_period_median  median net unit price paid in the store's region and period;
--   missing               none of these (price null).
-- promo: the shelf flag where the file has one, else whether at least half of the lines the
-- price came from carried a discount (false when the price came from no line).
-- Only the store-days of the occasions this build recomputes (056: all, or those from
-- $rebuilt_from on): a price reads other days, but no price reads another store-day's price.
create or replace table choice_alternative_prices as

with

keys as (
    select store, day, alternative from choice_set_candidates
    where $every_occasion or day >= $rebuilt_from
    union
    select store, day, chosen_alternative as alternative
    from choice_occasion_sets
    where chosen_added
),

keyed_days as (
    select
        keys.store,
        keys.day,
        keys.alternative,
        choice_store_days.period_start,
        choice_store_days.region,
        choice_store_days.snapshot_date,
    from keys
    join choice_store_days using (store, day)
),

shelf_rows as (
    select
        keyed_days.store,
        keyed_days.day,
        keyed_days.alternative,
        choice_shelf.price as shelf_price,
        columns(lambda c: list_contains($shelf_attributes, c)),
    from keyed_days
    join choice_shelf
        on choice_shelf.store = keyed_days.store
        and choice_shelf.date = keyed_days.snapshot_date
        and choice_shelf.alternative = keyed_days.alternative
),

shelf as (
    select
        store,
        day,
        alternative,
        avg(shelf_price) as shelf_price,
        max(columns(lambda c: list_contains($shelf_attributes, c))),
    from shelf_rows
    group by store, day, alternative
),

last_observed as (
    select
        keyed_days.store,
        keyed_days.day,
        keyed_days.alternative,
        choice_store_day_sales.unit_price,
        choice_store_day_sales.discount_share,
        keyed_days.day - choice_store_day_sales.day as days_old,
    from keyed_days
    asof join choice_store_day_sales
        on choice_store_day_sales.store = keyed_days.store
        and choice_store_day_sales.alternative = keyed_days.alternative
        and keyed_days.day >= choice_store_day_sales.day
),

sourced as (
    select
        keyed_days.store,
        keyed_days.day,
        keyed_days.alternative,
        shelf.shelf_price,
        store_period.unit_price as store_period_price,
        store_period.discount_share as store_period_discount_share,
        case
            when last_observed.days_old <= $price_window_days then last_observed.unit_price
        end as last_observed_price,
        last_observed.discount_share as last_observed_discount_share,
        region_period.unit_price as region_period_price,
        region_period.discount_share as region_period_discount_share,
        columns(lambda c: list_contains($shelf_attributes, c)),
    from keyed_days
    left join shelf using (store, day, alternative)
    left join choice_store_period_prices as store_period
        on store_period.store = keyed_days.store
        and store_period.period_start = keyed_days.period_start
        and store_period.alternative = keyed_days.alternative
    left join last_observed using (store, day, alternative)
    left join choice_region_period_prices as region_period
        on region_period.region = keyed_days.region
        and region_period.period_start = keyed_days.period_start
        and region_period.alternative = keyed_days.alternative
),

priced as (
    select
        *,
        case
            when shelf_price is not null then 'shelf'
            when store_period_price is not null then 'store_period_median'
            when last_observed_price is not null then 'store_last_observed'
            when region_period_price is not null then 'region_period_median'
            else 'missing'
        end as price_source,
    from sourced
),

final as (
    select
        * replace (
            case price_source
                when 'shelf' then coalesce(promo, store_period_discount_share >= 0.5, false)
                when 'store_period_median' then store_period_discount_share >= 0.5
                when 'store_last_observed' then last_observed_discount_share >= 0.5
                when 'region_period_median' then region_period_discount_share >= 0.5
            end as promo
        ),
        coalesce(shelf_price, store_period_price, last_observed_price, region_period_price)
            as price,
    from priced
)

-- store, day, alternative, price, price_source, promo and the shelf file's extra columns
select columns(lambda c: list_contains($price_columns, c)) from final;
