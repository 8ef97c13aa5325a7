"""The choices file of a night with an incremental choice build: the previous build's row groups
of unchanged rows are kept, and the file is byte for byte a full build's."""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import duckdb
import pyarrow.parquet as pq
import pytest
from test_incremental_build import EARLY_DAY, LAST_DAY, RECEIPTS, assert_same_parquet, build
from test_incremental_choices import full_choice_rebuild, rewrite_receipts

from demandprep.export import folder as export_folder
from demandprep.export.parquet_splice import read_footer

pytestmark = pytest.mark.usefixtures("one_line_report")

ROWS_PER_GROUP = 1024


@pytest.fixture()
def world(tmp_path: Path, coffee_sample: Path) -> Path:
    """The sample (choices on) with small row groups and its last day's file held back."""
    folder = tmp_path / "world"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config = folder / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    config.write_text(
        text.replace("[export]\n", f"[export]\nrow_group_rows = {ROWS_PER_GROUP}\n"),
        encoding="utf-8",
    )
    (folder / RECEIPTS / LAST_DAY).rename(tmp_path / LAST_DAY)
    return folder


def choices_file(manifest: dict) -> dict:
    """How the export wrote the choices file (the manifest's facts)."""
    return manifest["facts"]["choices_file"]


def add_last_day(world: Path, tmp_path: Path) -> None:
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)


def test_a_full_build_writes_the_file_whole_and_says_why(world):
    folder, manifest = build(world)
    assert choices_file(manifest) == {
        "row_groups_kept": 0,
        "row_groups_written": pq.ParquetFile(folder / "choices.parquet").num_row_groups,
        "kept_from_build": None,
        "written_whole_because": "the choice build was not incremental",
    }


def test_one_more_day_keeps_the_row_groups_before_its_week(world, tmp_path):
    first, _manifest = build(world)
    add_last_day(world, tmp_path)
    night, manifest = build(world)
    facts = choices_file(manifest)
    assert facts["kept_from_build"] == first.name
    assert facts["written_whole_because"] is None
    # every row group before the week of 2024-02-12 is kept
    table = pq.read_table(night / "choices.parquet", columns=["occasion"])
    before_week = sum(1 for occasion in table["occasion"].to_pylist() if occasion < "2024-02-12")
    assert facts["row_groups_kept"] == before_week // ROWS_PER_GROUP
    assert facts["row_groups_kept"] > 10
    assert facts["row_groups_written"] > 0
    kept_bytes = pq.ParquetFile(first / "choices.parquet").metadata.row_group(0)
    assert kept_bytes.num_rows == ROWS_PER_GROUP
    # the manifest's checksum is the one the splice computed as it wrote: the file's
    [record] = [o for o in manifest["outputs"] if o["path"] == "choices.parquet"]
    assert record["sha256"] == hashlib.sha256((night / "choices.parquet").read_bytes()).hexdigest()
    assert_same_parquet(night, full_choice_rebuild(world))


def recorded_footer_groups(world: Path) -> list[int] | None:
    """The row group bounds recorded with the last exported choices file."""
    con = duckdb.connect(str(world / "warehouse" / "demandprep.duckdb"), read_only=True)
    try:
        return con.execute("select footer_groups from choices_file_state").fetchone()[0]
    finally:
        con.close()


def test_a_night_without_new_files_keeps_every_full_row_group(world):
    first, _manifest = build(world)
    # written whole, its footer's bounds are recorded too: the first night after a full build
    # need not read the whole footer (0.37 s for 288 row groups on a 13.1M-line world)
    groups = pq.ParquetFile(first / "choices.parquet").metadata.num_row_groups
    whole_bounds = recorded_footer_groups(world)
    assert len(whole_bounds) == groups + 1
    assert whole_bounds == read_footer(first / "choices.parquet").group_bounds
    same, manifest = build(world)
    assert choices_file(manifest)["row_groups_kept"] == groups - 1  # the last is not full
    assert (same / "choices.parquet").read_bytes() == (first / "choices.parquet").read_bytes()
    # spliced: the bounds of its footer's entries are recorded, and the next night, which
    # keeps those entries as their bytes, writes the same file again
    assert len(recorded_footer_groups(world)) == groups + 1
    again, _manifest = build(world)
    assert (again / "choices.parquet").read_bytes() == (first / "choices.parquet").read_bytes()


def test_a_night_that_died_before_its_export_leaves_its_rows_to_the_next(
    world, tmp_path, monkeypatch
):
    build(world)
    # the night that dies corrects an older day; its rows are stored, its file never written
    rewrite_receipts(world / RECEIPTS / EARLY_DAY, lambda n, line: None if n % 5 == 0 else line)

    def dies(ctx):
        raise RuntimeError("the machine went down before the export")

    with monkeypatch.context() as patched:
        patched.setattr("demandprep.export.folder.export_build", dies)
        with pytest.raises(RuntimeError, match="went down"):
            build(world)
    # the next night adds a later day: the last file's rows from the older day on are stale
    add_last_day(world, tmp_path)
    night, manifest = build(world)
    table = pq.read_table(night / "choices.parquet", columns=["occasion"])
    before_week = sum(1 for occasion in table["occasion"].to_pylist() if occasion < "2024-01-15")
    assert choices_file(manifest)["row_groups_kept"] == before_week // ROWS_PER_GROUP
    assert_same_parquet(night, full_choice_rebuild(world))


def test_a_file_changed_in_its_build_folder_is_written_whole(world, tmp_path):
    first, _manifest = build(world)
    with (first / "choices.parquet").open("r+b") as handle:
        handle.seek(100)
        byte = handle.read(1)
        handle.seek(100)
        handle.write(bytes([byte[0] ^ 0xFF]))
    add_last_day(world, tmp_path)
    night, manifest = build(world)
    assert choices_file(manifest)["written_whole_because"] == (
        "the earlier file is not the one recorded (sha256 differs)"
    )
    assert not list(night.glob(".choices*"))
    assert_same_parquet(night, full_choice_rebuild(world))


def test_an_unpublished_build_leaves_the_next_night_a_whole_write(world, tmp_path, monkeypatch):
    build(world)
    add_last_day(world, tmp_path)

    def dies(ctx, staging):
        raise RuntimeError("the disk went away while publishing")

    with monkeypatch.context() as patched:
        patched.setattr(export_folder, "publish_build", dies)
        with pytest.raises(RuntimeError, match="went away"):
            build(world)
    night, manifest = build(world)
    assert choices_file(manifest)["written_whole_because"].endswith("is gone")
    assert_same_parquet(night, full_choice_rebuild(world))
