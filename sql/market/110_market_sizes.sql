-- The size M of every market under every named assumption, side by side:
--   visits         distinct receipts (all categories) in the market x units_per_visit
--   population     population of the geography's stores x units_per_person_per_day x days
--   peak_multiple  multiple x the geography's largest in-scope volume over all periods
--   table          the user's size for the geography and period start
-- A size that cannot be worked out (missing or non-numeric population, no table row, two
-- table rows) is null here; the stage stops and names those markets.
create or replace table market_sizes_slice as

with

markets as (
    select distinct
        market,
        geography,
        period_start,
    from market_products
    semi join market_slice_periods using (period_start)
),

assumptions as (
    select
        assumption,
        method,
        units_per_visit,
        units_per_person_per_day,
        population_column,
        multiple,
    from market_settings_assumptions
),

periods as (
    select distinct
        period_start,
        days_in_period,
    from market_calendar
),

store_geographies as (
    select
        store,
        geography,
    from market_store_geographies
),

geography_visits as (
    select
        store_geographies.geography,
        market_store_visits.period_start,
        sum(market_store_visits.visits)::bigint as visits,
    from market_store_visits
    semi join market_slice_periods using (period_start)
    inner join store_geographies using (store)
    group by all
),

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

store_populations as (
    select
        assumptions.assumption,
        store_geographies.geography,
        try_cast(store_cells.column_value as double) as population,
    from store_cells
    inner join assumptions on assumptions.population_column = store_cells.column_name
    inner join store_geographies on store_geographies.store = store_cells."stores store"
),

geography_populations as (
    -- one store without a usable population leaves its geography without one
    select
        assumption,
        geography,
        case
            when count(*) = count(population) then sum(population order by population)
        end as population,
    from store_populations
    group by all
),

peak_volumes as (
    select
        geography,
        peak_volume,
    from market_peak_volumes
),

size_rows as (
    select
        geography,
        period,
        case when count(*) = 1 then min(size) end as size,
    from market_input_size_table
    group by all
),

market_assumptions as (
    select
        assumptions.assumption,
        assumptions.method,
        markets.market,
        markets.geography,
        markets.period_start,
        case assumptions.method
            when 'visits' then geography_visits.visits * assumptions.units_per_visit
            when 'population' then
                geography_populations.population
                * assumptions.units_per_person_per_day
                * periods.days_in_period
            when 'peak_multiple' then peak_volumes.peak_volume * assumptions.multiple
            when 'table' then size_rows.size
        end as market_size,
    from markets
    cross join assumptions
    left join geography_visits
        on geography_visits.geography = markets.geography
        and geography_visits.period_start = markets.period_start
    left join geography_populations
        on geography_populations.assumption = assumptions.assumption
        and geography_populations.geography = markets.geography
    left join periods on periods.period_start = markets.period_start
    left join peak_volumes on peak_volumes.geography = markets.geography
    left join size_rows
        on size_rows.geography = markets.geography
        and size_rows.period = markets.period_start
),

final as (
    select
        assumption,
        method,
        market,
        geography,
        period_start,
        market_size,
    from market_assumptions
)

select
    assumption,
    method,
    market,
    geography,
    period_start,
    market_size,
from final
