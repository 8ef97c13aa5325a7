-- the highest version number of each path of a source
select
    path,
    max(version) as last_version,
from ledger
where source = $source
group by all
