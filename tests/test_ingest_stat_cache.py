"""Discovery trusts a file's recorded stat (size, mtime, ctime, inode, device) for its sha256,
the way git's index does, and hashes whenever any of them moved or the record is racy."""

from __future__ import annotations

import os
import time
from pathlib import Path

import pytest
from ingest_fixtures import faults_config

from demandprep.ingest import files as files_module
from demandprep.ingest.runner import discover_files, ingest_all
from demandprep.warehouse import open_warehouse

LATER_NS = 60 * 1_000_000_000  # the record is taken a minute after the files were written


@pytest.fixture
def hashed(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    """The names of the files discovery reads for their sha256, in call order."""
    calls: list[str] = []
    original = files_module.file_sha256

    def counting(path: Path) -> str:
        calls.append(path.name)
        return original(path)

    monkeypatch.setattr(files_module, "file_sha256", counting)
    return calls


@pytest.fixture
def settled_clock(monkeypatch: pytest.MonkeyPatch) -> None:
    """Records are taken well after the fixture's files were last written (not racy)."""
    # raising=False: on code without the clock the test fails on what it checks, not here
    monkeypatch.setattr(files_module, "now_ns", lambda: time.time_ns() + LATER_NS, raising=False)


def ledger_rows(con) -> list:
    return con.execute("select * exclude (ingested_at) from ledger order by all").fetchall()


def test_unchanged_files_are_not_read_for_their_checksum_on_the_next_run(
    tmp_path: Path, hashed: list[str], settled_clock: None
) -> None:
    config = faults_config(tmp_path)
    with open_warehouse(config.warehouse) as con:
        first = ingest_all(con, config)
        ledger_before = ledger_rows(con)
        hashed.clear()
        second = ingest_all(con, config)
        assert hashed == []
        assert ledger_rows(con) == ledger_before
    # the files that went in are unchanged; a failed one is tried again as on every night
    went_in = {r.path.name for r in first.files if r.status in ("new", "empty")}
    assert {r.path.name for r in second.files if r.status == "unchanged"} == went_in


def test_file_rewritten_in_place_with_its_mtime_restored_is_read_again(
    tmp_path: Path, hashed: list[str], settled_clock: None
) -> None:
    config = faults_config(tmp_path)
    target = config.config_path.parent / "stores.csv"
    with open_warehouse(config.warehouse) as con:
        ingest_all(con, config)
        before = target.stat()
        text = target.read_bytes()
        with target.open("r+b") as handle:  # same inode, same size, new bytes
            handle.write(text.replace(b"north", b"NORTH", 1))
        os.utime(target, ns=(before.st_atime_ns, before.st_mtime_ns))
        after = target.stat()
        assert (after.st_size, after.st_mtime_ns, after.st_ino) == (
            before.st_size,
            before.st_mtime_ns,
            before.st_ino,
        )
        assert after.st_ctime_ns != before.st_ctime_ns  # only the ctime tells
        hashed.clear()
        statuses = {f.path.name: f.status for f in discover_files(con, config)}
    assert hashed == ["stores.csv"]
    assert statuses["stores.csv"] == "changed"


def test_file_replaced_by_a_new_one_of_same_size_and_mtime_is_read_again(
    tmp_path: Path, hashed: list[str], settled_clock: None
) -> None:
    config = faults_config(tmp_path)
    target = config.config_path.parent / "stores.csv"
    with open_warehouse(config.warehouse) as con:
        ingest_all(con, config)
        before = target.stat()
        replacement = target.with_suffix(".new")
        replacement.write_bytes(target.read_bytes().replace(b"north", b"NORTH", 1))
        os.utime(replacement, ns=(before.st_atime_ns, before.st_mtime_ns))
        os.replace(replacement, target)
        assert target.stat().st_ino != before.st_ino
        hashed.clear()
        statuses = {f.path.name: f.status for f in discover_files(con, config)}
    assert hashed == ["stores.csv"]
    assert statuses["stores.csv"] == "changed"


def test_racy_record_is_not_trusted(
    tmp_path: Path, hashed: list[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    config = faults_config(tmp_path)
    written = [path for path in config.config_path.parent.rglob("*") if path.is_file()]
    last_write = max(max(p.stat().st_mtime_ns, p.stat().st_ctime_ns) for p in written)
    # the records are taken one second after the fixture was copied: within the margin
    monkeypatch.setattr(files_module, "now_ns", lambda: last_write + 1_000_000_000)
    with open_warehouse(config.warehouse) as con:
        first = [f.path.name for f in discover_files(con, config)]
        hashed.clear()
        again = discover_files(con, config)
    assert sorted(hashed) == sorted(first)
    assert {f.status for f in again} == {"new"}


STAMP_FIELDS = ["bytes", "mtime_ns", "ctime_ns", "inode", "device"]


@pytest.mark.parametrize("field", STAMP_FIELDS)
def test_any_stat_field_that_moved_means_hashing(tmp_path: Path, field: str) -> None:
    path = tmp_path / "day.csv"
    path.write_text("a,b\n1,2\n")
    stamp = files_module.FileStamp.of(path)
    moved = files_module.FileStamp(**{**vars(stamp), field: getattr(stamp, field) + 1})
    stale = "0" * 64  # a sha the file does not have: it shows when the record was trusted
    records = {
        str(path): files_module.StampRecord(moved, stale, stamp.mtime_ns + LATER_NS),
    }
    (found,) = files_module.discover_source("receipts", [path], {}, records=records)
    assert found.sha256 == files_module.file_sha256(path)


def test_same_stat_recorded_well_after_the_last_write_is_trusted(tmp_path: Path) -> None:
    path = tmp_path / "day.csv"
    path.write_text("a,b\n1,2\n")
    stamp = files_module.FileStamp.of(path)
    recorded_at = max(stamp.mtime_ns, stamp.ctime_ns) + files_module.RACY_MARGIN_NS + 1
    records = {str(path): files_module.StampRecord(stamp, "0" * 64, recorded_at)}
    (found,) = files_module.discover_source("receipts", [path], {}, records=records)
    assert found.sha256 == "0" * 64
    assert found.new_record is None  # nothing hashed, nothing to record


@pytest.mark.parametrize("changed", ["mtime_ns", "ctime_ns"])
def test_same_stat_recorded_within_the_margin_is_hashed(tmp_path: Path, changed: str) -> None:
    path = tmp_path / "day.csv"
    path.write_text("a,b\n1,2\n")
    stamp = files_module.FileStamp.of(path)
    # the record was taken less than the margin after this time stamp: a write in the same
    # clock tick would not have moved it
    recorded_at = getattr(stamp, changed) + files_module.RACY_MARGIN_NS
    records = {str(path): files_module.StampRecord(stamp, "0" * 64, recorded_at)}
    (found,) = files_module.discover_source("receipts", [path], {}, records=records)
    assert found.sha256 == files_module.file_sha256(path)
    assert found.new_record is not None  # hashed now, so recorded again


def test_reload_hashes_a_file_its_record_vouches_for(tmp_path: Path) -> None:
    path = tmp_path / "day.csv"
    path.write_text("a,b\n1,2\n")
    stamp = files_module.FileStamp.of(path)
    records = {str(path): files_module.StampRecord(stamp, "0" * 64, time.time_ns() + LATER_NS)}
    found = files_module.discover_source(
        "receipts", [path], {}, records=records, reload=frozenset([path])
    )
    assert found[0].sha256 == files_module.file_sha256(path)
