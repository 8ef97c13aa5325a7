-- rows quarantined per file version and reason, counted from the quarantine itself
insert into ledger_reasons
select
    file_id,
    reason,
    count(*) as rows,
from quarantine
where file_id >= $first_file_id and file_id <= $last_file_id
group by all
