-- Initial loyalty of each chooser: the alternative's share of the chooser's purchase visits in
-- the burn-in window (each visit weighs 1, split between its products). Choosers without a
-- burn-in purchase start at zero for every alternative.
create or replace table choice_loyalty_start as

with

burn_in_purchases as (
    select visit_number, chooser_number
    from choice_visit_history
    where is_purchase and burn_in
),

purchase_counts as (
    select chooser_number, count(*) as purchases from burn_in_purchases group by chooser_number
),

weights as (
    select
        burn_in_purchases.chooser_number,
        choice_occasions.chosen_alternative as alternative,
        sum(choice_occasions.history_weight) as weight,
    from burn_in_purchases
    join choice_occasions using (visit_number)
    group by burn_in_purchases.chooser_number, choice_occasions.chosen_alternative
),

final as (
    select
        weights.chooser_number,
        weights.alternative,
        weights.weight / purchase_counts.purchases as start_loyalty,
    from weights
    join purchase_counts using (chooser_number)
)

select chooser_number, alternative, start_loyalty from final;
