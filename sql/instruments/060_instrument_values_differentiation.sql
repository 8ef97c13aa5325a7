-- Differentiation instruments (Gandhi & Houde 2019): for each chosen characteristic, the sum
-- over rivals' products in the market of the squared difference to the product, and the count
-- of rivals whose difference is at most one standard deviation of the characteristic.
-- The standard deviation is the sample one (n - 1) over all inside product-markets
-- (iv_spreads). $characteristics: the checked characteristic names. $every_period: compute every
-- period (the spread moved, so every near-rival count may move); else the iv_build_periods.
insert into instrument_values

with

chosen as (
    select
        market,
        product,
        period_start,
        firm,
        characteristic,
        value,
    from iv_characteristic_values
    where list_contains($characteristics, characteristic)
        and (
            $every_period
            or period_start in (select build.period_start from iv_build_periods as build)
        )
),

spreads as (
    select
        characteristic,
        spread,
    from iv_spreads
),

rival_pairs as (
    select
        own.market,
        own.product,
        own.period_start,
        own.characteristic,
        other.product as rival_product,
        other.value - own.value as difference,
    from chosen as own
    left join chosen as other
        on other.market = own.market
        and other.characteristic = own.characteristic
        and other.firm <> own.firm
),

measures as (
    select
        pairs.market,
        pairs.product,
        pairs.period_start,
        pairs.characteristic,
        coalesce(
            sum(pairs.difference * pairs.difference order by pairs.rival_product), 0
        ) as squared_distance,
        count(pairs.rival_product) filter (
            where abs(pairs.difference) <= spreads.spread
        ) as near_rivals,
    from rival_pairs as pairs
    inner join spreads using (characteristic)
    group by pairs.market, pairs.product, pairs.period_start, pairs.characteristic
),

final as (
    select
        market,
        product,
        period_start,
        'iv_diff_sq_' || characteristic as instrument,
        'differentiation' as family,
        characteristic as source,
        squared_distance as value,
    from measures
    union all
    select
        market,
        product,
        period_start,
        'iv_diff_near_' || characteristic as instrument,
        'differentiation' as family,
        characteristic as source,
        near_rivals::double as value,
    from measures
)

select
    market,
    product,
    period_start,
    instrument,
    family,
    source,
    value,
from final
