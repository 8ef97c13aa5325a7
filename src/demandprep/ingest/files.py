"""Find the input files of every source and tell new, unchanged and changed ones apart.

A file is known by its source and absolute path; its content by size and sha256, and the way
it was read by its source's settings fingerprint. The ledger's `current` row for that path says
what was last ingested from it: a file is changed when its checksum or its source's reading
settings differ (a null fingerprint, from before they were recorded, counts as the same). A
path whose latest ledger row is `refused` stays out until its checksum or settings change; one
that is `withdrawn` stays out until its checksum changes (or an explicit reload).

The sha256 is taken from `file_stamps` instead of the file when the file's stat (size, mtime,
ctime, inode, device) is the one recorded beside that sha256 and its mtime and ctime lie well
before the record was taken (git's index does the same); any other file is read and recorded.
"""

from __future__ import annotations

import hashlib
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from fnmatch import fnmatch
from pathlib import Path
from typing import Literal

import duckdb

from demandprep.config import FileSource, ProjectConfig, no_files_error
from demandprep.errors import UserError
from demandprep.sqlfiles import run_sql

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
# a file changed this close before its record may change again within the same clock tick of
# a coarse file system without moving its mtime or ctime (git's "racy" check)
RACY_MARGIN_NS = 2_000_000_000  # common practice, no source: 2 s covers FAT's mtime steps

Status = Literal["new", "unchanged", "changed"]


@dataclass(frozen=True)
class FileStamp:
    """What stat says of a file; any write to it moves one of these."""

    bytes: int
    mtime_ns: int
    ctime_ns: int
    inode: int
    device: int

    @classmethod
    def of(cls, path: Path) -> FileStamp:
        """The stamp of the file at `path` now."""
        found = path.stat()
        return cls(found.st_size, found.st_mtime_ns, found.st_ctime_ns, found.st_ino, found.st_dev)


@dataclass(frozen=True)
class StampRecord:
    """A file's stamp and the sha256 its bytes had, taken at `recorded_at_ns` (stat first)."""

    stamp: FileStamp
    sha256: str
    recorded_at_ns: int

    def vouches_for(self, stamp: FileStamp) -> bool:
        """True when the file still has this stamp and was last written well before the record."""
        settled = max(stamp.mtime_ns, stamp.ctime_ns) < self.recorded_at_ns - RACY_MARGIN_NS
        return settled and stamp == self.stamp


@dataclass(frozen=True)
class DiscoveredFile:
    """One input file found by a source's globs, with its checksum and what the ledger knows."""

    source: str
    path: Path
    bytes: int
    sha256: str
    status: Status
    previous_file_id: str | None = None
    settings_fingerprint: str | None = None
    # read again because the source's reading settings changed (or a reload asked for it)
    settings_changed: bool = False
    # every current file of its (reference) source is read again with new settings: the
    # source's table may be rebuilt from nothing (runner.mark_source_rebuilds)
    rebuilds_source: bool = False
    # 'refused' or 'withdrawn' when that ledger row is why an unchanged file stays out
    held_back: str | None = None
    # the file's stamp and the sha256 just read from it, to record (None: taken from a record)
    new_record: StampRecord | None = None
    # read again as the same bytes for rows of a SKU or store no longer listed: its accepted
    # lines may leave, so the duplicates of them are judged again (071)
    lines_may_leave: bool = False


@dataclass(frozen=True)
class KnownVersion:
    """What the ledger holds for one path: a file version, its checksum and settings."""

    file_id: str
    sha256: str
    status: str
    settings_fingerprint: str | None

    def read_with(self, fingerprint: str) -> bool:
        """True when this version was read with these settings (unknown counts as the same)."""
        return self.settings_fingerprint in (None, fingerprint)


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


def checksums(paths: list[Path], workers: int) -> list[str]:
    """The sha256 of each file, in the order of `paths`."""
    if workers <= 1 or len(paths) <= 1:
        return [file_sha256(path) for path in paths]
    with ThreadPoolExecutor(workers, thread_name_prefix="demandprep-sha256") as pool:
        return list(pool.map(file_sha256, paths))


def now_ns() -> int:
    """The wall clock in nanoseconds, the time a stamp record is taken."""
    return time.time_ns()


def stamp_records(con: duckdb.DuckDBPyConnection) -> dict[str, StampRecord]:
    """path -> its recorded stamp and sha256."""
    rows = run_sql(con, "ingest/067_file_stamps.sql").fetchall()
    return {row[0]: StampRecord(FileStamp(*row[1:6]), row[6], row[7]) for row in rows}


def record_stamps(con: duckdb.DuckDBPyConnection, found: list[DiscoveredFile]) -> None:
    """Record the stamp and sha256 of every file just read for its checksum.

    Not tied to the ledger: a record states what a file's bytes were, and one that is stale or
    lost by a crash only makes the next run read the file again.
    """
    records = [(str(item.path), item.new_record) for item in found if item.new_record]
    if not records:
        return
    columns = {
        "paths": [path for path, _ in records],
        "bytes": [record.stamp.bytes for _, record in records],
        "mtimes": [record.stamp.mtime_ns for _, record in records],
        "ctimes": [record.stamp.ctime_ns for _, record in records],
        "inodes": [record.stamp.inode for _, record in records],
        "devices": [record.stamp.device for _, record in records],
        "sha256s": [record.sha256 for _, record in records],
        "recorded_at": [record.recorded_at_ns for _, record in records],
    }
    run_sql(con, "ingest/068_file_stamps_forget.sql", columns)
    run_sql(con, "ingest/069_file_stamps_insert.sql", columns)


def current_versions(con: duckdb.DuckDBPyConnection) -> dict[tuple[str, str], KnownVersion]:
    """(source, path) -> the current (or empty) ledger row of every file."""
    # an empty file is read once: not again until its checksum or its source's settings change
    rows = con.execute(
        "select source, path, file_id, sha256, status, settings_fingerprint from ledger "
        "where status in ('current', 'empty')"
    ).fetchall()
    return {(row[0], row[1]): KnownVersion(*row[2:]) for row in rows}


def held_back_versions(con: duckdb.DuckDBPyConnection) -> dict[tuple[str, str], KnownVersion]:
    """(source, path) -> the latest ledger row of each path when it is refused or withdrawn."""
    rows = con.execute(
        "select source, path, file_id, sha256, status, settings_fingerprint from ledger "
        "qualify row_number() over (partition by source, path order by version desc) = 1 "
        "and status in ('refused', 'withdrawn')"
    ).fetchall()
    return {(row[0], row[1]): KnownVersion(*row[2:]) for row in rows}


def discover_source(
    source: str,
    paths: list[Path],
    known: dict[tuple[str, str], KnownVersion],
    reload_all: bool = False,
    fingerprint: str | None = None,
    held_back: dict[tuple[str, str], KnownVersion] | None = None,
    reload: frozenset[Path] = frozenset(),
    workers: int = 1,
    records: dict[str, StampRecord] | None = None,
) -> list[DiscoveredFile]:
    """Checksum each file of one source and compare it with its ledger rows.

    A file its record vouches for keeps the recorded sha256 (a reload reads it all the same);
    the others are read in `workers` threads (hashlib releases the GIL on large reads).
    """
    recorded_at = now_ns()  # before the stat: a write after it moves the stamp or is racy
    stamps = [FileStamp.of(path) for path in paths]
    sums = known_checksums(paths, stamps, records or {}, reload_all, reload)
    new_records: list[StampRecord | None] = [None] * len(paths)
    unknown = [index for index, sha in enumerate(sums) if sha is None]
    for index, sha in zip(unknown, checksums([paths[i] for i in unknown], workers), strict=True):
        sums[index] = sha
        new_records[index] = StampRecord(stamps[index], sha, recorded_at)
    found = []
    for path, stamp, sha, record in zip(paths, stamps, sums, new_records, strict=True):
        assert sha is not None  # every unknown checksum was read above
        previous = known.get((source, str(path)))
        blocked = (held_back or {}).get((source, str(path)))
        forced = reload_all or path in reload
        status, settings_changed = file_status(sha, fingerprint, previous, blocked, forced)
        previous_id = previous.file_id if previous else None
        kept_out = status == "unchanged" and blocked is not None and blocked.sha256 == sha
        found.append(
            DiscoveredFile(
                source,
                path,
                stamp.bytes,
                sha,
                status,
                previous_id,
                fingerprint,
                settings_changed,
                held_back=blocked.status if kept_out and blocked else None,
                new_record=record,
            )
        )
    return found


def known_checksums(
    paths: list[Path],
    stamps: list[FileStamp],
    records: dict[str, StampRecord],
    reload_all: bool,
    reload: frozenset[Path],
) -> list[str | None]:
    """The recorded sha256 of each file its record vouches for; None where it must be read."""
    sums: list[str | None] = []
    for path, stamp in zip(paths, stamps, strict=True):
        record = records.get(str(path))
        forced = reload_all or path in reload
        trusted = record is not None and not forced and record.vouches_for(stamp)
        sums.append(record.sha256 if trusted and record else None)
    return sums


def file_status(
    sha: str,
    fingerprint: str | None,
    previous: KnownVersion | None,
    held_back: KnownVersion | None,
    forced: bool,
) -> tuple[Status, bool]:
    """A file's status against its ledger rows, and whether it is read for its settings."""
    if forced:
        return ("new" if previous is None else "changed"), True
    if (
        held_back is not None
        and held_back.sha256 == sha
        and (held_back.status == "withdrawn" or held_back.read_with(fingerprint or ""))
    ):
        return "unchanged", False
    if previous is None:
        return "new", False
    new_settings = fingerprint is not None and not previous.read_with(fingerprint)
    if previous.sha256 != sha or new_settings:
        return "changed", new_settings
    return "unchanged", False


def reload_targets(config: ProjectConfig, patterns: list[str]) -> dict[str, frozenset[Path]]:
    """Source name -> its files that `--reload` names (a source name or a glob of paths)."""
    base = config.config_path.parent if config.config_path else Path.cwd()
    targets: dict[str, set[Path]] = {}
    for pattern in patterns:
        matched = False
        for name, source in configured_sources(config):
            files = source.resolved_files()
            glob = str(Path(pattern) if Path(pattern).is_absolute() else base / pattern)
            chosen = files if pattern == name else [p for p in files if fnmatch(str(p), glob)]
            if chosen:
                targets.setdefault(name, set()).update(chosen)
                matched = True
        if not matched:
            raise UserError(
                f"--reload {pattern!r} matches no configured source and no input file.",
                "name a source (e.g. receipts) or a glob of input files.",
            )
    return {name: frozenset(paths) for name, paths in targets.items()}


def discovery_warnings(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[str]:
    """What a night's discovery warns about: sources whose globs match no file any more, and
    matched symbolic links that lead to no file."""
    return check_sources_have_files(con, config) + links_to_no_file(config)


def links_to_no_file(config: ProjectConfig) -> list[str]:
    """Warnings for symbolic links the sources' globs match that lead to no file: nothing is
    read from them, and a night must not skip an input without saying so."""
    return [
        f"{config.config_path}: key 'sources.{name}.files': {link} is a symbolic link to no file "
        "(its target is gone, or the links form a loop), so it is not read; point it at the "
        "file or remove it."
        for name, source in configured_sources(config)
        for link in source.links_to_no_file()
    ]


def check_sources_have_files(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[str]:
    """Warnings for sources whose globs match nothing but whose files the warehouse holds.

    A source with neither files nor ingested rows is the config error it is on a first run.
    """
    warnings = []
    for name, source in configured_sources(config):
        if source.resolved_files():
            continue
        held = con.execute(
            "select count(*) from ledger where status = 'current' and source = $source",
            {"source": name},
        ).fetchone()[0]
        if not held:
            raise no_files_error(config.config_path, name, source)
        warnings.append(
            f"{config.config_path}: key 'sources.{name}.files': no file matches "
            f"{source.files[0]}; the warehouse keeps the {held} file(s) ingested before."
        )
    return warnings
