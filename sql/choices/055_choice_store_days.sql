-- Store-days with occasions, and the shelf-price snapshot each one uses: the store's latest
-- shelf-price date on or before the day, if it is less than $set_window_days days old.
-- store_day_index numbers them 1, 2, ... by store and day: 090 finds a store-day's prices at
-- that position of one list instead of joining (see 090).
create or replace table choice_store_days as

with

occasion_days as (
    select distinct store, day, period_start from choice_occasions
),

shelf_dates as (
    select distinct store, date from choice_shelf
),

snapshots as (
    select
        occasion_days.store,
        occasion_days.day,
        occasion_days.period_start,
        shelf_dates.date as shelf_date,
    from occasion_days
    asof left join shelf_dates
        on shelf_dates.store = occasion_days.store
        and occasion_days.day >= shelf_dates.date
),

final as (
    select
        snapshots.store,
        snapshots.day,
        snapshots.period_start,
        coalesce(choice_store_regions.region, '') as region,
        case
            when snapshots.day - snapshots.shelf_date < $set_window_days
                then snapshots.shelf_date
        end as snapshot_date,
        row_number() over (order by snapshots.store, snapshots.day) as store_day_index,
    from snapshots
    left join choice_store_regions using (store)
)

select store, day, period_start, region, snapshot_date, store_day_index from final;
