-- Long form (market, product, period_start, firm, characteristic, value) of the characteristics that some
-- instrument family uses, so that the family SQL stays static whatever the config names.
-- $characteristics: the checked column names; values are cast to double (booleans become 0/1).
-- $keep_stored: only the periods in market_slice_periods are read from market_products, the
-- others come from the stored copy (iv_stored_characteristics), as in 010.
create or replace table iv_characteristic_values as

with

chosen_columns as (
    select
        market,
        product,
        columns(lambda c: list_contains($characteristics, c))::double,
    from market_products
    where not is_fringe
        and (
            not $keep_stored
            or period_start in (select slice.period_start from market_slice_periods as slice)
        )
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

kept_characteristics as (
    select
        market,
        product,
        period_start,
        firm,
        characteristic,
        value,
    from iv_stored_characteristics
    where $keep_stored
        and period_start not in (select slice.period_start from market_slice_periods as slice)
        -- a stored period the market tables no longer have is not brought back
        and period_start in (select market.period_start from market_products as market)
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
    union all
    select
        market,
        product,
        period_start,
        firm,
        characteristic,
        value,
    from kept_characteristics
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
