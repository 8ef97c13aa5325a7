-- One row per geography of the market build (markets.geography) with the number of its stores
-- and the stores columns that hold one value in it (market_geography_levels), with their
-- stores types: region and chain when markets are stores, so region x period effects need
-- no second lookup. $level_columns: ['store', the level columns] ('store' keeps the COLUMNS
-- list from being empty; it is dropped below).
create or replace table geographies as

with

store_geographies as (
    select
        store,
        geography,
    from market_store_geographies
),

store_levels as (
    select
        columns($level_columns),
    from stores
),

geography_stores as (
    select
        store_geographies.geography,
        store_levels.* exclude (store),
    from store_geographies
    inner join store_levels on cast(store_levels.store as varchar) = store_geographies.store
),

final as (
    select
        geography,
        count(*) as store_count,
        -- one value per geography by market_geography_levels, so min() only picks it
        min(columns(* exclude (geography))),
    from geography_stores
    group by geography
)

-- the level columns vary with the stores file, hence the star
select * from final
