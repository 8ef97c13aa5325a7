-- One row per chooser with at least one occasion: pseudonym, holdout flag, demographics from the
-- households file (household_known says whether the card was found there) and occasion counts.
-- Without a households file choice_input_households is empty: household_known is false.
create or replace table choosers as

with

pseudonyms as (
    select card, chooser, holdout from choice_pseudonyms
),

households as (
    select
        cast(card as varchar) as household_card,
        -- $demographics starts with card, so the selection is never empty
        min(columns(lambda c: list_contains($demographics, c))),
    from choice_input_households
    group by cast(card as varchar)
),

demographics as (
    select
        pseudonyms.chooser,
        pseudonyms.holdout,
        households.household_card is not null as household_known,
        households.* exclude (household_card, card),
    from pseudonyms
    left join households on households.household_card = pseudonyms.card
),

occasion_counts as (
    select
        chooser,
        count(*) as occasions,
        count(*) filter (where is_purchase) as purchase_occasions,
        min(occasion_at) as first_occasion_at,
        max(occasion_at) as last_occasion_at,
    from choice_occasions
    group by chooser
),

final as (
    select
        demographics.chooser,
        demographics.holdout,
        demographics.household_known,
        -- the configured demographics (choices.demographics)
        demographics.* exclude (chooser, holdout, household_known),
        occasion_counts.occasions,
        occasion_counts.purchase_occasions,
        occasion_counts.first_occasion_at,
        occasion_counts.last_occasion_at,
    from demographics
    join occasion_counts using (chooser)
)

select * from final order by chooser;
