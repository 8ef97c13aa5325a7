"""Read a batch of files of one source with DuckDB's own readers, every field as text.

CSV goes through one `read_csv` call over the batch's files with reject capture: records the
reader cannot split into the header's columns land in `ingest_rejected` with their original
text. Parquet goes through `read_parquet`. After `stage_files`, these temporary objects exist
until `drop_staging`:

- `ingest_stage`: ordinal (reader order over the batch), every source column, and
  `ingest_file_path`;
- `ingest_rejected`: path, line_no, reason, detail, original_text of each refused record;
- `ingest_numbered` (view): the stage with the physical line number of each record;
- `ingest_source_lines` (view, `create_source_view`): ordinal, path, line_no + our names.

Line numbers are physical lines, header included, as DuckDB counts them: exact unless the file
has blank lines or quoted fields spanning lines before that line (then records are counted).
DuckDB matches later files' headers to the first file's by name and stops on a missing column;
the runner then retries the batch file by file, so such a file fails alone.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager, suppress
from dataclasses import dataclass
from pathlib import Path

import duckdb

from demandprep.config import FileSource
from demandprep.errors import UserError
from demandprep.personal import carries_cards
from demandprep.sqlfiles import quote_identifier, run_sql

FILE_PATH_COLUMN = "ingest_file_path"
STAGING_TABLES = (
    "ingest_headers",
    "ingest_rendered",
    "ingest_duplicates",
    "ingest_checked",
    "ingest_file_counts",
    "ingest_accepted_counts",
    "ingest_gaps",
    "ingest_rejected",
    "ingest_file_offsets",
    "ingest_stage",
    "ingest_reject_errors",
    "ingest_reject_scans",
)
STAGING_VIEWS = ("ingest_source_lines", "ingest_numbered")
TEXT_TYPES = ("VARCHAR",)
TIMESTAMP_TYPES = ("TIMESTAMP", "TIMESTAMP_S", "TIMESTAMP_MS", "TIMESTAMP_NS", "DATE")
ZONED_TIMESTAMP_TYPES = ("TIMESTAMP WITH TIME ZONE",)

CSV_OPTIONS = (
    "delim = $delimiter, header = $header, encoding = $encoding, "
    "quote = '\"', escape = '\"', strict_mode = true, null_padding = false"
)


class FileRefused(Exception):
    """The file as a whole cannot go in (not a problem of single lines, which are quarantined)."""


class FileUnreadable(FileRefused):
    """The file cannot be opened or decoded at all; a later attempt may succeed."""


@dataclass(frozen=True)
class SourceColumn:
    """A column as the file holds it: its name and DuckDB type."""

    name: str
    type: str


def csv_parameters(paths: str | list[str], source: FileSource) -> dict[str, object]:
    """The bound parameters of every read_csv call for this source."""
    return {
        "paths": paths,
        "delimiter": source.delimiter,
        "header": source.header,
        "encoding": source.encoding,
    }


def file_columns(
    con: duckdb.DuckDBPyConnection, path: Path, source: FileSource, typed: bool = False
) -> tuple[SourceColumn, ...]:
    """The file's columns as its reader sees them (CSV: as text unless `typed` asks the sniffer)."""
    if source.format == "parquet":
        sql, params = "describe select * from read_parquet($paths)", {"paths": str(path)}
    else:
        params = csv_parameters(str(path), source)
        # ignore_errors: broken lines must not stop the sniffer (they are quarantined later)
        options = f"{CSV_OPTIONS}, ignore_errors = true"
        if typed:
            params["decimal_separator"] = source.decimal
            options += ", decimal_separator = $decimal_separator"
        else:
            options += ", all_varchar = true"
        sql = f"describe select * from read_csv($paths, {options})"
    try:
        rows = con.execute(sql, params).fetchall()
    except duckdb.Error as error:
        raise FileUnreadable(f"{path}: cannot be read ({first_line(error)}).") from None
    return tuple(SourceColumn(name, str(kind)) for name, kind, *_ in rows)


def map_columns(
    path: Path, columns: tuple[SourceColumn, ...], mapping: dict[str, str], header: bool
) -> dict[str, SourceColumn]:
    """Our name -> the file's column, checked against the real header; a gap is a UserError.

    Without a header, a mapping value may also be a 1-based column position ("3").
    """
    by_name = {column.name: column for column in columns}
    mapped = {}
    for ours, theirs in mapping.items():
        if not header and theirs.isdigit() and 1 <= int(theirs) <= len(columns):
            mapped[ours] = columns[int(theirs) - 1]
        elif theirs in by_name:
            mapped[ours] = by_name[theirs]
        else:
            raise _missing_column(path, columns, mapping, ours)
    return mapped


def _missing_column(
    path: Path, columns: tuple[SourceColumn, ...], mapping: dict[str, str], ours: str
) -> UserError:
    hint = "fix the source's columns mapping in the config (names are case-sensitive)"
    if carries_cards(mapping):
        # Why: a file delivered without its header has data as column names: card ids here
        return UserError(
            f"{path}: the mapping names column {mapping[ours]!r} (for {ours!r}) but the file's "
            f"header ({len(columns)} columns) has no such column.",
            f"{hint}; a file without a header line needs header = false and column positions "
            "in the mapping.",
        )
    shown = ", ".join(column.name for column in columns)
    return UserError(
        f"{path}: the mapping names column {mapping[ours]!r} (for {ours!r}) but the file has "
        f"no such column; its columns are {shown}.",
        f"{hint}.",
    )


def stage_files(
    con: duckdb.DuckDBPyConnection,
    paths: list[Path],
    source: FileSource,
    columns: tuple[SourceColumn, ...],
    mapped: dict[str, SourceColumn],
) -> int:
    """Read the batch's files whole into `ingest_stage` and `ingest_rejected`; returns rows read.

    `columns` are the first file's (sniffed once); every file is read with them, and a file
    whose header does not hold the mapped columns at the same places stops the batch.
    """
    drop_staging(con)
    try:
        if source.format == "parquet":
            _stage_parquet(con, paths)
        else:
            with insertion_order_kept(con):
                _stage_csv(con, paths, source, columns)
            if source.header:
                _check_headers(con, paths, mapped)
    except duckdb.Error as error:
        names = paths[0] if len(paths) == 1 else f"one of {len(paths)} files"
        raise FileUnreadable(f"{names}: cannot be read ({first_line(error)}).") from None
    staged = con.execute("select count(*) from ingest_stage").fetchone()[0]
    rejected = con.execute("select count(*) from ingest_rejected").fetchone()[0]
    return int(staged) + int(rejected)


@contextmanager
def insertion_order_kept(con: duckdb.DuckDBPyConnection) -> Iterator[None]:
    """Keep insertion order while the block runs, then restore the connection's setting."""
    before = con.execute("select current_setting('preserve_insertion_order')").fetchone()[0]
    con.execute("set preserve_insertion_order = true")
    try:
        yield
    finally:
        # an aborted transaction refuses the reset; the error that aborted it matters more
        with suppress(duckdb.Error):
            con.execute(f"set preserve_insertion_order = {'true' if before else 'false'}")


def _stage_csv(
    con: duckdb.DuckDBPyConnection,
    paths: list[Path],
    source: FileSource,
    columns: tuple[SourceColumn, ...],
) -> None:
    # Sniffing costs more than reading a small daily file, so the files are read with the first
    # file's columns and no detection; the header line comes in as each file's first record.
    # With insertion order kept, records arrive in file order: row_number() minus the file's
    # offset is the record's rank in the file, the header being record 1.
    params = csv_parameters([str(path) for path in paths], source)
    params["header"] = False
    params["columns"] = {column.name: "VARCHAR" for column in columns}
    con.execute(
        "create temp table ingest_stage as "
        "select row_number() over () as ordinal, * "
        f"from read_csv($paths, {CSV_OPTIONS}, auto_detect = false, columns = $columns, "
        f"filename = '{FILE_PATH_COLUMN}', "
        "store_rejects = true, ignore_errors = true, rejects_limit = 0, "
        "rejects_table = 'ingest_reject_errors', rejects_scan = 'ingest_reject_scans')",
        params,
    )
    run_sql(con, "ingest/010_file_offsets.sql")
    run_sql(con, "ingest/011_rejected_records.sql")
    run_sql(con, "ingest/012_record_gaps.sql", {"header_lines": 0})
    con.execute(
        "create temp view ingest_numbered as "
        "select s.*, s.ordinal - o.start_ordinal + coalesce(g.rejected_before, 0) as line_no "
        f"from ingest_stage s join ingest_file_offsets o on o.path = s.{FILE_PATH_COLUMN} "
        f"asof left join ingest_gaps g on g.path = s.{FILE_PATH_COLUMN} "
        "and s.ordinal - o.start_ordinal > g.accepted_before"
    )


class HeaderMismatch(FileRefused):
    """A file's header does not hold the mapped columns where the batch's first file has them."""


def _check_headers(
    con: duckdb.DuckDBPyConnection, paths: list[Path], mapped: dict[str, SourceColumn]
) -> None:
    run_sql(con, "ingest/014_header_records.sql")
    names = sorted({column.name for column in mapped.values()})
    params = {f"name_{i}": name for i, name in enumerate(names)}
    same = (
        " and ".join(
            f"s.{quote_identifier(name)} is not distinct from $name_{i}"
            for i, name in enumerate(names)
        )
        or "true"
    )
    bad = con.execute(
        "select f.path from ingest_batch_files f "  # noqa: S608 (quoted identifiers)
        "left join ingest_headers h using (path) left join ingest_stage s using (ordinal) "
        f"where h.ordinal is null or not ({same}) order by f.position limit 1",
        params,
    ).fetchone()
    if bad is not None:
        raise HeaderMismatch(
            f"{bad[0]}: its header does not have the mapped columns where {paths[0].name} has them."
        )
    con.execute("delete from ingest_stage where ordinal in (select ordinal from ingest_headers)")


def _stage_parquet(con: duckdb.DuckDBPyConnection, paths: list[Path]) -> None:
    # ordinal: file position in the batch, then row number; unique and in file order
    con.execute(
        "create temp table ingest_stage as "
        "select (f.position::bigint << 40) + p.file_row_number + 1 as ordinal, "
        "p.* exclude (file_row_number), p.file_row_number + 1 as ingest_row_number "
        f"from read_parquet($paths, file_row_number = true, filename = '{FILE_PATH_COLUMN}') p "
        f"join ingest_batch_files f on f.path = p.{FILE_PATH_COLUMN}",
        {"paths": [str(path) for path in paths]},
    )
    run_sql(con, "ingest/013_no_rejected_records.sql")
    con.execute(
        "create temp view ingest_numbered as "
        "select * exclude (ingest_row_number), ingest_row_number as line_no from ingest_stage"
    )


def create_source_view(
    con: duckdb.DuckDBPyConnection, mapped: dict[str, SourceColumn], names: tuple[str, ...]
) -> None:
    """`ingest_source_lines`: ordinal, path, line_no, then each of `names` as text (or NULL)."""
    fields = [
        _text_expression(mapped[name]) if name in mapped else "null::varchar" for name in names
    ]
    select = ", ".join(
        f"{field} as {quote_identifier(name)}" for field, name in zip(fields, names, strict=True)
    )
    con.execute(
        "create or replace temp view ingest_source_lines as "  # noqa: S608 (quoted identifiers)
        f"select ordinal, {FILE_PATH_COLUMN} as path, line_no, {select} from ingest_numbered"
    )


def _text_expression(column: SourceColumn) -> str:
    name = quote_identifier(column.name)
    if column.type in TEXT_TYPES:
        return name
    if column.type in ZONED_TIMESTAMP_TYPES:
        return f"cast(timezone('UTC', {name}) as varchar)"
    if column.type in TIMESTAMP_TYPES:
        return f"cast(cast({name} as timestamp) as varchar)"
    return f"cast({name} as varchar)"


def is_typed_timestamp(column: SourceColumn | None) -> bool:
    """True when a (Parquet) column already holds timestamps rather than text."""
    return column is not None and column.type in TIMESTAMP_TYPES + ZONED_TIMESTAMP_TYPES


def render_quarantined(
    con: duckdb.DuckDBPyConnection, columns: tuple[SourceColumn, ...], source: FileSource
) -> None:
    """`ingest_rendered`: the original text of each staged record that broke a rule.

    CSV: the fields joined by the delimiter, quoted where the field needs it (the line as
    written unless the source quoted fields that did not need it). Parquet: the row as JSON.
    Only the quarantined records are rendered.
    """
    if source.format == "parquet":
        pairs = ", ".join(
            f"{quote_identifier(c.name)} := {quote_identifier(c.name)}" for c in columns
        )
        body, params = f"to_json(struct_pack({pairs}))", None
    else:
        fields = ", ".join(_csv_field(column) for column in columns)
        body, params = f"concat_ws($delimiter, {fields})", {"delimiter": source.delimiter}
    con.execute(
        "create or replace temp table ingest_rendered as "  # noqa: S608 (quoted identifiers)
        f"select ordinal, {body} as original_text from ingest_stage "
        "where ordinal in (select ordinal from ingest_checked where reason is not null)",
        params,
    )


def _csv_field(column: SourceColumn) -> str:
    name = quote_identifier(column.name)
    needs_quotes = (
        f"contains({name}, $delimiter) or contains({name}, '\"') "
        f"or contains({name}, chr(10)) or contains({name}, chr(13))"
    )
    quoted = f"'\"' || replace({name}, '\"', '\"\"') || '\"'"
    return f"coalesce(case when {needs_quotes} then {quoted} else {name} end, '')"


def drop_staging(con: duckdb.DuckDBPyConnection) -> None:
    """Remove every temporary object of the previous batch."""
    for view in STAGING_VIEWS:
        con.execute(f"drop view if exists {view}")
    for table in STAGING_TABLES:
        con.execute(f"drop table if exists {table}")


def first_line(error: Exception) -> str:
    """The first line of an error's message."""
    return str(error).strip().splitlines()[0]
