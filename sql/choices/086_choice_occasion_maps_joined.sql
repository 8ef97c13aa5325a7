-- The occasions of choice_occasion_sets from first_occasion on and before after_occasion (null:
-- to the last), each with its store-day's map (078), for 087: joined by store_day_index, a cost
-- per row that does not grow with the store-days. The join's probe keeps the occasions' stored
-- order only on one thread, so each part of the occasions is written on one thread of its own
-- (choices/parts.py).
-- A table macro, not a view: its arguments reach the scan as constants, so a part reads only
-- the row groups of its occasions (the table is stored sorted by occasion).
create or replace temp macro choice_occasion_maps(first_occasion, after_occasion) as table

with

occasion_part as (
    select * exclude (day)
    from choice_occasion_sets
    where occasion >= first_occasion
        and (after_occasion is null or occasion < after_occasion)
),

final as (
    select
        occasion_part.* exclude (store_day_index),
        choice_store_day_info.alternative_info,
    from occasion_part
    left join choice_store_day_info using (store_day_index)
)

select * from final
