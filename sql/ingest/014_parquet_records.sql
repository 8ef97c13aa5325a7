-- per Parquet file of the batch: its rows (a Parquet file has no header or blank lines)
create temp table ingest_file_records as
with

files as (
    select
        path,
    from ingest_batch_files
),

counted as (
    select
        ingest_file_path as path,
        count(*) as records,
    from ingest_stage
    group by all
),

final as (
    select
        files.path,
        coalesce(counted.records, 0) as lines,
        coalesce(counted.records, 0) as records,
    from files
    left join counted using (path)
)

select
    path,
    lines,
    records,
from final
