-- current shelf-price files with rows of a SKU or store that the catalogue or stores table no
-- longer lists (the source's must_exist keys, references.py); as 072
with

unlisted_rows as (
    select file_id from ref_shelf_prices
    anti join catalogue on cast(catalogue.sku as varchar) = cast(ref_shelf_prices.sku as varchar)
    where ref_shelf_prices.sku is not null
    union
    select file_id from ref_shelf_prices
    anti join stores on cast(stores.store as varchar) = cast(ref_shelf_prices.store as varchar)
    where ref_shelf_prices.store is not null
)

select distinct
    files.source,
    files.path,
from ledger as files
semi join unlisted_rows using (file_id)
where files.status = 'current'
order by files.source, files.path
