"""The embedded warehouse: configured settings, and one writer at a time across processes."""

from __future__ import annotations

import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from demandprep.config import WarehouseSection
from demandprep.errors import UserError
from demandprep.warehouse import one_thread, open_warehouse


def settings(tmp_path: Path, timeout: float = 0.5) -> WarehouseSection:
    return WarehouseSection(
        path=tmp_path / "w.duckdb",
        temp_directory=tmp_path / "spill",
        memory_limit="512MB",
        threads=1,
        lock_timeout_seconds=timeout,
    )


def test_warehouse_opens_with_configured_limits(tmp_path: Path) -> None:
    with open_warehouse(settings(tmp_path)) as con:
        threads = con.execute("select current_setting('threads')").fetchone()[0]
        memory = con.execute("select current_setting('memory_limit')").fetchone()[0]
        spill = con.execute("select current_setting('temp_directory')").fetchone()[0]
    assert int(threads) == 1
    # 512MB less the process reserve, at most half of it: 256e6 bytes as DuckDB prints them
    assert memory == "244.1 MiB"
    assert Path(spill) == tmp_path / "spill"
    assert (tmp_path / "w.duckdb").exists()


HOLDER = textwrap.dedent(
    """
    import sys, time
    from pathlib import Path
    from demandprep.config import WarehouseSection
    from demandprep.warehouse import open_warehouse
    root = Path(sys.argv[1])
    cfg = WarehouseSection(path=root / "w.duckdb", temp_directory=root / "spill")
    with open_warehouse(cfg):
        (root / "holding").touch()
        time.sleep(float(sys.argv[2]))
        (root / "releasing").touch()
    """
)


def start_holder(tmp_path: Path, seconds: float) -> subprocess.Popen:
    process = subprocess.Popen([sys.executable, "-c", HOLDER, str(tmp_path), str(seconds)])
    deadline = time.monotonic() + 30
    while not (tmp_path / "holding").exists():
        assert process.poll() is None, "lock holder died"
        assert time.monotonic() < deadline, "lock holder never started"
        time.sleep(0.05)
    return process


def test_one_thread_sets_the_threads_back_even_when_the_block_fails(tmp_path: Path) -> None:
    with open_warehouse(settings(tmp_path).model_copy(update={"threads": 2})) as con:
        threads = "select current_setting('threads')"
        with pytest.raises(RuntimeError), one_thread(con):
            assert con.execute(threads).fetchone()[0] == 1
            raise RuntimeError("a failing statement")
        assert con.execute(threads).fetchone()[0] == 2


def test_second_writer_stops_with_a_clear_message(tmp_path: Path) -> None:
    holder = start_holder(tmp_path, seconds=20)
    try:
        with pytest.raises(UserError) as caught, open_warehouse(settings(tmp_path, 0.3)):
            pass
    finally:
        holder.kill()
        holder.wait()
    message = caught.value.one_line()
    assert f"pid {holder.pid}" in message
    assert "another demandprep process" in message


def test_second_writer_waits_for_the_first_to_finish(tmp_path: Path) -> None:
    holder = start_holder(tmp_path, seconds=1.0)
    with open_warehouse(settings(tmp_path, timeout=30)) as con:
        assert (tmp_path / "releasing").exists(), "second writer went in while the first held it"
        assert con.execute("select 42").fetchone()[0] == 42
    holder.wait()
