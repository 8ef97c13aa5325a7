-- One row per stores column that holds one value in each geography (region and chain when
-- markets are stores, chain when they are regions, ...): the levels geographies.parquet
-- carries. A null counts as a value, so a column that is blank for some stores of a
-- geography and set for others is no level. The stores table is unpivoted into
-- (store, column_name, value) cells, so no column name is pasted into this text.
create or replace table market_geography_levels as

with

store_rows as (
    select
        store as "stores store",
        columns(*)::varchar,
    from stores
),

store_cells as (
    from store_rows
    unpivot include nulls (column_value for column_name in (columns(* exclude ("stores store"))))
),

store_geographies as (
    select
        store,
        geography,
    from market_store_geographies
),

values_per_geography as (
    select
        store_cells.column_name,
        store_geographies.geography,
        count(distinct coalesce(store_cells.column_value, chr(0))) as distinct_values,
    from store_cells
    inner join store_geographies on store_geographies.store = store_cells."stores store"
    group by all
),

final as (
    select
        column_name,
    from values_per_geography
    group by column_name
    having max(distinct_values) = 1
)

select
    column_name,
from final
