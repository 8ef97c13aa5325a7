"""Validate `choices` in batches that hold whole occasions, so occasion-level checks see them all.

The build writes each occasion's rows together (090_choices.sql unnests one occasion at a time
with insertion order kept), so a scan in storage order meets an occasion's rows in one run:
each batch keeps back its last occasion and hands it to the next one.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import duckdb
import pandera.polars as pa
import polars as pl

from demandprep.memory import memory_shared_with_batches
from demandprep.validate import BATCH_ROWS, validate_frame


@contextmanager
def insertion_order_kept(con: duckdb.DuckDBPyConnection) -> Iterator[None]:
    """Within the block, DuckDB stores and scans rows in the order they were written."""
    before = con.execute("select current_setting('preserve_insertion_order')").fetchone()[0]
    con.execute("set preserve_insertion_order = true")
    try:
        yield
    finally:
        con.execute(f"set preserve_insertion_order = {'true' if before else 'false'}")


def validate_by_occasion(
    con: duckdb.DuckDBPyConnection,
    table: str,
    model: type[pa.DataFrameModel],
    batch_rows: int = BATCH_ROWS,
) -> int:
    """Validate `table` against `model` in batches cut between occasions; returns the rows."""
    rows = 0
    carry: pl.DataFrame | None = None
    with insertion_order_kept(con), memory_shared_with_batches(con):
        reader = con.cursor().sql(f"select * from {table}").to_arrow_reader(batch_rows)  # noqa: S608
        for batch in reader:
            frame = pl.from_arrow(batch)
            assert isinstance(frame, pl.DataFrame)
            if carry is not None:
                frame = pl.concat([carry, frame], how="vertical")
            whole, carry = _split_last_occasion(frame)
            if whole.height:
                validate_frame(whole, model, table, first_row=rows)
                rows += whole.height
        if carry is not None and carry.height:
            validate_frame(carry, model, table, first_row=rows)
            rows += carry.height
        if rows == 0:
            validate_frame(pl.from_arrow(reader.schema.empty_table()), model, table)
    return rows


def _split_last_occasion(frame: pl.DataFrame) -> tuple[pl.DataFrame, pl.DataFrame]:
    if frame.height == 0:
        return frame, frame
    # the last occasion's rows are the trailing run of its id
    others = (frame["occasion"] != frame["occasion"][-1]).to_numpy().nonzero()[0]
    start = int(others[-1]) + 1 if len(others) else 0
    return frame.slice(0, start), frame.slice(start)
