"""What the last exported choices file holds, for the next export to keep its row groups.

One row in `choices_file_state`: the build that wrote the file, its sha256, its rows, the
signature of the writer and query that made its bytes, `changed_from`, the smallest occasion id
from which the warehouse's `choices` may differ from the file (null: no row differs), and
`footer_groups`, where each row group's entry begins in the file's footer (and the last ends;
null when the footer could not be read), so the next splice need not read them. The choice build
lowers `changed_from` before it deletes or appends rows, and forgets the row before it rebuilds
every occasion, so a build that dies in between leaves it right; the export records a new row
after it wrote the file (`export/choices_file.py`).
"""

from __future__ import annotations

from dataclasses import dataclass

import duckdb

STATE_DDL = """
create table if not exists choices_file_state (
    build_id varchar not null,
    sha256 varchar not null,
    rows bigint not null,
    writer varchar not null,
    changed_from varchar,
);
alter table choices_file_state add column if not exists footer_groups bigint[];
"""


@dataclass(frozen=True)
class ChoicesFile:
    """The last exported choices file, as recorded."""

    build_id: str
    sha256: str
    rows: int
    writer: str
    changed_from: str | None
    footer_groups: list[int] | None = None


def rows_changing(con: duckdb.DuckDBPyConnection, first_occasion: str | None) -> None:
    """Before `choices` changes from `first_occasion` on (None: every row)."""
    con.execute(STATE_DDL)
    if first_occasion is None:
        con.execute("delete from choices_file_state")
        return
    con.execute(
        "update choices_file_state "
        "set changed_from = least(coalesce(changed_from, $first), $first)",
        {"first": first_occasion},
    )


def recorded_file(con: duckdb.DuckDBPyConnection) -> ChoicesFile | None:
    """The recorded file, if any."""
    con.execute(STATE_DDL)
    row = con.execute(
        "select build_id, sha256, rows, writer, changed_from, footer_groups from choices_file_state"
    ).fetchone()
    return ChoicesFile(*row) if row is not None else None


def record_file(con: duckdb.DuckDBPyConnection, exported: ChoicesFile) -> None:
    """After the export wrote `choices` whole into a file: that file, no row changed since."""
    con.execute(STATE_DDL)
    con.execute("delete from choices_file_state")
    con.execute(
        "insert into choices_file_state "
        "(build_id, sha256, rows, writer, changed_from, footer_groups) "
        "values ($build_id, $sha256, $rows, $writer, null, $footer_groups)",
        {
            "build_id": exported.build_id,
            "sha256": exported.sha256,
            "rows": exported.rows,
            "writer": exported.writer,
            "footer_groups": exported.footer_groups,
        },
    )


def drop_file_state(con: duckdb.DuckDBPyConnection) -> None:
    """Choices turned off: no file to keep rows of."""
    con.execute("drop table if exists choices_file_state")
