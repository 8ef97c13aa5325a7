-- Per store-day (every one of choice_store_days, by store_day_index), a map from each priced
-- alternative to its row of price, price source, promo, extra shelf-price columns, firm, nest
-- and characteristics (null where none is priced), so 090 can look alternatives up per
-- occasion instead of joining the long table. The rows leave out store, day and alternative
-- (the occasion's own and the map's key): 090 copies each occasion's entries, and narrower
-- entries copy faster. Only the store-days of the occasions this build recomputes (056), whose
-- prices 070 made.
create or replace table choice_store_day_info as

with

store_days as (
    select store, day, store_day_index from choice_store_days
    where $every_occasion or day >= $rebuilt_from
),

priced as (
    select
        prices.*,
        attributes.* exclude (alternative),
    from choice_alternative_prices as prices
    left join choice_alternative_attributes as attributes using (alternative)
),

store_day_maps as (
    select
        store,
        day,
        map(
            list(alternative order by alternative),
            list(
                struct_pack(*columns(* exclude (store, day, alternative))) order by alternative
            )
        ) as alternative_info,
    from priced
    group by store, day
),

final as (
    select
        store_days.store_day_index,
        store_days.store,
        store_days.day,
        store_day_maps.alternative_info,
    from store_days
    left join store_day_maps using (store, day)
)

select store_day_index, store, day, alternative_info from final;
