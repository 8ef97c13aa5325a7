-- current files with lines quarantined against something that changed after the file was
-- read: unknown_sku (catalogue) and unknown_store (stores), in receipts and in the reference
-- sources that name a SKU or store (shelf prices, ...), duplicate_line (a receipts file that
-- left) and duplicate_key (a file of the same reference source that left); and files refused
-- before the catalogue or stores table changed. Read again, such a line is judged as a first
-- read would judge it today.
-- "After" by file number (F + digits, increasing in ingest order, 063): ingested_at keeps
-- whole seconds only
with

reference_changes as (
    select
        source,
        max(try_cast(substr(file_id, 2) as bigint)) as changed_in,
    from ledger
    where source in ('catalogue', 'stores') and status = 'current'
    group by source
),

verdicts as (
    select
        reason,
        source,
    from (values ('unknown_sku', 'catalogue'), ('unknown_store', 'stores')) as v (reason, source)
),

-- receipts files read by a version that recorded no keys (before quarantined_keys, 033) or no
-- sale days of duplicates (before duplicate_days, 032): their verdicts are judged by the
-- broader rules, file number against the tables' changes or any departure; read again, they
-- record both
keyless_receipts as (
    select file_id from quarantine
    where source = 'receipts' and reason in ('unknown_sku', 'unknown_store')
    except
    select file_id from quarantined_keys
),

dayless_receipts as (
    select file_id from quarantine
    where source = 'receipts' and reason = 'duplicate_line'
    except
    select file_id from duplicate_days
),

stale_files as (
    select distinct
        files.source,
        files.path,
    from ledger as files
    join quarantine on quarantine.file_id = files.file_id
    join verdicts on verdicts.reason = quarantine.reason
    join reference_changes on reference_changes.source = verdicts.source
    where files.status = 'current'
        and files.source <> verdicts.source
        and (files.source <> 'receipts' or files.file_id in (select file_id from keyless_receipts))
        and try_cast(substr(files.file_id, 2) as bigint) < reference_changes.changed_in
),

-- receipts (many files) are read again only for a SKU or store the tables now list, so an
-- edit of the catalogue that lists none of them reads no receipts file again
known_now as (
    select 'unknown_sku' as reason, cast(sku as varchar) as value from catalogue
    union all
    select 'unknown_store' as reason, cast(store as varchar) as value from stores
),

stale_receipts as (
    select distinct
        files.source,
        files.path,
    from ledger as files
    join quarantined_keys as keys on keys.file_id = files.file_id
    semi join known_now on known_now.reason = keys.reason and known_now.value = keys.value
    where files.status = 'current' and files.source = 'receipts'
),

-- a receipts version that left after a file was read, on a day of the file's duplicates: the
-- accepted copy of one of them may have left with it (its accepted lines span its sale days)
departed_days as (
    select
        departures.left_in,
        gone.first_sold_at::date as first_day,
        gone.last_sold_at::date as last_day,
    from ingest_departures as departures
    join ledger as gone on gone.file_id = departures.file_id
    where gone.first_sold_at is not null
),

stale_duplicates as (
    select distinct
        files.source,
        files.path,
    from ledger as files
    join duplicate_days as days on days.file_id = files.file_id
    join departed_days
        on days.sale_day between departed_days.first_day and departed_days.last_day
    where files.status = 'current'
        and try_cast(substr(files.file_id, 2) as bigint) < departed_days.left_in
),

-- a dayless file's duplicates, after any receipts version left
stale_dayless as (
    select distinct
        files.source,
        files.path,
    from ledger as files
    join dayless_receipts using (file_id)
    join ingest_departures as departures
        on try_cast(substr(files.file_id, 2) as bigint) < departures.left_in
    join ledger as gone on gone.file_id = departures.file_id and gone.source = 'receipts'
    where files.status = 'current'
),

-- a reference file's duplicate_key rows, after a version of the same source left (reference
-- sources are small: any departure of the source makes them stale)
stale_reference_duplicates as (
    select distinct
        files.source,
        files.path,
    from ledger as files
    semi join quarantine
        on quarantine.file_id = files.file_id and quarantine.reason = 'duplicate_key'
    join ingest_departures as departures
        on try_cast(substr(files.file_id, 2) as bigint) < departures.left_in
    join ledger as gone on gone.file_id = departures.file_id and gone.source = files.source
    where files.status = 'current' and files.source <> 'receipts'
),

-- a file whose latest reading was refused (the version before, if any, stays current) is read
-- again once the catalogue or stores table changed after the refusal: a refusal for SKUs or
-- stores unknown then may not hold any more (076 keeps a refusal after the change waiting)
refused_before_change as (
    select
        latest_readings.source,
        latest_readings.path,
    from ingest_latest_readings as latest_readings
    where latest_readings.status = 'refused'
        and latest_readings.source not in ('catalogue', 'stores')
        and latest_readings.number < (select max(changed_in) from reference_changes)
)

select source, path from stale_files
union
select source, path from refused_before_change
union
select source, path from stale_receipts
union
select source, path from stale_duplicates
union
select source, path from stale_dayless
union
select source, path from stale_reference_duplicates
order by source, path
