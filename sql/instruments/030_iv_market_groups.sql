-- The exclusion group of each market for the other-market price instrument: with
-- $exclude_same null a market excludes only itself; otherwise it excludes every market whose
-- stores share its value of the stores column $exclude_same (e.g. region).
-- $geography: the market geography level ('store' or a stores column);
-- $levels: the stores columns to read besides store (checked names).
-- group_count > 1 means the geography is coarser than $exclude_same; the stage refuses it.
create or replace table iv_market_groups as

with

store_levels_wide as (
    select
        cast(store as varchar) as store_key,
        columns(lambda c: c = 'store' or list_contains($levels, c))::varchar,
    from stores
),

store_levels as (
    from store_levels_wide
    unpivot include nulls (level_value for level in (columns(* exclude (store_key))))
),

markets as (
    select distinct
        market,
        geography,
    from iv_products
),

market_stores as (
    select
        markets.market,
        levels.store_key,
    from markets
    inner join store_levels as levels
        on levels.level = $geography
        and levels.level_value = markets.geography
),

store_groups as (
    select
        market_stores.market,
        count(distinct levels.level_value) as group_count,
        min(levels.level_value) as exclusion_group,
    from market_stores
    inner join store_levels as levels
        on levels.store_key = market_stores.store_key
        and levels.level = $exclude_same
    group by market_stores.market
),

final as (
    select
        markets.market,
        case
            when $exclude_same::varchar is null then markets.market
            else store_groups.exclusion_group
        end as exclusion_group,
        case
            when $exclude_same::varchar is null then 1
            else coalesce(store_groups.group_count, 0)
        end as group_count,
    from markets
    left join store_groups using (market)
)

select
    market,
    exclusion_group,
    group_count,
from final
order by market
