-- The card visits an incremental build makes again, as one row: visits_from, the first day of
-- the earliest market period a receipts file that arrived or left has a line in (null: none
-- did); the visits and occasions of earlier days are kept from the last build
-- (choice_state_visits, choice_state_occasions). A full build (choices/scope.py) writes its
-- row itself: every_visit. A visit lies within one day (receipt ids unique per store and day),
-- so the lines of earlier days are the ones the kept visits were made from. The choice sets
-- may start earlier still, where a store-day's market changed (056).
create or replace table choice_visit_scope as

with

current_files as (
    select
        file_id,
        sha256,
        cast(first_sold_at as date) as first_day,
    from ledger
    where source = 'receipts' and status = 'current' and rows_accepted > 0
),

stored_files as (
    select
        file_id,
        sha256,
        first_day,
    from choice_state_files
),

arrived_files as (
    select first_day as day
    from current_files
    anti join stored_files using (file_id, sha256)
),

departed_files as (
    select first_day as day
    from stored_files
    anti join current_files using (file_id, sha256)
),

touched_days as (
    select day from arrived_files
    union all
    select day from departed_files
),

final as (
    select
        false as every_visit,
        choice_period_start(min(day), $period, $week_start) as visits_from,
        cast(null as varchar) as full_build_reason,
    from touched_days
)

select every_visit, visits_from, full_build_reason from final;
