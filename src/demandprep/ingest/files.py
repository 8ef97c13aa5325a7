"""Find the input files of every source and tell new, unchanged and changed ones apart.

A file is known by its source and absolute path; its content by size and sha256. The ledger's
`current` row for that path says what was last ingested from it.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import duckdb

from demandprep.config import FileSource, ProjectConfig

# references first: receipts are checked against the stores and the catalogue
SOURCE_ORDER = (
    "catalogue",
    "stores",
    "households",
    "shelf_prices",
    "market_sizes",
    "cost_shifters",
    "receipts",
)
HASH_CHUNK_BYTES = 1 << 20

Status = Literal["new", "unchanged", "changed"]


@dataclass(frozen=True)
class DiscoveredFile:
    """One input file found by a source's globs, with its checksum and what the ledger knows."""

    source: str
    path: Path
    bytes: int
    sha256: str
    status: Status
    previous_file_id: str | None = None


def configured_sources(config: ProjectConfig) -> list[tuple[str, FileSource]]:
    """The configured sources in load order (references before receipts)."""
    sources = config.sources
    found = [(name, getattr(sources, name)) for name in SOURCE_ORDER]
    return [(name, source) for name, source in found if source is not None]


def file_sha256(path: Path) -> str:
    """The sha256 of a file's bytes, read in chunks."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        while chunk := handle.read(HASH_CHUNK_BYTES):
            digest.update(chunk)
    return digest.hexdigest()


def current_versions(con: duckdb.DuckDBPyConnection) -> dict[tuple[str, str], tuple[str, str]]:
    """(source, path) -> (file_id, sha256) of every file's current (or empty) ledger row."""
    # an empty file is read once: not again until its checksum changes
    rows = con.execute(
        "select source, path, file_id, sha256 from ledger where status in ('current', 'empty')"
    ).fetchall()
    return {(source, path): (file_id, sha) for source, path, file_id, sha in rows}


def discover_source(
    source: str,
    paths: list[Path],
    known: dict[tuple[str, str], tuple[str, str]],
    reload_all: bool = False,
) -> list[DiscoveredFile]:
    """Checksum each file of one source and compare it with its current ledger row."""
    found = []
    for path in paths:
        sha = file_sha256(path)
        previous = known.get((source, str(path)))
        if previous is None:
            status: Status = "new"
        elif previous[1] == sha and not reload_all:
            status = "unchanged"
        else:
            status = "changed"
        previous_id = previous[0] if previous else None
        found.append(DiscoveredFile(source, path, path.stat().st_size, sha, status, previous_id))
    return found
