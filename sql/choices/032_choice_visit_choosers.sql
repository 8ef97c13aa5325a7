-- Card visits with the chooser pseudonym in place of the card id (choice_pseudonyms is a TEMP
-- table): from here on no persistent table of the build links a card to a chooser, even when
-- the build dies before its clean-up.
create or replace table choice_visits as

with

visits as (
    select visit, store, visit_day, receipt, occasion_at, day, card, several_cards from choice_visits
),

pseudonyms as (
    select card, chooser from choice_pseudonyms
),

final as (
    select
        visits.visit,
        visits.store,
        visits.visit_day,
        visits.receipt,
        visits.occasion_at,
        visits.day,
        pseudonyms.chooser,
        visits.several_cards,
    from visits
    join pseudonyms using (card)
)

select visit, store, visit_day, receipt, occasion_at, day, chooser, several_cards from final;
