-- duplicates are quarantined like any other broken rule; the key's values are quoted only when
-- no card column is mapped ($values_shown)
update ingest_checked
set
    reason = 'duplicate_line',
    detail = 'store, day, receipt and line: already accepted'
        || case
            when $values_shown then ' (' || concat_ws(', ',
                'store ''' || store || '''',
                'receipt ''' || receipt || '''',
                'line ' || line::varchar) || ')'
            else ''
        end
where ordinal in (select ordinal from ingest_duplicates)
