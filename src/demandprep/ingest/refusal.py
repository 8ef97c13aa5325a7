"""The reject limit: a file whose lines are mostly quarantined is refused whole, not half-loaded.

A file is refused when more than `reject_limit_fraction` of its records AND more than
`reject_limit_lines` of them are quarantined (defaults 0.5 and 100: a wrong decimal mark,
delimiter or timestamp format breaks nearly every line, while a real file's odd bad lines stay
far below half; the line count keeps a small file with a few bad lines from being refused).
The check runs inside the batch's transaction, after the lines were classified, so the message
can name the most common reason and its first line; the runner then rolls the file back.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import duckdb

from demandprep.config import FileSource
from demandprep.errors import UserError
from demandprep.ingest.ledger import BatchFile, FileCounts
from demandprep.ingest.references import REFERENCE_SPECS
from demandprep.personal import CARD_COLUMNS, carries_cards, value_shape
from demandprep.sqlfiles import quote_identifier

DUPLICATE_REASONS = ("duplicate_line", "duplicate_key")
# Reasons that come from reading a file with the wrong settings rather than from its content.
READING_REASONS = (
    "wrong_column_count",
    "unparseable_field",
    "missing_required_field",
    "timestamp_out_of_range",
)


@dataclass(frozen=True)
class Refusal:
    """Why one file is refused: the CLI's one-line message and the ledger's reason."""

    message: str
    reason: str


class FilesRefused(Exception):
    """Files of a batch went past their source's reject limit; the batch must be rolled back."""

    def __init__(self, refusals: dict[Path, Refusal]) -> None:
        self.refusals = refusals
        super().__init__("; ".join(refusal.message for refusal in refusals.values()))


def over_limit(counts: FileCounts, source: FileSource) -> bool:
    """True when a file's quarantined records pass both of its source's reject limits."""
    quarantined = counts.rows_quarantined
    return (
        counts.rows_read > 0
        and quarantined > source.reject_limit_lines
        and quarantined > source.reject_limit_fraction * counts.rows_read
    )


def refusals(
    con: duckdb.DuckDBPyConnection,
    source_name: str,
    source: FileSource,
    batch: list[BatchFile],
    counts: dict[str, FileCounts],
) -> dict[Path, Refusal]:
    """The batch's files past the reject limit, each with its message (staging tables needed)."""
    found = {}
    shapes_only = carries_cards(source.columns)
    for item in batch:
        found_counts = counts[item.file_id]
        if over_limit(found_counts, source):
            path = item.discovered.path
            refusal = _refusal(con, source_name, path, item.file_id, found_counts, shapes_only)
            found[path] = refusal
    return found


def _refusal(
    con: duckdb.DuckDBPyConnection,
    source_name: str,
    path: Path,
    file_id: str,
    counts: FileCounts,
    shapes_only: bool,
) -> Refusal:
    """The refusal of one file; `shapes_only` (a card-bearing source) shows the first bad
    value's shape, never the value: a shifted line can put a card id in any field."""
    reason = min(counts.quarantined, key=lambda name: (-counts.quarantined[name], name))
    line_no, field, value = _first_example(con, file_id, reason, _duplicate_field(source_name))
    share = f"{counts.rows_quarantined / counts.rows_read:.0%}"
    summary = (
        f"{counts.rows_quarantined} of {counts.rows_read} lines quarantined ({share}), "
        f"mostly {reason}"
    )
    where = f"line {line_no}" if line_no is not None else "no line number"
    named = f"{where}, {field}" if field else where
    shown = named
    if field and field not in CARD_COLUMNS:
        if not value:
            shown = f"{named} empty"
        elif shapes_only:
            shown = f"{named} shaped {value_shape(value)!r}"
        else:
            shown = f"{named} {value!r}"
    message = UserError(f"{path}: refused: {summary} (first: {shown}).", _hint(source_name, reason))
    return Refusal(message.one_line(), f"{summary} (first: {named})")


def _duplicate_field(source_name: str) -> str:
    """The column a duplicate is first known by: the receipt, or the reference's first key."""
    spec = REFERENCE_SPECS.get(source_name)
    return spec.key[0] if spec is not None else "receipt"


def _first_example(
    con: duckdb.DuckDBPyConnection, file_id: str, reason: str, duplicate_field: str
) -> tuple[int | None, str | None, str | None]:
    """Line number, our column and its text of the file's first line quarantined for `reason`.

    Duplicates are marked after the rules ran (their `reason_field` is empty): they are named
    by `duplicate_field`.
    """
    row = con.execute(
        # a staged line's ordinal is its file's position << 40 plus its line number (reader.py)
        "select q.line_no, c.ordinal, c.reason_field from quarantine q "
        "join ingest_batch_files f on f.file_id = q.file_id "
        "left join ingest_checked c on c.ordinal = (f.position::bigint << 40) + q.line_no "
        "where q.file_id = $file_id and q.reason = $reason "
        "order by q.line_no nulls last limit 1",
        {"file_id": file_id, "reason": reason},
    ).fetchone()
    line_no, ordinal, field = row
    if reason in DUPLICATE_REASONS:
        field = duplicate_field
    if field is None or ordinal is None:
        return line_no, None, None
    (value,) = con.execute(
        f"select {quote_identifier(field)} from ingest_source_lines where ordinal = $ordinal",  # noqa: S608
        {"ordinal": ordinal},
    ).fetchone()
    return line_no, field, value


def _hint(source_name: str, reason: str) -> str:
    key = f"sources.{source_name}"
    if reason == "timestamp_out_of_range":
        # dates read right but outside the window, or read wrong (format, timezone)
        return f"check {key}.valid_from and valid_to, then timestamp_format and timezone."
    if reason in READING_REASONS:
        formats = ", timestamp_format" if source_name == "receipts" else ""
        return f"check {key}.decimal, delimiter{formats} and the columns mapping."
    return (
        f"check the file; if its lines are meant to be quarantined, raise "
        f"{key}.reject_limit_fraction or reject_limit_lines."
    )
