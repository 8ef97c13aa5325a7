-- Each occasion visit's history, from the chooser's earlier occasion visits only (no look-ahead).
-- Visits are ordered by time, then visit id; the occasions of one split visit share its history.
-- burn_in: the visit falls within $burn_in_days days of the chooser's first occasion; such
-- purchases only initialise loyalty (046) and their own loyalty is not defined.
-- loyalty_rank: number of earlier purchase visits after the burn-in window.
create or replace table choice_visit_history as

with

occasion_visits as (
    select
        visit,
        chooser,
        min(occasion_at) as occasion_at,
        min(day) as day,
        bool_or(is_purchase) as is_purchase,
    from choice_occasions
    group by visit, chooser
),

earlier as (
    select
        visit,
        chooser,
        occasion_at,
        day,
        is_purchase,
        first_value(day) over chooser_order as first_day,
        coalesce(count(*) filter (where is_purchase) over earlier_visits, 0) as purchase_count,
        max(case when is_purchase then day end) over earlier_visits as last_purchase_day,
        last_value(case when is_purchase then visit end ignore nulls) over earlier_visits
            as last_purchase_visit,
    from occasion_visits
    window
        chooser_order as (partition by chooser order by occasion_at, visit),
        earlier_visits as (
            partition by chooser order by occasion_at, visit
            rows between unbounded preceding and 1 preceding
        )
),

flagged as (
    select
        *,
        day < first_day + cast($burn_in_days as integer) as burn_in,
    from earlier
),

final as (
    select
        visit,
        chooser,
        day,
        is_purchase,
        burn_in,
        purchase_count,
        day - last_purchase_day as days_since_last_purchase,
        last_purchase_visit,
        coalesce(
            count(*) filter (where is_purchase and not burn_in) over (
                partition by chooser order by occasion_at, visit
                rows between unbounded preceding and 1 preceding
            ),
            0
        ) as loyalty_rank,
    from flagged
)

select
    visit,
    chooser,
    day,
    is_purchase,
    burn_in,
    purchase_count,
    days_since_last_purchase,
    last_purchase_visit,
    loyalty_rank,
from final;
