-- The new files' ledger rows: a current file's counts are the partitions' together (kept and
-- quarantined lines); other statuses (failed, refused, empty) are any partition's.
insert into ledger by name
select
    file_id,
    'receipts' as source,
    path,
    version,
    bytes,
    sha256,
    first_sold_at,
    last_sold_at,
    rows_read,
    case when status = 'current' then kept else rows_accepted end as rows_accepted,
    case when status = 'current' then quarantined else rows_quarantined end as rows_quarantined,
    status,
    ingested_at,
    reason,
    fingerprint as settings_fingerprint,
from partitioned_files
order by file_id;
