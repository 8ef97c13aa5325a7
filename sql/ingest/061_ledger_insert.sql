-- one ledger row per file version of the batch; a file without records is ledgered empty
insert into ledger by name
select
    files.file_id,
    files.source,
    files.path,
    files.version,
    files.bytes,
    files.sha256,
    counts.first_sold_at,
    counts.last_sold_at,
    counts.rows_read,
    counts.rows_accepted,
    counts.rows_quarantined,
    case when counts.empty_reason is null then 'current' else 'empty' end as status,
    $ingested_at as ingested_at,
    counts.empty_reason as reason,
    $settings_fingerprint as settings_fingerprint,
from ingest_batch_files as files
join ingest_file_counts as counts using (file_id)
