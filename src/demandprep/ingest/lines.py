"""Cut a CSV file into its physical lines, apart from any CSV parser, in Arrow chunks.

A line ends at LF (byte 10). The LF is not part of the line (the bytes of a line that is not
valid UTF-8 may still carry it, and every line without THREAD_PREP); the reader drops it and
a CR just before it (CRLF is one terminator). A final line
without terminator counts; the empty rest after a final LF is no line. Lines are numbered
from 1 (the header, when there is one). A CR anywhere else, or a quote, is the reader's
business, not the cutter's.

The file is decompressed (`.gz` by ISA-L, `.zst` by pyarrow) and decoded to UTF-8 (latin-1,
utf-16; a UTF-8 byte order mark is dropped) by chunks of CHUNK_BYTES; numpy finds each chunk's
LF bytes and the lines become an Arrow array over the chunk's own buffer, so memory stays
bounded and no Python code runs per line. A line that spans chunks is joined in Python; past
MAX_LINE_BYTES it keeps only its first KEPT_BYTES (its full length travels with it), so one
huge line costs no more memory than a chunk. Invalid UTF-8 is not refused here: such a line
reaches the reader as bytes and is quarantined there.

The threads also do two per-line jobs of the reader's SQL (010) with numpy over the same
buffer, where they cost less and run beside DuckDB (THREAD_PREP; False leaves both to 010, the
reference the tests compare against): each valid line's text comes as an Arrow string view
without its LF (views into the chunk, no copy of the text), and each line's delimiter bytes are
counted (only for an ASCII delimiter other than CR and LF: a byte count is then the count of
the character, which 010 takes as the line's field count less one), and each line is told
`plain` when it is ASCII with no space at its ends or beside a delimiter (or a CR or LF): then
no field of it changes under trim, and 020 skips trimming its fields.

A batch's files are read in threads (`batch_line_chunks`): decompressing, decoding and numpy
release the GIL, so several files are cut at once, each numbering its own lines; the caller
still gets every file's chunks in file order. Each thread runs at most QUEUED_CHUNKS chunks
ahead of the caller, so memory stays bounded by the chunk size, not by the files' sizes.
"""

from __future__ import annotations

import codecs
import queue
import threading
from collections import deque
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import BinaryIO

import numpy as np
import pyarrow as pa
from isal import igzip, isal_zlib

CHUNK_BYTES = 8 * 1024 * 1024
MAX_LINE_BYTES = 1024 * 1024  # a receipt line is some 100 bytes; past this it is a fault
KEPT_BYTES = 4096  # of a too-long line, kept as its original text
UTF8_BOM = codecs.BOM_UTF8
LF = 10
CR = 13
SPACE = 32
# by pyarrow's streams; gzip goes through ISA-L (`_open_bytes`)
COMPRESSION = {".zst": "zstd"}
GZIP_SUFFIX = ".gz"
THREAD_PREP = True  # the LF drop and delimiter count in the threads (module docstring)
VIEW_INLINE_BYTES = 12  # Arrow string views hold values this short inline, longer ones by offset
QUEUED_CHUNKS = 2  # chunks a reader thread may hold ahead of the caller, per file
PUT_WAIT_SECONDS = 0.05  # how often a reader waiting on a full queue looks for a stop


class LinesUnreadable(Exception):
    """The file cannot be opened, decompressed or decoded as a whole."""

    def __init__(self, message: str, path: Path | None = None) -> None:
        super().__init__(message)
        self.path = path


_DONE = object()


def batch_line_chunks(
    paths: list[Path], encoding: str, workers: int, delimiter: str | None = None
) -> Iterator[tuple[int, pa.Table]]:
    """(file position, lines table) of every file in file order, each numbered from line 1.

    Up to `workers` files are read at once in threads. An empty (zero-byte) file gives nothing.
    A file that cannot be read raises LinesUnreadable (with its path) after every chunk of
    the files before it; the threads are stopped when the caller stops or fails.
    """
    if workers <= 1:
        for position, path in enumerate(paths):
            for chunk in _file_chunks(path, encoding, delimiter):
                yield position, chunk
        return
    stop = threading.Event()
    pool = ThreadPoolExecutor(workers, thread_name_prefix="demandprep-lines")
    pending: deque[tuple[int, queue.Queue]] = deque()
    upcoming = iter(enumerate(paths))

    def read_next() -> None:
        for position, path in upcoming:
            found: queue.Queue = queue.Queue(QUEUED_CHUNKS)
            pool.submit(_read_into, path, encoding, delimiter, found, stop)
            pending.append((position, found))
            return

    try:
        for _ in range(workers + 1):  # one more than the threads: the next file starts at once
            read_next()
        while pending:
            position, found = pending.popleft()
            while (item := found.get()) is not _DONE:
                if isinstance(item, BaseException):
                    raise item
                yield position, item
            read_next()
    finally:
        stop.set()
        pool.shutdown(wait=True, cancel_futures=True)


def _file_chunks(path: Path, encoding: str, delimiter: str | None) -> Iterator[pa.Table]:
    if path.stat().st_size == 0:
        return  # nothing to open (an empty .gz is not even valid gzip)
    try:
        # without a delimiter, the plain two-argument cut (the one tests stand in for)
        if delimiter is None:
            yield from line_chunks(path, encoding)
        else:
            yield from line_chunks(path, encoding, delimiter)
    except LinesUnreadable as error:
        raise LinesUnreadable(str(error), path) from None


def _read_into(
    path: Path, encoding: str, delimiter: str | None, found: queue.Queue, stop: threading.Event
) -> None:
    """One file's chunks into `found`, then _DONE (or the error that ended the read)."""
    try:
        for chunk in _file_chunks(path, encoding, delimiter):
            if not _put(found, chunk, stop):
                return
        _put(found, _DONE, stop)
    except BaseException as error:  # handed to the caller, who raises it in its own thread
        _put(found, error, stop)


def _put(found: queue.Queue, item: object, stop: threading.Event) -> bool:
    """Put `item` once there is room; False when the caller stopped reading meanwhile."""
    while not stop.is_set():
        try:
            found.put(item, timeout=PUT_WAIT_SECONDS)
            return True
        except queue.Full:
            continue
    return False


def line_chunks(path: Path, encoding: str, delimiter: str | None = None) -> Iterator[pa.Table]:
    """The file's lines as tables of (line_no, text, raw, length, delimiters), in order.

    `text` holds a line that is valid UTF-8 (else null, and `raw` holds its bytes, which may
    still end with its LF); with THREAD_PREP it has no LF. `length` is the line's full length in
    bytes, without the LF; `delimiters` the count of `delimiter` in it, and `plain` whether no
    field of it changes under trim, or null (not looked at).
    """
    count = _countable(delimiter) if THREAD_PREP else None
    next_line = 1
    for lines, lengths in _cut_lines(_utf8_chunks(path, encoding)):
        numbers = np.arange(next_line, next_line + len(lines), dtype=np.int64)
        next_line += len(lines)
        yield _line_table(numbers, lines, lengths, count)


def _countable(delimiter: str | None) -> int | None:
    """The delimiter's byte when counting bytes counts it exactly in 010's text, else None."""
    if delimiter is None or len(delimiter) != 1 or not delimiter.isascii():
        return None
    return None if delimiter in "\r\n" else ord(delimiter)


def _line_table(
    numbers: np.ndarray, lines: pa.Array, lengths: np.ndarray, delimiter: int | None
) -> pa.Table:
    # valid UTF-8 (nearly always) goes in as text, so DuckDB need not check every line again
    try:
        text = lines.cast(pa.string())
        raw = pa.nulls(len(lines), pa.binary())
    except pa.ArrowInvalid:
        # one text type for every chunk: DuckDB gets the pieces as one table
        text_type = pa.string_view() if THREAD_PREP else pa.string()
        text, raw = pa.nulls(len(lines), text_type), lines
    else:
        if THREAD_PREP:
            text = _views_without_lf(lines)
    if delimiter is None:
        counts, plain = pa.nulls(len(lines), pa.int64()), pa.nulls(len(lines), pa.bool_())
    else:
        counts, plain = _counts(lines, delimiter), _plain(lines, delimiter)
    return pa.table(
        {
            "line_no": numbers,
            "text": text,
            "raw": raw,
            "length": lengths,
            "delimiters": counts,
            "plain": plain,
        }
    )


def _offsets_and_data(lines: pa.Array) -> tuple[np.ndarray, pa.Buffer]:
    """The binary array's offsets (len + 1, into its data buffer) and that buffer."""
    _, offsets, data = lines.buffers()
    return np.frombuffer(offsets, np.int32, len(lines) + 1, lines.offset * 4), data


def _counts(lines: pa.Array, delimiter: int) -> pa.Array:
    """Per line, how many of its bytes are `delimiter` (numpy over the shared buffer).

    The matches' places searched per line, not the matches summed per line (`np.add.reduceat`):
    that cost a fifth less CPU but raised the ingest's peak RSS by some 450 MiB at 40M lines."""
    offsets, data = _offsets_and_data(lines)
    hits = np.flatnonzero(np.frombuffer(data, np.uint8) == delimiter)
    return pa.array(_per_line(hits, offsets).astype(np.int64))


def _plain(lines: pa.Array, delimiter: int) -> pa.Array:
    """Per line: all ASCII, and no space first, last or beside the delimiter, a CR or an LF.

    A false verdict only costs 020 its trims; a true one must be right, so doubtful spaces
    count against the line. Every line of the array but its last ends with LF (_cut_lines),
    so a line's first byte follows an LF or starts the array, and a last byte not before an LF
    ends the array.
    """
    offsets, data = _offsets_and_data(lines)
    first, end = int(offsets[0]), int(offsets[-1])
    body = np.frombuffer(data, np.uint8)[:end]
    spaces = np.flatnonzero(body[first:] == SPACE) + first
    before = body[np.maximum(spaces - 1, 0)]
    after = body[np.minimum(spaces + 1, max(end - 1, 0))]
    doubtful = (spaces == first) | (spaces + 1 == end)
    for edge in (CR, LF, delimiter):
        doubtful |= (before == edge) | (after == edge)
    wide = np.flatnonzero(body[first:] >= 0x80) + first
    return pa.array((_per_line(wide, offsets) + _per_line(spaces[doubtful], offsets)) == 0)


def _per_line(places: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """How many of the sorted byte `places` fall in each line."""
    return np.diff(np.searchsorted(places, offsets))


def _views_without_lf(lines: pa.Array) -> pa.Array:
    """The (valid UTF-8) lines as string views over their own buffer, each without its LF.

    Arrow's view layout: per value 16 bytes, its length (int32), then the value itself when it
    is at most VIEW_INLINE_BYTES long, else its first 4 bytes, buffer index and offset (int32).
    """
    offsets, data = _offsets_and_data(lines)
    body = np.frombuffer(data, np.uint8)
    starts, lengths = offsets[:-1], np.diff(offsets)
    ends_with_lf = lengths > 0
    ends_with_lf[ends_with_lf] = body[offsets[1:][ends_with_lf] - 1] == LF
    lengths = lengths - ends_with_lf
    views = np.zeros((len(lines), 16), np.uint8)
    words = views.view(np.int32)
    words[:, 0] = lengths
    long = lengths > VIEW_INLINE_BYTES
    words[long, 3] = starts[long]  # buffer index 0 (words[:, 2]) is already zero
    views[long, 4:8] = body[starts[long, None] + np.arange(4)]
    short = ~long
    places = np.arange(VIEW_INLINE_BYTES)
    inside = places < lengths[short, None]
    taken = np.minimum(starts[short, None] + places, max(len(body) - 1, 0))
    views[short, 4:] = np.where(inside, body[taken] if len(body) else 0, 0)
    return pa.Array.from_buffers(pa.string_view(), len(lines), [None, pa.py_buffer(views), data])


def _open_bytes(path: Path) -> BinaryIO | pa.NativeFile:
    """The file's decompressed bytes as a stream. Gzip is read by ISA-L's igzip, a drop-in for
    Python's gzip module (members in a row, trailing zero bytes ignored) that decompresses some
    three times faster than zlib and, like numpy, releases the GIL for the reader threads."""
    if path.suffix.lower() == GZIP_SUFFIX:
        return igzip.open(path, "rb")
    return pa.input_stream(str(path), compression=COMPRESSION.get(path.suffix.lower()))


def _utf8_chunks(path: Path, encoding: str) -> Iterator[bytes]:
    decoder = None if encoding == "utf-8" else codecs.getincrementaldecoder(encoding)()
    first = True
    try:
        with _open_bytes(path) as stream:
            while True:
                read = stream.read(CHUNK_BYTES)
                chunk = read
                if decoder is not None:
                    chunk = decoder.decode(read, final=not read).encode("utf-8")
                elif first and chunk.startswith(UTF8_BOM):
                    chunk = chunk[len(UTF8_BOM) :]
                first = False
                if chunk:
                    yield chunk
                if not read:
                    return
    except (OSError, EOFError, isal_zlib.error, pa.ArrowException, UnicodeDecodeError) as error:
        message = str(error).strip().splitlines()[0] if str(error).strip() else type(error).__name__
        raise LinesUnreadable(message) from None


def _cut_lines(chunks: Iterator[bytes]) -> Iterator[tuple[pa.Array, np.ndarray]]:
    """(lines, full lengths) as they complete; a line cut by a chunk's end is finished by the
    next chunk. The lines of a chunk share its buffer (each with its LF), without copies."""
    head, head_length = b"", 0  # the unfinished line so far (truncated once too long)
    for chunk in chunks:
        ends = np.flatnonzero(np.frombuffer(chunk, dtype=np.uint8) == LF)
        if not len(ends):
            head, head_length = _extend(head, head_length, chunk)
            continue
        last_end = int(ends[-1])
        start = 0  # nothing unfinished: the chunk's first line is whole in it
        if head_length:
            head, head_length = _extend(head, head_length, chunk[: ends[0]])
            yield pa.array([head], pa.binary()), np.array([head_length], dtype=np.int64)
            start, ends = int(ends[0]) + 1, ends[1:]
        if len(ends):
            offsets = np.concatenate(([0], ends + 1 - start)).astype(np.int32)
            body = pa.py_buffer(chunk).slice(start, last_end + 1 - start)
            lines = pa.BinaryArray.from_buffers(
                pa.binary(), len(offsets) - 1, [None, pa.py_buffer(offsets), body]
            )
            yield lines, np.diff(offsets).astype(np.int64) - 1
        head, head_length = _extend(b"", 0, chunk[last_end + 1 :])
    if head_length:
        yield pa.array([head], pa.binary()), np.array([head_length], dtype=np.int64)


def _extend(head: bytes, length: int, more: bytes) -> tuple[bytes, int]:
    length += len(more)
    if length > MAX_LINE_BYTES:
        return (head + more[:KEPT_BYTES])[:KEPT_BYTES], length
    return head + more, length
