-- the highest file number used so far (file ids are F + 7 digits, increasing in ingest order,
-- so scans of raw_lines by file id prune well)
select
    coalesce(max(try_cast(substr(file_id, 2) as bigint)), 0) as last_number,
from ledger
