-- The region of each store, for the regional median price.
create or replace table choice_store_regions as

with

stores as (
    select
        cast(store as varchar) as store,
        cast(region as varchar) as region,
    from stores
),

final as (
    select store, coalesce(min(region), '') as region from stores group by store
)

select store, region from final;
