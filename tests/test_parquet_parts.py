"""Row groups encoded on several threads and put together are the bytes pyarrow's own writer
gives for the same rows and row groups (the reference: pyarrow.parquet.ParquetWriter)."""

from __future__ import annotations

import io
import threading
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from demandprep.export.parquet_parts import encoded_part, write_row_groups
from demandprep.export.parquet_splice import read_footer

GROUP_ROWS = 1_000
ENCODERS = 2
OPTIONS = {
    "compression": "zstd",
    "compression_level": 1,
    "write_statistics": True,
    "store_schema": True,
    "sorting_columns": [pq.SortingColumn(0)],
}


def invented_rows(rows: int) -> pa.Table:
    """Ids in order, repeated texts (dictionary pages), nulls, doubles, dates and booleans."""
    ids = [f"occ{n:07d}" for n in range(rows)]
    table = pa.table(
        {
            "occasion": ids,
            "alternative": [f"roast-{n % 7}" for n in range(rows)],
            "price": [None if n % 11 == 0 else 2.5 + (n % 13) / 4 for n in range(rows)],
            "day": pa.array([n // 300 for n in range(rows)], pa.int32()).cast(pa.date32()),
            "chosen": [n % 5 == 0 for n in range(rows)],
        }
    )
    metadata = {b"demandprep.table": b"choices"}
    return table.replace_schema_metadata(metadata)


def groups_of(table: pa.Table, size: int) -> list[pa.Table]:
    return [table.slice(start, size) for start in range(0, table.num_rows, size)]


def single_writer_bytes(table: pa.Table) -> bytes:
    sink = io.BytesIO()
    writer = pq.ParquetWriter(sink, table.schema, **OPTIONS)
    for group in groups_of(table, GROUP_ROWS):
        writer.write_table(group, row_group_size=GROUP_ROWS)
    writer.close()
    return sink.getvalue()


@pytest.mark.parametrize("rows", [1, GROUP_ROWS, 4 * GROUP_ROWS + 123])
def test_parts_put_together_are_the_single_writers_bytes(rows: int, tmp_path: Path) -> None:
    table = invented_rows(rows)
    path = tmp_path / "parts.parquet"
    with path.open("wb") as out:
        written, bounds = write_row_groups(
            out, groups_of(table, GROUP_ROWS), table.schema, OPTIONS, ENCODERS
        )
    assert written == rows
    assert path.read_bytes() == single_writer_bytes(table)
    assert pq.read_table(path).equals(table)
    # the footer entries' bounds it returns are those a reading of the footer finds
    assert bounds == read_footer(path).group_bounds
    assert len(bounds) == -(-rows // GROUP_ROWS) + 1


def test_a_failing_group_stream_stops_the_encoders_and_raises_its_error() -> None:
    table = invented_rows(6 * GROUP_ROWS)

    def groups_then_failure():
        yield from groups_of(table, GROUP_ROWS)[:3]
        raise LookupError("rows out of order")

    before = threading.active_count()
    with pytest.raises(LookupError, match="rows out of order"):
        write_row_groups(io.BytesIO(), groups_then_failure(), table.schema, OPTIONS, ENCODERS)
    assert threading.active_count() == before


def test_a_part_is_one_row_group_of_its_rows() -> None:
    table = invented_rows(GROUP_ROWS)
    part = pq.ParquetFile(pa.BufferReader(encoded_part(table, table.schema, OPTIONS)))
    assert part.metadata.num_row_groups == 1
    assert part.read().equals(table)
