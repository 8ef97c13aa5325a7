"""Build folders: atomic publication, the `latest` pointer, pruning and interrupted exports."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from export_fixtures import export_config, fill_warehouse, fixture_context

from demandprep.export import folder

TESTS_DIR = Path(__file__).resolve().parent
START = datetime(2024, 3, 6, 2, 30, tzinfo=UTC)


# these tests are about folders and bytes, not plots: a one-line report keeps them fast
pytestmark = pytest.mark.usefixtures("one_line_report")


@pytest.fixture()
def warehouse(tmp_path: Path, filled_warehouses):
    config = export_config(tmp_path, {"keep_last": 2, "row_group_rows": 1024})
    con = duckdb.connect(str(filled_warehouses.copy(config.warehouse.path)))
    yield fixture_context(con, config)
    con.close()


def visible_entries(root: Path) -> set[str]:
    return {p.name for p in root.iterdir() if not p.name.startswith(".")}


def test_published_build_is_named_by_its_id_and_latest_points_to_it(warehouse) -> None:
    published = folder.export_build(warehouse, now=START)
    root = warehouse.config.export.root
    assert folder.BUILD_ID.match(published.name)
    assert published.name.startswith("20240306T023000Z-")
    assert folder.latest_build(root) == published
    assert os.readlink(root / "latest") == published.name
    assert visible_entries(root) == {published.name, "latest"}
    assert list((root / ".staging").iterdir()) == []


def test_only_the_last_builds_are_kept(warehouse) -> None:
    builds = [folder.export_build(warehouse, now=START + timedelta(hours=h)) for h in range(4)]
    root = warehouse.config.export.root
    assert visible_entries(root) == {builds[2].name, builds[3].name, "latest"}
    assert folder.latest_build(root) == builds[3]


def test_builds_in_the_same_second_get_distinct_folders(warehouse) -> None:
    first = folder.export_build(warehouse, now=START)
    second = folder.export_build(warehouse, now=START)
    assert first != second and first.is_dir() and second.is_dir()
    assert second.name == f"{first.name}-2"


def test_failed_build_leaves_nothing_and_keeps_latest(warehouse) -> None:
    root = warehouse.config.export.root
    good = folder.export_build(warehouse, now=START)
    warehouse.con.execute("alter table choosers add column undocumented_column integer")
    with pytest.raises(Exception, match="undocumented_column"):
        folder.export_build(warehouse, now=START + timedelta(hours=1))
    assert visible_entries(root) == {good.name, "latest"}
    assert folder.latest_build(root) == good
    assert list((root / ".staging").iterdir()) == []


# The child process exports a second build but stops for good in the middle of writing
# choices.parquet (after its first row group), so the test can kill it mid-write.
CHILD = r"""
import sys, time
from datetime import UTC, datetime
from pathlib import Path
sys.path.insert(0, sys.argv[1])
import duckdb
from demandprep.export import choices_file, parquet
from demandprep.export.folder import export_build
from export_fixtures import export_config, fixture_context

base, marker = Path(sys.argv[2]), Path(sys.argv[3])
original_groups = parquet.row_groups

def stalling_groups(reader, size):
    for index, group in enumerate(original_groups(reader, size)):
        if index == 1:
            marker.write_text("mid-write")
            time.sleep(600)
        yield group

original_write = choices_file.write_query_parquet

def write(con, sql, params, path, *args, **kwargs):
    if path.name == "choices.parquet":
        parquet.row_groups = stalling_groups
    return original_write(con, sql, params, path, *args, **kwargs)

choices_file.write_query_parquet = write
config = export_config(base, {"keep_last": 2, "row_group_rows": 1024})
con = duckdb.connect(str(config.warehouse.path))
export_build(fixture_context(con, config), now=datetime(2024, 3, 7, tzinfo=UTC))
"""


def test_killed_export_leaves_no_partial_build_and_latest_unchanged(
    tmp_path: Path, filled_warehouses
) -> None:
    config = export_config(tmp_path, {"keep_last": 2, "row_group_rows": 1024})
    con = duckdb.connect(str(filled_warehouses.copy(config.warehouse.path)))
    first = folder.export_build(fixture_context(con, config), now=START)
    con.close()
    root, marker = config.export.root, tmp_path / "child-is-mid-write"

    child = subprocess.Popen(
        [sys.executable, "-c", CHILD, str(TESTS_DIR), str(tmp_path), str(marker)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    try:
        _wait_for(marker, child)
    finally:
        child.send_signal(signal.SIGKILL)
        child.wait()

    assert visible_entries(root) == {first.name, "latest"}
    assert folder.latest_build(root) == first
    [partial] = [p for p in (root / ".staging").iterdir() if p.is_dir()]
    assert (partial / "choices.parquet").exists()
    assert not (partial / "manifest.json").exists()
    with pytest.raises(pa.ArrowInvalid):  # no footer: the file really was cut off mid-write
        pq.ParquetFile(partial / "choices.parquet")

    con = duckdb.connect(str(config.warehouse.path))
    try:
        after = folder.export_build(fixture_context(con, config), now=START + timedelta(days=2))
    finally:
        con.close()
    assert not partial.exists(), "the next export removes the dead writer's staging folder"
    assert folder.latest_build(root) == after
    assert visible_entries(root) == {first.name, after.name, "latest"}


def test_staging_of_a_live_writer_is_not_cleaned(tmp_path: Path) -> None:
    root = tmp_path / "builds"
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        staging = folder.open_staging(root, "20240306T023000Z-00000000")
        staging.with_name(staging.name + ".pid").write_text(str(sleeper.pid))
        assert folder.clean_stale_staging(root) == []
        assert staging.is_dir()
    finally:
        sleeper.kill()
        sleeper.wait()
    assert folder.clean_stale_staging(root) == [staging]
    assert not staging.exists()


def _wait_for(marker: Path, child: subprocess.Popen) -> None:
    """Wait until the child reports it is mid-write (a guard against hangs, not a timing check)."""
    deadline = time.monotonic() + 120
    while not marker.exists():
        if child.poll() is not None:
            raise AssertionError(f"child ended early: {child.stderr.read().decode()[-2000:]}")
        if time.monotonic() > deadline:
            raise AssertionError("child never reached the middle of choices.parquet")
        time.sleep(0.05)


def test_without_choices_the_build_has_no_choice_files(tmp_path: Path) -> None:
    config = export_config(tmp_path, choices=False)
    con = duckdb.connect(str(config.warehouse.path))
    fill_warehouse(con, occasions=5)
    con.execute("drop table choices")
    con.execute("drop table choosers")
    published = folder.export_build(fixture_context(con, config), now=START)
    con.close()
    names = {p.name for p in published.iterdir()}
    assert "shares_visits.parquet" in names and "ledger.parquet" in names
    assert not names & {"choices.parquet", "choosers.parquet"}
