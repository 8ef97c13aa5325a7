-- per file of the batch: its physical lines and its records (lines that are neither the header
-- nor blank), counted from the line cutter, not from the field parser
create temp table ingest_file_records as
with

files as (
    select
        position,
        path,
    from ingest_batch_files
),

counted as (
    select
        position,
        count(*) as lines,
        count(*) filter (where record) as records,
    from ingest_fields
    group by all
),

final as (
    select
        files.path,
        coalesce(counted.lines, 0) as lines,
        coalesce(counted.records, 0) as records,
    from files
    left join counted using (position)
)

select
    path,
    lines,
    records,
from final
