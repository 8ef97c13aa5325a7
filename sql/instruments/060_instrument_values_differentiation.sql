-- Differentiation instruments (Gandhi & Houde 2019): for each chosen characteristic, the sum
-- over rivals' products in the market of the squared difference to the product, and the count
-- of rivals whose difference is at most one standard deviation of the characteristic.
-- The standard deviation is the sample one (n - 1) over all inside product-markets
-- (iv_spreads). $characteristics: the checked characteristic names. Squared distances read only
-- their own market: they are computed for the iv_build_periods. Near-rival counts for the
-- iv_near_periods (059): those and the periods a moved spread changes.
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
        period_start in (select build.period_start from iv_build_periods as build) as in_build,
    from iv_characteristic_values
    where list_contains($characteristics, characteristic)
),

chosen_periods as (
    select
        market,
        product,
        period_start,
        firm,
        characteristic,
        value,
        in_build,
    from chosen
    where period_start in (select near.period_start from iv_near_periods as near)
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
        own.in_build,
        own.characteristic,
        other.product as rival_product,
        other.value - own.value as difference,
    from chosen_periods as own
    left join chosen_periods as other
        on other.market = own.market
        and other.characteristic = own.characteristic
        and other.firm <> own.firm
),

measures as (
    select
        pairs.market,
        pairs.product,
        pairs.period_start,
        pairs.in_build,
        pairs.characteristic,
        coalesce(
            sum(pairs.difference * pairs.difference order by pairs.rival_product) filter (
                where pairs.in_build
            ),
            0
        ) as squared_distance,
        count(pairs.rival_product) filter (
            where abs(pairs.difference) <= spreads.spread
        ) as near_rivals,
    from rival_pairs as pairs
    inner join spreads using (characteristic)
    group by pairs.market, pairs.product, pairs.period_start, pairs.in_build, pairs.characteristic
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
    where in_build
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
