-- accepted lines per file of the batch, counted in raw_lines itself (ids are consecutive)
create temp table ingest_accepted_counts as
select
    file_id,
    count(*) as rows,
    min(sold_at) as first_sold_at,
    max(sold_at) as last_sold_at,
from raw_lines
where file_id >= $first_file_id and file_id <= $last_file_id
group by all
