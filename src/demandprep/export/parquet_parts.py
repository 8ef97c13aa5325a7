"""Encode a Parquet file's row groups on several threads and put them together into the bytes
one writer gives.

pyarrow's writer encodes on the thread that calls it, one column chunk after the other, so a
long file is written at the speed of one core. Here each row group is encoded on a pool thread
into a Parquet file of its own, in memory (pyarrow releases the GIL while it encodes), and the
calling thread appends their row groups to the target in order and ends it with one footer:
the first part's FileMetaData with every part's row group entry, their file positions moved to
where their bytes land and their ordinals to their place (as `parquet_splice` moves a spliced
file's), and the row counts summed. pyarrow encodes a row group from its own rows only (a
column chunk starts a new dictionary), so the file is byte for byte the one a single writer
gives for the same rows and row groups (`tests/test_parquet_parts.py`).
"""

from __future__ import annotations

import struct
from collections import deque
from collections.abc import Iterable, Mapping
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, BinaryIO

import pyarrow as pa
import pyarrow.parquet as pq

from demandprep.export.parquet_splice import (
    FILE_NUM_ROWS,
    FILE_ROW_GROUPS,
    MAGIC,
    move_row_group,
)
from demandprep.export.thrift_compact import (
    STRUCT,
    Field,
    encode_struct_marked,
    field_value,
    read_struct,
    set_field,
)


def write_row_groups(
    out: BinaryIO,
    groups: Iterable[pa.Table],
    schema: pa.Schema,
    options: Mapping[str, Any],
    encoders: int,
) -> tuple[int, list[int]]:
    """Write a Parquet file of `groups`, one row group each, to `out` (at its start); returns
    its rows and where each row group's entry begins in the footer (and the last ends).
    `encoders` groups are encoded at once, one more waits encoded to be written.

    `options` are pyarrow.parquet.ParquetWriter's keyword arguments. At least one group is
    needed (a file without rows has no part to take the footer from)."""
    assembled = _Assembly(out)
    with ThreadPoolExecutor(encoders, thread_name_prefix="parquet-encode") as pool:
        pending: deque[Future[pa.Buffer]] = deque()
        try:
            for group in groups:
                pending.append(pool.submit(encoded_part, group, schema, options))
                if len(pending) > encoders:
                    assembled.append(pending.popleft().result())
            while pending:
                assembled.append(pending.popleft().result())
        finally:
            for future in pending:  # a failure: nothing more is encoded
                future.cancel()
    return assembled.finish()


def encoded_part(group: pa.Table, schema: pa.Schema, options: Mapping[str, Any]) -> pa.Buffer:
    """A Parquet file of `group` as one row group, in memory."""
    sink = pa.BufferOutputStream()
    writer = pq.ParquetWriter(sink, schema, **options)
    try:
        writer.write_table(group, row_group_size=max(group.num_rows, 1))
    finally:
        writer.close()
    return sink.getvalue()


class _Assembly:
    """The target file as parts are appended: its length so far, the first part's footer and
    every part's row group entry."""

    def __init__(self, out: BinaryIO) -> None:
        self.out = out
        self.length = len(MAGIC)
        self.footer: list[Field] | None = None
        self.groups: list[list[Field]] = []
        self.rows = 0
        out.write(MAGIC)

    def append(self, part: pa.Buffer) -> None:
        """The part's row group after the ones before, its entry moved to its place."""
        data = memoryview(part)
        footer_length = struct.unpack("<I", data[-8:-4])[0]
        footer_start = len(data) - 8 - footer_length
        fields, end = read_struct(bytes(data[footer_start:-8]))
        groups = field_value(fields, FILE_ROW_GROUPS)[1]
        if end != footer_length or len(groups) != 1 or data[:4] != MAGIC:
            raise ValueError("an encoded part is not a Parquet file of one row group")
        (group,) = groups
        move_row_group(group, self.length - len(MAGIC), len(self.groups))
        self.out.write(data[len(MAGIC) : footer_start])
        self.length += footer_start - len(MAGIC)
        self.rows += field_value(fields, FILE_NUM_ROWS)
        self.groups.append(group)
        if self.footer is None:
            self.footer = fields

    def finish(self) -> tuple[int, list[int]]:
        """Write the footer of every part's row group; returns the rows and the entry bounds."""
        if self.footer is None:
            raise ValueError("a Parquet file of parts needs one part at least")
        set_field(self.footer, FILE_ROW_GROUPS, (STRUCT, self.groups))
        set_field(self.footer, FILE_NUM_ROWS, self.rows)
        encoded, bounds = encode_struct_marked(self.footer, FILE_ROW_GROUPS)
        for piece in (encoded, struct.pack("<I", len(encoded)), MAGIC):
            self.out.write(piece)
        return self.rows, bounds
