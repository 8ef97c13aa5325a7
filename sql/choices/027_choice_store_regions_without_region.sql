-- The stores table has no region column: the whole chain is one region.
create or replace table choice_store_regions as

with

final as (
    select distinct cast(store as varchar) as store, '' as region from stores
)

select store, region from final;
