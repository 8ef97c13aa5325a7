-- the accepted lines of the batch join raw_lines, each under its file's id; the file is found
-- by its position, the ordinal's high bits (reader.py), not by comparing every line's path
insert into raw_lines
select
    files.file_id,
    checked.line_no,
    checked.receipt,
    checked.line,
    checked.store,
    checked.sold_at,
    checked.sku,
    checked.quantity,
    checked.amount,
    checked.discount,
    checked.card,
    checked.line_kind,
from ingest_checked as checked
join ingest_batch_files as files on files.position = checked.ordinal >> 40
where checked.reason is null
