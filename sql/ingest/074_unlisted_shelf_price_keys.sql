-- current shelf-price files with rows of a SKU or store that the catalogue or stores table no
-- longer lists (the source's must_exist keys, references.py); as 073
with

shelf_keys as (
    select
        file_id,
        cast(sku as varchar) as sku,
        cast(store as varchar) as store,
    from ref_shelf_prices
),

unlisted_rows as (
    select file_id from shelf_keys
    anti join ingest_current_keys as listed
        on listed.kind = 'sku' and listed.value = shelf_keys.sku
    where shelf_keys.sku is not null
    union
    select file_id from shelf_keys
    anti join ingest_current_keys as listed
        on listed.kind = 'store' and listed.value = shelf_keys.store
    where shelf_keys.store is not null
)

select distinct
    files.source,
    files.path,
from ledger as files
semi join unlisted_rows using (file_id)
where files.status = 'current'
order by files.source, files.path
