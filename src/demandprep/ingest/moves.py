"""Files that moved: a new path whose bytes equal those of a current file whose path is gone.

The ledger keys files by absolute path, so a project folder moved to another disk or mount would
make every file new and every line a duplicate of itself. A new file with the checksum of a
current file of its source whose path no longer exists takes over that file's ledger and
quarantine rows under its new path: it is not read again, and its rows stay as they were. When
the source's reading settings changed as well, it is read again as a changed file instead. A
withdrawn file (or one refused under today's settings) that moved stays held back.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import duckdb

from demandprep.ingest.files import DiscoveredFile
from demandprep.sqlfiles import run_sql

# (source, sha256) -> (file id, path, settings fingerprint, status) of the files whose path is
# gone: current ones, and those held back
Gone = dict[tuple[str, str], list[tuple[str, str, str | None, str]]]


def recognise_moves(
    con: duckdb.DuckDBPyConnection, found: list[DiscoveredFile]
) -> list[DiscoveredFile]:
    """`found` with each moved file recognised: unchanged under its new path, or changed."""
    if not any(item.status == "new" for item in found):
        return found
    gone = _gone_files(con)
    return [_moved(con, item, gone) for item in found]


def _gone_files(con: duckdb.DuckDBPyConnection) -> Gone:
    gone: Gone = {}
    rows = run_sql(con, "ingest/080_current_files.sql").fetchall()
    for source, path, file_id, sha256, fingerprint, status in rows:
        if not Path(path).exists():
            gone.setdefault((source, sha256), []).append((file_id, path, fingerprint, status))
    return gone


def _moved(con: duckdb.DuckDBPyConnection, item: DiscoveredFile, gone: Gone) -> DiscoveredFile:
    candidates = gone.get((item.source, item.sha256))
    if item.status != "new" or item.held_back is not None or not candidates:
        return item
    file_id, old_path, fingerprint, status = candidates.pop(0)
    same_settings = fingerprint in (None, item.settings_fingerprint)
    held_back = status == "withdrawn" or (status == "refused" and same_settings)
    if not same_settings and not held_back:
        if status == "refused":
            return item  # read under the new settings, as any refused file would be
        # read again under the new settings, replacing the old version's rows
        return replace(item, status="changed", previous_file_id=file_id, settings_changed=True)
    con.execute("begin transaction")
    try:
        params = {"source": item.source, "old_path": old_path, "new_path": str(item.path)}
        run_sql(con, "ingest/081_move_ledger.sql", params)
        run_sql(con, "ingest/082_move_quarantine.sql", params)
        con.execute("commit")
    except BaseException:
        con.execute("rollback")
        raise
    if held_back:
        return replace(item, status="unchanged", held_back=status)
    return replace(item, status="unchanged", previous_file_id=file_id)
