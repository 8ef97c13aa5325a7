-- User cost shifters joined by period, firm and/or product: the mean of each shifter column over
-- the shifter rows that match the product-market on the configured keys (with 'period', the rows
-- dated inside the market's period). No matching row -> null.
-- $columns: checked shifter column names; $join_period / $join_firm / $join_product: the keys;
-- $period: the market period length ('day', 'week', 'month', 'quarter').
-- Computed for every period in every build: it is cheap, and its period windows come from the
-- whole list of periods.
insert into instrument_values

with

shifter_rows as (
    -- firm and product exist only when the source maps them: a typed empty frame supplies them
    select * from (
        select
            null::date as period,
            null::varchar as firm,
            null::varchar as product,
        limit 0
    )
    union all by name
    select * from cost_shifters
),

shifter_wide as (
    select
        cast(period as date) as period,
        cast(firm as varchar) as firm,
        cast(product as varchar) as product,
        columns(lambda c: list_contains($columns, c))::double,
    from shifter_rows
),

shifter_long as (
    from shifter_wide
    unpivot include nulls (value for shifter in (columns(* exclude (period, firm, product))))
),

periods as (
    select distinct period_start from iv_products
),

period_windows as (
    select
        period_start,
        cast(
            case $period
                when 'day' then period_start + interval 1 day
                when 'week' then period_start + interval 7 day
                when 'month' then period_start + interval 1 month
                else period_start + interval 3 month
            end as date
        ) as period_end,
    from periods
),

shifters_dated as (
    select
        windows.period_start,
        shifts.period,
        shifts.firm,
        shifts.product,
        shifts.shifter,
        shifts.value,
    from shifter_long as shifts
    left join period_windows as windows
        on shifts.period >= windows.period_start
        and shifts.period < windows.period_end
),

shifters_by_key as (
    select
        case when $join_period then period_start end as key_period,
        case when $join_firm then firm end as key_firm,
        case when $join_product then product end as key_product,
        shifter,
        avg(value order by period, firm, product) as value,
    from shifters_dated
    where period_start is not null or not $join_period
    group by all
),

shifter_names as (
    select unnest($columns::varchar[]) as shifter
),

matched as (
    select
        products.market,
        products.product,
        products.period_start,
        names.shifter,
        shifts.value,
    from iv_products as products
    cross join shifter_names as names
    left join shifters_by_key as shifts
        on shifts.shifter = names.shifter
        and shifts.key_period is not distinct from
            case when $join_period then products.period_start end
        and shifts.key_firm is not distinct from
            case when $join_firm then products.firm end
        and shifts.key_product is not distinct from
            case when $join_product then products.product end
),

final as (
    select
        market,
        product,
        period_start,
        'iv_cost_' || shifter as instrument,
        'cost_shifters' as family,
        shifter as source,
        value,
    from matched
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
