-- Each occasion visit's history, from the chooser's earlier occasion visits only (no look-ahead).
-- Visits are ordered by time, then visit id (their numbers, 032, follow the ids); the occasions
-- of one split visit share its history.
-- burn_in: the visit falls within $burn_in_days days of the chooser's first occasion; such
-- purchases only initialise loyalty (046) and their own loyalty is not defined.
-- loyalty_rank: number of earlier purchase visits after the burn-in window.
-- previous_alternatives: what the latest earlier purchase visit bought (062 searches it with
-- list_contains, so its order does not matter).
-- Choosers go by their number (044), the key of the tables up to 049. The chooser's first day
-- comes from a grouping (day is occasion_at's date, so the earliest occasion has the smallest
-- day), so every window below shares one ordering: one sort.
create or replace table choice_visit_history as

with

occasion_visits as (
    select
        visit_number,
        chooser,
        min(occasion_at) as occasion_at,
        min(day) as day,
        bool_or(is_purchase) as is_purchase,
        -- null for a visit without a purchase, so last_value skips it
        list(chosen_alternative) filter (where is_purchase) as purchase_alternatives,
    from choice_occasions
    group by visit_number, chooser
),

first_days as (
    select chooser, min(day) as first_day
    from occasion_visits
    group by chooser
),

chooser_firsts as (
    select first_days.chooser, first_days.first_day, choice_chooser_numbers.chooser_number,
    from first_days
    join choice_chooser_numbers using (chooser)
),

flagged as (
    select
        occasion_visits.visit_number,
        chooser_firsts.chooser_number,
        occasion_visits.occasion_at,
        occasion_visits.day,
        occasion_visits.is_purchase,
        occasion_visits.purchase_alternatives,
        occasion_visits.day < chooser_firsts.first_day + cast($burn_in_days as integer)
            as burn_in,
    from occasion_visits
    join chooser_firsts using (chooser)
),

final as (
    select
        visit_number,
        chooser_number,
        day,
        is_purchase,
        burn_in,
        coalesce(count(*) filter (where is_purchase) over earlier_visits, 0) as purchase_count,
        day - max(case when is_purchase then day end) over earlier_visits
            as days_since_last_purchase,
        last_value(purchase_alternatives ignore nulls) over earlier_visits
            as previous_alternatives,
        coalesce(
            count(*) filter (where is_purchase and not burn_in) over earlier_visits, 0
        ) as loyalty_rank,
    from flagged
    window
        earlier_visits as (
            partition by chooser_number order by occasion_at, visit_number
            rows between unbounded preceding and 1 preceding
        )
)

select
    visit_number,
    chooser_number,
    day,
    is_purchase,
    burn_in,
    purchase_count,
    days_since_last_purchase,
    previous_alternatives,
    loyalty_rank,
from final;
