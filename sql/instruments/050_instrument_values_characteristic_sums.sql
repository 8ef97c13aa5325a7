-- Characteristic sums (Berry, Levinsohn & Pakes 1995): for each chosen characteristic, the sum
-- over the firm's other products in the market and the sum over rivals' products in the market.
-- An empty set sums to 0. $characteristics: the checked characteristic names. Only the periods
-- in iv_build_periods: a market's sums read only that market.
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
    semi join iv_build_periods using (period_start)
    where list_contains($characteristics, characteristic)
),

pairs as (
    select
        own.market,
        own.product,
        own.period_start,
        own.characteristic,
        other.product as other_product,
        other.firm = own.firm as same_firm,
        other.value as other_value,
    from chosen as own
    left join chosen as other
        on other.market = own.market
        and other.characteristic = own.characteristic
        and other.product <> own.product
),

sums as (
    select
        market,
        product,
        period_start,
        characteristic,
        coalesce(
            sum(other_value order by other_product) filter (where same_firm), 0
        ) as firm_sum,
        coalesce(
            sum(other_value order by other_product) filter (where not same_firm), 0
        ) as rival_sum,
    from pairs
    group by market, product, period_start, characteristic
),

final as (
    select
        market,
        product,
        period_start,
        'iv_firm_sum_' || characteristic as instrument,
        'characteristic_sums' as family,
        characteristic as source,
        firm_sum as value,
    from sums
    union all
    select
        market,
        product,
        period_start,
        'iv_rival_sum_' || characteristic as instrument,
        'characteristic_sums' as family,
        characteristic as source,
        rival_sum as value,
    from sums
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
