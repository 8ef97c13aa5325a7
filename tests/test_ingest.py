"""Ingest with nothing lost: every fault lands in quarantine with its reason, counts balance,
re-runs change nothing, corrections replace, broken files fail alone."""

from __future__ import annotations

import gzip
import shutil
from pathlib import Path

import pytest
from ingest_fixtures import classify_receipts, copy_faults, faults_config

from demandprep.config import load_config
from demandprep.ingest import ledger as ledger_module
from demandprep.ingest import receipts as receipt_rules
from demandprep.ingest.reasons import REASONS
from demandprep.ingest.runner import discover_files, ingest_all, summary_table
from demandprep.warehouse import open_warehouse

RECEIPT_REASONS = [
    "wrong_column_count",
    "unparseable_field",
    "missing_required_field",
    "non_positive_quantity",
    "negative_amount",
    "unknown_store",
    "unknown_sku",
    "timestamp_out_of_range",
    "duplicate_line",
    "unknown_line_kind",
    "return_not_negative",
]


def ingest(config):
    with open_warehouse(config.warehouse) as con:
        return ingest_all(con, config)


def query(config, sql: str, params=None):
    with open_warehouse(config.warehouse) as con:
        return con.execute(sql, params).fetchall()


def table_snapshot(config) -> dict[str, list]:
    return {
        table: query(config, f"select * from {table} order by all")  # noqa: S608
        for table in ("raw_lines", "quarantine", "ledger_reasons", "catalogue", "stores")
    } | {"ledger": query(config, "select * exclude (ingested_at) from ledger order by all")}


def test_fixture_holds_a_line_for_every_receipt_reason(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    expected = classify_receipts(config.config_path.parent)
    found = set().union(*(set(e.reasons.values()) for e in expected.values()))
    assert found == set(RECEIPT_REASONS)
    assert set(RECEIPT_REASONS) <= set(REASONS)


def test_each_faulty_line_lands_in_quarantine_with_its_reason(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    expected = classify_receipts(config.config_path.parent)
    ingest(config)
    for path, wanted in expected.items():
        rows = query(
            config, "select line_no, reason from quarantine where path = $path", {"path": path}
        )
        assert dict(rows) == wanted.reasons, path


def test_ledger_counts_equal_an_independent_csv_count(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    expected = classify_receipts(config.config_path.parent)
    summary = ingest(config)
    assert summary.ok
    for path, wanted in expected.items():
        ((file_id, read, accepted, quarantined),) = query(
            config,
            "select file_id, rows_read, rows_accepted, rows_quarantined from ledger "
            "where path = $path and status = 'current'",
            {"path": path},
        )
        assert (read, accepted, quarantined) == (
            wanted.rows_read,
            wanted.accepted,
            len(wanted.reasons),
        )
        reasons = query(
            config, "select reason, rows from ledger_reasons where file_id = $id", {"id": file_id}
        )
        assert dict(reasons) == dict(wanted.counts())
        lines = query(config, "select count(*) from raw_lines where file_id = $id", {"id": file_id})
        assert lines[0][0] == wanted.accepted


def test_quarantine_keeps_each_line_as_written(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    expected = classify_receipts(config.config_path.parent)
    ingest(config)
    for path, wanted in expected.items():
        rows = query(
            config,
            "select line_no, original_text from quarantine where path = $path",
            {"path": path},
        )
        written = {line: text for line, text in rows if line in wanted.text}
        assert written == {line: wanted.text[line] for line in written}
        assert len(written) == len([line for line in wanted.reasons if line in wanted.text])


def test_accepted_lines_are_typed_and_keep_their_kind(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    ingest(config)
    rows = query(
        config,
        "select receipt, line, quantity, amount, discount, card, line_kind from raw_lines "
        "where receipt = 'T0102' order by line",
    )
    assert rows == [
        ("T0102", 1, 2.0, 8.5, 0.0, None, "sale"),
        ("T0102", 2, -1.0, -1.9, 0.0, None, "return"),
        ("T0102", 3, 1.0, 6.49, 0.0, None, "sale"),
        ("T0102", 4, -1.0, -6.49, 0.0, None, "void"),
    ]
    # decimal comma: 0,40 is forty cents
    assert query(config, "select discount from raw_lines where receipt = 'T0001' and line = 2") == [
        (0.4,)
    ]


def test_rerun_on_the_same_files_changes_nothing(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    ingest(config)
    before = table_snapshot(config)
    again = ingest(config)
    assert {result.status for result in again.files} == {"unchanged"}
    assert again.rows_read == 0
    assert table_snapshot(config) == before


def test_redelivered_copy_under_a_new_name_adds_no_lines(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    ingest(config)
    lines_before = query(config, "select count(*) from raw_lines")[0][0]
    receipts = config.config_path.parent / "receipts"
    shutil.copy(receipts / "receipts_2024-03-01.csv", receipts / "receipts_2024-03-09.csv")
    summary = ingest(config)
    (copy,) = [r for r in summary.files if r.path.name == "receipts_2024-03-09.csv"]
    assert copy.status == "new"
    assert copy.rows_accepted == 0
    assert copy.quarantined == {"duplicate_line": 3}
    assert query(config, "select count(*) from raw_lines")[0][0] == lines_before


def test_corrected_file_replaces_the_rows_of_its_old_version(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    folder = config.config_path.parent
    ingest(config)
    target = folder / "receipts" / "receipts_2024-03-02.csv"
    old_id = query(config, "select file_id from ledger where path = $p", {"p": str(target)})[0][0]
    text = target.read_text(encoding="utf-8", errors="surrogateescape")
    fixed = text.replace("K100;1,5x;", "K100;1,5;").replace("B09;", "B01;")
    target.write_text(fixed, encoding="utf-8", errors="surrogateescape")
    expected = classify_receipts(folder)[str(target)]

    summary = ingest(config)

    (result,) = [r for r in summary.files if r.path == target]
    assert result.status == "replaced"
    assert (result.rows_accepted, result.quarantined) == (
        expected.accepted,
        dict(expected.counts()),
    )
    versions = query(
        config,
        "select version, status from ledger where path = $p order by version",
        {"p": str(target)},
    )
    assert versions == [(1, "superseded"), (2, "current")]
    assert query(config, "select count(*) from raw_lines where file_id = $id", {"id": old_id}) == [
        (0,)
    ]
    assert query(config, "select count(*) from quarantine where file_id = $id", {"id": old_id}) == [
        (0,)
    ]
    assert query(
        config, "select count(*) from raw_lines where file_id = $id", {"id": result.file_id}
    ) == [(expected.accepted,)]
    repeated = query(
        config,
        "select store, receipt, line from raw_lines group by all having count(*) > 1",
    )
    assert repeated == []


def test_mapping_naming_a_column_the_file_lacks_fails_with_a_one_line_error(
    tmp_path: Path,
) -> None:
    path = copy_faults(tmp_path)
    path.write_text(path.read_text().replace('card = "member"', 'card = "loyalty_no"'))
    config = load_config(path)
    summary = ingest(config)
    failed = summary.failed
    assert [r.path.name for r in failed] == ["receipts_2024-03-01.csv", "receipts_2024-03-02.csv"]
    for result in failed:
        assert "\n" not in result.error
        assert str(result.path) in result.error
        assert "'loyalty_no'" in result.error
        assert not result.unreadable  # a mapping problem: another attempt would fail the same
    assert not summary.ok
    assert query(config, "select count(*) from raw_lines") == [(0,)]
    assert query(config, "select count(*) from catalogue") == [(4,)]


def test_unreadable_file_is_reported_and_the_other_files_go_in(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    broken = config.config_path.parent / "receipts" / "receipts_2024-03-05.csv"
    broken.write_bytes(gzip.compress(b"not,a,receipt\n") + b"\x00" * 64)
    summary = ingest(config)
    assert not summary.ok
    assert [r.path for r in summary.failed] == [broken]
    assert str(broken) in summary.failed[0].error
    assert {r.status for r in summary.files if r.path != broken} == {"new"}
    expected = classify_receipts(config.config_path.parent)
    good = sum(e.accepted for path, e in expected.items() if path != str(broken))
    assert query(config, "select count(*) from raw_lines") == [(good,)]
    assert query(
        config, "select status, rows_read from ledger where path = $p", {"p": str(broken)}
    ) == [("failed", 0)]


def _swap_first_two_columns(path: Path) -> None:
    lines = path.read_bytes().split(b"\n")
    swapped = []
    for line in lines:
        fields = line.split(b";")
        if len(fields) > 1:
            fields[0], fields[1] = fields[1], fields[0]
        swapped.append(b";".join(fields))
    path.write_bytes(b"\n".join(swapped))


def test_file_with_its_columns_in_another_order_goes_in_on_its_own(tmp_path: Path) -> None:
    # the batch's header check fails, the files are then loaded one by one: nothing is lost
    config = faults_config(tmp_path)
    folder = config.config_path.parent
    expected = classify_receipts(folder)
    second = sorted((folder / "receipts").glob("receipts_*.csv"))[1]
    _swap_first_two_columns(second)
    summary = ingest(config)
    receipts = [r for r in summary.files if r.source == "receipts"]
    assert [r.status for r in receipts] == ["new", "new"]
    assert {str(r.path): r.rows_accepted for r in receipts} == {
        path: e.accepted for path, e in expected.items()
    }
    good = sum(e.accepted for e in expected.values())
    assert query(config, "select count(*) from raw_lines") == [(good,)]


def test_failed_file_is_tried_again_on_the_next_run(tmp_path: Path) -> None:
    path = copy_faults(tmp_path)
    text = path.read_text()
    path.write_text(text.replace('card = "member"', 'card = "loyalty_no"'))
    ingest(load_config(path))
    path.write_text(text)
    config = load_config(path)
    summary = ingest(config)
    receipts = [r for r in summary.files if r.source == "receipts"]
    assert [r.status for r in receipts] == ["new", "new"]
    assert summary.ok


def test_ledger_mismatch_stops_the_run_and_keeps_nothing_of_the_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = faults_config(tmp_path)

    def insert_all_but_one(con) -> None:
        # a simulated bug: one accepted line never reaches raw_lines
        con.execute(
            "delete from ingest_checked where ordinal = (select max(ordinal) "
            "from ingest_checked where reason is null)"
        )
        original(con)

    original = receipt_rules.insert_receipt_lines
    monkeypatch.setattr(receipt_rules, "insert_receipt_lines", insert_all_but_one)
    with pytest.raises(ledger_module.LedgerMismatchError, match="read"):
        ingest(config)
    assert query(config, "select count(*) from raw_lines") == [(0,)]
    assert query(config, "select count(*) from ledger where source = 'receipts'") == [(0,)]


def test_discovery_tells_new_unchanged_and_changed_files(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    with open_warehouse(config.warehouse) as con:
        assert {f.status for f in discover_files(con, config)} == {"new"}
        ingest_all(con, config)
        target = config.config_path.parent / "stores.csv"
        target.write_text(target.read_text() + "B03;Kettlebay;north\n")
        statuses = {f.path.name: f.status for f in discover_files(con, config)}
    assert statuses["stores.csv"] == "changed"
    assert statuses["catalogue.csv"] == "unchanged"


def test_summary_table_lists_files_and_reasons(tmp_path: Path) -> None:
    from rich.console import Console

    config = faults_config(tmp_path)
    summary = ingest(config)
    console = Console(width=100, record=True)
    console.print(summary_table(summary))
    text = console.export_text()
    assert "files new" in text and "duplicate_line" in text
    assert summary.count("new") == 4
    assert summary.quarantined["duplicate_line"] == 2


def test_schema_violation_rolls_the_batch_back_and_fails_its_files(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import pandera.polars as pa

    from demandprep.schemas.ingest import RawLines

    class NoReturns(RawLines):
        line_kind: str = pa.Field(isin=["sale", "void"])

    monkeypatch.setattr(receipt_rules, "RawLines", NoReturns)
    config = faults_config(tmp_path)
    summary = ingest(config)
    failed = summary.failed
    assert [r.path.name for r in failed] == ["receipts_2024-03-02.csv"]
    assert "breaks its schema" in failed[0].error
    assert query(config, "select count(*) from raw_lines") == [(3,)]
    assert query(
        config, "select status from ledger where path = $p", {"p": str(failed[0].path)}
    ) == [("failed",)]
