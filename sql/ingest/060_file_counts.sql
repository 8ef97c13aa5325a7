-- per file of the batch: its records as the line cutter counted them (ingest_file_records, not
-- the parser's output), rows accepted (ingest_accepted_counts, from the target table) and rows
-- quarantined (from the quarantine table); a file without records is empty
create temp table ingest_file_counts as
with

files as (
    select
        file_id,
        path,
    from ingest_batch_files
),

records as (
    select
        path,
        lines,
        records,
    from ingest_file_records
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
        coalesce(records.records, 0) as rows_read,
        coalesce(accepted.rows, 0) as rows_accepted,
        coalesce(quarantined.rows, 0) as rows_quarantined,
        accepted.first_sold_at,
        accepted.last_sold_at,
        case
            when coalesce(records.records, 0) > 0 then null
            when coalesce(records.lines, 0) = 0 then 'the file is empty'
            else 'the file has only a header'
        end as empty_reason,
    from files
    left join records using (path)
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
    empty_reason,
from final
