"""A disk that fills during an export: one line, nothing half-published, `latest` unchanged."""

from __future__ import annotations

import errno
import io
import os
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from export_fixtures import export_config, fixture_context

from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.export import folder
from demandprep.warehouse import connect

START = datetime(2024, 3, 6, 2, 30, tzinfo=UTC)
LATER = START + timedelta(hours=1)


# these tests are about folders and bytes, not plots: a one-line report keeps them fast
pytestmark = pytest.mark.usefixtures("one_line_report")


@pytest.fixture()
def warehouse(tmp_path: Path, filled_warehouses):
    config = export_config(tmp_path, {"keep_last": 2, "row_group_rows": 1024})
    filled_warehouses.copy(config.warehouse.path, occasions=1500)
    con = connect(config.warehouse)  # as the build opens it: the limit is shared while streaming
    yield fixture_context(con, config)
    con.close()


class FullDisk:
    """A disk with `left` bytes of room for files written inside a staging build folder."""

    def __init__(self, staging_root: Path, left: int) -> None:
        self.staging_root = staging_root
        self.left = left

    def holds(self, path: Path) -> bool:
        return self.staging_root in path.parents and path.parent != self.staging_root


class FillingFile(io.RawIOBase):
    """A file whose writes stop with ENOSPC once the disk's room is used, as a full disk does."""

    def __init__(self, path: Path, disk: FullDisk) -> None:
        self.file = io.FileIO(path, "w")
        self.disk = disk

    def writable(self) -> bool:
        return True

    def write(self, data) -> int:  # noqa: ANN001 - bytes-like, as io passes it
        room = self.disk.left
        if len(data) > room:
            self.file.write(bytes(data)[:room])  # the part that fits lands, like a real disk
            self.disk.left = 0
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        self.disk.left -= len(data)
        return self.file.write(data)

    def fileno(self) -> int:
        return self.file.fileno()

    def close(self) -> None:
        self.file.close()
        super().close()


def fill_disk_after(monkeypatch: pytest.MonkeyPatch, root: Path, room: int) -> None:
    """Every file the export writes inside staging shares `room` bytes; then writes fail."""
    disk = FullDisk(root / ".staging", room)
    real_open = Path.open

    def opened(path: Path, mode: str = "r", buffering: int = -1, encoding=None, **kwargs):  # noqa: ANN001, ANN202
        if "w" not in mode or not disk.holds(path):
            return real_open(path, mode, buffering, encoding, **kwargs)
        buffered = io.BufferedWriter(FillingFile(path, disk))
        if "b" in mode:
            return buffered
        return io.TextIOWrapper(buffered, encoding=encoding, newline=kwargs.get("newline"))

    monkeypatch.setattr(Path, "open", opened)


def entries(root: Path) -> set[str]:
    return {p.name for p in root.iterdir()}


# A whole fixture build is 317 695 bytes, written in this order: marker, shares and markets
# files (one row group each), choices.parquet (11 row groups, 68 kB to 219 kB), the other
# Parquet files, the dictionary (to 295 kB), report and manifest. The levels fill the disk in
# the marker, in a one-group file, four times while choices.parquet is still streaming from
# DuckDB, in the dictionary and in the manifest's last bytes.
FILL_LEVELS = [
    (0, "0 bytes"),
    (10, "10 bytes"),
    (20_000, "20.0 KB"),
    (80_000, "80.0 KB"),
    (120_000, "120.0 KB"),
    (160_000, "160.0 KB"),
    (200_000, "200.0 KB"),
    (260_000, "260.0 KB"),
    (317_000, "317.0 KB"),
]


@pytest.mark.parametrize(("room", "written"), FILL_LEVELS)
def test_a_full_disk_is_one_line_and_latest_stays(
    warehouse: BuildContext, monkeypatch: pytest.MonkeyPatch, room: int, written: str
) -> None:
    root = warehouse.config.export.root
    first = folder.export_build(warehouse, now=START)
    before = entries(root)
    fill_disk_after(monkeypatch, root, room)
    with pytest.raises(UserError) as caught:
        folder.export_build(warehouse, now=LATER)
    build_id = first.name.replace("T023000Z", "T033000Z")  # same config and inputs, an hour on
    assert caught.value.one_line() == (
        f"{root}: the disk filled while writing build {build_id} ({written} written); the "
        f"build was removed and latest still names {first.name}. Hint: free space on the disk "
        f"that holds {root}, or point export.root at a larger one, and build again."
    )
    assert entries(root) == before
    assert folder.latest_build(root) == first
    assert entries(root / ".staging") == set()


def test_after_a_full_disk_the_same_connection_exports_again(
    warehouse: BuildContext, monkeypatch: pytest.MonkeyPatch
) -> None:
    root = warehouse.config.export.root
    with monkeypatch.context() as full:
        fill_disk_after(full, root, 120_000)  # full while choices.parquet streams
        with pytest.raises(UserError, match="the disk filled"):
            folder.export_build(warehouse, now=START)
    published = folder.export_build(warehouse, now=LATER)
    assert folder.latest_build(root) == published


@pytest.mark.parametrize("memory_limit", ["1MB", "2MB"])
def test_export_out_of_memory_is_one_line_and_latest_stays(
    warehouse: BuildContext, memory_limit: str
) -> None:
    # real limits DuckDB cannot work in: 1MB runs out before the first file (reading the
    # ledger for the build id), 2MB while the first Parquet file streams
    root = warehouse.config.export.root
    first = folder.export_build(warehouse, now=START)
    before = entries(root)
    settings = warehouse.config.warehouse.model_copy(update={"memory_limit": memory_limit})
    config = warehouse.config.model_copy(update={"warehouse": settings})
    warehouse.con.close()
    con = connect(settings)
    try:
        with pytest.raises(UserError) as caught:
            folder.export_build(fixture_context(con, config), now=LATER)
    finally:
        con.close()
    assert caught.value.one_line() == (
        f"stage export: DuckDB ran out of memory within warehouse.memory_limit = {memory_limit}. "
        "Hint: raise warehouse.memory_limit, or give warehouse.temp_directory "
        f"({settings.temp_directory}) room to spill, and build again."
    )
    assert entries(root) == before
    assert folder.latest_build(root) == first
    assert entries(root / ".staging") == set()
