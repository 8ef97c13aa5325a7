-- One row per assumption and market: size, inside quantity (equivalent units of every inside
-- product, fringe included), outside share, product count and visits. The outside good is what
-- the size leaves over: s_0 = 1 - Q / M; with $zero_shares = 'add_one' it is (M - Q + 1) /
-- (M + J + 1), J the market's inside product count (see 130_shares.sql).
create or replace table markets_slice as

with

sizes as (
    select
        assumption,
        market,
        geography,
        period_start,
        market_size,
    from market_sizes
    semi join market_slice_periods using (period_start)
),

inside as (
    select
        market,
        sum(equivalent_quantity order by product) as inside_quantity,
        count(*) as product_count,
    from market_products
    semi join market_slice_periods using (period_start)
    group by market
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

markets_measured as (
    select
        sizes.assumption,
        sizes.market,
        sizes.geography,
        sizes.period_start,
        sizes.market_size,
        inside.inside_quantity,
        case
            when $zero_shares = 'add_one'
                then (sizes.market_size - inside.inside_quantity + 1)
                    / (sizes.market_size + inside.product_count + 1)
            else 1 - inside.inside_quantity / sizes.market_size
        end as outside_share,
        inside.product_count,
        coalesce(geography_visits.visits, 0) as visits,
    from sizes
    inner join inside using (market)
    left join geography_visits
        on geography_visits.geography = sizes.geography
        and geography_visits.period_start = sizes.period_start
),

final as (
    select
        assumption,
        market,
        geography,
        period_start,
        market_size,
        inside_quantity,
        outside_share,
        product_count,
        visits,
    from markets_measured
)

select
    assumption,
    market,
    geography,
    period_start,
    market_size,
    inside_quantity,
    outside_share,
    product_count,
    visits,
from final
