-- The new files' quarantined lines (the union over the partitions that read them) and their
-- counts per reason, under the coordinator's file ids.
insert into quarantine by name
select
    files.file_id,
    'receipts' as source,
    lines.path,
    lines.line_no,
    lines.reason,
    lines.detail,
    lines.original_text,
from partitioned_quarantine as lines
join partitioned_files as files using (path, sha256)
order by files.file_id, lines.line_no, lines.reason;

insert into ledger_reasons by name
select
    files.file_id,
    lines.reason,
    count(*) as rows,
from partitioned_quarantine as lines
join partitioned_files as files using (path, sha256)
group by all
order by all;
