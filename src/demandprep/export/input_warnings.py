"""Warnings about what went into the build, read from the ingest's ledger.

Three kinds, one warning line each, so they reach the manifest and the top of the report:
- files whose latest version did not go in: ledger status `failed` (could not be read),
  `refused` (past the reject limit), `empty` (no records) or `withdrawn` (rows removed on purpose);
- current files gone from the drop folder (their rows stay in the warehouse);
- sources that quarantined more than `QUARANTINE_WARN_RATE` of the rows read in their current files.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import duckdb

from demandprep.config import ProjectConfig
from demandprep.export.tables import table_columns

# common practice, no source: a clean till or catalogue export quarantines next to nothing, so
# one line in a hundred is past noise, and demand lost unevenly at that rate moves the shares of
# small products by as much as their own size.
QUARANTINE_WARN_RATE = 0.01
SHOWN = 5

# status -> what the warning says about such files
STATUS_MEANINGS = {
    "failed": "failed (could not be read)",
    "refused": "refused (past the reject limit)",
    "empty": "empty (no records)",
    "withdrawn": "withdrawn (rows removed on purpose)",
}

# the ledger with its `reason` column, which warehouses ingested before it existed lack
LEDGER_VIEW = "create or replace temp view input_warnings_ledger as select * from ledger"
LEDGER_VIEW_WITHOUT_REASON = (
    "create or replace temp view input_warnings_ledger as "
    "select *, null::varchar as reason from ledger"
)

# the latest version of each file, when it did not go in
LATEST_NOT_IN = """
with versions as (
    select
        status,
        source,
        path,
        reason,
        row_number() over (partition by source, path order by version desc) as newest_first,
    from input_warnings_ledger
)

select status, source, path, reason
from versions
where newest_first = 1 and status in ('failed', 'refused', 'empty', 'withdrawn')
order by status, source, path
"""

CURRENT_FILES = "select source, path from ledger where status = 'current' order by source, path"

QUARANTINE_BY_SOURCE = """
select
    source,
    sum(rows_read)::bigint as rows_read,
    sum(rows_quarantined)::bigint as rows_quarantined,
from ledger
where status = 'current'
group by source
order by source
"""


@dataclass(frozen=True)
class InputFile:
    """One input file that needs the user's attention."""

    status: str
    source: str
    path: str
    reason: str | None = None

    @property
    def name(self) -> str:
        """The file's name, without its folder."""
        return Path(self.path).name


def input_warnings(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig | None = None
) -> list[str]:
    """Every warning about the inputs, in a fixed order; none when there is no ledger.

    With `config`, current files its sources' `files` no longer name are warned about too."""
    if not _has_table(con, "ledger"):
        return []
    files = files_not_in(con) + files_gone(con, config)
    messages = []
    for status in (*STATUS_MEANINGS, "gone", "unnamed"):
        items = [item for item in files if item.status == status]
        if items:
            messages.append(_files_message(status, items))
    return messages + quarantine_warnings(con)


def files_needing_attention(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig | None = None
) -> list[InputFile]:
    """The files behind the warnings: latest versions that did not go in, then gone files."""
    if not _has_table(con, "ledger"):
        return []
    return files_not_in(con) + files_gone(con, config)


def files_not_in(con: duckdb.DuckDBPyConnection) -> list[InputFile]:
    """Files whose latest ledger version is failed, refused, empty or withdrawn."""
    has_reason = "reason" in table_columns(con, "ledger")
    con.execute(LEDGER_VIEW if has_reason else LEDGER_VIEW_WITHOUT_REASON)
    rows = con.execute(LATEST_NOT_IN).fetchall()
    return [InputFile(*row) for row in rows]


def files_gone(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig | None = None
) -> list[InputFile]:
    """Current files whose path no longer exists on disk ('gone') or, with `config`, that its
    sources' `files` no longer name ('unnamed'): their rows stay either way."""
    rows = con.execute(CURRENT_FILES).fetchall()
    named = _named_files(config) if config is not None else None
    found = []
    for source, path in rows:
        if not Path(path).exists():
            found.append(InputFile("gone", source, path))
        elif named is not None and path not in named.get(source, set()):
            found.append(InputFile("unnamed", source, path))
    return found


def _named_files(config: ProjectConfig) -> dict[str, set[str]]:
    return {
        name: {str(path) for path in source.resolved_files()}
        for name, source in config.sources
        if source is not None
    }


def quarantine_warnings(con: duckdb.DuckDBPyConnection) -> list[str]:
    """One warning per source whose current files quarantined more than the threshold."""
    messages = []
    for source, read, quarantined in con.execute(QUARANTINE_BY_SOURCE).fetchall():
        if read and quarantined / read > QUARANTINE_WARN_RATE:
            messages.append(
                f"inputs: {source} quarantined {quarantined / read:.2%} of the rows read "
                f"({quarantined} of {read}) in its current files, above "
                f"{QUARANTINE_WARN_RATE:.0%}; the report's ledger section gives the reasons."
            )
    return messages


def _files_message(status: str, items: list[InputFile]) -> str:
    names = [item.name for item in items]
    shown = ", ".join(names[:SHOWN])
    if len(names) > SHOWN:
        shown += f" and {len(names) - SHOWN} more"
    count = f"{len(items)} file" + ("s" if len(items) > 1 else "")
    if status == "gone":
        return (
            f"inputs: {count} gone from the drop folder, their rows still in the warehouse: "
            f"{shown}."
        )
    if status == "unnamed":
        return (
            f"inputs: {count} no longer named by its source's files in the config, their rows "
            f"still in the warehouse (withdraw takes them out): {shown}."
        )
    return f"inputs: {count} {STATUS_MEANINGS[status]}: {shown}."


def _has_table(con: duckdb.DuckDBPyConnection, table: str) -> bool:
    return bool(table_columns(con, table))
