"""Cut a CSV file into its physical lines, apart from any CSV parser, in Arrow chunks.

A line ends at LF (byte 10). The LF is not part of the line; a CR just before it stays and the
reader drops it (CRLF is one terminator). A final line without terminator counts; the empty
rest after a final LF is no line. Lines are numbered from 1 (the header, when there is one).
A CR anywhere else, or a quote, is the reader's business, not the splitter's.

The file is decompressed (`.gz`, `.zst`) and decoded to UTF-8 (latin-1, utf-16; a UTF-8 byte
order mark is dropped) by chunks of CHUNK_BYTES, and each chunk is cut with Arrow's compute
kernels, so memory stays bounded and no Python code runs per line. A line longer than
MAX_LINE_BYTES keeps only its first KEPT_BYTES (its full length travels with it), so one huge
line costs no more memory than a normal chunk. UTF-8 sources are not validated here: a line
with invalid bytes reaches the reader as is and is quarantined there.
"""

from __future__ import annotations

import codecs
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

CHUNK_BYTES = 8 * 1024 * 1024
MAX_LINE_BYTES = 1024 * 1024  # a receipt line is some 100 bytes; past this it is a fault
KEPT_BYTES = 4096  # of a too-long line, kept as its original text
UTF8_BOM = codecs.BOM_UTF8
COMPRESSION = {".gz": "gzip", ".zst": "zstd"}


class LinesUnreadable(Exception):
    """The file cannot be opened, decompressed or decoded as a whole."""


def line_chunks(path: Path, encoding: str) -> Iterator[pa.Table]:
    """The file's lines as tables of (line_no int64, raw binary, length int64), in order."""
    next_line = 1
    for raw, lengths in _cut_lines(_utf8_chunks(path, encoding)):
        numbers = np.arange(next_line, next_line + len(raw), dtype=np.int64)
        next_line += len(raw)
        yield pa.table({"line_no": numbers, "raw": raw, "length": lengths})


def _utf8_chunks(path: Path, encoding: str) -> Iterator[bytes]:
    compression = COMPRESSION.get(path.suffix.lower())
    decoder = None if encoding == "utf-8" else codecs.getincrementaldecoder(encoding)()
    first = True
    try:
        with pa.input_stream(str(path), compression=compression) as stream:
            while True:
                chunk = stream.read(CHUNK_BYTES)
                if decoder is not None:
                    chunk = decoder.decode(chunk, final=not chunk).encode("utf-8")
                elif first and chunk.startswith(UTF8_BOM):
                    chunk = chunk[len(UTF8_BOM) :]
                first = False
                if not chunk:
                    return
                yield chunk
    except (OSError, pa.ArrowException, UnicodeDecodeError) as error:
        message = str(error).strip().splitlines()[0] if str(error).strip() else type(error).__name__
        raise LinesUnreadable(message) from None


def _cut_lines(chunks: Iterator[bytes]) -> Iterator[tuple[pa.Array, pa.Array]]:
    """(lines, full lengths) per chunk; a line cut by a chunk's end is finished by the next."""
    head, head_length = b"", 0  # the unfinished line so far (truncated once too long)
    for chunk in chunks:
        last = chunk.rfind(b"\n")
        if last < 0:
            head, head_length = _extend(head, head_length, chunk)
            continue
        first = chunk.find(b"\n")
        head, head_length = _extend(head, head_length, chunk[:first])
        lines = [pa.array([head], pa.binary())]
        lengths = [pa.array([head_length], pa.int64())]
        if last > first:
            middle = pc.split_pattern(pa.array([chunk[first + 1 : last]], pa.binary()), b"\n")
            whole = middle.flatten()
            full = pc.cast(pc.binary_length(whole), pa.int64())
            lines.append(pc.if_else(pc.greater(full, MAX_LINE_BYTES), _kept(whole), whole))
            lengths.append(full)
        yield pa.concat_arrays(lines), pa.concat_arrays(lengths)
        head, head_length = _extend(b"", 0, chunk[last + 1 :])
    if head_length:
        yield pa.array([head], pa.binary()), pa.array([head_length], pa.int64())


def _kept(lines: pa.Array) -> pa.Array:
    return pc.binary_slice(lines, 0, KEPT_BYTES)


def _extend(head: bytes, length: int, more: bytes) -> tuple[bytes, int]:
    length += len(more)
    if length > MAX_LINE_BYTES:
        return (head + more[:KEPT_BYTES])[:KEPT_BYTES], length
    return head + more, length
