-- One row per receipts file version new to the coordinator, from the partitions that read it
-- (partitioned_versions, partitioned_quarantine: receipts_ledger.record_receipts_files): rows
-- read, bytes, status and reason are any partition's (checked equal before), accepted lines the
-- sum of the lines each partition kept, quarantined lines the union by line. File ids continue
-- the coordinator's ($last: its highest number), F + 7 digits as ingest.ledger.file_id_for.
create or replace temp table partitioned_files as

with

combined as (
    select
        path,
        sha256,
        any_value(bytes) as bytes,
        any_value(status) as status,
        any_value(reason) as reason,
        any_value(rows_read) as rows_read,
        coalesce(sum(lines), 0) as kept,
        min(first_sold_at) as first_sold_at,
        max(last_sold_at) as last_sold_at,
        max(ingested_at) as ingested_at,
        any_value(settings_fingerprint) as fingerprint,
        max(rows_accepted) as rows_accepted,
        max(rows_quarantined) as rows_quarantined,
    from partitioned_versions
    group by all
),

quarantined as (
    select path, sha256, count(*) as rows from partitioned_quarantine group by all
),

versions as (
    select path, max(version) as version from ledger where source = 'receipts' group by all
),

final as (
    select
        combined.*,
        'F' || lpad((row_number() over (order by combined.path) + $last)::varchar, 7, '0')
            as file_id,
        coalesce(versions.version, 0) + 1 as version,
        coalesce(quarantined.rows, 0) as quarantined,
    from combined
    left join quarantined using (path, sha256)
    left join versions using (path)
)

select * from final;
