"""Gzip receipts files are decompressed as the gzip format (RFC 1952) and Python's own gzip
module read them: several members in a row are one file, zero bytes padding the end are
ignored, and a damaged file is unreadable with a one-line reason."""

from __future__ import annotations

import gzip
import zlib
from pathlib import Path

import pytest

from demandprep.ingest.lines import LinesUnreadable, line_chunks

BODY = b"h\n" + b"".join(b"r%d,%d\n" % (n, n * 7) for n in range(30_000))


def read_lines(path: Path) -> list[bytes]:
    """Every line of `path` as the cutter gives it (text, else raw bytes), without its LF."""
    found = []
    for table in line_chunks(path, "utf-8", ","):
        for text, raw in zip(table["text"].to_pylist(), table["raw"].to_pylist(), strict=True):
            found.append(text.encode() if text is not None else raw.rstrip(b"\n"))
    return found


def expected_lines(data: bytes) -> list[bytes]:
    return data.split(b"\n")[:-1]


def write(path: Path, data: bytes) -> Path:
    path.write_bytes(data)
    return path


def test_a_gzip_file_reads_as_python_gzip_reads_it(tmp_path: Path) -> None:
    path = write(tmp_path / "r.csv.gz", gzip.compress(BODY, compresslevel=9))
    assert read_lines(path) == expected_lines(gzip.decompress(path.read_bytes()))


def test_gzip_members_in_a_row_are_one_file(tmp_path: Path) -> None:
    # RFC 1952 section 2.2: a gzip file is a series of members; `cat a.gz b.gz` is valid
    half = len(BODY) // 2
    cut = BODY.index(b"\n", half) + 1
    data = gzip.compress(BODY[:cut]) + gzip.compress(BODY[cut:])
    path = write(tmp_path / "r.csv.gz", data)
    assert read_lines(path) == expected_lines(BODY)


def test_zero_bytes_after_the_last_member_are_ignored(tmp_path: Path) -> None:
    # a file padded to a block size: gzip -d and Python's gzip module ignore trailing zeros
    data = gzip.compress(BODY) + b"\x00" * 512
    assert gzip.decompress(data) == BODY  # the reference reads it
    path = write(tmp_path / "r.csv.gz", data)
    assert read_lines(path) == expected_lines(BODY)


@pytest.mark.parametrize(
    "damage",
    ["truncated", "crc", "not_gzip", "garbage_after", "bad_deflate"],
)
def test_a_damaged_gzip_file_is_unreadable_with_one_line(tmp_path: Path, damage: str) -> None:
    whole = gzip.compress(BODY)
    data = {
        "truncated": whole[: len(whole) // 2],
        "crc": whole[:-8] + bytes([whole[-8] ^ 0xFF]) + whole[-7:],
        "not_gzip": b"\x1f\x8b not gzip at all",
        "garbage_after": whole + b"more text",
        "bad_deflate": whole[:10] + b"\xff" * 64 + whole[74:],
    }[damage]
    with pytest.raises((OSError, EOFError, zlib.error)):
        gzip.decompress(data)  # the reference refuses it too
    path = write(tmp_path / "r.csv.gz", data)
    with pytest.raises(LinesUnreadable) as raised:
        read_lines(path)
    message = str(raised.value)
    assert message and "\n" not in message
