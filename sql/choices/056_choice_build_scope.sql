-- Which occasions an incremental build recomputes, as one row: rebuilt_from, the first day of
-- the earliest market period whose rows may have changed (null: none did). Rows of earlier
-- occasions are kept from the last build. (A full build, choices/scope.py, writes its row
-- itself: every_occasion.)
-- A period may have changed when a receipts file with a line in it arrived or left (the first
-- day of the visits made again, 028) or when a store-day's market changed (the market build
-- decides those). Everything later may change with it: store-period prices cover the whole
-- period, choice sets and last observed prices read earlier days, a history earlier
-- occasions; nothing reads a later day, so earlier periods hold.
create or replace table choice_build_scope as

with

current_markets as (
    select store, day, market
    from choice_store_day_markets
),

stored_markets as (
    select store, day, market
    from choice_state_store_day_markets
),

changed_markets as (
    select day from (select * from current_markets except select * from stored_markets)
    union all
    select day from (select * from stored_markets except select * from current_markets)
),

touched_days as (
    select visits_from as day from choice_visit_scope
    union all
    select day from changed_markets
),

final as (
    select
        false as every_occasion,
        choice_period_start(min(day), $period, $week_start) as rebuilt_from,
    from touched_days
)

select every_occasion, rebuilt_from from final;
