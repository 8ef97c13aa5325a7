"""Hypothesis strategies for receipt and reference files with random corruption, and the
independent line count the fuzz tests hold the ledger to.

The invented world: two shops of a small coffee chain, three coffee articles and one grocery
article. Each strategy starts from good lines and spoils some of them the ways delivered files
go wrong: quotes (unclosed, doubled, stray), latin-1 bytes in a UTF-8 file, invalid UTF-8, NULs,
BOMs, huge fields, too few or too many fields, trailing empty fields, CRLF and lone CR line ends,
blank lines, non-numeric and out-of-range numbers, a last line without its terminator, and
files that are empty or hold only a header.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from hypothesis import strategies as st

SHOPS = ("S1", "S2")
ITEMS = ("K1", "K2", "K3", "G9")
RECEIPT_HEADER = ("ticket", "row", "shop", "stamp", "item", "qty", "value")
CATALOGUE_HEADER = ("item", "aisle", "grams")
STORES_HEADER = ("shop", "people")
NUMERIC_RECEIPT_FIELDS = (1, 5, 6)  # row, qty, value

HUGE_FIELD_BYTES = 3 * 1024 * 1024  # above DuckDB's default 2 MB line limit
BAD_NUMBERS = (
    "abc",
    "1_000",
    "1e400",
    "-1e400",
    "99999999999999999999999999999",
    "nan",
    "inf",
    "0x10",
    "4.5.6",
    "",
    " ",
)
# byte-level faults of one rendered line (see `spoil_line`)
LINE_FAULTS = (
    "unclosed_quote",
    "doubled_quote",
    "stray_quote",
    "latin1_byte",
    "invalid_utf8",
    "nul",
    "bom_inside",
    "lone_cr",
    "huge_field",
)
FIELD_FAULTS = ("too_few", "too_many", "trailing_empty", "bad_number", "empty_required")

CONFIG = """
[warehouse]
path = "warehouse/fuzz.duckdb"
memory_limit = "1GB"
threads = 1
temp_directory = "warehouse/tmp"
lock_timeout_seconds = 0

[sources.receipts]
files = ["receipts/*.csv"]
timestamp_format = "%Y-%m-%d %H:%M:%S"
valid_from = "2024-01-01"
valid_to = "2024-12-31"

[sources.receipts.columns]
receipt = "ticket"
line = "row"
store = "shop"
sold_at = "stamp"
sku = "item"
quantity = "qty"
amount = "value"

[sources.catalogue]
files = ["catalogue.csv"]

[sources.catalogue.columns]
sku = "item"
category = "aisle"
pack_grams = "grams"

[sources.stores]
files = ["stores.csv"]

[sources.stores.columns]
store = "shop"
population = "people"

[markets]
categories = ["coffee"]

[products]
keys = ["sku"]

[market_size.visits]
method = "visits"
units_per_visit = 1.0
"""


def physical_lines(data: bytes) -> int:
    """Lines as the README defines them: a line ends at LF (CRLF is one terminator, a lone CR
    is not one) and a last line without a terminator still counts."""
    # POSIX (and `wc -l`): a line is terminated by <newline>; the README adds the last line
    # without one
    if not data:
        return 0
    return data.count(b"\n") + (0 if data.endswith(b"\n") else 1)


def record_line_numbers(data: bytes) -> list[int]:
    """Numbers of the lines after the header that are records: not blank once their terminator
    (LF or CRLF) is taken off (README: a blank line is no record but keeps its number)."""
    lines = data.split(b"\n")
    terminated = len(lines) - 1  # every piece but the last ended at an LF
    if data.endswith(b"\n"):
        lines.pop()  # the empty rest after a final LF is no line
    numbers = []
    for number, line in enumerate(lines, start=1):
        text = line[:-1] if number <= terminated and line.endswith(b"\r") else line
        if number > 1 and text:
            numbers.append(number)
    return numbers


@dataclass(frozen=True)
class FuzzFile:
    """One generated input file: its source, its name inside the world folder and its bytes."""

    source: str
    name: str
    data: bytes

    def write(self, folder: Path) -> Path:
        """Write the bytes under `folder`; returns the absolute path the ledger will hold."""
        path = (folder / self.name).resolve()
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(self.data)
        return path


@st.composite
def receipt_fields(draw: st.DrawFn, ticket: int) -> list[str]:
    """The fields of one good receipt line (some shops or items may be unknown)."""
    day = draw(st.integers(1, 28))
    second = draw(st.integers(0, 86_399))
    stamp = f"2024-03-{day:02d} {second // 3600:02d}:{second // 60 % 60:02d}:{second % 60:02d}"
    return [
        f"T{ticket}",
        str(draw(st.integers(1, 3))),
        draw(st.sampled_from((*SHOPS, "S9"))),
        stamp,
        draw(st.sampled_from((*ITEMS, "K404"))),
        str(draw(st.integers(1, 4))),
        f"{draw(st.integers(0, 2_000)) / 100:.2f}",
    ]


@st.composite
def catalogue_fields(draw: st.DrawFn, position: int) -> list[str]:
    """The fields of one catalogue line (a repeated item is a duplicate key)."""
    item = ITEMS[position] if position < len(ITEMS) else draw(st.sampled_from(ITEMS))
    aisle = "grocery" if item.startswith("G") else "coffee"
    return [item, aisle, str(draw(st.sampled_from((250, 500, 1000))))]


@st.composite
def store_fields(draw: st.DrawFn, position: int) -> list[str]:
    """The fields of one stores line."""
    shop = SHOPS[position] if position < len(SHOPS) else draw(st.sampled_from(SHOPS))
    return [shop, str(draw(st.integers(1_000, 90_000)))]


@st.composite
def spoil_fields(draw: st.DrawFn, fields: list[str], numeric: tuple[int, ...]) -> list[str]:
    """The fields with one field-level fault applied."""
    fault = draw(st.sampled_from(FIELD_FAULTS))
    fields = list(fields)
    if fault == "too_few":
        del fields[draw(st.integers(0, len(fields) - 1))]
    elif fault == "too_many":
        fields.insert(draw(st.integers(0, len(fields))), "extra")
    elif fault == "trailing_empty":
        fields += [""] * draw(st.integers(1, 3))
    elif fault == "bad_number" and numeric:
        fields[draw(st.sampled_from(numeric))] = draw(st.sampled_from(BAD_NUMBERS))
    else:
        fields[draw(st.integers(0, len(fields) - 1))] = ""
    return fields


@st.composite
def spoil_line(draw: st.DrawFn, line: bytes) -> bytes:
    """The rendered line with one byte-level fault applied somewhere inside it."""
    fault = draw(st.sampled_from(LINE_FAULTS))
    at = draw(st.integers(0, len(line)))
    insert = {
        "unclosed_quote": b'"',
        "stray_quote": b'x"y',
        "doubled_quote": b'""',
        "latin1_byte": "é".encode("latin-1"),
        "invalid_utf8": draw(st.sampled_from((b"\xff\xfe", b"\xc3\x28", b"\xed\xa0\x80"))),
        "nul": b"\x00",
        "bom_inside": b"\xef\xbb\xbf",
        "lone_cr": b"\r",
    }.get(fault)
    if fault == "unclosed_quote":
        # at the start of a field, so a CSV parser opens a quoted field that never closes
        starts = [0] + [i + 1 for i, byte in enumerate(line) if byte == ord(",")]
        at = draw(st.sampled_from(starts))
    if insert is not None:
        return line[:at] + insert + line[at:]
    size = draw(st.sampled_from((70_000, HUGE_FIELD_BYTES)))
    fields = line.split(b",")
    fields[draw(st.integers(0, len(fields) - 1))] = b"x" * size
    return b",".join(fields)


@st.composite
def csv_bytes(
    draw: st.DrawFn,
    header: tuple[str, ...],
    line_fields,
    numeric: tuple[int, ...],
    spread: int = 9,
) -> bytes:
    """A whole CSV file: header, good and spoiled lines, mixed line ends, maybe a BOM.

    A line is spoiled with odds 5 in `spread + 1` (references get a wider spread, so that
    receipts are often checked against loaded references).
    """
    shape = draw(st.sampled_from(("lines",) * spread + ("header_only", "zero_bytes")))
    if shape == "zero_bytes":
        return b""
    lines = [",".join(header).encode()]
    count = 0 if shape == "header_only" else draw(st.integers(1, 12))
    for position in range(count):
        kind = draw(st.integers(0, spread))
        if kind == 9:
            lines.append(draw(st.sampled_from((b"", b"   ", b",,,"))))
            continue
        fields = draw(line_fields(position))
        if kind in (5, 6):
            fields = draw(spoil_fields(fields, numeric))
        line = ",".join(fields).encode()
        if kind in (7, 8):
            line = draw(spoil_line(line))
        lines.append(line)
    ends = [draw(st.sampled_from((b"\n", b"\r\n"))) for _ in lines]
    if draw(st.booleans()):
        ends[-1] = b""  # the last line has no terminator
    data = b"".join(line + end for line, end in zip(lines, ends, strict=True))
    if draw(st.integers(0, 9)) == 0:
        data = b"\xef\xbb\xbf" + data
    return data


@st.composite
def fuzz_world(draw: st.DrawFn) -> list[FuzzFile]:
    """A catalogue, a stores file and one to three receipts files, all possibly spoiled."""
    files = [
        FuzzFile(
            "catalogue",
            "catalogue.csv",
            draw(csv_bytes(CATALOGUE_HEADER, catalogue_fields, (2,), spread=19)),
        ),
        FuzzFile(
            "stores", "stores.csv", draw(csv_bytes(STORES_HEADER, store_fields, (1,), spread=19))
        ),
    ]
    first_ticket = 1
    for day in range(draw(st.integers(1, 3))):
        data = draw(
            csv_bytes(
                RECEIPT_HEADER,
                lambda p, base=first_ticket: receipt_fields(base + p),
                NUMERIC_RECEIPT_FIELDS,
            )
        )
        files.append(FuzzFile("receipts", f"receipts/receipts_2024-03-{day + 1:02d}.csv", data))
        first_ticket += 100
    return files
