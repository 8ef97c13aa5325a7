-- the older stamps of the paths about to be recorded again
delete from file_stamps
where path in (select unnest($paths::varchar[]))
