-- Append the other-market price to the long instrument table.
insert into instrument_values

with

hausman as (
    select
        market,
        product,
        period_start,
        hausman_price,
    from iv_hausman
),

final as (
    select
        market,
        product,
        period_start,
        'iv_hausman_price' as instrument,
        'hausman' as family,
        'price' as source,
        hausman_price as value,
    from hausman
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
