-- a file that could not be ingested: ledgered with no rows
insert into ledger
select
    $file_id as file_id,
    $source as source,
    $path as path,
    $version as version,
    $bytes as bytes,
    $sha256 as sha256,
    null as first_sold_at,
    null as last_sold_at,
    0 as rows_read,
    0 as rows_accepted,
    0 as rows_quarantined,
    'failed' as status,
    $ingested_at as ingested_at,
    null::varchar as reason,
