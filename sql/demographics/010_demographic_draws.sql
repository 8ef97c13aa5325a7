-- One row per assumption, market and draw: a household drawn with probability proportional to
-- its visits to the market's stores in the market's period, and its configured demographics
-- ($demographic_columns = ['card', <choices.demographics>]; the card is left out below).
-- A market where fewer than $min_households households of the households file visited draws
-- from its geography over all periods, and one whose geography has fewer too from every
-- household with a visit (draw_level says which). Draw d of market m picks the household
-- whose cumulative-visits interval (households ordered by card inside the warehouse) holds
-- md5_number_upper($seed / m / d) mod the pool's visits: exact integers, so no thread order
-- or rounding can change a draw. Integration weight 1 / $draws.
-- A visit is a receipt with a sale line and a card, identified as in the market build
-- ($receipt_ids_unique_per, sql/market/050) and placed in the store and period of its first line.
create or replace table demographic_draws as

with

card_lines as (
    select
        store,
        receipt,
        sold_at,
        card,
    from raw_lines
    where line_kind = 'sale' and card is not null
),

identified_lines as (
    select
        store,
        receipt,
        sold_at,
        card,
        case when $receipt_ids_unique_per <> 'chain' then store end as visit_store,
        case when $receipt_ids_unique_per = 'store_day' then sold_at::date end as visit_day,
    from card_lines
),

visits as (
    select
        min({'sold_at': sold_at, 'store': store}) as first_line,
        min(card) as card,
    from identified_lines
    group by visit_store, visit_day, receipt
),

household_values as (
    select
        columns($demographic_columns),
    from households
),

calendar as (
    select
        date,
        period_start,
    from market_calendar
),

store_geographies as (
    select
        store,
        geography,
    from market_store_geographies
),

built_markets as (
    select distinct
        market,
        geography,
        period_start,
    from markets
),

assumptions as (
    select distinct
        assumption,
    from markets
),

-- visits of households in the households file (others have no demographics to draw)
known_visits as (
    select
        visits.card,
        store_geographies.geography,
        calendar.period_start,
    from visits
    inner join calendar on calendar.date = visits.first_line.sold_at::date
    inner join store_geographies on store_geographies.store = visits.first_line.store
    where visits.card in (select card from household_values)
),

pool_rows as (
    select
        'market' as draw_level,
        built_markets.market as pool,
        known_visits.card,
        count(*) as visits,
    from known_visits
    inner join built_markets using (geography, period_start)
    group by all
    union all
    select
        'geography' as draw_level,
        geography as pool,
        card,
        count(*) as visits,
    from known_visits
    group by all
    union all
    select
        'all' as draw_level,
        '' as pool,
        card,
        count(*) as visits,
    from known_visits
    group by all
),

pool_intervals as (
    select
        draw_level,
        pool,
        card,
        sum(visits) over (
            partition by draw_level, pool order by card rows unbounded preceding
        ) - visits as lower,
        sum(visits) over (
            partition by draw_level, pool order by card rows unbounded preceding
        ) as upper,
    from pool_rows
),

pool_sizes as (
    select
        draw_level,
        pool,
        count(*) as households,
        sum(visits) as visits,
    from pool_rows
    group by all
),

market_levels as (
    select
        built_markets.market,
        built_markets.geography,
        case
            when coalesce(own.households, 0) >= $min_households then 'market'
            when coalesce(area.households, 0) >= $min_households then 'geography'
            else 'all'
        end as level,
    from built_markets
    left join pool_sizes as own on own.draw_level = 'market' and own.pool = built_markets.market
    left join pool_sizes as area
        on area.draw_level = 'geography' and area.pool = built_markets.geography
),

market_pools as (
    select
        market,
        level as draw_level,
        case level
            when 'market' then market
            when 'geography' then geography
            else ''
        end as pool,
    from market_levels
),

draw_numbers as (
    select
        unnest(range(1, $draws + 1)) as draw,
),

draw_targets as (
    select
        market_pools.market,
        draw_numbers.draw,
        market_pools.draw_level,
        market_pools.pool,
        md5_number_upper(concat_ws('/', $seed, market_pools.market, draw_numbers.draw))
            % pool_sizes.visits as target,
    from market_pools
    cross join draw_numbers
    inner join pool_sizes using (draw_level, pool)
),

picked as (
    select
        draw_targets.market,
        draw_targets.draw,
        draw_targets.draw_level,
        pool_intervals.card,
    from draw_targets
    inner join pool_intervals
        on pool_intervals.draw_level = draw_targets.draw_level
        and pool_intervals.pool = draw_targets.pool
        and draw_targets.target >= pool_intervals.lower
        and draw_targets.target < pool_intervals.upper
),

final as (
    select
        assumptions.assumption,
        picked.market,
        picked.draw,
        1.0 / $draws as weight,
        picked.draw_level,
        household_values.* exclude (card),
    from picked
    inner join household_values using (card)
    cross join assumptions
)

-- the demographic columns vary with the config, hence the star
select * from final
