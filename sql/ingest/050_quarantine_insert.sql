-- every refused line of the batch: the reader's rejects and the lines that broke a rule
insert into quarantine
with

reader_rejects as (
    select
        path,
        line_no,
        reason,
        detail,
        original_text,
    from ingest_rejected
),

-- the file of a checked line is its ordinal's high bits (020 keeps no path per line)
rule_breaks as (
    select
        files.path,
        checked.line_no,
        checked.reason,
        checked.detail,
        rendered.original_text,
    from ingest_checked as checked
    join ingest_batch_files as files on files.position = checked.ordinal >> 40
    left join ingest_rendered as rendered on rendered.ordinal = checked.ordinal
    where checked.reason is not null
),

refused as (
    select * from reader_rejects
    union all
    select * from rule_breaks
),

final as (
    select
        files.file_id,
        files.source,
        refused.path,
        refused.line_no,
        refused.reason,
        refused.detail,
        refused.original_text,
    from refused
    join ingest_batch_files as files using (path)
)

select
    file_id,
    source,
    path,
    line_no,
    reason,
    detail,
    original_text,
from final
