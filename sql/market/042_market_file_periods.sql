-- One row per receipts file whose lines are in the warehouse (current in the ledger): the
-- periods of its first and last accepted line, from the ledger's first and last sale time
-- (null for a file that kept no line). The incremental build diffs these rows against the files
-- each period summary was built from (market_summary_files), by file id and checksum.
create or replace table market_file_periods as

with

files as (
    select
        file_id,
        sha256,
        rows_accepted,
        first_sold_at::date as first_date,
        last_sold_at::date as last_date,
    from market_input_ledger
    where source = 'receipts' and status = 'current'
),

calendar as (
    select
        date,
        period_start,
    from market_calendar
),

final as (
    select
        files.file_id,
        files.sha256,
        files.rows_accepted,
        first_days.period_start as first_period,
        last_days.period_start as last_period,
    from files
    left join calendar as first_days on first_days.date = files.first_date
    left join calendar as last_days on last_days.date = files.last_date
)

select
    file_id,
    sha256,
    rows_accepted,
    first_period,
    last_period,
from final
