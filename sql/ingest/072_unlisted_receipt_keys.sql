-- current receipts files with accepted lines of a SKU or store that the catalogue or stores
-- table no longer lists: read today, those lines would be quarantined as unknown_sku or
-- unknown_store (the other direction from 075's unknown keys that became listed). Run only
-- when the catalogue or stores versions changed since the last comparison (listed_keys_state)
with

unlisted_lines as (
    select file_id from raw_lines
    anti join catalogue on cast(catalogue.sku as varchar) = raw_lines.sku
    union
    select file_id from raw_lines
    anti join stores on cast(stores.store as varchar) = raw_lines.store
)

select distinct
    files.source,
    files.path,
from ledger as files
semi join unlisted_lines using (file_id)
where files.status = 'current'
order by files.source, files.path
