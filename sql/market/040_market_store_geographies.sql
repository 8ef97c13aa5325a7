-- One row per store with a geography: the value of the configured geography column (store,
-- region, chain, ...), picked by unpivoting the stores table and joining the settings row.
create or replace table market_store_geographies as

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

geography_column as (
    select
        column_name,
    from market_settings_store_columns
    where role = 'geography'
),

final as (
    select
        store_cells."stores store" as store,
        store_cells.column_value as geography,
    from store_cells
    inner join geography_column using (column_name)
    where store_cells.column_value is not null
)

select
    store,
    geography,
from final
