-- records the CSV reader refused (one row per file and line), with their quarantine reason
create temp table ingest_rejected as
with

reader_errors as (
    select
        scans.file_path as path,
        errors.line,
        errors.column_idx,
        errors.error_type,
        errors.error_message,
        errors.csv_line,
    from ingest_reject_errors as errors
    join ingest_reject_scans as scans using (scan_id, file_id)
),

per_line as (
    select
        path,
        line as line_no,
        bool_or(error_type in ('MISSING COLUMNS', 'TOO MANY COLUMNS')) as wrong_count,
        -- a short line has one error per missing column: the first says how many were found
        arg_min(error_message, coalesce(column_idx, 0)) as detail,
        min(csv_line) as original_text,
    from reader_errors
    group by all
),

final as (
    select
        path,
        line_no,
        case when wrong_count then 'wrong_column_count' else 'unparseable_field' end as reason,
        detail,
        original_text,
    from per_line
)

select
    path,
    line_no,
    reason,
    detail,
    original_text,
from final
