-- Flag the product-markets whose other-market price is null because no other market sells it.
insert into instrument_flags

with

hausman as (
    select
        market,
        product,
        period_start,
        hausman_missing,
    from iv_hausman
),

final as (
    select
        market,
        product,
        period_start,
        'iv_hausman_missing' as flag,
        'hausman' as family,
        'price' as source,
        hausman_missing as value,
    from hausman
)

select
    market,
    product,
    period_start,
    flag,
    family,
    source,
    value,
from final
