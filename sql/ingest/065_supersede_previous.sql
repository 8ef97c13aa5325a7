-- the older versions of the batch's changed files stay in the ledger, marked superseded
update ledger
set status = 'superseded'
where file_id in (
    select previous_file_id from ingest_batch_files where previous_file_id is not null
);

-- a receipts version that leaves, with its successor's file number (075)
insert into ingest_departures
select
    previous_file_id as file_id,
    try_cast(substr(file_id, 2) as bigint) as left_in,
from ingest_batch_files
where previous_file_id is not null and source = 'receipts';
