-- Every day of the receipt data with the start of its market period (markets.period).
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
        case $period
            when 'day' then day
            -- $week_start is the ISO weekday (1 = Monday) a week starts on
            when 'week' then day - cast((isodow(day) - $week_start + 7) % 7 as integer)
            when 'month' then cast(date_trunc('month', day) as date)
            else cast(date_trunc('quarter', day) as date)
        end as period_start,
    from days
)

select day, period_start from final;
