"""Build folders under the export root: ids, staging, atomic publication, `latest`, pruning.

Layout of `export.root`:

    .staging/<build id>/      a build being written (invisible; removed if its writer died)
    .staging/<build id>.pid   the writing process's id
    <build id>/               a complete, published build
    latest -> <build id>      symlink (or a `latest` text file holding the id) to the newest

A build is written wholly inside `.staging`, then renamed into place in one step (same file
system, so `rename` is atomic); `latest` moves only after that, by an atomic replace.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
from datetime import UTC, datetime
from pathlib import Path

from demandprep.context import BuildContext
from demandprep.export.build import BuildOutputs, write_build
from demandprep.export.dictionary import ModelMap
from demandprep.export.manifest import input_records

__all__ = [
    "BuildOutputs",
    "clean_stale_staging",
    "discard_staging",
    "export_build",
    "latest_build",
    "new_build_id",
    "open_staging",
    "prune",
    "publish",
    "write_build",
]

STAGING = ".staging"
LATEST = "latest"
BUILD_ID = re.compile(r"^\d{8}T\d{6}Z-[0-9a-f]{8}(-\d+)?$")


def export_build(
    ctx: BuildContext, now: datetime | None = None, models: ModelMap | None = None
) -> Path:
    """Write, publish and prune: the whole export of one build; returns the published folder.

    `now` fixes the build time and `models` the dictionary's pandera models (tests use both).
    """
    root = ctx.config.export.root
    clean_stale_staging(root)
    built_at = now or datetime.now(UTC)
    staging = open_staging(root, new_build_id(ctx, built_at))
    try:
        write_build(ctx, staging, built_at, models)
    except BaseException:
        discard_staging(staging)
        raise
    published = publish(staging, root)
    prune(root, ctx.config.export.keep_last)
    return published


def new_build_id(ctx: BuildContext, built_at: datetime) -> str:
    """UTC build time and a short hash of config and inputs, e.g. 20240306T023000Z-1a2b3c4d."""
    digest = hashlib.sha256(ctx.config.config_hash().encode())
    for record in input_records(ctx.con):
        digest.update(f"{record['path']}\0{record['sha256']}\0".encode())
    stamp = built_at.astimezone(UTC).strftime("%Y%m%dT%H%M%SZ")
    return f"{stamp}-{digest.hexdigest()[:8]}"


def open_staging(root: Path, build_id: str) -> Path:
    """Create the staging folder for `build_id` (made unique if taken) and record our pid."""
    staging_root = root / STAGING
    staging_root.mkdir(parents=True, exist_ok=True)
    candidate, counter = build_id, 1
    while (root / candidate).exists() or (staging_root / candidate).exists():
        counter += 1
        candidate = f"{build_id}-{counter}"
    folder = staging_root / candidate
    folder.mkdir()
    _pid_file(folder).write_text(str(os.getpid()), encoding="ascii")
    return folder


def publish(staging_dir: Path, root: Path) -> Path:
    """Move a complete staging folder into place, then point `latest` at it; returns its path."""
    target = root / staging_dir.name
    _fsync_dir(staging_dir)
    os.rename(staging_dir, target)
    _fsync_dir(root)
    _point_latest(root, target.name)
    _pid_file(staging_dir).unlink(missing_ok=True)
    return target


def prune(root: Path, keep_last: int) -> list[Path]:
    """Delete all but the newest `keep_last` published builds (never the one `latest` names)."""
    latest = latest_build(root)
    builds = published_builds(root)
    doomed = [b for b in builds[:-keep_last] if latest is None or b.name != latest.name]
    trash = root / STAGING
    for build in doomed:
        # Why rename first: a half-deleted build must never be visible under the root.
        parked = trash / f".trash-{build.name}"
        os.rename(build, parked)
        shutil.rmtree(parked)
    return doomed


def published_builds(root: Path) -> list[Path]:
    """The published build folders, oldest first."""
    if not root.is_dir():
        return []
    builds = [
        p for p in root.iterdir() if p.is_dir() and not p.is_symlink() and BUILD_ID.match(p.name)
    ]
    return sorted(builds, key=lambda p: (p.name[:16], p.stat().st_mtime_ns, p.name))


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
    """Remove staging folders whose writing process is gone (an interrupted export)."""
    staging_root = root / STAGING
    if not staging_root.is_dir():
        return []
    removed = []
    for folder in sorted(staging_root.iterdir()):
        if folder.is_dir() and (folder.name.startswith(".trash-") or not _writer_alive(folder)):
            shutil.rmtree(folder)
            _pid_file(folder).unlink(missing_ok=True)
            removed.append(folder)
    return removed


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
    try:
        pid = int(_pid_file(folder).read_text(encoding="ascii"))
    except (OSError, ValueError):
        return False
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _pid_file(folder: Path) -> Path:
    return folder.with_name(folder.name + ".pid")


def _fsync_dir(path: Path) -> None:
    descriptor = os.open(path, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)
