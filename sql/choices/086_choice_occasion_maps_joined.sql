-- Each occasion of choice_occasion_sets with its store-day's map (078), for 090, when the
-- store-days are many (choices/build.py picks this file or 085): joined by store_day_index, a
-- cost per row that does not grow with the store-days. The join's probe keeps the occasions'
-- stored order only on one thread, so 090 then runs on one.
create or replace temp view choice_occasion_maps as

with

final as (
    select
        choice_occasion_sets.* exclude (day, store_day_index),
        choice_store_day_info.alternative_info,
    from choice_occasion_sets
    left join choice_store_day_info using (store_day_index)
)

select * from final
