-- Per store-day, a map from each priced alternative to its row of price, price source, promo,
-- extra shelf-price columns, firm, nest and characteristics, so 090 can look alternatives up
-- per occasion instead of joining the long table.
create or replace table choice_store_day_info as

with

priced as (
    select
        prices.*,
        attributes.* exclude (alternative),
    from choice_alternative_prices as prices
    left join choice_alternative_attributes as attributes using (alternative)
),

final as (
    select
        store,
        day,
        map(
            list(alternative order by alternative), list(priced order by alternative)
        ) as alternative_info,
    from priced
    group by store, day
)

select store, day, alternative_info from final;
