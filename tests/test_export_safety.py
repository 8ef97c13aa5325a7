"""The export root may hold what is not ours: only marked builds are pruned or cleaned, never
through a link, `latest` must be our link, and one publisher at a time holds the root."""

from __future__ import annotations

import os
import subprocess
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path

import duckdb
import pytest
from export_fixtures import export_config, fixture_context

from demandprep import pipeline
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.export import folder

START = datetime(2024, 3, 6, 2, 30, tzinfo=UTC)
MARKER = ".demandprep-build"  # the file that makes a folder ours
LOCK_FILE = ".demandprep-export.lock"


# these tests are about folders and bytes, not plots: a one-line report keeps them fast
pytestmark = pytest.mark.usefixtures("one_line_report")


@pytest.fixture()
def warehouse(tmp_path: Path, filled_warehouses):
    config = export_config(tmp_path, {"keep_last": 2, "row_group_rows": 1024})
    con = duckdb.connect(str(filled_warehouses.copy(config.warehouse.path, occasions=20)))
    yield fixture_context(con, config)
    con.close()


def entries(root: Path) -> set[str]:
    return {p.name for p in root.iterdir()}


def foreign_folder(parent: Path, name: str) -> Path:
    """A folder someone else keeps, with one file in it."""
    path = parent / name
    path.mkdir(parents=True)
    (path / "notes.txt").write_text("not demandprep's", encoding="utf-8")
    return path


def test_prune_leaves_foreign_folders_that_look_like_build_ids(warehouse: BuildContext) -> None:
    root = warehouse.config.export.root
    foreign = [foreign_folder(root, f"2023010{d}T000000Z-0000000{d}") for d in range(1, 9)]
    builds = [folder.export_build(warehouse, now=START + timedelta(hours=h)) for h in range(3)]
    assert all((f / "notes.txt").read_text(encoding="utf-8") == "not demandprep's" for f in foreign)
    kept = {f.name for f in foreign} | {builds[1].name, builds[2].name, "latest"}
    assert entries(root) - {".staging", LOCK_FILE} == kept
    assert (builds[2] / MARKER).read_text(encoding="utf-8") == builds[2].name + "\n"


def test_symlinked_staging_is_refused_and_nothing_is_deleted_through_it(
    warehouse: BuildContext, tmp_path: Path
) -> None:
    root = warehouse.config.export.root
    elsewhere = tmp_path / "elsewhere"
    theirs = foreign_folder(elsewhere, "20240101T000000Z-deadbeef")
    foreign_folder(elsewhere, "holiday photos")
    root.mkdir(parents=True)
    (root / ".staging").symlink_to(elsewhere, target_is_directory=True)
    with pytest.raises(UserError) as caught:
        folder.export_build(warehouse, now=START)
    assert caught.value.one_line() == (
        f"{root}/.staging is a symbolic link, not the staging folder demandprep keeps. "
        "Hint: remove the link (not what it points to) and build again."
    )
    assert entries(elsewhere) == {"20240101T000000Z-deadbeef", "holiday photos"}
    assert (theirs / "notes.txt").exists()
    assert entries(root) - {LOCK_FILE} == {".staging"}


def test_cleanup_leaves_unmarked_folders_and_links_inside_staging(tmp_path: Path) -> None:
    root = tmp_path / "builds"
    target = foreign_folder(tmp_path, "linked")
    unmarked = foreign_folder(root / ".staging", "20240101T000000Z-0badcafe")
    (root / ".staging" / "20240102T000000Z-0badf00d").symlink_to(target)
    assert folder.clean_stale_staging(root) == []
    assert (unmarked / "notes.txt").exists()
    assert (target / "notes.txt").exists()
    assert entries(root / ".staging") == {unmarked.name, "20240102T000000Z-0badf00d"}


def test_latest_as_a_real_folder_stops_the_export_before_writing(warehouse: BuildContext) -> None:
    root = warehouse.config.export.root
    restored = foreign_folder(root, "latest")
    with pytest.raises(UserError) as caught:
        folder.export_build(warehouse, now=START)
    assert caught.value.one_line() == (
        f"{root}/latest is a folder, not the link demandprep keeps. "
        "Hint: move it away (it looks like a restored copy) and build again."
    )
    assert entries(root) - {".staging", LOCK_FILE} == {"latest"}
    assert not (root / ".staging").exists() or entries(root / ".staging") == set()
    assert (restored / "notes.txt").exists()


def test_latest_as_a_real_folder_stops_the_build_before_its_stages(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = export_config(tmp_path)
    foreign_folder(config.export.root, "latest")
    ran: list[str] = []
    monkeypatch.setattr(pipeline, "run_stage", lambda stage, ctx: ran.append(stage.name))
    with pytest.raises(UserError, match="latest is a folder, not the link"):
        pipeline.run_build(config)
    assert ran == []


def test_second_publisher_stops_with_one_line_naming_the_holder(warehouse: BuildContext) -> None:
    root = warehouse.config.export.root
    first = folder.export_build(warehouse, now=START)
    quick = warehouse.config.warehouse.model_copy(update={"lock_timeout_seconds": 0.2})
    ctx = BuildContext(
        con=warehouse.con, config=warehouse.config.model_copy(update={"warehouse": quick})
    )
    with folder.export_root_lock(root, 1.0), pytest.raises(UserError) as caught:
        folder.export_build(ctx, now=START + timedelta(hours=1))
    assert caught.value.one_line() == (
        f"{root}: another demandprep process (pid {os.getpid()}) is publishing to this export "
        "root; waited 0.2 s. Hint: wait for it to finish, or give each project its own export.root."
    )
    assert folder.latest_build(root) == first
    assert entries(root) - {".staging", LOCK_FILE} == {first.name, "latest"}


def _dead_pid() -> int:
    process = subprocess.Popen([sys.executable, "-c", "pass"])
    process.wait()
    return process.pid


def test_stale_pid_files_are_removed_and_a_live_writers_kept(tmp_path: Path) -> None:
    root = tmp_path / "builds"
    staging = root / ".staging"
    staging.mkdir(parents=True)
    stale = staging / "20240306T023000Z-00000000.pid"
    stale.write_text(str(_dead_pid()), encoding="ascii")
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        live = staging / "20240306T023000Z-11111111.pid"
        live.write_text(str(sleeper.pid), encoding="ascii")
        foreign = staging / "readme.pid"
        foreign.write_text("not a pid", encoding="ascii")
        assert folder.clean_stale_staging(root) == [stale]
        assert entries(staging) == {live.name, foreign.name}
    finally:
        sleeper.kill()
        sleeper.wait()
