-- for each run of rejected records of a file: how many records the reader accepted before it
-- and how many it rejected up to it; an accepted record's line number is then its rank in the
-- file + header lines + the rejects before it
create temp table ingest_gaps as
with

rejected as (
    select
        path,
        line_no - $header_lines as record,
        row_number() over (partition by path order by line_no) as rejected_so_far,
    from ingest_rejected
),

final as (
    select
        path,
        record - rejected_so_far as accepted_before,
        max(rejected_so_far) as rejected_before,
    from rejected
    group by all
)

select
    path,
    accepted_before,
    rejected_before,
from final
