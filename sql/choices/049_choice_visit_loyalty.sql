-- Each chooser's loyalty to every alternative after n purchases past the burn-in window, as two
-- lists per chooser and n (from 048): the alternatives and, at the same positions, their
-- loyalty. 090 finds an alternative's position with list_position; building a map instead
-- (map_from_entries) cost as much again as the grouping, for the same lookups. One list of
-- pairs is gathered and then split, so both lists keep the same order whatever the grouping's
-- order. Its own statement: DuckDB runs this list aggregate within the memory limit, but not
-- while the window and unnest of 048 feed it in the same pipeline (seen with memory_limit = 4GB
-- on the 10M-occasion benchmark).
create or replace table choice_visit_loyalty as

with

entries as (
    select
        chooser_number,
        loyalty_rank,
        list({'alternative': alternative, 'loyalty': loyalty}) as entries,
    from choice_loyalty_values
    group by chooser_number, loyalty_rank
),

final as (
    select
        chooser_number,
        loyalty_rank,
        list_transform(entries, lambda entry: entry.alternative) as loyalty_alternatives,
        list_transform(entries, lambda entry: entry.loyalty) as loyalty_values,
    from entries
)

select chooser_number, loyalty_rank, loyalty_alternatives, loyalty_values from final;
