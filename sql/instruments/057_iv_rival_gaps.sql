-- The rival gaps of each period this build computes (iv_build_periods): the distinct absolute
-- differences of a differentiation characteristic between a product and a rival's product in
-- the same market, the very numbers 060 compares with the spread. The periods outside
-- iv_build_periods have the gaps stored with the values (iv_stored_gaps), as their inputs equal
-- the stored copy; 059 reads them to find the counts a moved spread changes.
-- $characteristics: the checked characteristic names.
create or replace table iv_rival_gaps as

with

chosen as (
    select
        market,
        period_start,
        firm,
        characteristic,
        value,
    from iv_characteristic_values
    where list_contains($characteristics, characteristic)
        and period_start in (select build.period_start from iv_build_periods as build)
),

rival_pairs as (
    select
        own.period_start,
        own.characteristic,
        -- as in 060: abs(other - own)
        abs(other.value - own.value) as gap,
    from chosen as own
    inner join chosen as other
        on other.market = own.market
        and other.characteristic = own.characteristic
        and other.firm <> own.firm
)

select distinct
    period_start,
    characteristic,
    gap,
from rival_pairs
order by period_start, characteristic, gap
