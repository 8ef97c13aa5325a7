-- The two counts that go with the characteristic sums (Berry, Levinsohn & Pakes 1995): the
-- number of the firm's other products and the number of rivals' products in the market.
-- Only the periods in iv_build_periods.
insert into instrument_values

with

products as (
    select
        market,
        product,
        period_start,
        firm,
    from iv_products
    semi join iv_build_periods using (period_start)
),

pairs as (
    select
        own.market,
        own.product,
        own.period_start,
        other.product as other_product,
        other.firm = own.firm as same_firm,
    from products as own
    left join products as other
        on other.market = own.market
        and other.product <> own.product
),

counts as (
    select
        market,
        product,
        period_start,
        count(other_product) filter (where same_firm) as firm_count,
        count(other_product) filter (where not same_firm) as rival_count,
    from pairs
    group by market, product, period_start
),

final as (
    select
        market,
        product,
        period_start,
        'iv_firm_count' as instrument,
        'characteristic_sums' as family,
        null::varchar as source,
        firm_count::double as value,
    from counts
    union all
    select
        market,
        product,
        period_start,
        'iv_rival_count' as instrument,
        'characteristic_sums' as family,
        null::varchar as source,
        rival_count::double as value,
    from counts
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
