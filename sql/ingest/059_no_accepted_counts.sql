-- a batch of empty files accepts nothing: the accepted counts are an empty table of their shape
create temp table ingest_accepted_counts as
select
    null::varchar as file_id,
    null::bigint as rows,
    null::timestamp as first_sold_at,
    null::timestamp as last_sold_at,
where false
