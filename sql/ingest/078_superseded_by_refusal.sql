-- the older version of a file refused when read again under new settings leaves: superseded
-- (its rows are gone, version_rows.py); 079 records its departure
update ledger
set status = 'superseded'
where file_id = $previous_file_id
