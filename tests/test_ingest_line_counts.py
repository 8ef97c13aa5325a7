"""The reader threads' per-line delimiter counts equal a plain count of the delimiter's byte in
each line, whatever the lines: empty ones, lines cut by a chunk's end, a final line without LF,
lines of other bytes than ASCII.

reference: Python's bytes.count on each line of the file split at LF.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from demandprep.ingest import lines as lines_module
from demandprep.ingest.lines import line_chunks

LINE_BYTES = st.sampled_from([b";", b",", b"a", b" ", b"\r", b'"', "é".encode(), b"\xff"])
LINES = st.lists(st.lists(LINE_BYTES, max_size=40).map(b"".join), min_size=1, max_size=60)


def counted_by_the_reader(path: Path, delimiter: str) -> list[int]:
    found: list[int] = []
    for table in line_chunks(path, "utf-8", delimiter):
        found += table["delimiters"].to_pylist()
    return found


def counted_by_python(data: bytes, delimiter: str) -> list[int]:
    lines = data.split(b"\n")
    if lines[-1] == b"":
        lines = lines[:-1]  # the empty rest after a final LF is no line
    return [line.count(delimiter.encode()) for line in lines]


@settings(max_examples=150, deadline=None)
@given(lines=LINES, final_lf=st.booleans(), chunk=st.sampled_from([7, 64, 1 << 20]))
def test_each_lines_delimiter_count_is_a_plain_count(
    lines: list[bytes], final_lf: bool, chunk: int
) -> None:
    data = b"\n".join(lines) + (b"\n" if final_lf else b"")
    if not data:
        return  # an empty file has no line
    with tempfile.TemporaryDirectory() as folder, pytest.MonkeyPatch.context() as patch:
        patch.setattr(lines_module, "CHUNK_BYTES", chunk)
        path = Path(folder) / "r.csv"
        path.write_bytes(data)
        for delimiter in (";", ","):
            assert counted_by_the_reader(path, delimiter) == counted_by_python(data, delimiter)
