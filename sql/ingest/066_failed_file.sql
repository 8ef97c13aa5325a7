-- a file that could not be ingested or was refused: ledgered with no rows and the reason why
insert into ledger by name
select
    $file_id as file_id,
    $source as source,
    $path as path,
    $version as version,
    $bytes as bytes,
    $sha256 as sha256,
    null::timestamp as first_sold_at,
    null::timestamp as last_sold_at,
    0 as rows_read,
    0 as rows_accepted,
    0 as rows_quarantined,
    $status as status,
    $ingested_at as ingested_at,
    $reason as reason,
    $settings_fingerprint as settings_fingerprint
