-- the SKUs and stores the batch's receipts lines were quarantined for as unknown, per file
-- (the file is the ordinal's high bits); 075 reads the file again once a table lists one
insert into quarantined_keys
select distinct
    files.file_id,
    checked.reason,
    case checked.reason when 'unknown_sku' then checked.sku else checked.store end as value,
from ingest_checked as checked
join ingest_batch_files as files on files.position = checked.ordinal >> 40
where checked.reason in ('unknown_sku', 'unknown_store')
