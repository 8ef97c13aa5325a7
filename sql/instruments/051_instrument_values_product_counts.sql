-- The two counts that go with the characteristic sums (Berry, Levinsohn & Pakes 1995): the
-- number of the firm's other products and the number of rivals' products in the market.
insert into instrument_values

with

products as (
    select
        market,
        product,
        firm,
    from iv_products
),

pairs as (
    select
        own.market,
        own.product,
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
        count(other_product) filter (where same_firm) as firm_count,
        count(other_product) filter (where not same_firm) as rival_count,
    from pairs
    group by market, product
),

final as (
    select
        market,
        product,
        'iv_firm_count' as instrument,
        'characteristic_sums' as family,
        null::varchar as source,
        firm_count::double as value,
    from counts
    union all
    select
        market,
        product,
        'iv_rival_count' as instrument,
        'characteristic_sums' as family,
        null::varchar as source,
        rival_count::double as value,
    from counts
)

select
    market,
    product,
    instrument,
    family,
    source,
    value,
from final
