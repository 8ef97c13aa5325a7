-- One row per date the build can meet (receipts and shelf prices), with the start of its
-- period and the period's length in days. Periods: day, week (starting on $week_start, ISO
-- weekday 1 = Monday), calendar month or calendar quarter.
create or replace table market_calendar as

with

-- the receipts' first and last sale day, from the ledger when it accounts for every line
-- (market/inputs.py)
sale_dates as (
    select
        first_date,
        last_date,
    from market_input_sale_dates
),

shelf_dates as (
    select
        min(date) as first_date,
        max(date) as last_date,
    from market_input_shelf_prices
),

date_range as (
    -- least / greatest skip nulls, so a missing shelf file leaves the receipts' range
    select
        least(sale_dates.first_date, shelf_dates.first_date) as first_date,
        greatest(sale_dates.last_date, shelf_dates.last_date) as last_date,
    from sale_dates
    cross join shelf_dates
),

dates as (
    select
        unnest(generate_series(first_date, last_date, interval 1 day))::date as date,
    from date_range
    where first_date is not null
),

dates_in_periods as (
    select
        date,
        case $period
            when 'day' then date
            when 'week' then date - ((isodow(date) - $week_start + 7) % 7)::integer
            when 'month' then date_trunc('month', date)::date
            when 'quarter' then date_trunc('quarter', date)::date
        end as period_start,
    from dates
),

final as (
    select
        date,
        period_start,
        case $period
            when 'day' then 1
            when 'week' then 7
            when 'month' then date_diff('day', period_start, (period_start + interval 1 month)::date)
            when 'quarter' then date_diff('day', period_start, (period_start + interval 3 month)::date)
        end::bigint as days_in_period,
    from dates_in_periods
)

select
    date,
    period_start,
    days_in_period,
from final
