-- Card visits with the chooser pseudonym in place of the card id (choice_pseudonyms is a TEMP
-- table): from here on no persistent table of the build links a card to a chooser, even when
-- the build dies before its clean-up.
-- visit_number numbers the visits $visit_number_offset + 1, + 2, ... in visit id order: the key
-- that 035 to 062 group, sort and join on in place of the 32-character id (a BIGINT is a sixth
-- of its bytes in tables of tens of millions of rows), and ordering by it orders by the id. The
-- offset is the largest number of the kept visits (0 in a full build): their ids start with
-- earlier days, so they sort before these. Never exported.
create or replace table choice_scoped_visits as

with

visits as (
    select visit, store, visit_day, receipt, occasion_at, day, card, several_cards
    from choice_scoped_visits
),

pseudonyms as (
    select card, chooser from choice_pseudonyms
),

-- numbered on the id alone and joined back: a window over whole rows cost twice as much
visit_numbers as (
    select
        visit,
        $visit_number_offset + row_number() over (order by visit) as visit_number,
    from choice_scoped_visits
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
        visit_numbers.visit_number,
    from visits
    join pseudonyms using (card)
    join visit_numbers using (visit)
)

select
    visit, visit_number, store, visit_day, receipt, occasion_at, day, chooser, several_cards,
from final;
