-- records the reader refuses (one row per file and line), with their quarantine reason: the
-- line cannot be split (010), or it has another number of fields than its file's header
create temp table ingest_rejected as
with

records as (
    select
        position,
        line_no,
        text,
        field_count,
        reason,
        detail,
    from ingest_fields
    where record
),

measured as (
    select
        records.*,
        layouts.width,
    from records
    join ingest_file_layouts as layouts using (position)
),

refused as (
    select
        position,
        line_no,
        coalesce(reason, 'wrong_column_count') as reason,
        coalesce(
            detail,
            field_count || ' fields, '
            || case when $header then 'the header has ' else 'the first line has ' end
            || width
        ) as detail,
        text as original_text,
    from measured
    where reason is not null or field_count <> width
),

final as (
    select
        files.path,
        refused.line_no,
        refused.reason,
        refused.detail,
        refused.original_text,
    from refused
    join ingest_batch_files as files using (position)
)

select
    path,
    line_no,
    reason,
    detail,
    original_text,
from final
