"""Read a batch of files of one source, every field as text, every input line accounted for.

CSV is read line by line, not by a CSV parser that may join or drop lines. A line ends at LF;
CRLF is one terminator; a final line without terminator counts; a blank line is no record (it
keeps its number); a quoted field may not span lines. `lines.py` cuts each file into its
physical lines, apart from any parser; `010_line_fields.sql` splits each line at the source's
delimiter, with '"' quoting ('""' inside quotes is a quote). Each file is read with its own
header: files of one batch may have their columns in another order. A line the reader refuses
goes to `ingest_rejected` with its number and reason (`unclosed_quote`,
`stray_carriage_return`, `line_too_long`, `unparseable_field` for bytes that are not valid in
the encoding or a misplaced quote, `wrong_column_count`, empty trailing fields included). The
count of each file's records comes from the line cutter (`ingest_file_records`), so the ledger
checks `records = accepted + quarantined` against a count the parser did not make. Parquet
goes through `read_parquet`. After `stage_files`, these temporary objects exist until
`drop_staging`:

- `ingest_fields`: ordinal, position, line_no, text, fields (quoted lines only: the others are
  split as the stage reads them), field_count, reason, detail, record per line;
- `ingest_stage`: `ingest_ordinal` (file position << 40 + line number), `ingest_file_path`,
  and every mapped source column under the file's name for it (CSV: a view of the
  accepted-shape lines, with `ingest_line_no` and `ingest_trimmed`; Parquet: every column, with
  `ingest_row_number`); the stage's own columns are named so that a file's column (`line_no`,
  `ordinal`...) never meets them, and a file column with one of their names is refused;
- `ingest_rejected`: path, line_no, reason, detail, original_text of each refused line;
- `ingest_file_records`: path, lines (physical, header included), records per file;
- `ingest_numbered` (view): the stage with each record's physical line number (header = 1) as
  `ingest_line_no`;
- `ingest_source_lines` (view, `create_source_view`): ordinal, path, line_no + our names.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa

from demandprep.config import FileSource
from demandprep.errors import UserError
from demandprep.ingest.lines import (
    KEPT_BYTES,
    MAX_LINE_BYTES,
    LinesUnreadable,
    batch_line_chunks,
)
from demandprep.ingest.timings import PhaseTimer
from demandprep.personal import carries_cards
from demandprep.sqlfiles import quote_identifier, run_sql
from demandprep.warehouse import threads_of

FILE_PATH_COLUMN = "ingest_file_path"
# per staged line: true when no field of it changes under trim (010), false for Parquet rows
TRIMMED_COLUMN = "ingest_trimmed"
ORDINAL_COLUMN = "ingest_ordinal"
LINE_NO_COLUMN = "ingest_line_no"
# the staged tables' own columns, beside the file's (read_parquet adds file_row_number)
STAGE_COLUMNS = frozenset(
    {
        ORDINAL_COLUMN,
        FILE_PATH_COLUMN,
        LINE_NO_COLUMN,
        TRIMMED_COLUMN,
        "ingest_row_number",
        "file_row_number",
    }
)
STAGING_OBJECTS = (
    "ingest_source_lines",
    "ingest_numbered",
    "ingest_stage",
    "ingest_rendered",
    "ingest_duplicates",
    "ingest_checked",
    "ingest_file_counts",
    "ingest_accepted_counts",
    "ingest_rejected",
    "ingest_file_records",
    "ingest_file_layouts",
    "ingest_fields",
    "ingest_lines",
)
TEXT_TYPES = ("VARCHAR",)
TIMESTAMP_TYPES = ("TIMESTAMP", "TIMESTAMP_S", "TIMESTAMP_MS", "TIMESTAMP_NS", "DATE")
ZONED_TIMESTAMP_TYPES = ("TIMESTAMP WITH TIME ZONE",)
COMMON_DELIMITERS = (";", ",", "\t", "|")
# lines gathered in Python before DuckDB splits them (010): one statement per chunk cost ms
# each, and Python holds at most this much (plus the threads' read-ahead) beside DuckDB's limit
HANDOFF_BYTES = 32 * 1024 * 1024

CSV_OPTIONS = (
    "delim = $delimiter, header = $header, encoding = $encoding, "
    "quote = '\"', escape = '\"', strict_mode = true, null_padding = false"
)


class FileRefused(Exception):
    """The file as a whole cannot go in (not a problem of single lines, which are quarantined)."""


class FileUnreadable(FileRefused):
    """The file cannot be opened or decoded at all; a later attempt may succeed."""


def unreadable(subject: object, why: str) -> FileUnreadable:
    """`<subject>: cannot be read (<why>). Hint: ...` as one line."""
    return FileUnreadable(
        f"{subject}: cannot be read ({why}). Hint: check that the file is whole (a cut or "
        "damaged copy?) and in the source's format and encoding; a file that failed is read "
        "again at the next ingest."
    )


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
        raise unreadable(path, first_line(error)) from None
    return tuple(SourceColumn(name, str(kind)) for name, kind, *_ in rows)


def map_columns(
    path: Path, columns: tuple[SourceColumn, ...], mapping: dict[str, str], header: bool
) -> dict[str, SourceColumn]:
    """Our name -> the file's column, checked against the real header; a gap is a UserError.

    Without a header, a mapping value may also be a 1-based column position ("3").
    """
    return {ours: map_column(path, columns, mapping, ours, header) for ours in mapping}


def map_column(
    path: Path, columns: tuple[SourceColumn, ...], mapping: dict[str, str], ours: str, header: bool
) -> SourceColumn:
    """The file's column for one of our names; a gap is a UserError. `mapping` is the source's
    whole mapping: whether the file may carry card ids decides what the error quotes."""
    theirs = mapping[ours]
    if not header and theirs.isdigit() and 1 <= int(theirs) <= len(columns):
        return columns[int(theirs) - 1]
    by_name = {column.name: column for column in columns}
    if theirs not in by_name:
        raise _missing_column(path, columns, mapping, ours)
    _refuse_repeated(path, columns, ours, theirs)
    return by_name[theirs]


def _refuse_repeated(path: Path, columns: tuple[SourceColumn, ...], ours: str, theirs: str) -> None:
    """A mapped column the header names more than once: which one is meant is unknown."""
    places = [index for index, column in enumerate(columns, start=1) if column.name == theirs]
    if len(places) > 1:
        shown = ", ".join(str(place) for place in places[:-1]) + f" and {places[-1]}"
        raise UserError(
            f"{path}: the header names column {theirs!r} (mapped to {ours!r}) "
            f"{'twice' if len(places) == 2 else f'{len(places)} times'}, as columns {shown}.",
            "rename or remove one of them in the file.",
        )


def refuse_stage_names(
    path: Path,
    source: FileSource,
    columns: tuple[SourceColumn, ...],
    mapped: dict[str, SourceColumn],
) -> None:
    """A file column named like one of the stage's own would meet it there: refuse it.

    Parquet stages every column of the file (`columns`), CSV only the mapped ones (`mapped`).
    """
    staged = columns if source.format == "parquet" else tuple(mapped.values())
    for column in staged:
        if column.name.lower() in STAGE_COLUMNS:
            raise UserError(
                f"{path}: its column {column.name!r} has a name the ingest keeps for its own "
                f"columns ({', '.join(sorted(STAGE_COLUMNS))}).",
                "rename that column in the file.",
            )


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


@dataclass(frozen=True)
class Staged:
    """What staging a batch found: the first file's columns and mapping, lines per file."""

    columns: tuple[SourceColumn, ...]
    mapped: dict[str, SourceColumn]
    lines: dict[str, int]  # path -> physical lines (header included)
    records: dict[str, int]  # path -> records (data lines: header and blank lines left out)


def stage_files(
    con: duckdb.DuckDBPyConnection,
    paths: list[Path],
    source: FileSource,
    name: str,
    timer: PhaseTimer | None = None,
) -> Staged:
    """Read the batch's files into `ingest_stage` and `ingest_rejected` (needs the batch table).

    CSV: every file's own header is checked against the mapping; files with their columns in
    another order go in the same batch. Parquet: the first file's columns are used for all.
    `timer` gets the seconds of reading and of splitting the lines into fields (classify).
    """
    timer = timer or PhaseTimer()
    drop_staging(con)
    if source.format == "parquet":
        with timer.phase("read"):
            columns = file_columns(con, paths[0], source)
            mapped = map_columns(paths[0], columns, source.columns, source.header)
            refuse_stage_names(paths[0], source, columns, mapped)
            try:
                _stage_parquet(con, paths)
            except duckdb.Error as error:
                names = paths[0] if len(paths) == 1 else f"one of {len(paths)} files"
                raise unreadable(names, first_line(error)) from None
    else:
        _read_lines(con, paths, source, timer)
        with timer.phase("classify"):
            run_sql(con, "ingest/011_file_records.sql")
            columns, mapped = _stage_csv(con, paths, source, name)
    rows = con.execute("select path, lines, records from ingest_file_records").fetchall()
    return Staged(
        columns,
        mapped,
        {path: int(lines) for path, lines, _ in rows},
        {path: int(records) for path, _, records in rows},
    )


def _read_lines(
    con: duckdb.DuckDBPyConnection, paths: list[Path], source: FileSource, timer: PhaseTimer
) -> None:
    # each file's physical lines, cut apart from any CSV parser (lines.py), files read in as
    # many threads as DuckDB has; DuckDB splits them into `ingest_fields` in pieces of about
    # HANDOFF_BYTES, straight from Arrow (the reader threads read on meanwhile)
    run_sql(con, "ingest/009_ingest_fields_table.sql")
    workers = threads_of(con)
    pieces: list[pa.Table] = []
    size = 0
    chunks = batch_line_chunks(paths, source.encoding, workers, source.delimiter)
    try:
        while True:
            with timer.phase("read"):
                found = next(chunks, None)
            if found is None:
                break
            position, chunk = found
            positions = pa.array(np.full(chunk.num_rows, position, dtype=np.int32))
            pieces.append(chunk.add_column(0, "position", positions))
            size += pieces[-1].nbytes
            if size >= HANDOFF_BYTES:
                with timer.phase("classify"):
                    _split_lines(con, pieces, source)
                pieces, size = [], 0
    except LinesUnreadable as error:
        raise unreadable(error.path, str(error)) from None
    finally:
        chunks.close()  # stops the reader threads when a piece failed
    if pieces:
        with timer.phase("classify"):
            _split_lines(con, pieces, source)


def _split_lines(
    con: duckdb.DuckDBPyConnection, pieces: list[pa.Table], source: FileSource
) -> None:
    """One record per line of `pieces` into `ingest_fields`: text, fields, and why the reader
    refuses it (010); one statement per piece (one per chunk costs ms each)."""
    con.register("ingest_lines", pa.concat_tables(pieces))
    try:
        run_sql(
            con,
            "ingest/010_line_fields.sql",
            {
                "delimiter": source.delimiter,
                "header": source.header,
                "encoding": source.encoding,
                "max_line_bytes": MAX_LINE_BYTES,
                "kept_bytes": KEPT_BYTES,
            },
        )
    finally:
        con.unregister("ingest_lines")


def _stage_csv(
    con: duckdb.DuckDBPyConnection, paths: list[Path], source: FileSource, name: str
) -> tuple[tuple[SourceColumn, ...], dict[str, SourceColumn]]:
    # every file's own header (or first line) gives its width and where the mapped columns are
    firsts = _first_lines(con, source.header, source.delimiter)
    layouts, first_columns, first_mapped = [], None, None
    for position, path in enumerate(paths):
        if position not in firsts:
            continue  # no line at all: an empty file
        fields, detail = firsts[position]
        columns = _header_columns(path, fields, detail, source, name)
        try:
            mapped = map_columns(path, columns, source.columns, source.header)
            refuse_stage_names(path, source, columns, mapped)
        except UserError:
            if source.header and len(columns) == 1:
                _check_delimiter(path, columns[0].name, source.delimiter, name)
            raise
        if first_mapped is None:
            first_columns, first_mapped = columns, mapped
        where = {column.name: index for index, column in enumerate(columns, start=1)}
        layouts.append((position, len(columns), {c.name: where[c.name] for c in mapped.values()}))
    if first_mapped is None:  # every file is empty: the mapping is checked when one has lines
        first_columns, first_mapped = (), {}
    names = list(dict.fromkeys(column.name for column in first_mapped.values()))
    _create_layouts(con, layouts, names, source.delimiter)
    run_sql(con, "ingest/012_rejected_lines.sql", {"header": source.header})
    fields = ", ".join(
        f"line_fields[{_position_column(i)}] as {quote_identifier(column)}"
        for i, column in enumerate(names)
    )
    places = "".join(f", l.{_position_column(i)}" for i in range(len(names)))
    # each line is split once, as the stage is read (010 keeps no list for unquoted lines)
    con.execute(
        "create temp view ingest_stage as "  # noqa: S608 (quoted identifiers)
        f"select ordinal as {ORDINAL_COLUMN}, {FILE_PATH_COLUMN}, line_no as {LINE_NO_COLUMN}, "
        f"{TRIMMED_COLUMN}"
        + (f", {fields}" if fields else "")
        + f" from (select f.ordinal, b.path as {FILE_PATH_COLUMN}, f.line_no{places}, "
        f"f.trimmed as {TRIMMED_COLUMN}, "
        "ingest_line_fields(f.text, f.fields, f.reason, l.delimiter) as line_fields "
        "from ingest_fields f join ingest_file_layouts l using (position) "
        "join ingest_batch_files b using (position) "
        "where f.record and f.reason is null and f.field_count = l.width)"
    )
    con.execute("create temp view ingest_numbered as select * from ingest_stage")
    mapped_text = {ours: SourceColumn(c.name, "VARCHAR") for ours, c in first_mapped.items()}
    return first_columns, mapped_text


def _first_lines(
    con: duckdb.DuckDBPyConnection, header: bool, delimiter: str
) -> dict[int, tuple[list[str] | None, str | None]]:
    """position -> (fields, why unreadable) of each file's header, or first record without one."""
    fields = "ingest_line_fields(text, fields, reason, $delimiter)"
    if header:
        sql = f"select position, {fields}, detail from ingest_fields where line_no = 1"  # noqa: S608
    else:
        # every file with a record, the first one that splits giving the width
        sql = (
            f"select position, arg_min({fields}, line_no) filter (where reason is null), "  # noqa: S608
            "'no line splits into fields' from ingest_fields where record group by position"
        )
    rows = con.execute(sql, {"delimiter": delimiter}).fetchall()
    return {position: (fields, detail) for position, fields, detail in rows}


def _header_columns(
    path: Path, fields: list[str] | None, detail: str | None, source: FileSource, name: str
) -> tuple[SourceColumn, ...]:
    if fields is None:
        line = "header line" if source.header else "lines"
        raise UserError(
            f"{path}: its {line} cannot be read ({detail}).",
            f"check the file and sources.{name}.encoding in the config.",
        )
    if not source.header:
        return tuple(SourceColumn(f"column{i}", "VARCHAR") for i in range(len(fields)))
    return tuple(SourceColumn(field, "VARCHAR") for field in fields)


def _check_delimiter(path: Path, header: str, configured: str, name: str) -> None:
    """A one-column header that another common delimiter would split: name the right one.

    Asked only when the mapping does not fit the header, so a true one-column file passes.
    """
    for candidate in COMMON_DELIMITERS:
        if candidate != configured and candidate in header:
            raise UserError(
                f"{path}: the header has one column; the file seems to use {candidate!r} "
                f"(configured: {configured!r}).",
                f"set sources.{name}.delimiter = {candidate!r} in the config.",
            )


def _position_column(index: int) -> str:
    return f"column_{index}"


def _create_layouts(
    con: duckdb.DuckDBPyConnection,
    layouts: list[tuple[int, int, dict[str, int]]],
    names: list[str],
    delimiter: str,
) -> None:
    """`ingest_file_layouts`: per file position, its width, delimiter and each mapped column's
    place."""
    places = ", ".join(f"{_position_column(i)} integer" for i in range(len(names)))
    con.execute(
        "create temp table ingest_file_layouts (position integer, width integer, delimiter varchar"
        + (f", {places})" if places else ")")
    )
    if not layouts:
        return
    values = [[position for position, _, _ in layouts], [width for _, width, _ in layouts]]
    values += [[delimiter] * len(layouts)]
    values += [[where[name] for _, _, where in layouts] for name in names]
    selects = ", ".join(f"unnest($c{i})" for i in range(len(values)))
    con.execute(
        f"insert into ingest_file_layouts select {selects}",
        {f"c{i}": column for i, column in enumerate(values)},
    )


def _stage_parquet(con: duckdb.DuckDBPyConnection, paths: list[Path]) -> None:
    # ordinal: file position in the batch, then row number; unique and in file order
    con.execute(
        "create temp table ingest_stage as "
        f"select (f.position::bigint << 40) + p.file_row_number + 1 as {ORDINAL_COLUMN}, "
        "p.* exclude (file_row_number), p.file_row_number + 1 as ingest_row_number "
        f"from read_parquet($paths, file_row_number = true, filename = '{FILE_PATH_COLUMN}') p "
        f"join ingest_batch_files f on f.path = p.{FILE_PATH_COLUMN}",
        {"paths": [str(path) for path in paths]},
    )
    run_sql(con, "ingest/013_no_rejected_records.sql")
    run_sql(con, "ingest/014_parquet_records.sql")
    con.execute(
        "create temp view ingest_numbered as "
        f"select * exclude (ingest_row_number), ingest_row_number as {LINE_NO_COLUMN}, "
        f"false as {TRIMMED_COLUMN} from ingest_stage"
    )


def create_source_view(
    con: duckdb.DuckDBPyConnection, mapped: dict[str, SourceColumn], names: tuple[str, ...]
) -> None:
    """`ingest_source_lines`: ordinal, path, line_no, ingest_trimmed (010), then each of `names`
    as text (or NULL)."""
    fields = [
        _text_expression(mapped[name]) if name in mapped else "null::varchar" for name in names
    ]
    select = ", ".join(
        f"{field} as {quote_identifier(name)}" for field, name in zip(fields, names, strict=True)
    )
    con.execute(
        "create or replace temp view ingest_source_lines as "  # noqa: S608 (quoted identifiers)
        f"select {ORDINAL_COLUMN} as ordinal, {FILE_PATH_COLUMN} as path, "
        f"{LINE_NO_COLUMN} as line_no, {TRIMMED_COLUMN}, {select} "
        "from ingest_numbered"
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

    CSV: the line as written (without its terminator). Parquet: the row as JSON. Only the
    quarantined records are rendered.
    """
    if source.format == "parquet":
        pairs = ", ".join(
            f"{quote_identifier(c.name)} := {quote_identifier(c.name)}" for c in columns
        )
        body, table, ordinal = f"to_json(struct_pack({pairs}))", "ingest_stage", ORDINAL_COLUMN
    else:
        body, table, ordinal = "text", "ingest_fields", "ordinal"
    con.execute(
        "create or replace temp table ingest_rendered as "  # noqa: S608 (quoted identifiers)
        f"select {ordinal} as ordinal, {body} as original_text from {table} "
        f"where {ordinal} in (select ordinal from ingest_checked where reason is not null)"
    )


def drop_staging(con: duckdb.DuckDBPyConnection) -> None:
    """Remove every temporary object of the previous batch (views before the tables they read)."""
    found = dict(
        con.execute(
            "select view_name, 'view' from duckdb_views() where temporary "
            "union all select table_name, 'table' from duckdb_tables() where temporary"
        ).fetchall()
    )
    for name in STAGING_OBJECTS:
        if name in found:
            con.execute(f"drop {found[name]} {name}")


def first_line(error: Exception) -> str:
    """The first line of an error's message."""
    return str(error).strip().splitlines()[0]
