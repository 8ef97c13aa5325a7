-- One row per SKU of an in-scope category: its product id (the key columns' values joined
-- with '|', in config order), firm, nest, and how many equivalent units one unit sold is.
-- The catalogue is unpivoted into (sku, column_name, value) cells so the columns named in the
-- config are picked by joining settings rows, never by pasting names into this text.
create or replace table market_skus as

with

catalogue_rows as (
    select
        sku as "catalogue sku",
        columns(*)::varchar,
    from catalogue
),

catalogue_cells as (
    from catalogue_rows
    unpivot include nulls (column_value for column_name in (columns(* exclude ("catalogue sku"))))
),

column_roles as (
    select
        role,
        position,
        column_name,
    from market_settings_catalogue_columns
),

in_scope_skus as (
    select
        sku,
        category,
    from catalogue
    where category in (select category from market_settings_categories)
),

unit_grams as (
    -- grams per unit of pack size; the pound and ounce are the international avoirdupois units
    select
        unit,
        grams,
    from (values ('g', 1.0), ('kg', 1000.0), ('lb', 453.59237), ('oz', 28.349523125))
        as units (unit, grams)
),

sku_roles as (
    select
        catalogue_cells."catalogue sku" as sku,
        string_agg(coalesce(column_value, ''), '|' order by position)
            filter (where role = 'key') as product,
        min(column_value) filter (where role = 'firm') as firm,
        min(column_value) filter (where role = 'nest') as nest,
        min(try_cast(column_value as double)) filter (where role = 'pack_size') as pack_size,
        min(lower(trim(column_value))) filter (where role = 'pack_unit') as pack_unit,
    from catalogue_cells
    inner join column_roles using (column_name)
    group by all
),

skus_converted as (
    select
        in_scope_skus.sku,
        in_scope_skus.category,
        sku_roles.product,
        sku_roles.firm,
        sku_roles.nest,
        sku_roles.pack_size,
        sku_roles.pack_unit,
        case
            when $unit_kind = 'item' then 1.0
            else sku_roles.pack_size * unit_grams.grams / $unit_grams
        end as equivalent_per_unit,
    from in_scope_skus
    inner join sku_roles using (sku)
    left join unit_grams on unit_grams.unit = sku_roles.pack_unit
),

final as (
    select
        sku,
        category,
        product,
        firm,
        nest,
        pack_size,
        pack_unit,
        equivalent_per_unit,
    from skus_converted
)

select
    sku,
    category,
    product,
    firm,
    nest,
    pack_size,
    pack_unit,
    equivalent_per_unit,
from final
