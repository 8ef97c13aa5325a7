-- Visits per store and period: receipts with at least one sale line, whatever the category, and
-- the sale lines counted. (Lines of SKUs missing from the catalogue are quarantined by the
-- ingest, so every line here has a category.)
-- A visit is one receipt id within the scope $receipt_ids_unique_per says ids are unique in:
--   store_day  (store, business day, receipt): tills that restart numbers every day; the day is
--              sold_at::date, as in the ingest's duplicate-line key
--   store      (store, receipt)
--   chain      (receipt)
-- A visit counts once, in the store and period of its first sale line. A store_day visit lies
-- in one store and day, so its group gives them and no first line is searched: that search
-- (a struct min per visit) cost twice the CPU and half again the memory of the whole count.
-- Only the periods in this build's ranges (market_build_ranges) are counted here, reading the
-- lines sold from $scan_from to before $scan_until; the stage merges these rows into the stored
-- summary market_store_visits. A store_day visit lies within one day, so counting one period
-- at a time is exact; the other scopes let a visit span periods, and with them every build
-- counts every period (market/summaries.py).
create or replace table market_store_visits_slice as

with

-- read twice (visits and lines): not materialized, since a copy of its 40M rows cost a third
-- of this step
sale_lines as not materialized (
    select
        store,
        receipt,
        sold_at,
    from raw_lines
    where line_kind = 'sale'
        and sold_at >= $scan_from
        and sold_at < $scan_until
),

build_ranges as (
    select
        first_period,
        last_period,
    from market_build_ranges
    where summary = 'market_store_visits'
),

calendar as (
    select
        market_calendar.date,
        market_calendar.period_start,
    from market_calendar
    semi join build_ranges
        on market_calendar.period_start between build_ranges.first_period
        and build_ranges.last_period
),

-- counted per store and day (a distinct count per group cost a quarter less than a group per
-- visit at 39.8M lines)
store_day_visits as (
    select
        store,
        sold_at::date as visit_date,
        count(distinct receipt) as visits,
    from sale_lines
    where $receipt_ids_unique_per = 'store_day'
    group by store, sold_at::date
),

-- the store part of a spanning visit's identity: null for every line when ids are chain-wide
identified_lines as (
    select
        store,
        receipt,
        sold_at,
        case when $receipt_ids_unique_per = 'store' then store end as visit_store,
    from sale_lines
    where $receipt_ids_unique_per <> 'store_day'
),

spanning_visits as (
    select
        -- the first line by time, then store, so a rebuild places every visit alike
        min({'sold_at': sold_at, 'store': store}) as first_line,
    from identified_lines
    group by visit_store, receipt
),

visits as (
    select
        store,
        visit_date,
        visits,
    from store_day_visits
    union all
    select
        first_line.store as store,
        first_line.sold_at::date as visit_date,
        1 as visits,
    from spanning_visits
),

visits_in_periods as (
    select
        visits.store,
        calendar.period_start,
        sum(visits.visits)::bigint as visits,
    from visits
    inner join calendar on calendar.date = visits.visit_date
    group by all
),

lines_in_periods as (
    select
        sale_lines.store,
        calendar.period_start,
        count(*) as sale_lines,
    from sale_lines
    inner join calendar on calendar.date = sale_lines.sold_at::date
    group by all
),

final as (
    select
        lines_in_periods.store,
        lines_in_periods.period_start,
        -- zero where every receipt of the store-period began in an earlier period
        coalesce(visits_in_periods.visits, 0) as visits,
        lines_in_periods.sale_lines,
    from lines_in_periods
    left join visits_in_periods using (store, period_start)
)

select
    store,
    period_start,
    visits,
    sale_lines,
from final
