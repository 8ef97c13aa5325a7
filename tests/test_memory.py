"""Sharing the memory limit with Python batches: DuckDB is held to a share, then set back."""

from __future__ import annotations

import errno
from pathlib import Path

import duckdb
import pyarrow.parquet as pq
import pytest
from ingest_fixtures import copy_faults, ingest
from market_fixtures import build_context, market_config, tiny_world

from demandprep.config import WarehouseSection, load_config
from demandprep.errors import UserError
from demandprep.export import parquet
from demandprep.memory import memory_shared_with_batches, parse_bytes
from demandprep.stages import run_build_stages
from demandprep.warehouse import connect


def _limit(con: duckdb.DuckDBPyConnection) -> str:
    return con.execute("select current_setting('memory_limit')").fetchone()[0]


@pytest.mark.parametrize("text", ["2GB", "512MB", "1.5GiB", "300MiB", "64KB"])
def test_parse_bytes_agrees_with_duckdb(text: str) -> None:
    # reference: DuckDB's own reading of the same size, reported back in bytes as it set it
    con = duckdb.connect(config={"memory_limit": text})
    expected = duckdb.connect(config={"memory_limit": f"{parse_bytes(text)}B"})
    assert _limit(con) == _limit(expected)


def test_parse_bytes_names_a_bad_size() -> None:
    with pytest.raises(ValueError, match="not a memory size: '2 lots'"):
        parse_bytes("2 lots")


def _warehouse(tmp_path: Path, memory_limit: str = "2GB") -> duckdb.DuckDBPyConnection:
    return connect(
        WarehouseSection(
            path=tmp_path / "w.duckdb",
            temp_directory=tmp_path / "spill",
            memory_limit=memory_limit,
            threads=1,
        )
    )


@pytest.mark.parametrize(
    ("configured", "budget"),
    [("4GB", 4_000_000_000 - 256 * 2**20), ("2GiB", 2**31 - 256 * 2**20), ("300MB", 150_000_000)],
)
def test_duckdb_leaves_the_python_process_its_reserve(
    tmp_path: Path, configured: str, budget: int
) -> None:
    # the limit is the whole process's: DuckDB gets it less 256 MiB, at most half the limit
    con = _warehouse(tmp_path, configured)
    expected = duckdb.connect(config={"memory_limit": f"{budget}B"})
    assert _limit(con) == _limit(expected)


def test_batches_get_half_the_limit_and_it_is_set_back_exactly(tmp_path: Path) -> None:
    con = _warehouse(tmp_path)
    before = _limit(con)
    with memory_shared_with_batches(con):
        during = _limit(con)
    assert before == "1.6 GiB"  # 2e9 bytes less the process reserve, as DuckDB prints them
    assert during == "825.6 MiB"  # half of that
    assert _limit(con) == before


def test_limit_is_set_back_when_the_block_fails(tmp_path: Path) -> None:
    con = _warehouse(tmp_path)
    before = _limit(con)
    with pytest.raises(RuntimeError), memory_shared_with_batches(con):
        raise RuntimeError("a batch failed")
    assert _limit(con) == before


def test_a_connection_opened_elsewhere_keeps_its_limit() -> None:
    con = duckdb.connect(config={"memory_limit": "2GB"})
    before = _limit(con)
    with memory_shared_with_batches(con):
        assert _limit(con) == before


def test_parquet_export_streams_under_half_the_limit(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    con = _warehouse(tmp_path)
    con.execute("create table t as select range as k from range(5000)")
    seen: list[str] = []
    write_batches = parquet._write_batches

    def watched(reader, *args):  # noqa: ANN001, ANN202 - passes through to the real writer
        seen.append(_limit(con.cursor()))
        return write_batches(reader, *args)

    monkeypatch.setattr(parquet, "_write_batches", watched)
    written = parquet.write_query_parquet(
        con, "select k from t order by k", {}, tmp_path / "t.parquet", 1024, {}, {}, ("k",)
    )
    assert seen == ["825.6 MiB"]
    assert _limit(con) == "1.6 GiB"
    assert pq.read_table(written.path).column("k").to_pylist() == list(range(5000))


@pytest.mark.parametrize(
    ("configured", "during"),
    [("2GB", "825.6 MiB"), ("250MB", "119.2 MiB"), ("200MB", "95.3 MiB"), ("100MB", "47.6 MiB")],
)
def test_the_shared_limit_never_exceeds_the_configured_one(
    tmp_path: Path, configured: str, during: str
) -> None:
    # half of DuckDB's budget, at least DuckDB's 128 MiB scan floor, at most the budget itself
    con = _warehouse(tmp_path, configured)
    before = _limit(con)
    with memory_shared_with_batches(con):
        assert _limit(con) == during
    assert parse_bytes(during.replace(" ", "")) <= parse_bytes(configured) * 1.001
    assert _limit(con) == before


def test_a_failure_while_a_reader_is_open_is_not_hidden(tmp_path: Path) -> None:
    con = _warehouse(tmp_path)
    con.execute("create table t as select range as k from range(100000)")
    before = _limit(con)
    with (
        pytest.raises(OSError, match="No space left on device"),
        memory_shared_with_batches(con),
    ):
        reader = con.sql("select k from t order by k").to_arrow_reader(1024)
        reader.read_next_batch()
        raise OSError(errno.ENOSPC, "No space left on device")
    assert _limit(con.cursor()) == before  # set back although the reader is still open
    reader.close()


def test_a_stage_out_of_memory_is_one_line_naming_stage_limit_and_way_out(tmp_path: Path) -> None:
    # a real limit DuckDB cannot work in: 4MB runs out in the first market stage's own SQL
    config = market_config(tmp_path, warehouse={"memory_limit": "4MB"})
    ctx = build_context(tiny_world(), config)
    ctx.con.execute("set memory_limit = $limit", {"limit": config.warehouse.memory_limit})
    with pytest.raises(UserError) as caught:
        run_build_stages(ctx)
    assert caught.value.one_line() == (
        "stage market_settings: DuckDB ran out of memory within warehouse.memory_limit = 4MB. "
        "Hint: raise warehouse.memory_limit, or give warehouse.temp_directory "
        f"({config.warehouse.temp_directory}) room to spill, and build again."
    )
    assert isinstance(caught.value.__cause__, duckdb.OutOfMemoryException)
    assert "market_settings" not in ctx.timings


def test_a_limit_too_low_to_open_the_warehouse_is_one_line(tmp_path: Path) -> None:
    # before: a traceback ending in duckdb.OutOfMemoryException, from connect itself
    with pytest.raises(UserError) as caught:
        _warehouse(tmp_path, "1KB")
    assert caught.value.one_line() == (
        f"{tmp_path / 'w.duckdb'}: DuckDB cannot open the warehouse within "
        "warehouse.memory_limit = 1KB. Hint: raise warehouse.memory_limit (the default is 4GB)."
    )


def test_an_ingest_out_of_memory_stops_with_one_line_and_ledgers_no_file(tmp_path: Path) -> None:
    # before: the file was ledgered as failed (not its fault), and the ledger row itself ran
    # out of memory too: a traceback
    config_path = copy_faults(tmp_path)
    text = config_path.read_text(encoding="utf-8")
    config_path.write_text(text.replace('memory_limit = "1GB"', 'memory_limit = "1MB"'), "utf-8")
    config = load_config(config_path)
    assert config.warehouse.memory_limit == "1MB"
    with pytest.raises(UserError) as caught:
        ingest(config_path)
    assert caught.value.one_line() == (
        "stage ingest: DuckDB ran out of memory within warehouse.memory_limit = 1MB. "
        "Hint: raise warehouse.memory_limit, or give warehouse.temp_directory "
        f"({config.warehouse.temp_directory}) room to spill, and ingest again."
    )
    with duckdb.connect(str(config.warehouse.path), read_only=True) as con:
        assert con.execute("select count(*) from ledger").fetchone() == (0,)
