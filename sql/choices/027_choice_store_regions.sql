-- The region of each store, for the regional median price. A stores table without a region
-- column gets one, all null: the whole chain is one region ('').
create or replace table choice_store_regions as

with

stores_with_region as (
    from stores
    union all by name
    select null as region where false
),

store_rows as (
    select
        cast(store as varchar) as store,
        cast(region as varchar) as region,
    from stores_with_region
),

final as (
    select store, coalesce(min(region), '') as region from store_rows group by store
)

select store, region from final;
