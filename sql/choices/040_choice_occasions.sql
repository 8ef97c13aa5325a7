-- Choice occasions: card visits that chose an alternative (and, when choices.occasions =
-- 'all_visits', visits without a category purchase choosing $outside), after the
-- multiple-purchase policy: 'largest_spend' keeps the largest spend (ties: larger quantity,
-- then alternative id), 'split' makes one occasion per alternative, 'drop' drops the visit.
-- history_weight is the visit's share in the loyalty recursion: 1, or 1/n for n split products.
-- Visits go by their number (032) up to 062; the occasion id starts with the visit id.
-- The occasions of the visits this build makes (from $visits_from on); the stage merges them
-- with the kept ones of earlier days into choice_occasions.
create or replace table choice_scoped_occasions as

with

visits as (
    select
        visit,
        visit_number,
        store,
        occasion_at,
        day,
        chooser,
    from choice_scoped_visits
),

purchases as (
    select visit_number, alternative, quantity, spend
    from choice_scoped_visit_purchases
    where alternative is not null
),

ranked_purchases as (
    select
        visit_number,
        alternative,
        quantity,
        spend,
        count(*) over (partition by visit_number) as visit_products,
        row_number() over (
            partition by visit_number order by spend desc, quantity desc, alternative
        ) as spend_rank,
    from purchases
),

kept_purchases as (
    select
        visit_number,
        -- the occasion id: the visit id, with the product's spend rank after a split
        case
            when visit_products > 1 and $multiple_purchases = 'split' then '/' || spend_rank
            else ''
        end as occasion_suffix,
        alternative,
        quantity,
        spend,
        case
            when $multiple_purchases = 'split' then 1.0 / visit_products
            else 1.0
        end as history_weight,
    from ranked_purchases
    where visit_products = 1
        or $multiple_purchases = 'split'
        or ($multiple_purchases = 'largest_spend' and spend_rank = 1)
),

outside_visits as (
    select
        visit_number,
        '' as occasion_suffix,
        $outside as alternative,
        cast(null as double) as quantity,
        cast(null as double) as spend,
        0.0 as history_weight,
    from visits
    anti join purchases using (visit_number)
    where $occasion_mode = 'all_visits'
),

all_occasions as (
    select visit_number, occasion_suffix, alternative, quantity, spend, history_weight
    from kept_purchases
    union all
    select visit_number, occasion_suffix, alternative, quantity, spend, history_weight
    from outside_visits
),

final as (
    select
        visits.visit || all_occasions.occasion_suffix as occasion,
        visits.visit_number,
        visits.chooser,
        visits.store,
        visits.occasion_at,
        visits.day,
        choice_calendar.period_start,
        all_occasions.alternative as chosen_alternative,
        all_occasions.alternative <> $outside as is_purchase,
        all_occasions.quantity,
        all_occasions.spend,
        all_occasions.history_weight,
    from all_occasions
    join visits using (visit_number)
    join choice_calendar using (day)
)

select
    occasion,
    visit_number,
    chooser,
    store,
    occasion_at,
    day,
    period_start,
    chosen_alternative,
    is_purchase,
    quantity,
    spend,
    history_weight,
from final;
