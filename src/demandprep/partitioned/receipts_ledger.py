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
from demandprep.sqlfiles import run_sql

# after 030 (the new files, numbered): the older versions superseded, then the new rows
LEDGER_FILES = (
    "031_supersede_partitioned_files",
    "032_partitioned_ledger_insert",
    "033_partitioned_quarantine_insert",
)

# a partition's ledger row of each receipts file version (the current one, else the latest: a
# reading of the same bytes refused keeps the version before current), and the lines it kept
PARTITION_VERSIONS = (
    "select versions.*, kept.lines, kept.first_sold_at, kept.last_sold_at from ("
    "select path, sha256, file_id, bytes, status, reason, rows_read, rows_accepted, "
    "rows_quarantined, ingested_at, settings_fingerprint from {p}.ledger "
    "where source = 'receipts' "
    "qualify row_number() over (partition by path, sha256 "
    "order by status in ('current', 'empty') desc, version desc) = 1"
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


def read_again_in_partitions(con: duckdb.DuckDBPyConnection, aliases: list[str]) -> dict[str, str]:
    """The coordinator's current receipts files (path to sha256) that a partition read again
    as the same bytes after the coordinator ledgered them (a SKU or store listed or no longer
    listed, a duplicate's copy that left): their lines changed, so they are ledgered again."""
    rows = con.execute(
        f"with partition_rows as (select path, sha256, max(ingested_at) as ingested_at "  # noqa: S608
        f"from ({union_of(aliases, PARTITION_VERSIONS)}) group by all) "
        "select ledger.path, ledger.sha256 from ledger join partition_rows using (path, sha256) "
        "where ledger.source = 'receipts' and ledger.status in ('current', 'empty') "
        "and partition_rows.ingested_at > ledger.ingested_at"
    ).fetchall()
    return dict(rows)


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
    run_sql(con, "partitioned/030_partitioned_files.sql", {"last": last_number})
    for name in LEDGER_FILES:
        run_sql(con, f"partitioned/{name}.sql")
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
