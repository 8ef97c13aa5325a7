-- Every day of the receipt data with the start of its market period (markets.period, 024).
create or replace table choice_calendar as

with

bounds as (
    select
        cast(min(sold_at) as date) as first_day,
        cast(max(sold_at) as date) as last_day,
    from raw_lines
),

days as (
    select cast(unnest(generate_series(first_day, last_day, interval 1 day)) as date) as day
    from bounds
    where first_day is not null
),

final as (
    select
        day,
        choice_period_start(day, $period, $week_start) as period_start,
    from days
)

select day, period_start from final;
