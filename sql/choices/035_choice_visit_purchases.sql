-- Category purchases of the card visits this build makes (032, from $visits_from on): net
-- quantity and spend per visit (by its number) and alternative.
-- alternative is null for products outside the universe when products.universe.rest = 'outside'.
create or replace table choice_scoped_visit_purchases as

with

visit_lines as (
    select
        visits.visit_number,
        choice_sales.alternative,
        choice_sales.quantity,
        choice_sales.net_amount,
    from choice_sales
    join choice_scoped_visits as visits
        on visits.store = choice_sales.store
        and visits.receipt = choice_sales.receipt
        -- visit_day is set when the visit's identity includes the business day
        and coalesce(visits.visit_day, choice_sales.day) = choice_sales.day
    where $visits_from is null or choice_sales.day >= $visits_from
),

final as (
    select
        visit_number,
        alternative,
        sum(quantity) as quantity,
        sum(net_amount) as spend,
    from visit_lines
    group by visit_number, alternative
    -- a voided re-scan nets to zero; keep what was actually bought
    having sum(quantity) > 1e-9
)

select visit_number, alternative, quantity, spend from final;
