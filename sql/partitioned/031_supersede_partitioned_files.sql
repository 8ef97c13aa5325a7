-- The coordinator's earlier versions of the new files: their quarantine rows go, and their
-- ledger rows become superseded (as the ingest does for a file read again).
delete from quarantine
where file_id in (
    select file_id from ledger
    where source = 'receipts'
        and status in ('current', 'empty')
        and path in (select path from partitioned_files)
);

update ledger set status = 'superseded'
where source = 'receipts'
    and status in ('current', 'empty')
    and path in (select path from partitioned_files);
