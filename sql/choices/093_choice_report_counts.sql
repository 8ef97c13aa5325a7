-- What the report's choice section shows, counted per day of the occasions from $counted_from
-- on (every occasion when null), so that a night counts the rows it wrote only and the report
-- adds the days up (export/report_data.py); kept with `choices`, whose rows from a day on a
-- night replaces (build.py deletes the counts of those days first). Per day: chosen rows (one
-- per occasion), rows, holdout occasions; occasions by alternatives offered (an unsampled
-- occasion offers its choice_set_size on every row, the build checks it in 091: only sampled
-- ones are counted row by row); chosen rows by alternative; rows outside the burn-in by tenth
-- of loyalty (its lower bound; 1.0 falls in the last tenth).
insert into choice_report_counts

with

counted as (
    select
        left(occasion, 10) as day,
        occasion,
        alternative,
        chosen,
        holdout,
        sampled,
        choice_set_size,
        loyalty,
        burn_in,
    from choices
    where $counted_from is null or occasion >= $counted_from
),

totals as (
    select
        day,
        count(*) filter (where chosen) as occasions,
        count(*) as rows,
        count(*) filter (where chosen and holdout) as holdout_occasions,
    from counted
    group by day
),

offered as (
    select day, choice_set_size as alternatives from counted where chosen and not sampled
    union all
    select any_value(day), count(*) as alternatives from counted where sampled group by occasion
)

select day, 'occasions' as measure, null as alternative, null as alternatives,
    null as loyalty_low, occasions as count,
from totals
union all
select day, 'rows', null, null, null, rows from totals
union all
select day, 'holdout_occasions', null, null, null, holdout_occasions from totals
union all
select day, 'offered', null, alternatives, null, count(*) from offered group by day, alternatives
union all
select day, 'chosen', alternative, null, null, count(*)
from counted
where chosen
group by day, alternative
union all
select day, 'loyalty', null, null, least(floor(loyalty * 10), 9) / 10, count(loyalty)
from counted
where not burn_in
group by day, 5;
