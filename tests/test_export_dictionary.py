"""The data dictionary is generated from the pandera models and refuses undocumented columns."""

from __future__ import annotations

from pathlib import Path

import duckdb
import pandera.polars as pa
import pytest
from export_fixtures import export_config, fill_warehouse

from demandprep.errors import UserError
from demandprep.export.dictionary import (
    KIND_TABLES,
    document_columns,
    model_table,
    schema_models,
    step_notes,
)


class PriceThings(pa.DataFrameModel):
    price: float = pa.Field(description="Price.", metadata={"unit": "currency", "formula": "p"})
    iv_any: float = pa.Field(alias="^iv_dummy_.*$", regex=True, description="A regex instrument.")

    class Config:
        name = "price_things"
        metadata = {
            "dynamic_columns": [
                {"pattern": "lag_.*", "description": "Lagged {column}.", "unit": "as source"}
            ]
        }


def test_models_are_matched_to_tables_by_name() -> None:
    assert model_table(PriceThings) == "price_things"
    from demandprep.schemas import choices, ingest, instruments

    assert model_table(instruments.ShareTableModel) == "share_table"
    assert model_table(ingest.LedgerReasons) == "ledger_reasons"
    assert model_table(choices.Choosers) == "choosers"


def test_every_output_kind_finds_a_step_model() -> None:
    found = schema_models()
    for kind, tables in KIND_TABLES.items():
        assert any(found.get(table) for table in tables), kind


def test_fields_regex_fields_and_dynamic_patterns_document_columns(tmp_path: Path) -> None:
    config = export_config(tmp_path)
    models = {"markets": [PriceThings]}
    entries = document_columns("markets", ["price", "iv_dummy_a", "lag_price"], config, models)
    assert (entries["price"].description, entries["price"].unit) == ("Price.", "currency")
    assert entries["iv_dummy_a"].description == "A regex instrument."
    assert entries["lag_price"].description == "Lagged lag_price."
    assert entries["lag_price"].defined_by.endswith("PriceThings")


def test_an_undocumented_column_is_an_error(tmp_path: Path) -> None:
    config = export_config(tmp_path)
    with pytest.raises(UserError, match="no entry for column\\(s\\) mystery"):
        document_columns("markets", ["price", "mystery"], config, {"markets": [PriceThings]})


def test_an_instrument_the_instruments_step_cannot_describe_is_undocumented(
    tmp_path: Path,
) -> None:
    config = export_config(tmp_path)
    con = duckdb.connect()
    fill_warehouse(con, occasions=5)
    con.execute("alter table share_table add column iv_mystery double")
    notes = step_notes(con, config)
    assert "iv_hausman_price" in notes["shares"]
    assert notes["shares"]["iv_rival_sum_organic"].description.startswith("Sum of organic")
    with pytest.raises(UserError, match="iv_mystery"):
        document_columns("shares", ["iv_hausman_price", "iv_mystery"], config, {}, notes)


def test_config_named_columns_get_entries_naming_their_source_column(tmp_path: Path) -> None:
    config = export_config(tmp_path)
    entries = document_columns("shares", ["roast_level"], config, {})
    assert "catalogue column 'roast'" in entries["roast_level"].description
