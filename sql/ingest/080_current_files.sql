-- every current (or empty) file with its checksum and settings, for moves.py: in path order,
-- so of two gone files with the same bytes the first path is taken first
select source, path, file_id, sha256, settings_fingerprint
from ledger
where status in ('current', 'empty')
order by source, path
