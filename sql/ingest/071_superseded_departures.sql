-- a version (receipts or reference) superseded by other bytes, or read before under other
-- settings, leaves with the first file number of its successor's batch (075: a duplicate of
-- one of its lines is judged again).
-- The same bytes read again under the same settings (a verdict judged again) keep every
-- accepted line, so nothing leaves: recording it would make another file's duplicates stale
-- in turn, night after night; except a file read again for rows of a SKU or store no longer
-- listed ($leaving: their paths), whose accepted lines of it leave.
-- $settings_fingerprint: the batch's reading settings
insert into ingest_departures
select
    batch.previous_file_id as file_id,
    -- every older version of the batch leaves before any file of it is judged, so the batch's
    -- first number: a file of the same batch saw the departure already
    (select min(try_cast(substr(file_id, 2) as bigint)) from ingest_batch_files) as left_in,
from ingest_batch_files as batch
join ledger as previous on previous.file_id = batch.previous_file_id
where previous.sha256 <> batch.sha256
    or coalesce(previous.settings_fingerprint, $settings_fingerprint)
        is distinct from $settings_fingerprint
    or list_contains($leaving::varchar[], batch.path)
