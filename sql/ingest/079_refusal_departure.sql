-- a version (receipts or reference) that left for a refused reading under new settings leaves
-- before the refused version's number (075: a duplicate of one of its lines is judged again)
insert into ingest_departures
select
    file_id,
    try_cast(substr($file_id, 2) as bigint) as left_in,
from ledger
where file_id = $previous_file_id
