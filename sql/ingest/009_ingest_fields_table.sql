-- the batch's lines as the reader sees them (filled by 010, one piece of lines at a time)
create temp table ingest_fields (
    ordinal bigint,
    position integer,
    line_no bigint,
    text varchar,
    fields varchar[],
    field_count bigint,
    reason varchar,
    detail varchar,
    record boolean,
    trimmed boolean,
)
