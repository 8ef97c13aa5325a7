-- a Parquet file has no reader-level rejects: an empty table of the same shape
create temp table ingest_rejected as
select
    null::varchar as path,
    null::bigint as line_no,
    null::varchar as reason,
    null::varchar as detail,
    null::varchar as original_text,
where false
