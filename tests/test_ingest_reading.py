"""The CSV reader: every physical line is one record, counted apart from the field parser.

Each test writes a small receipts (or households) file beside the fault fixture, ingests, and
compares the ledger with a count made here (reference: counting b"\\n" in the file's bytes, or
Python's csv module), the quarantined line numbers and the exact one-line messages.
"""

from __future__ import annotations

import csv
import gzip
from pathlib import Path

import pytest
from ingest_fixtures import copy_faults, ingest, query
from rich.console import Console

from demandprep.ingest.runner import summary_table

UNREADABLE_HINT = (
    "Hint: check that the file is whole (a cut or damaged copy?) and in the source's format "
    "and encoding; a file that failed is read again at the next ingest."
)

HEADER = b"ticket;row;branch;stamp;article;qty;value;member;disc;kind"


def clean_line(number: int) -> bytes:
    """A receipt line every rule accepts, unique by its ticket."""
    return f"R{number:05d};1;B01;2024-03-05 10:00:00;K100;1;6,49;M-17;0,00;sale".encode()


def write_receipts(folder: Path, name: str, lines: list[bytes], end: bytes = b"\n") -> Path:
    """A receipts file of the fault fixture's dialect: header, then `lines`, each ended by `end`."""
    path = folder / "receipts" / name
    path.write_bytes(b"".join(line + end for line in [HEADER, *lines]))
    return path


def reference_records(path: Path) -> int:
    """Data lines of a plain file, by the reader's definition, counted apart from the reader.

    reference: the bytes split at b"\\n" (a final line without terminator counts), header and
    blank lines left out.
    """
    lines = path.read_bytes().split(b"\n")
    if lines and lines[-1] == b"":
        lines.pop()
    return sum(1 for line in lines[1:] if line not in (b"", b"\r"))


def ledger_counts(config, path: Path) -> tuple:
    (row,) = query(
        config,
        "select rows_read, rows_accepted, rows_quarantined from ledger "
        "where path = $p and status = 'current'",
        {"p": str(path)},
    )
    return row


def quarantined(config, path: Path) -> list[tuple[int, str]]:
    return query(
        config,
        "select line_no, reason from quarantine where path = $p order by line_no",
        {"p": str(path)},
    )


def accepted(config, path: Path) -> int:
    return query(
        config,
        "select count(*) from raw_lines join ledger using (file_id) where path = $p",
        {"p": str(path)},
    )[0][0]


def test_unclosed_quote_in_a_later_file_of_the_batch_quarantines_that_line_only(
    tmp_path: Path,
) -> None:
    config_path = copy_faults(tmp_path)
    lines = [clean_line(n) for n in range(3000)]
    lines[9] = b'"R00009;1;B01;2024-03-05 10:00:00;K100;1;6,49;M-17;0,00;sale'
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", lines)
    config, summary = ingest(config_path)
    assert summary.ok
    assert reference_records(path) == 3000
    assert ledger_counts(config, path) == (3000, 2999, 1)
    assert quarantined(config, path) == [(11, "unclosed_quote")]  # header is line 1
    assert accepted(config, path) == 2999


def test_one_crlf_line_among_lf_lines_goes_in(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    lines = [clean_line(n) for n in range(4000)]
    lines[100] += b"\r"
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", lines)
    config, summary = ingest(config_path)
    assert summary.ok
    assert ledger_counts(config, path) == (reference_records(path), 4000, 0)
    kinds = query(config, "select distinct line_kind from raw_lines where receipt = 'R00100'")
    assert kinds == [("sale",)]


def test_a_whole_crlf_file_later_in_the_batch_goes_in(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    lines = [clean_line(n) for n in range(300)]
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", lines, end=b"\r\n")
    config, summary = ingest(config_path)
    assert summary.ok
    assert ledger_counts(config, path) == (reference_records(path), 300, 0)
    assert accepted(config, path) == 300


def test_a_lone_carriage_return_quarantines_its_line_alone(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    lines = [clean_line(n) for n in range(4000)]
    lines[500] = clean_line(500) + b"\r" + clean_line(4000)
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", lines)
    config, summary = ingest(config_path)
    assert summary.ok
    assert reference_records(path) == 4000
    assert ledger_counts(config, path) == (4000, 3999, 1)
    assert quarantined(config, path) == [(502, "stray_carriage_return")]


def test_a_three_megabyte_field_quarantines_its_line_alone(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    lines = [clean_line(n) for n in range(4000)]
    lines[2000] = lines[2000].replace(b";M-17;", b";" + b"M" * 3_000_000 + b";")
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", lines)
    config, summary = ingest(config_path)
    assert summary.ok
    assert ledger_counts(config, path) == (4000, 3999, 1)
    assert quarantined(config, path) == [(2002, "line_too_long")]


def test_extra_empty_trailing_fields_are_a_wrong_column_count(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    lines = [clean_line(n) for n in range(10)]
    lines[3] += b";;"
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", lines)
    config, summary = ingest(config_path)
    assert summary.ok
    # reference: Python's csv module splits that line into 12 fields, the header into 10
    row = next(csv.reader([lines[3].decode()], delimiter=";"))
    assert len(row) == 12
    assert ledger_counts(config, path) == (10, 9, 1)
    assert quarantined(config, path) == [(5, "wrong_column_count")]


HOUSEHOLDS_SOURCE = """
[sources.households]
files = ["households.csv"]

[sources.households.columns]
card = "member"
size = "people"
"""


def test_households_appended_by_the_csv_module_with_crlf_go_in_whole(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    config_path.write_text(config_path.read_text() + HOUSEHOLDS_SOURCE)
    path = config_path.parent / "households.csv"
    rows = [["member", "people"]] + [[f"M-{n}", str(1 + n % 4)] for n in range(50)]
    path.write_text("".join(",".join(row) + "\n" for row in rows[:21]), encoding="utf-8")
    with path.open("a", newline="", encoding="utf-8") as handle:
        csv.writer(handle).writerows(rows[21:])  # reference: the csv module ends lines with CRLF
    assert path.read_bytes().count(b"\r\n") == 30
    config, summary = ingest(config_path)
    assert summary.ok
    assert ledger_counts(config, path) == (50, 50, 0)
    stored = query(config, "select card, size from ref_households order by line_no")
    assert [(card, str(size)) for card, size in stored] == [tuple(row) for row in rows[1:]]


@pytest.mark.parametrize("name", ["receipts_2024-03-05.csv", "r.csv.gz", "r.csv.zst"])
def test_zero_byte_file_is_ledgered_empty_once(tmp_path: Path, name: str) -> None:
    config_path = copy_faults(tmp_path)
    config_path.write_text(config_path.read_text().replace("receipts_*.csv", "*"))
    path = config_path.parent / "receipts" / name
    path.write_bytes(b"")
    config, summary = ingest(config_path)
    assert summary.ok
    (result,) = [r for r in summary.files if r.path == path]
    assert (result.status, result.error) == ("empty", f"{path}: the file is empty.")
    rows = query(
        config,
        "select status, reason, rows_read from ledger where path = $p",
        {"p": str(path)},
    )
    assert rows == [("empty", "the file is empty", 0)]
    _, again = ingest(config_path)
    assert [r.status for r in again.files if r.path == path] == ["unchanged"]


def test_compressed_file_without_lines_is_empty(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    config_path.write_text(config_path.read_text().replace("receipts_*.csv", "*"))
    path = config_path.parent / "receipts" / "r.csv.gz"
    path.write_bytes(gzip.compress(b""))
    config, summary = ingest(config_path)
    assert summary.ok
    (result,) = [r for r in summary.files if r.path == path]
    assert (result.status, result.error) == ("empty", f"{path}: the file is empty.")


def test_header_only_file_is_empty(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", [])
    config, summary = ingest(config_path)
    assert summary.ok
    (result,) = [r for r in summary.files if r.path == path]
    assert (result.status, result.error) == (
        "empty",
        f"{path}: the file is empty (it has only a header).",
    )
    assert query(config, "select status, reason from ledger where path = $p", {"p": str(path)}) == [
        ("empty", "the file has only a header")
    ]
    console = Console(width=200, record=True)
    console.print(summary_table(summary))
    assert "empty: receipts_2024-03-05.csv" in console.export_text()


def test_a_wrong_delimiter_is_named_with_the_key_to_fix(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    lines = [clean_line(n).replace(b";", b",").replace(b"6,49", b"6.49") for n in range(5)]
    path = config_path.parent / "receipts" / "receipts_2024-03-05.csv"
    path.write_bytes(b"\n".join([HEADER.replace(b";", b","), *lines]) + b"\n")
    config, summary = ingest(config_path)
    (result,) = summary.failed
    assert result.path == path
    assert result.error == (
        f"{path}: the header has one column; the file seems to use ',' (configured: ';'). "
        "Hint: set sources.receipts.delimiter = ',' in the config."
    )
    others = sum(r.rows_accepted for r in summary.files if r.source == "receipts")
    assert query(config, "select count(*) from raw_lines") == [(others,)]
    assert accepted(config, path) == 0


def test_blank_lines_are_no_records_and_keep_the_numbering(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    lines = [clean_line(n) for n in range(6)]
    lines[2:2] = [b"", b"\r"]  # lines 4 and 5 are blank
    lines[6] += b";;"  # the fifth record, on line 8
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", lines)
    config, summary = ingest(config_path)
    assert summary.ok
    assert reference_records(path) == 6
    assert ledger_counts(config, path) == (6, 5, 1)
    assert quarantined(config, path) == [(8, "wrong_column_count")]
    numbers = query(
        config,
        "select line_no from raw_lines join ledger using (file_id) where path = $p order by 1",
        {"p": str(path)},
    )
    assert [n for (n,) in numbers] == [2, 3, 6, 7, 9]


def test_quoted_fields_are_read_as_the_csv_module_reads_them(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    quoted = [
        b'"R00001";"1";"B01";"2024-03-05 10:00:00";"K100";"1";"6,49";"M;17";"0,00";"sale"',
        b'R00002;1;B01;2024-03-05 10:00:00;K100;1;6,49;"M ""17""; x";0,00;sale',
        b'R00003;1;B01;2024-03-05 10:00:00;K100;1;6,49;"";0,00;sale',
        b'R00004;1;B01;2024-03-05 10:00:00;K100;1;6,49;a"b;0,00;sale',
        b'R00005;1;B01;2024-03-05 10:00:00;K100;1;6,49;"M"17;0,00;sale',
    ]
    path = write_receipts(config_path.parent, "receipts_2024-03-05.csv", quoted)
    config, summary = ingest(config_path)
    assert summary.ok
    # reference: Python's csv module, the fourth line's card field
    cards = [next(csv.reader([line.decode()], delimiter=";"))[7] for line in quoted[:4]]
    stored = query(
        config,
        "select coalesce(card, '') from raw_lines where receipt like 'R0000%' order by receipt",
    )
    assert [card for (card,) in stored] == cards
    assert quarantined(config, path) == [(6, "unparseable_field")]


def test_a_file_without_header_numbers_its_first_line_one(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    source = HOUSEHOLDS_SOURCE.replace('card = "member"', 'card = "1"').replace(
        'size = "people"', 'size = "2"'
    )
    source = source.replace(
        'files = ["households.csv"]', 'files = ["households.csv"]\nheader = false'
    )
    config_path.write_text(config_path.read_text() + source)
    path = config_path.parent / "households.csv"
    path.write_bytes(b"M-1,2\nM-2,3\nM-3,4,5\nM-4,1\n")
    config, summary = ingest(config_path)
    assert summary.ok
    assert ledger_counts(config, path) == (4, 3, 1)
    assert quarantined(config, path) == [(3, "wrong_column_count")]
    stored = query(config, "select line_no, card from ref_households order by line_no")
    assert stored == [(1, "M-1"), (2, "M-2"), (4, "M-4")]


def test_a_corrupt_gzip_file_fails_alone_as_unreadable(tmp_path: Path) -> None:
    config_path = copy_faults(tmp_path)
    config_path.write_text(config_path.read_text().replace("receipts_*.csv", "*"))
    path = config_path.parent / "receipts" / "r.csv.gz"
    path.write_bytes(gzip.compress(HEADER + b"\n" + clean_line(1) + b"\n")[:-12] + b"\x00" * 40)
    config, summary = ingest(config_path)
    (result,) = summary.failed
    assert result.path == path and result.unreadable
    assert result.error.startswith(f"{path}: cannot be read (")
    # before: no hint
    assert result.error.endswith(UNREADABLE_HINT), result.error
    assert "\n" not in result.error
    others = sum(r.rows_accepted for r in summary.files if r.source == "receipts")
    assert others > 0
    assert query(config, "select count(*) from raw_lines") == [(others,)]


@pytest.mark.parametrize("end", [b"\n", b"\r\n"])
def test_a_line_not_valid_utf8_is_kept_without_its_terminator(tmp_path: Path, end: bytes) -> None:
    config_path = copy_faults(tmp_path)
    broken = clean_line(2).replace(b"B01", b"B\xff01")
    path = write_receipts(
        config_path.parent, "receipts_2024-03-05.csv", [clean_line(1), broken, clean_line(3)], end
    )
    config, summary = ingest(config_path)
    assert summary.ok
    (row,) = query(
        config,
        "select line_no, reason, original_text from quarantine where path = $p",
        {"p": str(path)},
    )
    # the bytes as DuckDB writes a blob (a byte outside printable ASCII as \xNN), no LF or CR
    assert row == (3, "unparseable_field", broken.decode("latin-1").replace("\xff", "\\xFF"))
