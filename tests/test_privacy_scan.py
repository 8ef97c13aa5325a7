"""End to end: no raw card id or receipt id of the inputs appears in any file a build writes.

The invented aisle of privacy_fixtures (crafted bad lines in every card-bearing source) goes
through the ingest, every stage and the export with CSV and DTA copies; then every file under
the export root is read as text (Parquet decoded cell by cell) and searched for every id.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import pyarrow.parquet as pq
import pytest
from privacy_fixtures import input_ids, scan_config, write_inputs

from demandprep.errors import UserError
from demandprep.flows.build_log import append_build_log, build_log_path
from demandprep.flows.nightly import failure_reason
from demandprep.flows.retry import raise_if_failed
from demandprep.ingest.runner import discover_files, ensure_tables, ingest_file
from demandprep.pipeline import run_build, run_ingest


def file_text(path: Path) -> str:
    """A build file as text: Parquet decoded cell by cell (and its metadata), others as bytes."""
    if path.suffix != ".parquet":
        return path.read_bytes().decode("utf-8", errors="replace")
    parquet = pq.ParquetFile(path)
    metadata = parquet.schema_arrow.metadata or {}
    parts = [key.decode() + "=" + value.decode() for key, value in metadata.items()]
    table = parquet.read()
    for column in table.columns:
        parts += [str(value) for value in column.to_pylist()]
    return "\n".join(parts)


def leaks(root: Path, ids: set[str]) -> dict[str, list[str]]:
    """Build file -> the ids found in it."""
    found = {}
    for path in sorted(p for p in root.rglob("*") if p.is_file()):
        # case-blind: a rule may lower-case what it quotes (line kinds are)
        text = file_text(path).casefold()
        hits = sorted(value for value in ids if value.casefold() in text)
        if hits:
            found[path.relative_to(root).as_posix()] = hits
    return found


@pytest.fixture(scope="module")
def scanned_build(tmp_path_factory: pytest.TempPathFactory):
    folder = tmp_path_factory.mktemp("scan")
    write_inputs(folder)
    config = scan_config(folder)
    summary = run_ingest(config)
    build, _ctx = run_build(config)
    return folder, config, summary, build


def test_crafted_lines_are_quarantined(scanned_build) -> None:
    _folder, config, _summary, _build = scanned_build
    con = duckdb.connect(str(config.warehouse.path), read_only=True)
    reasons = con.execute(
        "select source, reason, count(*) from quarantine group by all order by all"
    ).fetchall()
    con.close()
    # every crafted line is refused, so the scan below checks the messages that quote them
    assert reasons == [
        ("households", "duplicate_key", 1),
        ("households", "unparseable_field", 1),
        ("receipts", "duplicate_line", 1),
        ("receipts", "missing_required_field", 1),
        ("receipts", "negative_amount", 1),
        ("receipts", "non_positive_quantity", 1),
        ("receipts", "return_not_negative", 1),
        ("receipts", "timestamp_out_of_range", 1),
        ("receipts", "unknown_line_kind", 1),
        ("receipts", "unknown_sku", 1),
        ("receipts", "unknown_store", 1),
        ("receipts", "unparseable_field", 5),
        ("receipts", "wrong_column_count", 1),
    ]


def test_no_input_card_or_receipt_id_in_any_build_file(scanned_build) -> None:
    folder, config, _summary, build = scanned_build
    names = {p.relative_to(build).as_posix() for p in build.rglob("*") if p.is_file()}
    # the scan covers every kind of file the build writes
    assert {"quarantine.parquet", "csv/quarantine.csv", "dta/quarantine.dta"} <= names
    assert {"choices.parquet", "csv/choices.csv", "dta/choices.dta", "manifest.json"} <= names
    assert any(name.endswith(".html") for name in names)
    assert any(name.startswith("data_dictionary") for name in names)
    assert leaks(config.export.root, input_ids(folder)) == {}


def test_scan_sees_values_inside_parquet_csv_and_dta(scanned_build) -> None:
    # the scan must be able to fail: a value the quarantine does hold is found in every copy
    _folder, _config, _summary, build = scanned_build
    found = leaks(build, {"unknown_store"})
    assert {"quarantine.parquet", "csv/quarantine.csv", "dta/quarantine.dta"} <= set(found)


def test_household_file_without_header_is_refused_without_quoting_it(tmp_path: Path) -> None:
    write_inputs(tmp_path)
    ids = input_ids(tmp_path)
    rows = (tmp_path / "households.csv").read_text().splitlines()[1:]
    (tmp_path / "households.csv").write_text("\n".join(rows) + "\n")
    config = scan_config(tmp_path)
    con = duckdb.connect(str(config.warehouse.path))
    ensure_tables(con)
    households = [f for f in discover_files(con, config) if f.source == "households"]
    result = ingest_file(con, config, households[0])
    con.close()
    path = tmp_path / "households.csv"
    assert result.error == (
        f"{path}: the mapping names column 'loyalty_card' (for 'card') but the file's header "
        "(2 columns) has no such column. Hint: fix the source's columns mapping in the config "
        "(names are case-sensitive); a file without a header line needs header = false and "
        "column positions in the mapping."
    )
    # the night's failure goes to build.log as the flow writes it
    with pytest.raises(UserError) as raised:
        raise_if_failed(result)
    append_build_log(config, "test-run", "failed", failure_reason(raised.value))
    log = build_log_path(config).read_text()
    assert "has no such column" in log
    assert [value for value in ids if value in log] == []


def test_check_quotes_no_header_of_a_card_source_delivered_without_one(tmp_path: Path) -> None:
    # before: check named each missing column but the card's with "its columns are <first
    # line>", which held a card id (only ingest withheld it)
    from demandprep.preflight import preflight_problems

    write_inputs(tmp_path)
    ids = input_ids(tmp_path)
    for path in (tmp_path / "households.csv", tmp_path / "receipts" / "receipts_2024-03.csv"):
        rows = path.read_text().splitlines()[1:]
        path.write_text("\n".join(rows) + "\n")
    problems = [problem.one_line() for problem in preflight_problems(scan_config(tmp_path))]
    assert any("households.csv" in text for text in problems)
    assert any("receipts_2024-03.csv" in text for text in problems)
    assert [text for text in problems if any(value in text for value in ids)] == []
