-- Each occasion of choice_occasion_sets with its store-day's map (078), for 090, when the
-- store-days are few (choices/build.py picks this file or 086): the map sits at position
-- store_day_index of one list of them all (store_day_index runs 1, 2, ...), and a product with
-- that one-row list keeps the occasions' stored order on every thread (090's plan: "Batch
-- Create Table As"). DuckDB copies the whole list for each batch of occasions, so the cost per
-- row grows with the store-days: 086 joins instead when they are many.
create or replace temp view choice_occasion_maps as

with

store_day_maps as (
    select list(alternative_info order by store_day_index) as alternative_infos
    from choice_store_day_info
),

final as (
    select
        choice_occasion_sets.* exclude (day, store_day_index),
        store_day_maps.alternative_infos[choice_occasion_sets.store_day_index]
            as alternative_info,
    from choice_occasion_sets, store_day_maps
)

select * from final
