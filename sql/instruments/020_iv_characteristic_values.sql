-- Long form (market, product, period_start, firm, characteristic, value) of the characteristics that some
-- instrument family uses, so that the family SQL stays static whatever the config names.
-- $characteristics: the checked column names; values are cast to double (booleans become 0/1).
create or replace table iv_characteristic_values as

with

chosen_columns as (
    select
        market,
        product,
        columns(lambda c: list_contains($characteristics, c))::double,
    from market_products
    where not is_fringe
),

characteristic_long as (
    from chosen_columns
    unpivot include nulls (value for characteristic in (columns(* exclude (market, product))))
),

with_firm as (
    select
        long.market,
        long.product,
        products.period_start,
        products.firm,
        long.characteristic,
        long.value,
    from characteristic_long as long
    inner join iv_products as products using (market, product)
),

final as (
    select
        market,
        product,
        period_start,
        firm,
        characteristic,
        value,
    from with_firm
)

select
    market,
    product,
    period_start,
    firm,
    characteristic,
    value,
from final
order by market, product, characteristic
