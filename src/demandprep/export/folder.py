"""Build folders under the export root: ids, staging, atomic publication, `latest`, pruning.

Layout of `export.root`:

    .staging/<build id>/      a build being written (invisible; removed if its writer died)
    .staging/<build id>.pid   the writing process's id
    <build id>/               a complete, published build
    latest -> <build id>      symlink (or a `latest` text file holding the id) to the newest

A build is written wholly inside `.staging`, then renamed into place in one step (same file
system, so `rename` is atomic); `latest` moves only after that, by an atomic replace.

The root may hold what is not ours, so nothing is deleted on its name alone: a build folder
carries a marker file (`.demandprep-build`, holding its build id) written when its staging
folder is made, and only marked folders are pruned or cleaned. Cleanup never follows a link:
a `.staging` that is a symbolic link, or a `latest` that is a real folder (a restored copy),
stops the export with one line before anything is written. One publisher at a time holds
the root's lock (`root_lock.py`), from the staging cleanup to the pruning.
"""

from __future__ import annotations

import errno
import hashlib
import os
import re
import shutil
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.export.manifest import input_records
from demandprep.export.root_lock import LOCK_FILE, export_root_lock
from demandprep.export.unpublished import forget_unpublished_periods
from demandprep.memory import out_of_memory_reported

if TYPE_CHECKING:
    # the writer imports pandas: a night that finds `latest` current does not need it
    from demandprep.export.dictionary import ModelMap

__all__ = [
    "LOCK_FILE",
    "check_export_root",
    "clean_stale_staging",
    "discard_staging",
    "export_build",
    "export_root_lock",
    "latest_build",
    "new_build_id",
    "open_staging",
    "prune",
    "publish",
    "write_staged_build",
]

STAGING = ".staging"
LATEST = "latest"
MARKER = ".demandprep-build"
TRASH_PREFIX = ".trash-"
DISK_FULL = (errno.ENOSPC, errno.EDQUOT)
BUILD_ID = re.compile(r"^\d{8}T\d{6}Z-[0-9a-f]{8}(-\d+)?$")


def export_build(
    ctx: BuildContext, now: datetime | None = None, models: ModelMap | None = None
) -> Path:
    """Write, publish and prune under the root's lock: the whole export of one build.

    Returns the published folder; `now` fixes the build time and `models` the dictionary's
    pandera models (tests use both).
    """
    root = ctx.config.export.root
    with export_root_lock(root, ctx.config.warehouse.lock_timeout_seconds):
        staging = write_staged_build(ctx, now or datetime.now(UTC), models)
        published = publish_build(ctx, staging)
        prune(root, ctx.config.export.keep_last)
    return published


def publish_build(ctx: BuildContext, staging: Path) -> Path:
    """Publish a written build, then forget the periods it was the first to show."""
    published = publish(staging, ctx.config.export.root)
    forget_unpublished_periods(ctx.con)
    return published


def write_staged_build(
    ctx: BuildContext, built_at: datetime, models: ModelMap | None = None
) -> Path:
    """Check the root, clean dead writers' leftovers and write the build into staging.

    Returns the staging folder. A failed write leaves nothing behind; a full disk or DuckDB
    running out of memory becomes one `UserError` line. Call it holding the root's lock.
    """
    from demandprep.export.build import write_build

    root = ctx.config.export.root
    check_export_root(root)
    clean_stale_staging(root)
    with out_of_memory_reported("export", ctx.config.warehouse):
        build_id = new_build_id(ctx, built_at)
        try:
            staging = _reserve_staging(root, build_id)
        except OSError as error:
            if error.errno in DISK_FULL:
                raise _disk_full_error(root, build_id, 0) from error
            raise
        try:
            _mark_as_ours(staging)
            write_build(ctx, staging, built_at, models, previous=latest_build(root))
        except BaseException as error:
            written = _bytes_under(staging)
            discard_staging(staging)
            if isinstance(error, OSError) and error.errno in DISK_FULL:
                raise _disk_full_error(root, staging.name, written) from error
            raise
    return staging


def check_export_root(root: Path) -> None:
    """Stop with one line if `latest` or `.staging` is not what demandprep keeps there."""
    latest, staging = root / LATEST, root / STAGING
    if latest.is_dir() and not latest.is_symlink():
        raise UserError(
            f"{latest} is a folder, not the link demandprep keeps.",
            "move it away (it looks like a restored copy) and build again.",
        )
    if staging.is_symlink():
        raise UserError(
            f"{staging} is a symbolic link, not the staging folder demandprep keeps.",
            "remove the link (not what it points to) and build again.",
        )


def new_build_id(ctx: BuildContext, built_at: datetime) -> str:
    """UTC build time and a short hash of config and inputs, e.g. 20240306T023000Z-1a2b3c4d."""
    digest = hashlib.sha256(ctx.config.config_hash().encode())
    for record in input_records(ctx.con):
        digest.update(f"{record['path']}\0{record['sha256']}\0".encode())
    stamp = built_at.astimezone(UTC).strftime("%Y%m%dT%H%M%SZ")
    return f"{stamp}-{digest.hexdigest()[:8]}"


def open_staging(root: Path, build_id: str) -> Path:
    """Create the staging folder for `build_id` (made unique if taken): our marker, our pid."""
    folder = _reserve_staging(root, build_id)
    try:
        _mark_as_ours(folder)
    except BaseException:
        # Why here: an unmarked folder would never count as ours, so no later cleanup takes it
        discard_staging(folder)
        raise
    return folder


def _reserve_staging(root: Path, build_id: str) -> Path:
    check_export_root(root)
    staging_root = root / STAGING
    staging_root.mkdir(parents=True, exist_ok=True)
    candidate, counter = build_id, 1
    while (root / candidate).exists() or (staging_root / candidate).exists():
        counter += 1
        candidate = f"{build_id}-{counter}"
    folder = staging_root / candidate
    folder.mkdir()
    return folder


def _mark_as_ours(folder: Path) -> None:
    (folder / MARKER).write_text(folder.name + "\n", encoding="utf-8")
    _pid_file(folder).write_text(str(os.getpid()), encoding="ascii")


def publish(staging_dir: Path, root: Path) -> Path:
    """Move a complete staging folder into place, then point `latest` at it; returns its path."""
    check_export_root(root)  # `latest` may have been restored while the build was written
    target = root / staging_dir.name
    _fsync_dir(staging_dir)
    os.rename(staging_dir, target)
    _fsync_dir(root)
    _point_latest(root, target.name)
    _pid_file(staging_dir).unlink(missing_ok=True)
    return target


def prune(root: Path, keep_last: int) -> list[Path]:
    """Delete all but the newest `keep_last` of our builds (never the one `latest` names)."""
    check_export_root(root)
    latest = latest_build(root)
    builds = published_builds(root)
    doomed = [b for b in builds[:-keep_last] if latest is None or b.name != latest.name]
    trash = root / STAGING
    for build in doomed:
        # Why rename first: a half-deleted build must never be visible under the root.
        parked = trash / f"{TRASH_PREFIX}{build.name}"
        os.rename(build, parked)
        shutil.rmtree(parked)
    return doomed


def published_builds(root: Path) -> list[Path]:
    """Our published build folders (named like a build id and marked as ours), oldest first."""
    if not root.is_dir():
        return []
    builds = [p for p in root.iterdir() if BUILD_ID.match(p.name) and is_our_build(p, p.name)]
    return sorted(builds, key=lambda p: (p.name[:16], p.stat().st_mtime_ns, p.name))


def is_our_build(folder: Path, build_id: str) -> bool:
    """True for a real folder (not a link) whose marker file names `build_id`."""
    marker = folder / MARKER
    if folder.is_symlink() or not folder.is_dir() or marker.is_symlink() or not marker.is_file():
        return False
    try:
        return marker.read_text(encoding="utf-8").strip() == build_id
    except (OSError, UnicodeDecodeError):
        return False


def latest_build(root: Path) -> Path | None:
    """The build `latest` points to, or None when there is none yet."""
    pointer = root / LATEST
    if pointer.is_symlink():
        name = os.readlink(pointer)
    elif pointer.is_file():
        name = pointer.read_text(encoding="utf-8").strip()
    else:
        return None
    target = root / name
    return target if target.is_dir() else None


def clean_stale_staging(root: Path) -> list[Path]:
    """Remove what dead writers left: their marked staging folders, their pid files and their
    temporary `latest` pointers.

    Folders without our marker, links and other files are left alone; a linked `.staging`
    is refused (`check_export_root`), so nothing is ever deleted through a link.
    """
    check_export_root(root)
    removed = _remove_stale_latest_pointers(root)
    staging_root = root / STAGING
    if not staging_root.is_dir():
        return removed
    for entry in sorted(staging_root.iterdir()):
        if _is_stale_staging(entry):
            shutil.rmtree(entry)
            _pid_file(entry).unlink(missing_ok=True)
            removed.append(entry)
        elif _is_stale_pid_file(entry):
            entry.unlink()
            removed.append(entry)
    return removed


def _remove_stale_latest_pointers(root: Path) -> list[Path]:
    # Why: a kill between writing `.latest-<id>.tmp` and moving it over `latest` leaves it; the
    # caller holds the root's lock, so no live publisher owns one. Only our own name pattern,
    # as a link or a small pointer file, is removed.
    removed = []
    for entry in sorted(root.glob(f".{LATEST}-*.tmp")):
        build_id = entry.name.removeprefix(f".{LATEST}-").removesuffix(".tmp")
        if BUILD_ID.match(build_id) and (entry.is_symlink() or entry.is_file()):
            entry.unlink()
            removed.append(entry)
    return removed


def _is_stale_staging(entry: Path) -> bool:
    if entry.name.startswith(TRASH_PREFIX):
        # a build parked by prune, marked with its published name
        return is_our_build(entry, entry.name.removeprefix(TRASH_PREFIX))
    return is_our_build(entry, entry.name) and not _writer_alive(entry)


def _is_stale_pid_file(entry: Path) -> bool:
    # Why: a kill between the rename and the pid file's removal leaves the pid file alone
    build_id = entry.name.removesuffix(".pid")
    if entry.suffix != ".pid" or not BUILD_ID.match(build_id) or entry.is_symlink():
        return False
    if not entry.is_file() or entry.with_name(build_id).exists():
        return False
    return _recorded_pid(entry) is not None and not _writer_alive(entry.with_name(build_id))


def discard_staging(staging_dir: Path) -> None:
    """Remove a staging folder and its pid file (a failed build leaves nothing behind)."""
    shutil.rmtree(staging_dir, ignore_errors=True)
    _pid_file(staging_dir).unlink(missing_ok=True)


def _point_latest(root: Path, name: str) -> None:
    temporary = root / f".{LATEST}-{name}.tmp"
    temporary.unlink(missing_ok=True)
    try:
        os.symlink(name, temporary, target_is_directory=True)
    except OSError:
        # Why: some file systems have no symlinks; a small pointer file does the same job.
        temporary.write_text(name + "\n", encoding="utf-8")
    os.replace(temporary, root / LATEST)
    _fsync_dir(root)


def _writer_alive(folder: Path) -> bool:
    pid = _recorded_pid(_pid_file(folder))
    if pid is None or pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _recorded_pid(pid_file: Path) -> int | None:
    try:
        return int(pid_file.read_text(encoding="ascii"))
    except (OSError, ValueError):
        return None


def _disk_full_error(root: Path, build_id: str, written: int) -> UserError:
    latest = latest_build(root)
    kept = f"latest still names {latest.name}" if latest else "no build was published"
    return UserError(
        f"{root}: the disk filled while writing build {build_id} ({_size_text(written)} "
        f"written); the build was removed and {kept}.",
        f"free space on the disk that holds {root}, or point export.root at a larger one, "
        "and build again.",
    )


def _bytes_under(folder: Path) -> int:
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file() and not p.is_symlink())


def _size_text(size: int) -> str:
    """Bytes as DuckDB writes sizes (1 KB = 1000 bytes), one decimal."""
    for unit, scale in (("GB", 10**9), ("MB", 10**6), ("KB", 10**3)):
        if size >= scale:
            return f"{size / scale:.1f} {unit}"
    return f"{size} bytes"


def _pid_file(folder: Path) -> Path:
    return folder.with_name(folder.name + ".pid")


def _fsync_dir(path: Path) -> None:
    descriptor = os.open(path, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)
