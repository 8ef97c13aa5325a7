"""The ledger: one row per ingested file version, and the check that no row went missing.

`rows_read = rows_accepted + rows_quarantined` is verified per file from the tables themselves
(reader output, target table, quarantine) before the transaction commits; a mismatch is a bug
and stops the run.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

import duckdb

from demandprep.ingest.files import DiscoveredFile
from demandprep.ingest.version_rows import remove_version_rows
from demandprep.schemas.ingest import Ledger, Quarantine
from demandprep.sqlfiles import run_sql
from demandprep.validate import validate_query


class LedgerMismatchError(RuntimeError):
    """Rows read differ from rows accepted plus rows quarantined: the run must stop."""


@dataclass(frozen=True)
class BatchFile:
    """A discovered file with the ids its new ledger row gets."""

    discovered: DiscoveredFile
    file_id: str
    version: int


@dataclass(frozen=True)
class FileCounts:
    """Row counts of one file version, as found in the target table and the quarantine."""

    rows_read: int
    rows_accepted: int
    quarantined: dict[str, int]
    first_sold_at: datetime | None = None
    last_sold_at: datetime | None = None

    @property
    def rows_quarantined(self) -> int:
        """All quarantined rows of the file, every reason together."""
        return sum(self.quarantined.values())


def file_id_for(number: int) -> str:
    """The file id of the `number`-th file version ever ingested."""
    return f"F{number:07d}"


def assign_versions(
    con: duckdb.DuckDBPyConnection, source: str, files: list[DiscoveredFile]
) -> list[BatchFile]:
    """Consecutive new file ids and per-path version numbers for a batch of one source."""
    last_number = run_sql(con, "ingest/063_file_numbers.sql").fetchone()[0]
    rows = run_sql(con, "ingest/064_path_versions.sql", {"source": source}).fetchall()
    versions = {path: int(version) for path, version in rows}
    return [
        BatchFile(item, file_id_for(last_number + offset), versions.get(str(item.path), 0) + 1)
        for offset, item in enumerate(files, start=1)
    ]


def create_batch_table(con: duckdb.DuckDBPyConnection, batch: list[BatchFile]) -> None:
    """`ingest_batch_files`: the batch's files, their ids and what they replace."""
    con.execute(
        "create or replace temp table ingest_batch_files (position integer, path varchar, "
        "file_id varchar, version bigint, source varchar, bytes bigint, sha256 varchar, "
        "previous_file_id varchar)"
    )
    rows = [
        (
            position,
            str(item.discovered.path),
            item.file_id,
            item.version,
            item.discovered.source,
            item.discovered.bytes,
            item.discovered.sha256,
            item.discovered.previous_file_id,
        )
        for position, item in enumerate(batch)
    ]
    # one statement for the whole batch: a row-by-row executemany costs seconds for 700 files
    columns = list(zip(*rows, strict=True))
    con.execute(
        "insert into ingest_batch_files select unnest($c0), unnest($c1), unnest($c2), "
        "unnest($c3), unnest($c4), unnest($c5), unnest($c6), unnest($c7)",
        {f"c{index}": list(values) for index, values in enumerate(columns)},
    )


def id_range(batch: list[BatchFile]) -> dict[str, str]:
    """The first and last file id of a batch, as SQL parameters."""
    return {"first_file_id": batch[0].file_id, "last_file_id": batch[-1].file_id}


def supersede_previous(
    con: duckdb.DuckDBPyConnection,
    settings_fingerprint: str | None,
    leaving: list[str] | None = None,
) -> None:
    """Mark the older versions of the batch's changed files as superseded, and record those
    that leave lines behind (071; `settings_fingerprint`: the batch's reading settings;
    `leaving`: paths read again as the same bytes whose accepted lines may leave)."""
    run_sql(
        con,
        "ingest/071_superseded_departures.sql",
        {"settings_fingerprint": settings_fingerprint, "leaving": leaving or []},
    )
    run_sql(con, "ingest/065_supersede_previous.sql")


def count_batch(con: duckdb.DuckDBPyConnection, batch: list[BatchFile]) -> dict[str, FileCounts]:
    """file id -> counts of each file of the batch (needs `ingest_accepted_counts`)."""
    run_sql(con, "ingest/060_file_counts.sql", id_range(batch))
    reasons = _quarantined_by_reason(con, batch)
    rows = con.execute(
        "select file_id, rows_read, rows_accepted, rows_quarantined, first_sold_at, last_sold_at "
        "from ingest_file_counts"
    ).fetchall()
    counts = {}
    for file_id, read, accepted, quarantined, first, last in rows:
        found = reasons.get(file_id, {})
        if sum(found.values()) != quarantined:
            raise LedgerMismatchError(f"{file_id}: quarantine counts disagree (this is a bug).")
        counts[file_id] = FileCounts(int(read), int(accepted), found, first, last)
    return counts


def _quarantined_by_reason(
    con: duckdb.DuckDBPyConnection, batch: list[BatchFile]
) -> dict[str, dict[str, int]]:
    rows = con.execute(
        "select file_id, reason, count(*) from quarantine "
        "where file_id >= $first_file_id and file_id <= $last_file_id group by all order by all",
        id_range(batch),
    ).fetchall()
    found: dict[str, dict[str, int]] = {}
    for file_id, reason, count in rows:
        found.setdefault(file_id, {})[reason] = int(count)
    return found


def check_balance(batch: list[BatchFile], counts: dict[str, FileCounts]) -> None:
    """Stop the run when any file's rows read differ from accepted plus quarantined."""
    for item in batch:
        found = counts[item.file_id]
        if found.rows_read != found.rows_accepted + found.rows_quarantined:
            raise LedgerMismatchError(
                f"{item.discovered.path}: read {found.rows_read} rows but accepted "
                f"{found.rows_accepted} and quarantined {found.rows_quarantined}; the file was "
                "rolled back and the run stopped (this is a bug)."
            )


def record_batch(
    con: duckdb.DuckDBPyConnection, batch: list[BatchFile], settings_fingerprint: str | None
) -> None:
    """Write the ledger rows and the per-reason rows of the batch's files."""
    now = datetime.now().replace(microsecond=0)
    params = {"ingested_at": now, "settings_fingerprint": settings_fingerprint}
    run_sql(con, "ingest/061_ledger_insert.sql", params)
    run_sql(con, "ingest/062_ledger_reasons_insert.sql", id_range(batch))


def validate_batch(con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
    """Guard the batch's ledger and quarantine rows with their schemas."""
    in_batch = "where file_id >= $first_file_id and file_id <= $last_file_id"
    for table, model in (("ledger", Ledger), ("quarantine", Quarantine)):
        validate_query(con, f"select * from {table} {in_batch}", id_range, model, table)  # noqa: S608


def has_current_with(
    con: duckdb.DuckDBPyConnection, source: str, settings_fingerprint: str | None
) -> bool:
    """True when some current file of `source` was read with these settings."""
    found = con.execute(
        "select count(*) from ledger where source = $source and status = 'current' "
        "and settings_fingerprint is not distinct from $fingerprint",
        {"source": source, "fingerprint": settings_fingerprint},
    ).fetchone()[0]
    return bool(found)


def record_failure(
    con: duckdb.DuckDBPyConnection,
    discovered: DiscoveredFile,
    status: str,
    reason: str,
    replaces_previous: bool = False,
) -> str:
    """Ledger a file that failed or was refused (no rows kept) with why; returns its file id.

    `replaces_previous`: its older version leaves too (superseded, rows out), as a reading
    under new settings replaces it whatever it finds."""
    con.execute("begin transaction")
    try:
        (item,) = assign_versions(con, discovered.source, [discovered])
        previous = discovered.previous_file_id
        if replaces_previous and previous is not None:
            remove_version_rows(con, {discovered.source}, [previous])
            run_sql(con, "ingest/078_superseded_by_refusal.sql", {"previous_file_id": previous})
            ids = {"previous_file_id": previous, "file_id": item.file_id}
            run_sql(con, "ingest/079_refusal_departure.sql", ids)
        run_sql(
            con,
            "ingest/066_failed_file.sql",
            {
                "file_id": item.file_id,
                "source": discovered.source,
                "path": str(discovered.path),
                "version": item.version,
                "bytes": discovered.bytes,
                "sha256": discovered.sha256,
                "ingested_at": datetime.now().replace(microsecond=0),
                "status": status,
                "reason": reason,
                "settings_fingerprint": discovered.settings_fingerprint,
            },
        )
        con.execute("commit")
    except BaseException:
        con.execute("rollback")
        raise
    return item.file_id
