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
-- Made for the visits from $visits_from on (every visit when $every_visit, none when neither
-- holds): the history of earlier visits is kept (043), and it is all a later visit needs of
-- them, since days never fall in visit order: the chooser's first day, its purchases so far
-- (after the burn-in too) and its latest purchase, when and what (a full build keeps none).
insert into choice_visit_history

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
    where $every_visit or day >= $visits_from
    group by visit_number, chooser
),

-- what the kept history holds of each chooser's earlier visits
kept as (
    select
        chooser_number,
        min(day) as first_day,
        count(*) filter (where is_purchase) as purchases,
        count(*) filter (where is_purchase and not burn_in) as loyal_purchases,
        max(day) filter (where is_purchase) as last_purchase_day,
        -- a purchase visit's purchase_count is its place among the chooser's purchases
        arg_max(purchase_alternatives, purchase_count) filter (where is_purchase)
            as last_purchase_alternatives,
    from choice_visit_history
    group by chooser_number
),

first_days as (
    select chooser, min(day) as first_day
    from occasion_visits
    group by chooser
),

chooser_firsts as (
    select
        first_days.chooser,
        coalesce(kept.first_day, first_days.first_day) as first_day,
        choice_chooser_numbers.chooser_number,
    from first_days
    join choice_chooser_numbers on choice_chooser_numbers.chooser = first_days.chooser
    left join kept on kept.chooser_number = choice_chooser_numbers.chooser_number
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

-- over the visits made here; the kept ones come before all of them
windowed as (
    select
        *,
        coalesce(count(*) filter (where is_purchase) over earlier_visits, 0) as new_purchases,
        max(case when is_purchase then day end) over earlier_visits as new_last_purchase_day,
        last_value(purchase_alternatives ignore nulls) over earlier_visits
            as new_previous_alternatives,
        coalesce(
            count(*) filter (where is_purchase and not burn_in) over earlier_visits, 0
        ) as new_loyal_purchases,
    from flagged
    window
        earlier_visits as (
            partition by chooser_number order by occasion_at, visit_number
            rows between unbounded preceding and 1 preceding
        )
),

final as (
    select
        windowed.visit_number,
        windowed.chooser_number,
        windowed.day,
        windowed.is_purchase,
        windowed.burn_in,
        coalesce(kept.purchases, 0) + windowed.new_purchases as purchase_count,
        windowed.day - coalesce(windowed.new_last_purchase_day, kept.last_purchase_day)
            as days_since_last_purchase,
        coalesce(windowed.new_previous_alternatives, kept.last_purchase_alternatives)
            as previous_alternatives,
        coalesce(kept.loyal_purchases, 0) + windowed.new_loyal_purchases as loyalty_rank,
        windowed.purchase_alternatives,
    from windowed
    left join kept on kept.chooser_number = windowed.chooser_number
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
    purchase_alternatives,
from final;
