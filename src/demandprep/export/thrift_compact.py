"""Apache Thrift's compact protocol, read and written field by field (the encoding of a Parquet
file's footer, the FileMetaData struct of the Parquet format's parquet.thrift).

A struct is read into a list of `[field id, type, value]` entries, in the order they came, with
no schema: a list is `(element type, [values])`, a nested struct another such list, a binary
`bytes` and a double its eight raw bytes. Writing the entries back gives the bytes that were
read, provided the writer of those bytes used the protocol's short field headers whenever it
could (the reference implementation does); `tests/test_parquet_splice.py` checks this on
pyarrow's footers. Maps are not read: the Parquet footer has none.
"""

from __future__ import annotations

from itertools import pairwise
from typing import Any

STOP, TRUE, FALSE, BYTE, I16, I32, I64, DOUBLE, BINARY, LIST, SET, MAP, STRUCT = range(13)
INTEGERS = (I16, I32, I64)

Field = list[Any]  # [field id, type, value]


class RawStruct(bytes):
    """A struct kept as its encoding (fields and stop byte): written back as it is, unread."""


class CompactReader:
    """Reads values from `data`, starting at `position`."""

    def __init__(self, data: bytes, position: int = 0) -> None:
        self.data = data
        self.position = position

    def _byte(self) -> int:
        value = self.data[self.position]
        self.position += 1
        return value

    def _varint(self) -> int:
        shift = result = 0
        while True:
            byte = self._byte()
            result |= (byte & 0x7F) << shift
            if not byte & 0x80:
                return result
            shift += 7

    def _zigzag(self) -> int:
        number = self._varint()
        return (number >> 1) ^ -(number & 1)

    def _bytes(self, size: int) -> bytes:
        value = self.data[self.position : self.position + size]
        self.position += size
        return value

    def value(self, kind: int) -> Any:
        """One value of a type."""
        if kind in (TRUE, FALSE):
            return kind == TRUE
        if kind == BYTE:
            return self._byte()
        if kind in INTEGERS:
            return self._zigzag()
        if kind == DOUBLE:
            return self._bytes(8)
        if kind == BINARY:
            return self._bytes(self._varint())
        if kind in (LIST, SET):
            return self._list()
        if kind == STRUCT:
            return self.struct()
        raise ValueError(f"compact protocol type {kind} is not read here")

    def _list(self) -> tuple[int, list[Any]]:
        size, kind = self._list_header()
        if kind in (TRUE, FALSE):  # a list's booleans are one byte each
            return kind, [self._byte() for _ in range(size)]
        return kind, [self.value(kind) for _ in range(size)]

    def struct(self, marked: int | None = None, bounds: list[int] | None = None) -> list[Field]:
        """A struct's fields up to its stop byte. Field `marked`, a list of structs, is read
        element by element with the position where each begins and the last ends put in
        `bounds`; when `bounds` already holds them, its elements are taken as `RawStruct`s at
        those positions, unread, after checking the list's size and where it begins."""
        fields: list[Field] = []
        last = 0
        while True:
            header = self._byte()
            if header == STOP:
                return fields
            delta, kind = header >> 4, header & 0x0F
            number = last + delta if delta else self._zigzag()
            if number == marked and kind == LIST and bounds is not None:
                value = self._raw_structs(bounds) if bounds else self._marked_list(bounds)
            else:
                value = self.value(kind)
            fields.append([number, kind, value])
            last = number

    def _list_header(self) -> tuple[int, int]:
        header = self._byte()
        size, kind = header >> 4, header & 0x0F
        if size == 15:
            size = self._varint()
        return size, kind

    def _marked_list(self, bounds: list[int]) -> tuple[int, list[Any]]:
        size, kind = self._list_header()
        if kind != STRUCT:
            raise ValueError("the marked field is not a list of structs")
        items = []
        for _ in range(size):
            bounds.append(self.position)
            items.append(self.struct())
        bounds.append(self.position)
        return kind, items

    def _raw_structs(self, bounds: list[int]) -> tuple[int, list[Any]]:
        size, kind = self._list_header()
        if kind != STRUCT or size != len(bounds) - 1 or self.position != bounds[0]:
            raise ValueError("the recorded bounds are not the marked list's")
        if any(end <= start for start, end in pairwise(bounds)):
            raise ValueError("the recorded bounds do not grow")
        items = [RawStruct(self.data[start:end]) for start, end in pairwise(bounds)]
        self.position = bounds[-1]
        return kind, items


class CompactWriter:
    """Collects the encoding of the values written."""

    def __init__(self) -> None:
        self.out = bytearray()
        self.bounds: list[int] = []  # where the marked list's elements begin, and its end

    def _varint(self, number: int) -> None:
        while number >= 0x80:
            self.out.append((number & 0x7F) | 0x80)
            number >>= 7
        self.out.append(number)

    def _zigzag(self, number: int) -> None:
        self._varint(-2 * number - 1 if number < 0 else 2 * number)

    def value(self, kind: int, value: Any) -> None:
        """One value of a type (a boolean field's value is in its header)."""
        if kind in (TRUE, FALSE):
            return
        if isinstance(value, RawStruct):
            self.out += value
        elif kind == BYTE:
            self.out.append(value)
        elif kind in INTEGERS:
            self._zigzag(value)
        elif kind == DOUBLE:
            self.out += value
        elif kind == BINARY:
            self._varint(len(value))
            self.out += value
        elif kind in (LIST, SET):
            self._list(*value)
        elif kind == STRUCT:
            self.struct(value)
        else:
            raise ValueError(f"compact protocol type {kind} is not written here")

    def _list(self, kind: int, items: list[Any], marked: bool = False) -> None:
        if len(items) < 15:
            self.out.append((len(items) << 4) | kind)
        else:
            self.out.append(0xF0 | kind)
            self._varint(len(items))
        for item in items:
            if marked:
                self.bounds.append(len(self.out))
            if kind in (TRUE, FALSE):
                self.out.append(item)
            else:
                self.value(kind, item)
        if marked:
            self.bounds.append(len(self.out))

    def struct(self, fields: list[Field], marked: int | None = None) -> None:
        """A struct's fields (short headers when the id grows by 1 to 15) and its stop byte;
        where the elements of list field `marked` begin (and the last ends) go to `bounds`."""
        last = 0
        for number, kind, value in fields:
            if kind in (TRUE, FALSE):
                kind = TRUE if value else FALSE
            if 0 < number - last <= 15:
                self.out.append(((number - last) << 4) | kind)
            else:
                self.out.append(kind)
                self._zigzag(number)
            if number == marked and kind == LIST:
                self._list(*value, marked=True)
            else:
                self.value(kind, value)
            last = number
        self.out.append(STOP)


def read_struct(data: bytes, position: int = 0) -> tuple[list[Field], int]:
    """The struct encoded at `position` and the position after it."""
    reader = CompactReader(data, position)
    return reader.struct(), reader.position


def encode_struct(fields: list[Field]) -> bytes:
    """The compact encoding of a struct read by `read_struct` (or built like one)."""
    writer = CompactWriter()
    writer.struct(fields)
    return bytes(writer.out)


def read_struct_marked(
    data: bytes, marked: int, bounds: list[int] | None = None
) -> tuple[list[Field], int, list[int]]:
    """The struct encoded at the start of `data`, the position after it, and the bounds of its
    list field `marked` (where each element begins, and where the last ends). Given `bounds`
    (recorded from an earlier read or write of the same bytes), that list's elements come back
    as `RawStruct`s, unread; `ValueError` when they do not fit."""
    found = list(bounds) if bounds else []
    reader = CompactReader(data)
    fields = reader.struct(marked, found)
    return fields, reader.position, found


def encode_struct_marked(fields: list[Field], marked: int) -> tuple[bytes, list[int]]:
    """The encoding of a struct and the bounds of its list field `marked` in it."""
    writer = CompactWriter()
    writer.struct(fields, marked)
    return bytes(writer.out), writer.bounds


def field_value(fields: list[Field], number: int, default: Any = None) -> Any:
    """The value of field `number`, or `default` when the struct does not carry it."""
    for entry in fields:
        if entry[0] == number:
            return entry[2]
    return default


def set_field(fields: list[Field], number: int, value: Any) -> None:
    """Replace the value of field `number`, which the struct must carry."""
    for entry in fields:
        if entry[0] == number:
            entry[2] = value
            return
    raise KeyError(number)
