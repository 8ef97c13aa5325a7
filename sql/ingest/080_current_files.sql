-- for moves.py: every current (or empty) file, and every path whose latest version is held
-- back (withdrawn, refused), with its checksum, settings and status; in path order, so of two
-- gone files with the same bytes the first path is taken first
with

latest as (
    select source, path, file_id, sha256, settings_fingerprint, status,
    from ledger
    qualify row_number() over (partition by source, path order by version desc) = 1
),

held_back as (
    select * from latest where status in ('withdrawn', 'refused')
),

current_files as (
    select source, path, file_id, sha256, settings_fingerprint, status,
    from ledger
    where status in ('current', 'empty')
)

select source, path, file_id, sha256, settings_fingerprint, status from current_files
union all
select source, path, file_id, sha256, settings_fingerprint, status from held_back
order by source, path, status
