-- files whose latest ledger row is a refused reading numbered after the last change that could
-- turn a verdict (the current catalogue or stores version, a version that left): read again
-- now, they would be refused again, so the stale verdicts of their version before (075, and
-- rows of a key no longer listed) wait for the next such change. Numbers as in 075
with

last_change as (
    select greatest(
        coalesce((
            select max(try_cast(substr(file_id, 2) as bigint)) from ledger
            where source in ('catalogue', 'stores') and status = 'current'
        ), 0),
        coalesce((select max(left_in) from ingest_departures), 0)
    ) as number
)

select
    latest.source,
    latest.path,
from ingest_latest_readings as latest
cross join last_change
where latest.status = 'refused' and latest.number > last_change.number
order by latest.source, latest.path
