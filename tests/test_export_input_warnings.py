"""Warnings about the inputs, from ledger rows written here directly: statuses, gone files,
quarantine rates; one line each in the manifest and at the top of report.html."""

from __future__ import annotations

import json
from datetime import datetime
from html.parser import HTMLParser
from pathlib import Path

import duckdb
import pandas as pd
import pytest
from export_fixtures import SHARED_NOW, export_config, fill_warehouse, fixture_context

from demandprep.export.folder import export_build
from demandprep.export.input_warnings import input_warnings
from demandprep.export.report import ReportInputs, render_report
from demandprep.sqlfiles import run_sql


def ledger_row(file_id: str, source: str, path: Path, status: str, **counts) -> dict:
    """One ledger row; `counts` may set version, rows_read, rows_quarantined and reason."""
    read, quarantined = counts.get("rows_read", 0), counts.get("rows_quarantined", 0)
    return {
        "file_id": file_id,
        "source": source,
        "path": str(path),
        "version": counts.get("version", 1),
        "bytes": 100,
        "sha256": file_id.lower() * 8,
        "rows_read": read,
        "rows_accepted": read - quarantined,
        "rows_quarantined": quarantined,
        "status": status,
        "ingested_at": datetime(2024, 3, 6, 2, 30),
        "reason": counts.get("reason"),
    }


def insert_ledger(con: duckdb.DuckDBPyConnection, rows: list[dict], reason: bool = True) -> None:
    """Insert ledger rows by column name, into a ledger with the reason column unless not
    `reason` (a warehouse ingested before the column existed)."""
    if reason:  # the column as the ingest's own tables add it (see RULES)
        con.execute("alter table ledger add column if not exists reason varchar")
    for row in rows:
        row = row if reason else {k: v for k, v in row.items() if k != "reason"}
        names = ", ".join(row)
        values = ", ".join(f"${name}" for name in row)
        con.execute(f"insert into ledger ({names}) values ({values})", row)  # noqa: S608


def drop_folder(tmp_path: Path, *names: str) -> Path:
    """A drop folder holding the named files."""
    folder = tmp_path / "drop"
    folder.mkdir()
    for name in names:
        (folder / name).write_text("x\n")
    return folder


def problem_ledger(folder: Path) -> list[dict]:
    """Receipts: 2 current files (35 of 2000 rows quarantined), one fixed after a failure, one
    whose retry failed, one refused, seven empty, one withdrawn; stores: one gone file."""
    rows = [
        ledger_row(
            "F1", "receipts", folder / "a.csv", "current", rows_read=1000, rows_quarantined=5
        ),
        ledger_row(
            "F2", "receipts", folder / "b.csv", "current", rows_read=1000, rows_quarantined=30
        ),
        ledger_row("F3", "receipts", folder / "c.csv", "failed", reason="c.csv: not gzip"),
        ledger_row("F4", "receipts", folder / "c.csv", "current", version=2, rows_read=0),
        ledger_row("F5", "receipts", folder / "d.csv", "current", rows_read=0),
        ledger_row("F6", "receipts", folder / "d.csv", "failed", version=2, reason="truncated"),
        ledger_row("F7", "receipts", folder / "e.csv", "refused", reason="past the limit"),
        ledger_row("F8", "receipts", folder / "w.csv", "withdrawn"),
        ledger_row("F9", "stores", folder / "stores.csv", "current", rows_read=10),
    ]
    for n in range(7):
        path = folder / f"empty_{n}.csv"
        rows.append(ledger_row(f"G{n}", "receipts", path, "empty", reason="no records"))
    return rows


def ingest_ledger(con: duckdb.DuckDBPyConnection) -> None:
    """The ingest's own (empty) tables, from its SQL."""
    run_sql(con, "ingest/000_ingest_tables.sql")


def test_input_warnings_name_each_kind_of_problem_with_counts_and_first_files(tmp_path):
    names = ["a.csv", "b.csv", "c.csv", "d.csv", "e.csv", "w.csv"]
    names += [f"empty_{n}.csv" for n in range(7)]
    folder = drop_folder(tmp_path, *names)  # stores.csv is not there any more
    con = duckdb.connect()
    ingest_ledger(con)
    insert_ledger(con, problem_ledger(folder))
    assert input_warnings(con) == [
        # c.csv failed once and then went in: its latest version is current, no warning
        "inputs: 1 file failed (could not be read): d.csv.",
        "inputs: 1 file refused (past the reject limit): e.csv.",
        "inputs: 7 files empty (no records): empty_0.csv, empty_1.csv, empty_2.csv, "
        "empty_3.csv, empty_4.csv and 2 more.",
        "inputs: 1 file withdrawn (rows removed on purpose): w.csv.",
        "inputs: 1 file gone from the drop folder, their rows still in the warehouse: stores.csv.",
        # 35 / 2000 = 1.75% > 1%; stores 0 / 10
        "inputs: receipts quarantined 1.75% of the rows read (35 of 2000) in its current "
        "files, above 1%; the report's ledger section gives the reasons.",
    ]


def test_a_quarantine_rate_at_the_threshold_is_no_warning(tmp_path):
    folder = drop_folder(tmp_path, "a.csv")
    con = duckdb.connect()
    ingest_ledger(con)
    row = ledger_row(
        "F1", "receipts", folder / "a.csv", "current", rows_read=500, rows_quarantined=5
    )
    insert_ledger(con, [row])
    assert input_warnings(con) == []  # 5 / 500 = 1%, not above it


def test_a_ledger_without_the_reason_column_still_gives_the_warnings(tmp_path):
    folder = drop_folder(tmp_path)
    con = duckdb.connect()
    ingest_ledger(con)
    insert_ledger(con, [ledger_row("F1", "receipts", folder / "x.csv", "failed")], reason=False)
    assert input_warnings(con) == ["inputs: 1 file failed (could not be read): x.csv."]


class Page(HTMLParser):
    """The report's tags in order, with the text inside the warnings box."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str]]] = []
        self.box_depth = 0
        self.box_text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        attributes = {k: v or "" for k, v in attrs}
        self.tags.append((tag, attributes))
        if self.box_depth or attributes.get("id") == "warnings":
            self.box_depth += 1

    def handle_endtag(self, tag: str) -> None:
        if self.box_depth:
            self.box_depth -= 1

    def handle_data(self, data: str) -> None:
        if self.box_depth:
            self.box_text.append(data)


@pytest.fixture(scope="module")
def problem_build(tmp_path_factory) -> Path:
    """An export whose ledger has the problem rows above, besides the export fixture's own."""
    base = tmp_path_factory.mktemp("problem-build")
    folder = drop_folder(base, "a.csv", "b.csv", "c.csv", "d.csv", "e.csv", "w.csv")
    config = export_config(base)
    con = duckdb.connect(str(config.warehouse.path))
    try:
        fill_warehouse(con)
        # the exported ledger is documented column by column; its reason column is not yet
        insert_ledger(con, problem_ledger(folder), reason=False)
        return export_build(fixture_context(con, config), now=SHARED_NOW)
    finally:
        con.close()


def test_input_warnings_are_manifest_warnings(problem_build):
    warnings = json.loads((problem_build / "manifest.json").read_text())["warnings"]
    inputs = [w for w in warnings if w.startswith("inputs: ")]
    assert inputs[:2] == [
        "inputs: 1 file failed (could not be read): d.csv.",
        "inputs: 1 file refused (past the reject limit): e.csv.",
    ]
    # the export fixture's own three files (under /data/coffee) are not on disk either
    gone = "inputs: 4 files gone from the drop folder, their rows still in the warehouse: "
    assert [w for w in inputs if w.startswith(gone)] == [
        gone + "catalogue.csv, receipts_2024-03-04.csv, receipts_2024-03-05.csv, stores.csv."
    ]


def test_report_opens_with_a_warnings_box_above_the_plots(problem_build):
    page = Page()
    page.feed((problem_build / "report.html").read_text(encoding="utf-8"))
    positions = [n for n, (tag, attrs) in enumerate(page.tags) if attrs.get("id") == "warnings"]
    first_plot = min(n for n, (tag, _) in enumerate(page.tags) if tag == "svg")
    sections = [attrs.get("id") for tag, attrs in page.tags if tag == "section"]
    # the first screen: headline numbers, then the warnings, before any chart
    assert len(positions) == 1 and positions[0] < first_plot
    assert sections[:2] == ["headline", "warnings"]
    text = " ".join(page.box_text)
    warnings = json.loads((problem_build / "manifest.json").read_text())["warnings"]
    assert len(warnings) >= 8
    for warning in warnings:
        assert warning in text
    assert "e.csv" in text and "refused" in text


def test_report_lists_the_files_behind_the_warnings_with_their_reasons(tmp_path):
    folder = drop_folder(tmp_path, "a.csv", "b.csv", "c.csv", "d.csv", "e.csv", "w.csv")
    config = export_config(tmp_path)
    con = duckdb.connect()
    fill_warehouse(con)
    insert_ledger(con, problem_ledger(folder))
    ctx = fixture_context(con, config)
    inputs = ReportInputs("B1", "2024-04-15T02:30:00", pd.DataFrame(), [])
    page = Page()
    page.feed(render_report(ctx, inputs))
    text = " ".join(page.box_text)
    for name, reason in (("d.csv", "truncated"), ("e.csv", "past the limit")):
        assert name in text and reason in text
    assert "c.csv: not gzip" not in text  # c.csv went in on its retry


def test_a_current_file_the_config_no_longer_names_is_a_warning(tmp_path):
    # the config's files now name another file: before, the old one's rows stayed (and won
    # over the new file's as duplicate keys) with no word, as it still existed on disk
    folder = drop_folder(tmp_path, "sizes_v1.csv")
    con = duckdb.connect()
    ingest_ledger(con)
    insert_ledger(
        con, [ledger_row("F1", "market_sizes", folder / "sizes_v1.csv", "current", rows_read=4)]
    )
    config = export_config(tmp_path)  # its sources name files elsewhere
    assert input_warnings(con, config) == [
        "inputs: 1 file no longer named by its source's files in the config, their rows still "
        "in the warehouse (withdraw takes them out): sizes_v1.csv."
    ]
    assert input_warnings(con) == []
