-- Append the other-market price to the long instrument table.
insert into instrument_values

with

hausman as (
    select
        market,
        product,
        hausman_price,
    from iv_hausman
),

final as (
    select
        market,
        product,
        'iv_hausman_price' as instrument,
        'hausman' as family,
        'price' as source,
        hausman_price as value,
    from hausman
)

select
    market,
    product,
    instrument,
    family,
    source,
    value,
from final
