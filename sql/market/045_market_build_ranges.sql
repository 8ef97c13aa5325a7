-- One row per period summary (market_store_visits, market_sku_sales) and range of periods
-- whose rows this build recomputes from raw lines, both ends included:
--   full build         the whole calendar (market_summary_modes.full_build)
--   incremental build  the periods of the files that arrived since the summary was built, and
--                      the periods of the files it holds that left the warehouse (superseded
--                      by a correction, withdrawn): the old lines' periods, from the summary's
--                      own record, as the calendar may no longer reach them
-- A file's lines lie between its first and last period; a period in that span without its
-- lines is recomputed to the same rows, which costs time but never changes a result.
create or replace table market_build_ranges as

with

modes as (
    select
        summary,
        full_build,
    from market_summary_modes
),

files as (
    select
        file_id,
        sha256,
        first_period,
        last_period,
    from market_file_periods
),

summarized_files as (
    select
        summary,
        file_id,
        sha256,
        first_period,
        last_period,
    from market_summary_files
),

calendar_span as (
    select
        min(period_start) as first_period,
        max(period_start) as last_period,
    from market_calendar
),

full_ranges as (
    select
        modes.summary,
        calendar_span.first_period,
        calendar_span.last_period,
    from modes
    cross join calendar_span
    where modes.full_build
),

incremental_summaries as (
    select
        summary,
    from modes
    where not full_build
),

arrived_files as (
    select
        incremental_summaries.summary,
        files.first_period,
        files.last_period,
    from incremental_summaries
    cross join files
    anti join summarized_files
        on summarized_files.summary = incremental_summaries.summary
        and summarized_files.file_id = files.file_id
        and summarized_files.sha256 = files.sha256
),

departed_files as (
    select
        summarized_files.summary,
        summarized_files.first_period,
        summarized_files.last_period,
    from summarized_files
    semi join incremental_summaries using (summary)
    anti join files using (file_id, sha256)
),

touched_ranges as (
    select * from arrived_files
    union all
    select * from departed_files
),

final as (
    select * from full_ranges
    union all
    select * from touched_ranges
    where first_period is not null and last_period is not null
)

select distinct
    summary,
    first_period,
    last_period,
from final
