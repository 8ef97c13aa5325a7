"""Ingest speed-ups change no output: raw_lines, quarantine, ledger and ledger_reasons are the
same row for row with the cheap `ingest_trim` as with DuckDB's plain `trim`, and with the reader
threads' line preparation (`lines.THREAD_PREP`: LF dropped, delimiters counted) as with 010
doing both in SQL.

reference: DuckDB's own `trim(text)`, put back in place of `ingest_trim` for the second ingest
of the same files (the fault fixture with a file of padded fields, and fuzzed worlds); 010's
own LF drop and delimiter count, with the threads' preparation switched off.
"""

from __future__ import annotations

import contextlib
import tempfile
from pathlib import Path
from unittest import mock

from fuzz_inputs import CONFIG, FuzzFile, fuzz_world
from hypothesis import HealthCheck, given, settings
from ingest_fixtures import copy_faults

from demandprep import sqlfiles
from demandprep.config import load_config
from demandprep.errors import UserError
from demandprep.ingest import lines as lines_module
from demandprep.ingest.runner import ingest_all
from demandprep.warehouse import open_warehouse

PLAIN_TRIM = "\ncreate or replace temp macro ingest_trim(text) as trim(text);\n"
# what each table holds, in a total order, without the folder and the time of the run
TABLES = {
    "raw_lines": "select * from raw_lines order by file_id, line_no",
    "quarantine": "select * exclude (path) from quarantine order by file_id, line_no, reason",
    "ledger": "select * exclude (path, ingested_at) from ledger order by file_id",
    "ledger_reasons": "select * from ledger_reasons order by all",
}
# spaces that trim removes (' ', no-break, ideographic) and ones it keeps (tab), on every field
PADDED = (
    "ticket;row;branch;stamp;article;qty;value;member;disc;kind\n"
    " T0901 ; 1 ; B01 ;2024-03-05 10:00:00 ; K100;1 ; 6,49 ; M-17 ; 0,00 ; sale \n"
    "T0902;1;\u00a0B01\u00a0;2024-03-05 10:01:00;\u3000K100;1;6,49;;0,00;\u2003sale\n"
    "T0903;1;\tB01;2024-03-05 10:02:00;K100\t;1;6,49;;;sale\n"
    "T0904;\u00a0;B01;\u00a02024-03-05 10:03:00;K100;\u00a0 ;6,49;;;  \n"
    "T0905;é ;B01;2024-03-05 10:04:00;K100;2;\u00a06,49é;;;void\n"
)


def ingest_tables(
    config_path: Path, plain_trim: bool = False, thread_prep: bool = True
) -> dict[str, list]:
    """Ingest the config's files into its (fresh) warehouse; every table's rows, in order."""
    original = sqlfiles.sql_text

    def with_plain_trim(name: str) -> str:
        text = original(name)
        return text + PLAIN_TRIM if name == "ingest/005_ingest_macros.sql" else text

    config = load_config(config_path)
    text = with_plain_trim if plain_trim else original
    with (
        mock.patch.object(sqlfiles, "sql_text", text),
        mock.patch.object(lines_module, "THREAD_PREP", thread_prep),
        open_warehouse(config.warehouse) as con,
    ):
        # stopping with one line is allowed: what went in must still be the same
        with contextlib.suppress(UserError):
            ingest_all(con, config)
        return {name: con.execute(sql).fetchall() for name, sql in TABLES.items()}


def test_faults_give_the_same_tables_with_plain_trim(tmp_path: Path) -> None:
    tables = {}
    for plain_trim in (False, True):
        config_path = copy_faults(tmp_path / str(plain_trim))
        (config_path.parent / "receipts" / "receipts_2024-03-05.csv").write_text(
            PADDED, encoding="utf-8"
        )
        tables[plain_trim] = ingest_tables(config_path, plain_trim)
    assert len(tables[False]["raw_lines"]) > 0 and len(tables[False]["quarantine"]) > 0
    assert tables[False] == tables[True]


# eight fixed examples per fuzzed comparison: each ingests its world twice
FUZZED = settings(
    max_examples=8,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)


@FUZZED
@given(files=fuzz_world())
def test_fuzzed_worlds_give_the_same_tables_with_plain_trim(files: list[FuzzFile]) -> None:
    tables = {}
    for plain_trim in (False, True):
        with tempfile.TemporaryDirectory(prefix="demandprep-trim-") as folder:
            root = Path(folder)
            (root / "demandprep.toml").write_text(CONFIG, encoding="utf-8")
            for item in files:
                item.write(root)
            tables[plain_trim] = ingest_tables(root / "demandprep.toml", plain_trim)
    assert tables[False] == tables[True]


# lines whose LF, CR and delimiters a byte-level preparation could get wrong, beside good ones
# (all valid UTF-8: the threads prepare text only)
EDGE_LINES = (
    b"ticket;row;branch;stamp;article;qty;value;member;disc;kind\r\n"
    b"T0951;1;B01;2024-03-05 11:00:00;K100;1;6,49;;0,00;sale\r\n"
    b"T0952;1;B01;2024-03-05 11:01:00;K100;1;6,49;;0,00;sale\r\r\n"
    b"T0953;1;B01;2024-03-05 11:02:00;K100;1;6,49;;0,00;sale;\n"
    b"\n\r\n;\n"
    b'T0954;1;B01;2024-03-05 11:03:00;K100;1;"6,49";;0,00;sale\n'
    b"T0956;1;B01;2024-03-05\r11:05:00;K100;1;6,49;;0,00;sale\n"
    b"T0957;1;B01;2024-03-05 11:06:00;K100;1;6,49;;0,00\n"
    b"T0958;1;B01;2024-03-05 11:07:00;K100;1;6,49;;0,00;sale\r"
)


def test_faults_give_the_same_tables_without_the_threads_line_preparation(
    tmp_path: Path,
) -> None:
    tables = {}
    for thread_prep in (True, False):
        config_path = copy_faults(tmp_path / str(thread_prep))
        receipts = config_path.parent / "receipts"
        (receipts / "receipts_2024-03-05.csv").write_bytes(EDGE_LINES)
        (receipts / "receipts_2024-03-06.csv").write_bytes(EDGE_LINES.replace(b"\r\n", b"\n"))
        # a byte that is not UTF-8 sends its whole chunk down the bytes path (`raw`)
        not_utf8 = b"T0955;1;B01;2024-03-05 11:04:00;K100;1;6,49;\xff;0,00;sale\n"
        (receipts / "receipts_2024-03-07.csv").write_bytes(EDGE_LINES + not_utf8)
        tables[thread_prep] = ingest_tables(config_path, thread_prep=thread_prep)
    assert len(tables[True]["raw_lines"]) > 0 and len(tables[True]["quarantine"]) > 0
    assert tables[True] == tables[False]


@FUZZED
@given(files=fuzz_world())
def test_fuzzed_worlds_give_the_same_tables_without_the_threads_line_preparation(
    files: list[FuzzFile],
) -> None:
    tables = {
        thread_prep: fuzzed_world_tables(
            files, lambda config_path, on=thread_prep: ingest_tables(config_path, thread_prep=on)
        )
        for thread_prep in (True, False)
    }
    assert tables[True] == tables[False]


def fuzzed_world_tables(files: list[FuzzFile], ingest) -> dict:
    """The ingest tables of a fuzzed world written to a temporary folder, by `ingest(config)`."""
    with tempfile.TemporaryDirectory(prefix="demandprep-fuzzed-") as folder:
        root = Path(folder)
        (root / "demandprep.toml").write_text(CONFIG, encoding="utf-8")
        for item in files:
            item.write(root)
        return ingest(root / "demandprep.toml")


def test_receipt_without_line_numbers_repeats_only_from_another_file_of_the_batch(
    tmp_path: Path,
) -> None:
    # the duplicate rule's earlier-file test compares files (030), not the text of their paths
    config_path = copy_faults(tmp_path)
    receipts = config_path.parent / "receipts"
    header = "ticket;row;branch;stamp;article;qty;value;member;disc;kind\n"
    line = "T0801;;B01;2024-03-05 10:00:00;K100;1;6,49;;0,00;sale\n"
    (receipts / "receipts_2024-03-05.csv").write_text(header + line + line, encoding="utf-8")
    (receipts / "receipts_2024-03-06.csv").write_text(header + line, encoding="utf-8")
    tables = ingest_tables(config_path)
    kept = [row[:3] for row in tables["raw_lines"] if row[2] == "T0801"]
    refused = [row[:4] for row in tables["quarantine"] if row[5] == line.strip()]
    assert kept == [("F0000005", 2, "T0801"), ("F0000005", 3, "T0801")]
    assert refused == [("F0000006", "receipts", 2, "duplicate_line")]


# 010's per-line verdict that no field needs trimming, forced off: every field goes through
# ingest_trim as if no line had been judged
TRIMMED_VERDICT = "as trimmed,"
VERDICT_START = "unquoted and coalesce("


def without_trimmed_verdict(original):
    """sql_text with 010's `trimmed` column always false (the reference: ingest_trim on all)."""

    def text(name: str) -> str:
        found = original(name)
        if name != "ingest/010_line_fields.sql":
            return found
        assert found.count(TRIMMED_VERDICT) == 1
        head, tail = found.split(TRIMMED_VERDICT)
        start = head.rindex(VERDICT_START)
        return head[:start] + "false " + TRIMMED_VERDICT + tail

    return text


def test_faults_give_the_same_tables_without_the_trimmed_verdict(tmp_path: Path) -> None:
    tables = {}
    for verdict in (True, False):
        config_path = copy_faults(tmp_path / str(verdict))
        receipts = config_path.parent / "receipts"
        # ASCII lines with spaces beside a delimiter only: no end of the line is a space
        beside = (
            "T0906; 2 ;B01;2024-03-05 10:05:00;K100 ;1;6,49;;0,00;sale\n"
            "T0907;1;B01;2024-03-05 10:06:00;K100;1;6,49;; 0,00;sale\n"
        )
        text = PADDED + beside
        (receipts / "receipts_2024-03-05.csv").write_text(text, encoding="utf-8")
        (receipts / "receipts_2024-03-06.csv").write_bytes(EDGE_LINES.replace(b"\r\n", b"\n"))
        patched = sqlfiles.sql_text if verdict else without_trimmed_verdict(sqlfiles.sql_text)
        with mock.patch.object(sqlfiles, "sql_text", patched):
            tables[verdict] = ingest_tables(config_path)
    assert len(tables[True]["raw_lines"]) > 0 and len(tables[True]["quarantine"]) > 0
    assert tables[True] == tables[False]


@FUZZED
@given(files=fuzz_world())
def test_fuzzed_worlds_give_the_same_tables_without_the_trimmed_verdict(
    files: list[FuzzFile],
) -> None:
    tables = {}
    for verdict in (True, False):
        patched = sqlfiles.sql_text if verdict else without_trimmed_verdict(sqlfiles.sql_text)
        with mock.patch.object(sqlfiles, "sql_text", patched):
            tables[verdict] = fuzzed_world_tables(files, ingest_tables)
    assert tables[True] == tables[False]
