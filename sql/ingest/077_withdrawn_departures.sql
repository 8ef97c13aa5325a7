-- withdrawn versions (receipts or reference) leave after every file numbered so far, so before
-- the next number (075); $ids: their file ids
insert into ingest_departures
select
    file_id,
    (select max(try_cast(substr(file_id, 2) as bigint)) + 1 from ledger) as left_in,
from ledger
where list_contains($ids, file_id)
