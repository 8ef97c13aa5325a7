-- the older versions of the batch's changed files stay in the ledger, marked superseded
update ledger
set status = 'superseded'
where file_id in (
    select previous_file_id from ingest_batch_files where previous_file_id is not null
)
