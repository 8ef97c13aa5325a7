"""A build's choices file, keeping the previous build's row groups of the rows no night changed.

An incremental choice build replaces the rows from its first rebuilt day on and keeps the
earlier ones, which the last exported file already holds (`choices/file_state.py` records that
file and the first occasion that may differ from it). With fixed row groups
(`export.row_group_rows`), the row groups of that file holding only unchanged rows are copied
byte for byte, the rows after them are written from the warehouse, and the two are spliced into
one file (`parquet_splice.py`): the bytes a whole write gives, for a fraction of its time (a
whole write took 0.56 s per million rows with one encoding thread, 0.48 s with two).

Written whole, with the reason in the manifest's `facts.choices_file`, when the choice build
was not incremental, no file is recorded, the recorded file is gone from its build folder or
is not its recorded sha256, the writer or the query differs from the one that wrote it, fewer
unchanged rows than one row group are left, or the two parts do not add up to the table.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from demandprep import __version__
from demandprep.choices.file_state import ChoicesFile, record_file, recorded_file
from demandprep.context import BuildContext
from demandprep.export import parquet
from demandprep.export.manifest import file_sha256
from demandprep.export.parquet import WrittenTable, write_query_parquet
from demandprep.export.parquet_splice import (
    Footer,
    SpliceRefused,
    kept_prefix_hash,
    read_footer,
    splice_refusal,
    write_spliced,
)
from demandprep.export.tables import OutputTable, TableQuery, output_query
from demandprep.fingerprints import source_of


@dataclass(frozen=True)
class Layout:
    """How a data file is written: row group size, column and file metadata."""

    row_group_rows: int
    column_docs: Mapping[str, Mapping[str, str]]
    table_metadata: Mapping[str, str]


@dataclass(frozen=True)
class KeptPart:
    """The first `keep` row groups of the recorded file, whose last row has keys `last`."""

    path: Path
    footer: Footer
    keep: int
    last: tuple
    record: ChoicesFile


def write_choices_file(
    ctx: BuildContext, output: OutputTable, query: TableQuery, path: Path, layout: Layout
) -> WrittenTable:
    """Write the choices file to `path` (kept row groups and new ones, or whole) and record it."""
    writer = writer_signature(query, layout.row_group_rows)
    kept, reason = kept_part(ctx, output, writer, layout.row_group_rows)
    written: WrittenTable | None = None
    bounds = None
    if kept is not None:
        try:
            written, sha256, bounds = _write_spliced(ctx, output, kept, path, layout)
        except SpliceRefused as refused:
            reason = str(refused)
    if written is None:
        written = write_output_query(ctx, output, query, path, layout)
        sha256 = file_sha256(path)
        bounds = written.footer_bounds or footer_bounds(path)
    record_file(ctx.con, ChoicesFile(path.parent.name, sha256, written.rows, writer, None, bounds))
    ctx.facts["choices_file"] = _facts(written, kept if reason is None else None, layout, reason)
    return replace(written, sha256=sha256)  # the manifest need not read the file again


def footer_bounds(path: Path) -> list[int] | None:
    """Where each row group's entry begins in the footer of a file written whole (and the last
    ends), for the next splice, when its writer did not say (an empty file): reading them there
    costs a night what it costs a full build here (0.37 s for 288 row groups). None when the
    footer cannot be read as spliceable."""
    try:
        return read_footer(path).group_bounds
    except SpliceRefused:
        return None


def writer_signature(query: TableQuery, row_group_rows: int) -> str:
    """What makes a row group's bytes: the query, the row group size and the writer."""
    parts = [__version__, pa.__version__, source_of(parquet), query.sql, row_group_rows]
    return hashlib.sha256(repr(parts).encode()).hexdigest()


def kept_part(
    ctx: BuildContext, output: OutputTable, writer: str, row_group_rows: int
) -> tuple[KeptPart | None, str | None]:
    """The recorded file's row groups this build keeps, or None and why none."""
    if ctx.facts.get("choice_scope", {}).get("build_mode") != "incremental":
        return None, "the choice build was not incremental"
    record = recorded_file(ctx.con)
    if record is None:
        return None, "no exported choices file is recorded"
    if record.writer != writer:
        return None, "the writer, the query or the row group size changed since the last file"
    path = ctx.config.export.root / record.build_id / output.file_name
    if not path.is_file():
        return None, f"the last file (build {record.build_id}) is gone"
    keep = _kept_row_groups(ctx, output, record, path, row_group_rows)
    if keep == 0:
        return None, "fewer unchanged rows than one row group"
    try:
        footer = read_footer(path, record.footer_groups)
    except SpliceRefused as refused:
        return None, str(refused)
    if keep > len(footer.row_groups):
        return None, "the last file has fewer row groups than its record says"
    last_group = pq.ParquetFile(path).read_row_group(keep - 1, columns=list(output.sort_keys))
    last = tuple(column[-1].as_py() for column in last_group.columns)
    return KeptPart(path, footer, keep, last, record), None


def _kept_row_groups(
    ctx: BuildContext, output: OutputTable, record: ChoicesFile, path: Path, row_group_rows: int
) -> int:
    # the file's rows before `changed_from` are the table's: its statistics say how many whole
    # row groups they fill (a count over the table took 0.3 s at 54M rows)
    if record.changed_from is None:
        return record.rows // row_group_rows
    counted = row_groups_before(path, "occasion", record.changed_from, row_group_rows)
    if counted is not None:
        return counted
    return min(_unchanged_rows(ctx, output, record), record.rows) // row_group_rows


def row_groups_before(path: Path, column: str, first: str, row_group_rows: int) -> int | None:
    """How many leading row groups of the file at `path` (sorted by `column`) hold
    `row_group_rows` rows whose `column` is below `first`, from the row groups' statistics;
    None when the file has no min/max statistics for `column`. A statistic cut short is a bound
    above the values (Parquet's rule for max), so it can only give fewer row groups."""
    metadata = pq.read_metadata(path)
    leaves = [metadata.schema.column(index).path for index in range(metadata.num_columns)]
    if column not in leaves:
        return None
    index = leaves.index(column)
    groups = 0
    for number in range(metadata.num_row_groups):
        group = metadata.row_group(number)
        statistics = group.column(index).statistics
        if statistics is None or not statistics.has_min_max:
            return None
        if group.num_rows != row_group_rows or not statistics.max < first:
            break
        groups += 1
    return groups


def _unchanged_rows(ctx: BuildContext, output: OutputTable, record: ChoicesFile) -> int:
    # the table's rows before the first changed occasion (`_kept_row_groups` calls it only then)
    return ctx.con.execute(
        f"select count(*) from {output.table} where occasion < $first",  # noqa: S608
        {"first": record.changed_from},
    ).fetchone()[0]


def _write_spliced(
    ctx: BuildContext, output: OutputTable, kept: KeptPart, path: Path, layout: Layout
) -> tuple[WrittenTable, str, list[int]]:
    tail_path = path.with_name(f".{path.stem}.tail.parquet")
    # the earlier file's check and kept bytes' hash read it whole (0.27 s for 325 MB): in a
    # thread, while DuckDB and the writer make the new row groups
    hashing = ThreadPoolExecutor(1, thread_name_prefix="demandprep-splice")
    prefix = hashing.submit(kept_prefix_hash, kept.path, kept.footer, kept.keep, kept.record.sha256)
    try:
        after_kept = output_query(ctx.con, output, ctx.config, after=kept.last)
        tail = write_output_query(ctx, output, after_kept, tail_path, layout)
        rows = kept.keep * layout.row_group_rows + tail.rows
        total = ctx.con.execute(f"select count(*) from {output.table}").fetchone()[0]  # noqa: S608
        if rows != total:
            raise SpliceRefused(f"the kept and new rows ({rows}) are not the table's {total}")
        tail_footer = read_footer(tail_path)
        refusal = splice_refusal(kept.footer, kept.keep, tail_footer, layout.row_group_rows)
        if refusal is not None:
            raise SpliceRefused(refusal)
        sha256, bounds = write_spliced(
            kept.path,
            kept.footer,
            kept.keep,
            kept.record.sha256,
            tail_path,
            tail_footer,
            path,
            prefix.result(),
        )
    finally:
        hashing.shutdown(cancel_futures=True)
        tail_path.unlink(missing_ok=True)
    return WrittenTable(path, rows, tail.schema), sha256, bounds


def write_output_query(
    ctx: BuildContext, output: OutputTable, query: TableQuery, path: Path, layout: Layout
) -> WrittenTable:
    """A data file written whole from its query."""
    return write_query_parquet(
        ctx.con,
        query.sql,
        query.params,
        path,
        layout.row_group_rows,
        layout.column_docs,
        layout.table_metadata,
        output.sort_keys,
        query.stored_order_sql,
    )


def _facts(
    written: WrittenTable, kept: KeptPart | None, layout: Layout, reason: str | None
) -> dict[str, object]:
    groups = -(-written.rows // layout.row_group_rows)
    keep = kept.keep if kept is not None else 0
    return {
        "row_groups_kept": keep,
        "row_groups_written": groups - keep,
        "kept_from_build": kept.record.build_id if kept is not None else None,
        "written_whole_because": reason,
    }
