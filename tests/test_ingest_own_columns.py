"""The ingest's own columns sit beside the config's column names: the config refuses those names
(config.INGEST_OWN_COLUMNS), so the list must hold every column the ingest adds."""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest
from ingest_fixtures import copy_faults, ingest, query

from demandprep.config import INGEST_OWN_COLUMNS
from demandprep.ingest.reader import (
    FILE_PATH_COLUMN,
    TRIMMED_COLUMN,
    SourceColumn,
    create_source_view,
)
from demandprep.ingest.references import (
    REFERENCE_SPECS,
    check_reference_sql,
    ensure_storage_sql,
)
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
        "create temp table ingest_numbered as select 1::bigint as ordinal, "
        f"'f.csv' as {FILE_PATH_COLUMN}, 1::bigint as line_no, true as {TRIMMED_COLUMN}, "
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
