-- Each chooser's loyalty to every alternative after n purchases past the burn-in window, as one
-- map per chooser and n (from 048). Its own statement: DuckDB runs this list aggregate within
-- the memory limit, but not while the window and unnest of 048 feed it in the same pipeline
-- (seen with memory_limit = 4GB on the 10M-occasion benchmark).
create or replace table choice_visit_loyalty as

select
    chooser,
    loyalty_rank,
    -- a map is looked up by key, so the order of its entries does not matter
    map_from_entries(list({'key': alternative, 'value': loyalty})) as loyalty_by_alternative,
from choice_loyalty_values
group by chooser, loyalty_rank;
