-- current files with lines quarantined against a reference table that changed after the file
-- was read: unknown_sku (catalogue) and unknown_store (stores), in receipts and in the
-- reference sources that name a SKU or store (shelf prices, ...). Read again, a line of a SKU
-- or store the corrected table now lists is accepted, as a first read would accept it.
-- "After" by file number (F + digits, increasing in ingest order, 063): ingested_at keeps
-- whole seconds only
with

reference_changes as (
    select
        source,
        max(try_cast(substr(file_id, 2) as bigint)) as changed_in,
    from ledger
    where source in ('catalogue', 'stores') and status = 'current'
    group by source
),

verdicts as (
    select
        reason,
        source,
    from (values ('unknown_sku', 'catalogue'), ('unknown_store', 'stores')) as v (reason, source)
),

stale_files as (
    select distinct
        files.source,
        files.path,
    from ledger as files
    join quarantine on quarantine.file_id = files.file_id
    join verdicts on verdicts.reason = quarantine.reason
    join reference_changes on reference_changes.source = verdicts.source
    where files.status = 'current'
        and files.source <> verdicts.source
        and try_cast(substr(files.file_id, 2) as bigint) < reference_changes.changed_in
)

select source, path from stale_files order by source, path
