-- per file of the batch: records the reader met, rows accepted (ingest_accepted_counts, from
-- the target table) and rows quarantined (from the quarantine table)
create temp table ingest_file_counts as
with

files as (
    select
        file_id,
        path,
    from ingest_batch_files
),

staged as (
    select
        ingest_file_path as path,
        count(*) as records,
    from ingest_stage
    group by all
),

rejected as (
    select
        path,
        count(*) as records,
    from ingest_rejected
    group by all
),

quarantined as (
    select
        file_id,
        count(*) as rows,
    from quarantine
    where file_id >= $first_file_id and file_id <= $last_file_id
    group by all
),

final as (
    select
        files.file_id,
        coalesce(staged.records, 0) + coalesce(rejected.records, 0) as rows_read,
        coalesce(accepted.rows, 0) as rows_accepted,
        coalesce(quarantined.rows, 0) as rows_quarantined,
        accepted.first_sold_at,
        accepted.last_sold_at,
    from files
    left join staged using (path)
    left join rejected using (path)
    left join ingest_accepted_counts as accepted using (file_id)
    left join quarantined using (file_id)
)

select
    file_id,
    rows_read,
    rows_accepted,
    rows_quarantined,
    first_sold_at,
    last_sold_at,
from final
