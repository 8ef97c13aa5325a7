-- duplicates are quarantined like any other broken rule
update ingest_checked
set
    reason = 'duplicate_line',
    detail = concat_ws(' ', 'receipt=' || receipt, 'line=' || line::varchar, 'store=' || store)
where ordinal in (select ordinal from ingest_duplicates)
