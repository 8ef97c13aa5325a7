"""One Parquet file from an earlier file's first row groups and a newly written file's row
groups: byte for byte the file pyarrow writes for all those rows at once.

A Parquet file is `PAR1`, the row groups' column chunks one after the other, the footer (the
format's FileMetaData in Thrift's compact protocol: `thrift_compact.py`), its length and `PAR1`.
pyarrow encodes each row group from its own rows only (a column chunk starts a new dictionary),
so with fixed row groups (`export.row_group_rows`) a row group holding the same rows is the
same bytes in both files. The spliced file is the earlier file up to its first row group not
kept, the new file's row groups after its `PAR1`, and the new file's footer with the kept row
groups' entries put first and the new ones' file positions moved by the length of what comes
before them. Offsets that pyarrow leaves at 0 (a column chunk's deprecated `file_offset`) stay 0.

Refused (`SpliceRefused`, the caller then writes the whole file) when the two files do not
share their Parquet schema and writer, when either has page indexes or bloom filters (written
after the row groups, so not in the copied part), when a kept row group is not of the fixed
size, or when the earlier file is not the bytes its recorded sha256 says.
"""

from __future__ import annotations

import copy
import hashlib
import os
import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from demandprep.export.thrift_compact import (
    STRUCT,
    Field,
    RawStruct,
    encode_struct_marked,
    field_value,
    read_struct,
    read_struct_marked,
    set_field,
)

MAGIC = b"PAR1"
CHUNK_BYTES = 8 << 20

# Field ids of the Parquet format's parquet.thrift.
FILE_SCHEMA, FILE_NUM_ROWS, FILE_ROW_GROUPS, FILE_CREATED_BY, FILE_COLUMN_ORDERS = 2, 3, 4, 6, 7
GROUP_COLUMNS, GROUP_NUM_ROWS, GROUP_SORTING, GROUP_FILE_OFFSET, GROUP_ORDINAL = 1, 3, 4, 5, 7
CHUNK_FILE_OFFSET, CHUNK_META_DATA, CHUNK_OFFSET_INDEX, CHUNK_COLUMN_INDEX = 2, 3, 4, 6
META_DATA_PAGE, META_INDEX_PAGE, META_DICTIONARY_PAGE, META_BLOOM_FILTER = 9, 10, 11, 14
CHUNK_POSITIONS = (CHUNK_FILE_OFFSET, CHUNK_OFFSET_INDEX, CHUNK_COLUMN_INDEX)
META_POSITIONS = (META_DATA_PAGE, META_INDEX_PAGE, META_DICTIONARY_PAGE, META_BLOOM_FILTER)


class SpliceRefused(Exception):
    """The files cannot be spliced into the file a whole write would give; says why."""


@dataclass
class Footer:
    """A Parquet file's footer: its fields, where it starts, the file's size, where each row
    group's entry begins in the footer's encoding (and the last ends), and pyarrow's reading of
    it (row counts and page index locations without our Thrift reader)."""

    fields: list[Field]
    start: int
    size: int
    group_bounds: list[int]
    metadata: pq.FileMetaData

    @property
    def row_groups(self) -> list[list[Field] | RawStruct]:
        return field_value(self.fields, FILE_ROW_GROUPS, (STRUCT, []))[1]


def read_footer(path: Path, group_bounds: list[int] | None = None) -> Footer:
    """The footer of the Parquet file at `path` (only its last bytes are read).

    With `group_bounds` recorded when the file was written (`write_spliced`), the row groups'
    entries are kept as their bytes, unread (reading a 415-row-group footer's entries took
    0.7 s); when they do not fit the footer, it is read whole."""
    with path.open("rb") as handle:
        size = handle.seek(0, 2)
        if size < 12:
            raise SpliceRefused(f"{path.name} is too short to be a Parquet file")
        handle.seek(size - 8)
        tail = handle.read(8)
        length = struct.unpack("<I", tail[:4])[0]
        if tail[4:] != MAGIC or length > size - 12:
            raise SpliceRefused(f"{path.name} does not end like a Parquet file")
        handle.seek(size - 8 - length)
        encoded = handle.read(length)
    fields, bounds = _footer_fields(encoded, group_bounds)
    if fields is None:
        raise SpliceRefused(f"{path.name}: its footer is not one FileMetaData struct")
    try:
        metadata = pq.read_metadata(path)
    except (pa.ArrowException, OSError) as error:
        raise SpliceRefused(f"{path.name}: pyarrow cannot read its footer ({error})") from None
    return Footer(fields, size - 8 - length, size, bounds, metadata)


def _footer_fields(
    encoded: bytes, recorded: list[int] | None
) -> tuple[list[Field] | None, list[int]]:
    # the recorded bounds first; the whole footer when they are not this footer's
    for bounds in ([recorded] if recorded else []) + [None]:
        try:
            fields, end, found = read_struct_marked(encoded, FILE_ROW_GROUPS, bounds)
        except (ValueError, IndexError):
            continue
        if end == len(encoded):
            return fields, found
    return None, []


def group_rows(group: list[Field]) -> int:
    """The rows of one row group."""
    return field_value(group, GROUP_NUM_ROWS)


def group_start(group: list[Field]) -> int:
    """Where a row group's bytes begin: its first column chunk's first page."""
    starts = []
    for chunk in field_value(group, GROUP_COLUMNS)[1]:
        meta = field_value(chunk, CHUNK_META_DATA)
        starts.append(field_value(meta, META_DICTIONARY_PAGE) or field_value(meta, META_DATA_PAGE))
    return min(starts)


def splice_refusal(kept: Footer, keep: int, written: Footer, row_group_rows: int) -> str | None:
    """Why the first `keep` row groups of `kept` cannot precede `written`'s, or None."""
    shared = (("schema", FILE_SCHEMA), ("writer", FILE_CREATED_BY), ("orders", FILE_COLUMN_ORDERS))
    for name, number in shared:
        if field_value(kept.fields, number) != field_value(written.fields, number):
            return f"the earlier file's Parquet {name} differs"
    if keep > len(kept.row_groups):
        return "the earlier file has fewer row groups than kept"
    if any(_rows(kept, number) != row_group_rows for number in range(keep)):
        return "a kept row group of the earlier file is not of the configured size"
    if _written_after_row_groups(kept) or _written_after_row_groups(written):
        return "a file has page indexes or bloom filters"
    return None


def _rows(footer: Footer, number: int) -> int:
    return footer.metadata.row_group(number).num_rows


def _written_after_row_groups(footer: Footer) -> bool:
    for number in range(footer.metadata.num_row_groups):
        group = footer.metadata.row_group(number)
        for column in range(group.num_columns):
            chunk = group.column(column)
            if chunk.has_offset_index or chunk.has_column_index:
                return True
            if chunk.bloom_filter_offset is not None:
                return True
    return False


def kept_bytes(kept: Footer, keep: int) -> int:
    """How many leading bytes of the earlier file the spliced file copies: up to its first row
    group not kept (its footer when every row group is kept)."""
    if keep < len(kept.row_groups):
        return group_start(_fields(kept.row_groups[keep]))
    return kept.start


def spliced_footer(kept: Footer, keep: int, written: Footer) -> tuple[bytes, int, list[int]]:
    """The footer of the spliced file, where `written`'s row groups begin in the file, and
    where each row group's entry begins in the footer (and the last ends)."""
    cut = kept_bytes(kept, keep)
    shift = cut - len(MAGIC)
    fields = copy.deepcopy(written.fields)
    groups = field_value(fields, FILE_ROW_GROUPS)[1]
    for group in groups:
        move_row_group(group, shift, keep)
    # the kept entries are encoded as they are, never changed: no copy (a deep copy of the
    # 13.1M-line world's 284 entries took 1.2 s), and written back as their bytes when read so
    all_groups = kept.row_groups[:keep] + groups
    set_field(fields, FILE_ROW_GROUPS, (STRUCT, all_groups))
    rows = sum(_rows(kept, number) for number in range(keep))
    set_field(fields, FILE_NUM_ROWS, rows + sum(group_rows(group) for group in groups))
    encoded, bounds = encode_struct_marked(fields, FILE_ROW_GROUPS)
    return encoded, cut, bounds


def _fields(group: list[Field] | RawStruct) -> list[Field]:
    # the first entry not kept is read: its bounds, where the kept bytes end, must hold exactly
    # one struct (the others only need to add up, which reading the footer checked)
    if not isinstance(group, RawStruct):
        return group
    try:
        fields, end = read_struct(group)
    except (ValueError, IndexError):
        end = -1
    if end != len(group):
        raise SpliceRefused("the recorded row group bounds do not fit the earlier file's footer")
    return fields


def move_row_group(group: list[Field], shift: int, groups_before: int) -> None:
    """A row group's footer entry for its bytes moved `shift` bytes on and `groups_before`
    more row groups before it: its file positions and its ordinal (when written) move."""
    _move_positions(group, (GROUP_FILE_OFFSET,), shift)
    for entry in group:
        if entry[0] == GROUP_ORDINAL:
            entry[2] += groups_before
    for chunk in field_value(group, GROUP_COLUMNS)[1]:
        _move_positions(chunk, CHUNK_POSITIONS, shift)
        _move_positions(field_value(chunk, CHUNK_META_DATA), META_POSITIONS, shift)


def _move_positions(fields: list[Field], numbers: tuple[int, ...], shift: int) -> None:
    # a position pyarrow leaves at 0 (not written) stays 0
    for entry in fields:
        if entry[0] in numbers and entry[2] > 0:
            entry[2] += shift


def write_spliced(
    kept_path: Path,
    kept: Footer,
    keep: int,
    kept_sha256: str,
    written_path: Path,
    written: Footer,
    target: Path,
    prefix_hash: Any = None,
) -> tuple[str, list[int]]:
    """Write the spliced file to `target`; returns its sha256 and its footer's row group
    bounds (for `read_footer` of the next splice).

    The earlier file is read whole to check its sha256 first (`kept_prefix_hash`, unless its
    result comes as `prefix_hash`, e.g. from a thread that ran while the new row groups were
    written); on a mismatch `SpliceRefused` is raised and `target` is not written. Its kept
    bytes are then copied by the kernel
    (`os.copy_file_range`: 0.2 s a 550 MB file here, where reading and writing them through
    Python took 1.3 s), so the earlier file, an old build's, must not change meanwhile: builds
    are never rewritten, and the export root's lock keeps other builds out."""
    footer, cut, bounds = spliced_footer(kept, keep, written)
    if prefix_hash is None:
        prefix_hash = kept_prefix_hash(kept_path, kept, keep, kept_sha256)
    target_hash = prefix_hash.copy()
    with target.open("wb", buffering=0) as out:
        with kept_path.open("rb", buffering=0) as source:
            _copy_prefix(source, out, cut)
        with written_path.open("rb") as source:
            source.seek(len(MAGIC))
            _copy(source, written.start - len(MAGIC), out, (target_hash,))
        for part in (footer, struct.pack("<I", len(footer)), MAGIC):
            _write_all(out, part)
            target_hash.update(part)
        os.fsync(out.fileno())
    return target_hash.hexdigest(), bounds


def kept_prefix_hash(path: Path, kept: Footer, keep: int, recorded_sha256: str):  # noqa: ANN201
    """The sha256 state of the earlier file's kept bytes (`kept_bytes`), which starts the
    spliced file's hash, once the whole file is found to be its recorded sha256 (else
    `SpliceRefused`). Reading and hashing release the GIL, so a thread can run it."""
    return _verified_prefix_hash(path, kept.size, kept_bytes(kept, keep), recorded_sha256)


def _verified_prefix_hash(path: Path, size: int, cut: int, recorded_sha256: str):  # noqa: ANN202
    # the file is read once: the hash of its first `cut` bytes starts the spliced file's (the
    # state copied), and the whole file's must be the recorded one
    whole = hashlib.sha256()
    with path.open("rb") as source:
        _copy(source, cut, None, (whole,))
        prefix = whole.copy()
        _copy(source, size - cut, None, (whole,))
    if whole.hexdigest() != recorded_sha256:
        raise SpliceRefused("the earlier file is not the one recorded (sha256 differs)")
    return prefix


def _copy_prefix(source, out, size: int) -> None:  # noqa: ANN001 - binary files
    """The first `size` bytes of `source` to `out`, in the kernel when it can."""
    copied = 0
    try:
        while copied < size:
            count = os.copy_file_range(source.fileno(), out.fileno(), size - copied, copied)
            if count == 0:
                raise SpliceRefused("the earlier file is shorter than its footer says")
            copied += count
    except (AttributeError, OSError):  # no copy_file_range here, or not across these files
        source.seek(copied)
        _copy(source, size - copied, out, ())


def _write_all(out, data: bytes) -> None:  # noqa: ANN001 - a binary file without buffer
    view = memoryview(data)
    while view:
        view = view[out.write(view) :]


def _copy(source, size: int, out, hashes: tuple) -> None:  # noqa: ANN001 - binary files
    while size > 0:
        block = source.read(min(CHUNK_BYTES, size))
        if not block:
            raise SpliceRefused("the earlier file is shorter than its footer says")
        size -= len(block)
        for digest in hashes:
            digest.update(block)
        if out is not None:
            _write_all(out, block)
