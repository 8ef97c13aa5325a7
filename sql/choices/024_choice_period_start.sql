-- The start of the market period (markets.period) a day falls in: the calendar's rule (025),
-- and the scope of an incremental build (056) for days the calendar may no longer reach.
-- week_start is the ISO weekday (1 = Monday) a week starts on. A TEMP macro: every connection
-- of the choice build defines it.
create or replace temp macro choice_period_start(day, period, week_start) as
    case period
        when 'day' then day
        when 'week' then day - cast((isodow(day) - week_start + 7) % 7 as integer)
        when 'month' then cast(date_trunc('month', day) as date)
        else cast(date_trunc('quarter', day) as date)
    end
