-- The spread of each differentiation characteristic: the sample standard deviation (n - 1) over
-- every inside product-market (Gandhi & Houde 2019 measure nearness in this unit). It reads every
-- period, so a build compares it with the stored one before it reuses any near-rival count.
-- $characteristics: the checked characteristic names.
create or replace table iv_spreads as

with

chosen as (
    select
        market,
        product,
        characteristic,
        value,
    from iv_characteristic_values
    where list_contains($characteristics, characteristic)
),

final as (
    select
        characteristic,
        stddev_samp(value order by market, product) as spread,
    from chosen
    group by characteristic
)

select
    characteristic,
    spread,
from final
order by characteristic
