-- The periods whose near-rival counts this build counts (060). A rival is near when its gap is
-- at most the spread, so when a spread moves a count changes exactly where a rival gap lies
-- between the two spreads, in (lower, higher]. Every period when $every_period (a full build,
-- or a spread that is or was not a finite number); else the periods computed again
-- (iv_build_periods) and those with a stored rival gap (iv_stored_gaps, 057) between the stored
-- spread (iv_stored_spreads) and this build's (iv_spreads, 058).
create or replace table iv_near_periods as

with

moved_spreads as (
    select
        characteristic,
        least(fresh.spread, stored.spread) as lower_spread,
        greatest(fresh.spread, stored.spread) as higher_spread,
    from iv_spreads as fresh
    inner join iv_stored_spreads as stored using (characteristic)
    where fresh.spread is distinct from stored.spread
),

gaps_between as (
    select distinct gaps.period_start
    from iv_stored_gaps as gaps
    inner join moved_spreads as moved using (characteristic)
    where gaps.gap > moved.lower_spread
        and gaps.gap <= moved.higher_spread
),

current_periods as (
    select distinct period_start from iv_products
),

final as (
    select period_start from current_periods
    where $every_period
        or period_start in (select build.period_start from iv_build_periods as build)
        or period_start in (select gaps.period_start from gaps_between as gaps)
)

select
    period_start,
from final
order by period_start
