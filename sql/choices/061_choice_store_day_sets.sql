-- Each store-day's choice set as a sorted list: its available inside alternatives, plus the
-- outside alternative when every visit is an occasion (choices.occasions = 'all_visits'). Only
-- the store-days of the occasions this build recomputes (056: all, or those from $rebuilt_from
-- on).
create or replace table choice_store_day_sets as

with

store_days as (
    select store, day from choice_store_days
    where $every_occasion or day >= $rebuilt_from
),

inside as (
    select store, day, list(alternative order by alternative) as alternatives
    from choice_set_candidates
    group by store, day
),

final as (
    select
        store_days.store,
        store_days.day,
        list_sort(
            coalesce(inside.alternatives, [])
            || case when $occasion_mode = 'all_visits' then [$outside] else [] end
        ) as alternatives,
    from store_days
    left join inside using (store, day)
)

select store, day, alternatives from final;
