"""The ingest's own columns sit beside the config's column names: the config refuses those names
(config.INGEST_OWN_COLUMNS), so the list must hold every column the ingest adds."""

from __future__ import annotations

from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from ingest_fixtures import copy_faults, ingest, query

from demandprep.config import INGEST_OWN_COLUMNS, load_config
from demandprep.ingest.reader import (
    FILE_PATH_COLUMN,
    LINE_NO_COLUMN,
    ORDINAL_COLUMN,
    TRIMMED_COLUMN,
    SourceColumn,
    create_source_view,
)
from demandprep.ingest.references import (
    REFERENCE_SPECS,
    check_reference_sql,
    ensure_storage_sql,
)
from demandprep.preflight import preflight_problems
from demandprep.sqlfiles import run_sql

NAMES = {"sku": "VARCHAR", "category": "VARCHAR", "label": "VARCHAR", "grams": "BIGINT"}


def columns_of(con: duckdb.DuckDBPyConnection, table: str) -> set[str]:
    return {row[0] for row in con.execute(f"describe {table}").fetchall()}


@pytest.fixture()
def con():
    connection = duckdb.connect()
    run_sql(connection, "ingest/005_ingest_macros.sql")
    yield connection
    connection.close()


def test_the_source_view_adds_only_own_columns(con) -> None:
    con.execute(
        f"create temp table ingest_numbered as select 1::bigint as {ORDINAL_COLUMN}, "
        f"'f.csv' as {FILE_PATH_COLUMN}, 1::bigint as {LINE_NO_COLUMN}, "
        f"true as {TRIMMED_COLUMN}, "
        "'K1' as article, 'coffee' as aisle, 'Beans' as title, '250' as grams"
    )
    mapped = {
        "sku": SourceColumn("article", "VARCHAR"),
        "category": SourceColumn("aisle", "VARCHAR"),
        "label": SourceColumn("title", "VARCHAR"),
        "grams": SourceColumn("grams", "VARCHAR"),
    }
    create_source_view(con, mapped, tuple(NAMES))
    added = columns_of(con, "ingest_source_lines") - set(NAMES)
    assert added and added <= INGEST_OWN_COLUMNS


def test_the_checked_reference_rows_and_their_storage_add_only_own_columns(con) -> None:
    con.execute(
        "create temp table ingest_source_lines as select 1::bigint as ordinal, "
        "'f.csv' as path, 1::bigint as line_no, true as ingest_trimmed, 'K1' as sku, "
        "'coffee' as category, 'Beans' as label, '250' as grams"
    )
    spec = REFERENCE_SPECS["catalogue"]
    con.execute(check_reference_sql(spec, NAMES))
    assert columns_of(con, "ingest_checked") - set(NAMES) <= INGEST_OWN_COLUMNS
    con.execute(ensure_storage_sql(spec, NAMES))
    assert columns_of(con, spec.storage) - set(NAMES) <= INGEST_OWN_COLUMNS


def test_a_reference_column_keeps_its_own_values(tmp_path: Path) -> None:
    # the control for the refusal: a name that is not the ingest's holds the file's column
    config_path = copy_faults(tmp_path)
    text = config_path.read_text()
    config_path.write_text(
        text.replace('pack_grams = "grams"\n', 'pack_grams = "grams"\nlabel = "label"\n')
    )
    config, summary = ingest(config_path)
    assert summary.ok
    rows = query(config, "select sku, label from catalogue where sku = 'K100'")
    assert rows == [("K100", "Harbour Roast Beans 250g")]


def ingest_tables(config) -> dict[str, list]:
    """The accepted and quarantined rows, without what names the file (id and path)."""
    return {
        "raw_lines": query(config, "select * exclude (file_id) from raw_lines order by all"),
        "quarantine": query(
            config, "select * exclude (file_id, path) from quarantine order by all"
        ),
    }


@pytest.mark.parametrize("header", ["line_no", "ordinal", "path", "Line_No"])
def test_a_file_column_named_like_an_ingest_column_reads_as_any_other(
    tmp_path: Path, header: str
) -> None:
    # before: a receipts header `line_no` made DuckDB refuse the file (a Binder error)
    plain = copy_faults(tmp_path / "plain")
    renamed = csv_receipts_with_column(tmp_path / "renamed", header, mapped=True)
    expected = ingest_tables(ingest(plain)[0])
    config, summary = ingest(renamed)
    assert [result.error for result in summary.files if result.error] == []
    assert ingest_tables(config) == expected


def parquet_receipts(tmp_path: Path, line_column: str) -> Path:
    """The faults config reading one clean Parquet receipts file whose line column is named
    `line_column` (the receipt's own line numbers 7 and 9, so they differ from the rows')."""
    config_path = copy_faults(tmp_path)
    folder = config_path.parent / "receipts"
    for path in folder.glob("*.csv"):
        path.unlink()
    columns = {
        "ticket": ["T0001", "T0001"],
        line_column: ["7", "9"],
        "branch": ["B01", "B01"],
        "stamp": ["2024-03-01 09:15:02", "2024-03-01 09:15:09"],
        "article": ["K100", "K101"],
        "qty": ["1", "2"],
        "value": ["6.49", "9.98"],
        "member": ["M-17", "M-17"],
        "disc": ["0", "0"],
        "kind": ["sale", "sale"],
    }
    pq.write_table(pa.table(columns), folder / "receipts_2024-03-01.parquet")
    text = config_path.read_text().replace('line = "row"', f'line = "{line_column}"')
    text = text.replace('files = ["receipts/receipts_*.csv"]', 'files = ["receipts/*.parquet"]')
    config_path.write_text(
        text.replace("[sources.receipts]\n", '[sources.receipts]\nformat = "parquet"\n')
    )
    return config_path


@pytest.mark.parametrize("column", ["line", "line_no", "ordinal", "path"])
def test_a_parquet_column_named_like_an_ingest_column_keeps_its_values(
    tmp_path: Path, column: str
) -> None:
    # before: a Parquet column `line_no` silently replaced the row numbers in raw_lines.line_no
    config, summary = ingest(parquet_receipts(tmp_path, column))
    assert [result.error for result in summary.files if result.error] == []
    assert query(config, "select line_no, line from raw_lines order by line_no") == [(1, 7), (2, 9)]


@pytest.mark.parametrize("column", ["ingest_line_no", "ingest_row_number", "File_Row_Number"])
def test_a_file_column_named_like_a_stage_column_is_refused_by_name(
    tmp_path: Path, column: str
) -> None:
    config, summary = ingest(parquet_receipts(tmp_path, column))
    (error,) = [result.error for result in summary.files if result.error]
    assert "receipts_2024-03-01.parquet" in error
    assert f"its column {column!r} has a name the ingest keeps" in error
    assert query(config, "select count(*) from raw_lines") == [(0,)]


def csv_receipts_with_column(tmp_path: Path, header: str, mapped: bool) -> Path:
    """The faults config whose receipts' `row` column is named `header`, mapped as the line
    number or left unmapped."""
    config_path = copy_faults(tmp_path)
    for path in (config_path.parent / "receipts").glob("*.csv"):
        first, rest = path.read_bytes().split(b"\n", 1)
        path.write_bytes(first.replace(b";row;", f";{header};".encode()) + b"\n" + rest)
    line = f'line = "{header}"\n' if mapped else ""
    config_path.write_text(config_path.read_text().replace('line = "row"\n', line))
    return config_path


def test_a_mapped_csv_column_named_like_a_stage_column_is_refused_once_by_check(
    tmp_path: Path,
) -> None:
    config_path = csv_receipts_with_column(tmp_path, "ingest_line_no", mapped=True)
    problems = [
        problem.one_line()
        for problem in preflight_problems(load_config(config_path))
        if "keeps for its own" in problem.one_line()
    ]
    assert len(problems) == 1
    assert "receipts_2024-03-01.csv: its column 'ingest_line_no'" in problems[0]
    config, summary = ingest(config_path)
    assert len([result.error for result in summary.files if result.error]) == 2


def test_an_unmapped_csv_column_named_like_a_stage_column_is_no_problem(tmp_path: Path) -> None:
    # CSV stages only the mapped columns, so an unmapped one meets nothing
    config, summary = ingest(csv_receipts_with_column(tmp_path, "ingest_line_no", mapped=False))
    assert [result.error for result in summary.files if result.error] == []
    assert query(config, "select count(*) from raw_lines")[0][0] > 0
