"""The coordinator's receipts ledger and quarantine, assembled from the partitions' own.

The coordinator reads no receipt line: each partition ingests its routed files through the
ordinary ingest and keeps its own lines. For every receipts file version new to the coordinator,
one ledger row is written (a new file id and version, the older version superseded, as the
ingest does) from the partitions that read it:
- rows read, bytes, status and reason: the same in each of them (checked);
- rows accepted: the sum over partitions of the lines each kept;
- quarantined lines: the union by line over those partitions, so a bad line of a file read by
  three partitions is counted once; a partition flags no false duplicate (it sees a subset of
  the earlier copies, and every copy of a line of its stores), so the union is the one-process
  quarantine;
and `rows read = accepted + quarantined` is checked per file before the transaction commits.
"""

from __future__ import annotations

import duckdb

from demandprep.errors import UserError
from demandprep.partitioned.attached import union_of

# a partition's latest ledger row of each receipts file version, and the lines it kept of it
PARTITION_VERSIONS = (
    "select versions.*, kept.lines, kept.first_sold_at, kept.last_sold_at from ("
    "select path, sha256, file_id, bytes, status, reason, rows_read, rows_accepted, "
    "rows_quarantined, ingested_at, settings_fingerprint from {p}.ledger "
    "where source = 'receipts' "
    "qualify row_number() over (partition by path, sha256 order by version desc) = 1"
    ") as versions left join ("
    "select file_id, count(*) as lines, min(sold_at) as first_sold_at, "
    "max(sold_at) as last_sold_at from {p}.raw_lines group by all"
    ") as kept using (file_id)"
)
# a partition's quarantined lines of each receipts file version
PARTITION_QUARANTINE = (
    "select own.path, own.sha256, quarantine.line_no, quarantine.reason, quarantine.detail, "
    "quarantine.original_text from {p}.quarantine as quarantine "
    "join {p}.ledger as own using (file_id) where own.source = 'receipts'"
)


def record_receipts_files(
    con: duckdb.DuckDBPyConnection, aliases: list[str], files: dict[str, str]
) -> None:
    """Ledger the receipts file versions `files` (path to sha256) from the attached partitions."""
    if not files:
        return
    wanted = {"paths": list(files), "checksums": list(files.values())}
    con.execute(
        "create or replace temp table partitioned_versions as "
        "with wanted as (select unnest($paths) as path, unnest($checksums) as sha256) "
        f"select * from ({union_of(aliases, PARTITION_VERSIONS)}) semi join wanted "
        "using (path, sha256)",
        wanted,
    )
    con.execute(
        "create or replace temp table partitioned_quarantine as "
        "with wanted as (select unnest($paths) as path, unnest($checksums) as sha256) "
        f"select distinct * from ({union_of(aliases, PARTITION_QUARANTINE)}) semi join wanted "
        "using (path, sha256)",
        wanted,
    )
    check_partitions_agree(con, files)
    con.execute("begin transaction")
    try:
        write_ledger_rows(con)
        con.execute("commit")
    except BaseException:
        con.execute("rollback")
        raise


def check_partitions_agree(con: duckdb.DuckDBPyConnection, files: dict[str, str]) -> None:
    """Every file was read by some partition, and all that read it saw the same file."""
    read = dict(
        con.execute(
            "select path, count(distinct (rows_read, bytes, status, coalesce(reason, ''))) "
            "from partitioned_versions group by all"
        ).fetchall()
    )
    for path in sorted(files):
        if read.get(path, 0) != 1:
            found = "no partition read" if path not in read else "the partitions disagree on"
            raise UserError(
                f"{path}: {found} this receipts file version, so the coordinator cannot ledger it.",
                "run the partitioned build again; if it repeats, remove the partitions' folders "
                "under partitioning.root to rebuild them from their files.",
            )


def write_ledger_rows(con: duckdb.DuckDBPyConnection) -> None:
    """Supersede the older versions, then write the new ledger, quarantine and reason rows."""
    last_number = con.execute(
        "select coalesce(max(try_cast(substr(file_id, 2) as bigint)), 0) from ledger"
    ).fetchone()[0]
    con.execute(
        "create or replace temp table partitioned_files as "
        "with combined as (select path, sha256, any_value(bytes) as bytes, "
        "any_value(status) as status, any_value(reason) as reason, "
        "any_value(rows_read) as rows_read, coalesce(sum(lines), 0) as kept, "
        "min(first_sold_at) as first_sold_at, max(last_sold_at) as last_sold_at, "
        "max(ingested_at) as ingested_at, any_value(settings_fingerprint) as fingerprint, "
        "max(rows_accepted) as rows_accepted, max(rows_quarantined) as rows_quarantined "
        "from partitioned_versions group by all), "
        "quarantined as (select path, sha256, count(*) as rows from partitioned_quarantine "
        "group by all), "
        "versions as (select path, max(version) as version from ledger "
        "where source = 'receipts' group by all) "
        # file ids continue the coordinator's: F + 7 digits (ingest.ledger.file_id_for)
        "select combined.*, 'F' || lpad((row_number() over (order by combined.path) + $last)"
        "::varchar, 7, '0') as file_id, coalesce(versions.version, 0) + 1 as version, "
        "coalesce(quarantined.rows, 0) as quarantined "
        "from combined left join quarantined using (path, sha256) "
        "left join versions using (path)",
        {"last": last_number},
    )
    con.execute(
        "delete from quarantine where file_id in (select file_id from ledger "
        "where source = 'receipts' and status in ('current', 'empty') "
        "and path in (select path from partitioned_files))"
    )
    con.execute(
        "update ledger set status = 'superseded' where source = 'receipts' "
        "and status in ('current', 'empty') and path in (select path from partitioned_files)"
    )
    # a current file's counts are the partitions' together; other statuses are any partition's
    con.execute(
        "insert into ledger by name select file_id, 'receipts' as source, path, version, bytes, "
        "sha256, first_sold_at, last_sold_at, rows_read, "
        "case when status = 'current' then kept else rows_accepted end as rows_accepted, "
        "case when status = 'current' then quarantined else rows_quarantined end "
        "as rows_quarantined, status, ingested_at, reason, "
        "fingerprint as settings_fingerprint from partitioned_files order by file_id"
    )
    con.execute(
        "insert into quarantine by name select files.file_id, 'receipts' as source, "
        "lines.path, lines.line_no, lines.reason, lines.detail, lines.original_text "
        "from partitioned_quarantine as lines join partitioned_files as files "
        "using (path, sha256) order by files.file_id, lines.line_no, lines.reason"
    )
    con.execute(
        "insert into ledger_reasons by name select files.file_id, lines.reason, "
        "count(*) as rows from partitioned_quarantine as lines "
        "join partitioned_files as files using (path, sha256) group by all order by all"
    )
    check_files_add_up(con)


def check_files_add_up(con: duckdb.DuckDBPyConnection) -> None:
    """Stop (before COMMIT) when a new current file's rows read differ from its rows placed."""
    wrong = con.execute(
        "select path, rows_read, kept, quarantined from partitioned_files "
        "where status = 'current' and rows_read <> kept + quarantined order by path limit 1"
    ).fetchone()
    if wrong is not None:
        path, read, kept, quarantined = wrong
        raise UserError(
            f"{path}: {read} rows read, but the partitions kept {kept} lines and quarantined "
            f"{quarantined}.",
            "remove the partitions' folders under partitioning.root to rebuild them from their "
            "files.",
        )
