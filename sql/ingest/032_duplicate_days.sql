-- the sale days of the batch's duplicate lines, per file (the file is the ordinal's high bits);
-- 075 compares them with the days of receipts files that left since
insert into duplicate_days
select distinct
    files.file_id,
    checked.sold_at::date as sale_day,
from ingest_checked as checked
join ingest_batch_files as files on files.position = checked.ordinal >> 40
where checked.reason = 'duplicate_line'
