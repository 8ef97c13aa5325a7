-- the ingest's own tables; created once, never dropped by a run
create table if not exists raw_lines (
    file_id varchar not null,
    line_no bigint not null,
    receipt varchar not null,
    line bigint,
    store varchar not null,
    sold_at timestamp not null,
    sku varchar not null,
    quantity double not null,
    amount double not null,
    discount double not null,
    card varchar,
    line_kind varchar not null,
);

create table if not exists quarantine (
    file_id varchar not null,
    source varchar not null,
    path varchar not null,
    line_no bigint,
    reason varchar not null,
    detail varchar,
    original_text varchar,
);

create table if not exists ledger (
    file_id varchar not null,
    source varchar not null,
    path varchar not null,
    version bigint not null,
    bytes bigint not null,
    sha256 varchar not null,
    first_sold_at timestamp,
    last_sold_at timestamp,
    rows_read bigint not null,
    rows_accepted bigint not null,
    rows_quarantined bigint not null,
    status varchar not null,
    ingested_at timestamp not null,
    reason varchar,
    settings_fingerprint varchar,
);

-- warehouses made before these columns existed gain them (null on their old rows: a null
-- fingerprint counts as the current settings, so an upgrade does not re-read everything)
alter table ledger add column if not exists reason varchar;

alter table ledger add column if not exists settings_fingerprint varchar;

create table if not exists ledger_reasons (
    file_id varchar not null,
    reason varchar not null,
    rows bigint not null,
);

-- seconds per phase of each ingest run (ingest/timings.py), for benchmarks and slow nights
create table if not exists ingest_runs (
    run_at timestamp not null,
    phase varchar not null,
    seconds double not null,
    run_seconds double not null,
);

-- per input path, its stat and the sha256 its bytes had (ingest/files.py): a file whose stat
-- is unchanged since is not read again for its checksum; a stale row only costs a read
create table if not exists file_stamps (
    path varchar not null,
    bytes bigint not null,
    mtime_ns bigint not null,
    ctime_ns bigint not null,
    inode ubigint not null,
    device ubigint not null,
    sha256 varchar not null,
    recorded_at_ns bigint not null,
);

-- the sale days of each receipts file's lines quarantined as duplicate_line (032), and each
-- receipts file version that left (superseded, withdrawn) with the highest file number at the
-- time (065, 077): a duplicate whose accepted copy may have left is judged again (075)
create table if not exists duplicate_days (
    file_id varchar not null,
    sale_day date not null,
);

create table if not exists ingest_departures (
    file_id varchar not null,
    left_in bigint not null,
);

-- the distinct SKUs and stores of each receipts file's lines quarantined as unknown_sku or
-- unknown_store (033): a file is read again when the catalogue or stores table lists one (075)
create table if not exists quarantined_keys (
    file_id varchar not null,
    reason varchar not null,
    value varchar not null,
);

-- the SKUs ('sku') and stores ('store') the catalogue and stores table listed when the accepted
-- rows were last compared with them (ingest/unlisted_keys.py): a key that leaves the list makes
-- the files with rows of it be read again (072, 073)
create table if not exists listed_keys (
    kind varchar not null,
    value varchar not null,
);

-- the stores and days whose lines a partition's warehouse keeps (partitioned/map.py writes the
-- one row before its ingest); empty in one process: every line (030)
create temp table if not exists ingest_line_scope (
    stores varchar[] not null,
    first_day date,
    after_last_day date,
);

-- each path's latest ledger row (the latest reading of it, whatever its status) with its file
-- number (F + digits, increasing in ingest order): 075 and 076 compare readings with changes
create or replace temp view ingest_latest_readings as
select
    source,
    path,
    status,
    try_cast(substr(file_id, 2) as bigint) as number,
from ledger
qualify row_number() over (partition by source, path order by version desc) = 1;
