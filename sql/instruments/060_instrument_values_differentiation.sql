-- Differentiation instruments (Gandhi & Houde 2019): for each chosen characteristic, the sum
-- over rivals' products in the market of the squared difference to the product, and the count
-- of rivals whose difference is at most one standard deviation of the characteristic.
-- The standard deviation is the sample one (n - 1) over all inside product-markets.
-- $characteristics: the checked characteristic names.
insert into instrument_values

with

chosen as (
    select
        market,
        product,
        firm,
        characteristic,
        value,
    from iv_characteristic_values
    where list_contains($characteristics, characteristic)
),

spreads as (
    select
        characteristic,
        stddev_samp(value order by market, product) as spread,
    from chosen
    group by characteristic
),

rival_pairs as (
    select
        own.market,
        own.product,
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
        pairs.characteristic,
        coalesce(
            sum(pairs.difference * pairs.difference order by pairs.rival_product), 0
        ) as squared_distance,
        count(pairs.rival_product) filter (
            where abs(pairs.difference) <= spreads.spread
        ) as near_rivals,
    from rival_pairs as pairs
    inner join spreads using (characteristic)
    group by pairs.market, pairs.product, pairs.characteristic
),

final as (
    select
        market,
        product,
        'iv_diff_sq_' || characteristic as instrument,
        'differentiation' as family,
        characteristic as source,
        squared_distance as value,
    from measures
    union all
    select
        market,
        product,
        'iv_diff_near_' || characteristic as instrument,
        'differentiation' as family,
        characteristic as source,
        near_rivals::double as value,
    from measures
)

select
    market,
    product,
    instrument,
    family,
    source,
    value,
from final
