"""Quarantine details name the field and the problem; values only for sources without card ids.

A card id can sit in any field of a card-bearing source (a shifted line puts it in `store`), so
no value of receipts (with `card` mapped) or households is quoted; the crafted lines of
privacy_fixtures carry card ids in the broken fields.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest
from privacy_fixtures import PLANTED, scan_config, write_inputs

from demandprep.config import ProjectConfig
from demandprep.errors import UserError
from demandprep.ingest.reader import SourceColumn, map_columns
from demandprep.pipeline import run_ingest

WITHHELD = [
    "sold_at: not a timestamp",
    "store: not in the stores table",
    "sku: not in the catalogue",
    "line_kind: not sale, return or void",
    "line: not a whole number",
    "quantity: not a number",
    "amount: not a number",
    "discount: not a number",
    "empty: sku",
    "sold_at: before valid_from or after valid_to",
    "quantity: zero or less on a sale",
    "amount: negative on a sale",
    "quantity: not negative on a return; amount: positive on a return",
    "store, day, receipt and line: already accepted",
    "11 fields, the header has 10",
]


def quarantine_details(config: ProjectConfig, source: str) -> list[str]:
    con = duckdb.connect(str(config.warehouse.path), read_only=True)
    rows = con.execute(
        "select detail from quarantine where source = $source order by line_no", {"source": source}
    ).fetchall()
    con.close()
    return [row[0] for row in rows]


def without_cards(config: ProjectConfig, folder: Path) -> ProjectConfig:
    raw = config.model_dump(mode="json", exclude_unset=True)
    del raw["sources"]["receipts"]["columns"]["card"]
    del raw["sources"]["households"]
    raw["choices"] = {"enabled": False}
    return ProjectConfig.model_validate(raw, context={"base_dir": folder})


def test_receipt_details_quote_no_value_when_card_is_mapped(tmp_path: Path) -> None:
    write_inputs(tmp_path)
    config = scan_config(tmp_path)
    run_ingest(config)
    assert quarantine_details(config, "receipts") == WITHHELD


def test_household_details_quote_no_value(tmp_path: Path) -> None:
    write_inputs(tmp_path)
    config = scan_config(tmp_path)
    run_ingest(config)
    assert quarantine_details(config, "households") == [
        "card: duplicate key",
        "household_size: not a whole number",
    ]


def test_receipt_details_keep_values_when_no_card_is_mapped(tmp_path: Path) -> None:
    write_inputs(tmp_path)
    config = without_cards(scan_config(tmp_path), tmp_path)
    run_ingest(config)
    assert quarantine_details(config, "receipts") == [
        f"sold_at: not a timestamp ('{PLANTED['sold_at']}')",
        f"store: not in the stores table ('{PLANTED['store']}')",
        f"sku: not in the catalogue ('{PLANTED['sku']}')",
        f"line_kind: not sale, return or void ('{PLANTED['line_kind'].lower()}')",
        f"line: not a whole number ('{PLANTED['line']}')",
        f"quantity: not a number ('{PLANTED['quantity']}')",
        f"amount: not a number ('{PLANTED['amount']}')",
        f"discount: not a number ('{PLANTED['discount']}')",
        "empty: sku",
        "sold_at: before valid_from or after valid_to ('2023-01-02 10:00:00')",
        "quantity: zero or less on a sale ('0')",
        "amount: negative on a sale ('-3.00')",
        "quantity: not negative on a return ('1'); amount: positive on a return ('4.00')",
        "store, day, receipt and line: already accepted "
        "(store 'S01', receipt 'RCPT-7Q93K1-0001', line 1)",
        "11 fields, the header has 10",
    ]


def test_missing_column_of_a_card_free_source_lists_the_file_columns() -> None:
    columns = (SourceColumn("shop", "VARCHAR"), SourceColumn("area", "VARCHAR"))
    with pytest.raises(UserError) as raised:
        map_columns(Path("stores.csv"), columns, {"store": "shop_id"}, header=True)
    assert raised.value.one_line() == (
        "stores.csv: the mapping names column 'shop_id' (for 'store') but the file has no such "
        "column; its columns are shop, area. Hint: fix the source's columns mapping in the "
        "config (names are case-sensitive)."
    )


def test_a_mapped_column_named_twice_in_the_header_is_refused_by_name() -> None:
    # before: the later of the two columns was read, without a word
    columns = tuple(SourceColumn(name, "VARCHAR") for name in ("shop", "qty", "area", "qty"))
    with pytest.raises(UserError) as raised:
        map_columns(Path("r.csv"), columns, {"store": "shop", "quantity": "qty"}, header=True)
    assert raised.value.one_line() == (
        "r.csv: the header names column 'qty' (mapped to 'quantity') twice, as columns 2 and 4. "
        "Hint: rename or remove one of them in the file."
    )


def test_a_column_named_twice_but_not_mapped_is_no_problem() -> None:
    columns = tuple(SourceColumn(name, "VARCHAR") for name in ("shop", "note", "note"))
    mapped = map_columns(Path("s.csv"), columns, {"store": "shop"}, header=True)
    assert mapped == {"store": columns[0]}


def test_missing_column_of_a_card_source_quotes_no_header() -> None:
    columns = (SourceColumn("LC-7Q93K1-000", "VARCHAR"), SourceColumn("4", "VARCHAR"))
    with pytest.raises(UserError) as raised:
        map_columns(Path("households.csv"), columns, {"card": "loyalty_card"}, header=True)
    assert raised.value.one_line() == (
        "households.csv: the mapping names column 'loyalty_card' (for 'card') but the file's "
        "header (2 columns) has no such column. Hint: fix the source's columns mapping in the "
        "config (names are case-sensitive); a file without a header line needs header = false "
        "and column positions in the mapping."
    )


def test_database_error_on_a_card_source_is_reported_without_its_text(tmp_path, monkeypatch):
    # DuckDB quotes the value it could not convert; in a card-bearing source that can be a card
    def convert_fails(self, con, first_path, mapped) -> None:
        raise duckdb.ConversionException("Conversion Error: Could not convert 'LC-7Q93K1-000'")

    monkeypatch.setattr("demandprep.ingest.loaders.ReferenceLoader.check", convert_fails)
    write_inputs(tmp_path)
    config = scan_config(tmp_path)
    summary = run_ingest(config)
    errors = {result.source: result.error for result in summary.files}
    assert errors["households"] == (
        f"{tmp_path / 'households.csv'}: the database refused the file (ConversionException); "
        "its message is withheld because the source holds card ids."
    )
    # a card-free source keeps DuckDB's message, which helps find the line
    assert errors["stores"] == (
        f"{tmp_path / 'stores.csv'}: Conversion Error: Could not convert 'LC-7Q93K1-000'"
    )
