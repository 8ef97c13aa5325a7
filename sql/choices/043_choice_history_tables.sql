-- The history tables, kept from build to build with the visits they are made of
-- (choices/kept_visits.py: renamed to choice_state_* after a complete build, back before the
-- next one, which deletes the history of the days it makes again). A full build drops them
-- first, so 044 and 045 fill them whole.
create table if not exists choice_chooser_numbers (
    chooser varchar,
    chooser_number bigint,
);

create table if not exists choice_visit_history (
    visit_number bigint,
    chooser_number bigint,
    day date,
    is_purchase boolean,
    burn_in boolean,
    purchase_count bigint,
    days_since_last_purchase bigint,
    previous_alternatives varchar[],
    loyalty_rank bigint,
    -- what the visit itself bought (null without a purchase): the next build's history of a
    -- chooser's later visits starts from the latest kept purchase
    purchase_alternatives varchar[],
);
