-- current receipts files with accepted lines of a SKU or store that the catalogue or stores
-- table no longer lists: read today, those lines would be quarantined as unknown_sku or
-- unknown_store (the other direction from 075's unknown keys that became listed). Run only
-- when a key left the list since the last comparison, or when none is recorded
-- (ingest/unlisted_keys.py); ingest_current_keys: 072
with

unlisted_lines as (
    select file_id from raw_lines
    anti join ingest_current_keys as listed
        on listed.kind = 'sku' and listed.value = raw_lines.sku
    union
    select file_id from raw_lines
    anti join ingest_current_keys as listed
        on listed.kind = 'store' and listed.value = raw_lines.store
)

select distinct
    files.source,
    files.path,
from ledger as files
semi join unlisted_lines using (file_id)
where files.status = 'current'
order by files.source, files.path
