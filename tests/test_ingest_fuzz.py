"""Property-based tests: randomly spoiled receipt and reference files never lose a line.

Each example writes a small world (catalogue, stores, one to three receipts files) whose lines
are spoiled at random (see fuzz_inputs), ingests it into a fresh warehouse and checks, file by
file, against counts made here from the bytes written:

- the ingest returns results or stops with a UserError, never another exception;
- every file ends `current` (ingested), `refused`, `empty` or `failed`; damaged lines never
  make a file fail (the headers are written intact): only receipts whose catalogue or stores
  did not go in may fail;
- an ingested, refused or empty file's `rows_read` is its count of records, counted here from
  the bytes as the README defines them: a line ends at LF, CRLF is one terminator, a last line
  without one counts, the header is line 1, and a blank line is no record but keeps its number;
- an ingested file's rows add up: read = accepted + quarantined, in the ledger, in
  `ledger_reasons` and in the tables themselves, and every record's line number is either
  accepted or quarantined, exactly once, with a reason code from reasons.py;
- a refused, empty or failed file leaves no accepted or quarantined rows and says why in the
  ledger's `reason` column.

The default run is small and derandomized (the same 25 examples every time);
`DEMANDPREP_FUZZ_EXAMPLES=2000 pytest -m slow tests/test_ingest_fuzz.py` is the long run.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import duckdb
import pytest
from fuzz_inputs import CONFIG, FuzzFile, fuzz_world, physical_lines, record_line_numbers
from hypothesis import HealthCheck, given, settings

from demandprep.config import load_config
from demandprep.errors import UserError
from demandprep.ingest.reasons import REASONS
from demandprep.ingest.runner import ingest_all
from demandprep.warehouse import open_warehouse

FILE_STATUSES = ("current", "refused", "empty", "failed")
RESULT_STATUSES = ("new", "refused", "empty", "failed")
ACCEPTED_TABLE = {"receipts": "raw_lines", "catalogue": "ref_catalogue", "stores": "ref_stores"}
DEFAULT_EXAMPLES = 25
LONG_EXAMPLES = int(os.environ.get("DEMANDPREP_FUZZ_EXAMPLES", "500"))
HEALTH = [HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.large_base_example]


def ingest_world(files: list[FuzzFile]) -> None:
    """Write the world to a fresh folder, ingest it once and check every property."""
    with tempfile.TemporaryDirectory(prefix="demandprep-fuzz-") as folder:
        root = Path(folder)
        (root / "demandprep.toml").write_text(CONFIG, encoding="utf-8")
        written = {str(item.write(root)): item for item in files}
        config = load_config(root / "demandprep.toml")
        with open_warehouse(config.warehouse) as con:
            try:
                summary = ingest_all(con, config)
            except UserError:
                summary = None  # stopping with one line is allowed; what went in must add up
            problems = [] if summary is None else result_problems(summary, written)
            problems += warehouse_problems(con, written, complete=summary is not None)
    # every broken property of the example at once, each naming its file
    assert not problems, "\n".join(problems)


def result_problems(summary, written: dict[str, FuzzFile]) -> list[str]:
    """Every file has one result with a known status; a failure carries its one-line message."""
    problems = []
    if sorted(str(result.path.resolve()) for result in summary.files) != sorted(written):
        problems.append("the summary does not list every file once")
    for result in summary.files:
        name = result.path.name
        if result.status not in RESULT_STATUSES:
            problems.append(f"{name}: result status {result.status!r}")
        if result.status in ("failed", "refused") and (not result.error or "\n" in result.error):
            problems.append(f"{name}: {result.status} without a one-line error: {result.error!r}")
    return problems


def warehouse_problems(
    con: duckdb.DuckDBPyConnection, written: dict[str, FuzzFile], complete: bool
) -> list[str]:
    """Where the ledger and the tables disagree with the bytes written, file by file."""
    ledger = ledger_rows(con)
    problems = []
    if len(ledger) != len(con.execute("select * from ledger").fetchall()):
        problems.append("a file has more than one ledger row after one run")
    if complete and sorted(ledger) != sorted(written):
        problems.append("the ledger does not hold every file")
    statuses = {written[path].source: row["status"] for path, row in ledger.items()}
    references_in = statuses.get("catalogue") == statuses.get("stores") == "current"
    for path, row in ledger.items():
        item = written[path]
        # every header is written intact: only receipts without their references may fail
        if row["status"] == "failed" and (item.source != "receipts" or references_in):
            problems.append(
                f"{item.name}: failed ({row.get('reason')}); only receipts without their "
                "references may fail"
            )
        if row["source"] != item.source or row["status"] not in FILE_STATUSES:
            problems.append(f"{item.name}: ledger source {row['source']}, status {row['status']}")
        elif row["status"] == "current":
            problems += ingested_file_problems(con, row, item)
        else:
            problems += left_behind_problems(con, row, item)
    return problems


def ledger_rows(con: duckdb.DuckDBPyConnection) -> dict[str, dict]:
    """path -> its ledger row (one run over fresh files: one version each)."""
    cursor = con.execute("select * from ledger order by file_id")
    names = [column[0] for column in cursor.description]
    return {
        row["path"]: row for row in (dict(zip(names, v, strict=True)) for v in cursor.fetchall())
    }


def ingested_file_problems(con: duckdb.DuckDBPyConnection, row: dict, item: FuzzFile) -> list[str]:
    """Read = accepted + quarantined, everywhere, and each physical line is in exactly once."""
    name, where, problems = item.name, {"file_id": row["file_id"]}, []
    read, accepted_n, quarantined_n = (
        row["rows_read"],
        row["rows_accepted"],
        row["rows_quarantined"],
    )
    records = record_line_numbers(item.data)
    if read != len(records):
        problems.append(f"{name}: rows_read {read}, but the file has {len(records)} records")
    if read != accepted_n + quarantined_n:
        problems.append(
            f"{name}: read {read} != accepted {accepted_n} + quarantined {quarantined_n}"
        )
    by_reason = con.execute(
        "select coalesce(sum(rows), 0) from ledger_reasons where file_id = $file_id", where
    ).fetchone()[0]
    if by_reason != quarantined_n:
        problems.append(f"{name}: ledger_reasons holds {by_reason} rows, not {quarantined_n}")
    accepted = accepted_line_numbers(con, item.source, row["file_id"])
    quarantined = con.execute(
        "select line_no, reason from quarantine where file_id = $file_id", where
    ).fetchall()
    if len(accepted) != len(set(accepted)):
        problems.append(f"{name}: an accepted (file_id, line_no) appears twice")
    if (len(accepted), len(quarantined)) != (accepted_n, quarantined_n):
        problems.append(f"{name}: tables hold {len(accepted)} + {len(quarantined)} rows")
    last = physical_lines(item.data)
    for line_no, reason in quarantined:
        if reason not in REASONS:
            problems.append(f"{name}: line {line_no} quarantined with unknown reason {reason!r}")
        if line_no is None or not 2 <= line_no <= last:
            problems.append(f"{name}: quarantined line number {line_no} outside 2..{last}")
    every_line = sorted(accepted + [line_no or 0 for line_no, _ in quarantined])
    if every_line != records:
        problems.append(f"{name}: records {records} not each in once: {every_line}")
    return problems


def accepted_line_numbers(con: duckdb.DuckDBPyConnection, source: str, file_id: str) -> list[int]:
    """Line numbers of the file's accepted rows in its source's table (none if not created)."""
    table = ACCEPTED_TABLE[source]
    exists = con.execute(
        "select count(*) from duckdb_tables() where table_name = $table", {"table": table}
    ).fetchone()[0]
    if not exists:
        return []
    rows = con.execute(
        f"select line_no from {table} where file_id = $file_id",  # noqa: S608 (fixed names)
        {"file_id": file_id},
    ).fetchall()
    return [line_no for (line_no,) in rows]


def left_behind_problems(con: duckdb.DuckDBPyConnection, row: dict, item: FuzzFile) -> list[str]:
    """A refused, empty or failed file keeps no rows, and its ledger row says why."""
    name, status, problems = item.name, row["status"], []
    records = len(record_line_numbers(item.data))
    if status in ("refused", "empty") and row["rows_read"] != records:
        problems.append(f"{name}: {status} with rows_read {row['rows_read']}, not {records}")
    if status == "empty" and records:
        problems.append(f"{name}: empty, but it has {records} records")
    quarantined = con.execute(
        "select count(*) from quarantine where file_id = $file_id", {"file_id": row["file_id"]}
    ).fetchone()[0]
    if accepted_line_numbers(con, item.source, row["file_id"]) or quarantined:
        problems.append(f"{name}: {status}, but rows of it were kept")
    if not row.get("reason"):
        problems.append(f"{name}: ledger row {status} without a reason")
    return problems


@settings(
    max_examples=DEFAULT_EXAMPLES,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=HEALTH,
)
@given(files=fuzz_world())
def test_spoiled_files_are_ingested_without_losing_a_line(files: list[FuzzFile]) -> None:
    ingest_world(files)


@pytest.mark.slow
@settings(
    max_examples=LONG_EXAMPLES,
    deadline=None,
    database=None,
    suppress_health_check=HEALTH,
    print_blob=True,
)
@given(files=fuzz_world())
def test_long_fuzz_loses_no_line(files: list[FuzzFile]) -> None:
    ingest_world(files)
