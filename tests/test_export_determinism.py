"""Same warehouse and config, same bytes: rebuilding gives byte-identical data files."""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

import duckdb
import pytest
from export_fixtures import export_config, fixture_context

from demandprep.export.folder import export_build
from demandprep.export.manifest import file_sha256

TABLES = ("share_table", "markets", "choices", "choosers", "ledger", "ledger_reasons", "quarantine")


# these tests are about folders and bytes, not plots: a one-line report keeps them fast
pytestmark = pytest.mark.usefixtures("one_line_report")


def data_file_hashes(build: Path) -> dict[str, str]:
    patterns = ("*.parquet", "csv/*.csv", "dta/*.dta", "data_dictionary.*")
    return {
        p.relative_to(build).as_posix(): file_sha256(p)
        for pattern in patterns
        for p in sorted(build.glob(pattern))
    }


def test_rebuild_gives_byte_identical_files(tmp_path: Path, filled_warehouses) -> None:
    config = export_config(tmp_path, {"extra_formats": ["csv", "dta"], "row_group_rows": 1024})
    con = duckdb.connect(str(filled_warehouses.copy(config.warehouse.path)))
    first = export_build(fixture_context(con, config), datetime(2024, 5, 1, tzinfo=UTC))
    second = export_build(fixture_context(con, config), datetime(2024, 5, 2, tzinfo=UTC))
    con.close()
    assert first.name != second.name
    hashes = data_file_hashes(first)
    assert len([name for name in hashes if name.endswith(".parquet")]) == 9
    assert hashes == data_file_hashes(second)


def test_row_order_in_the_warehouse_does_not_change_the_bytes(
    tmp_path: Path, filled_warehouses
) -> None:
    config = export_config(tmp_path, {"row_group_rows": 1024})
    filled_warehouses.copy(config.warehouse.path)
    con = duckdb.connect(str(config.warehouse.path), config={"threads": 2})
    first = export_build(fixture_context(con, config), datetime(2024, 5, 1, tzinfo=UTC))
    con.execute("select setseed(0.25)")
    for table in TABLES:
        # Same rows, physically stored in a shuffled order.
        con.execute(f"create or replace table {table} as from {table} order by random()")  # noqa: S608
    second = export_build(fixture_context(con, config), datetime(2024, 5, 2, tzinfo=UTC))
    con.close()
    parquet = {k: v for k, v in data_file_hashes(first).items() if k.endswith(".parquet")}
    assert parquet == {k: v for k, v in data_file_hashes(second).items() if k.endswith(".parquet")}
