"""The files of a build folder: Parquet layout, dictionary, manifest, CSV and Stata copies."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import duckdb
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from export_fixtures import RAW_CARD, export_config, fill_warehouse

from demandprep.errors import UserError
from demandprep.export.csv_safe import escape_formula_cells
from demandprep.export.folder import MARKER
from demandprep.export.manifest import file_sha256
from demandprep.export.tables import OutputTable, output_query
from demandprep.schemas.market import Shares


@pytest.fixture(scope="module")
def build(shared_export_build: Path) -> Path:
    return shared_export_build


@pytest.fixture(scope="module")
def dictionary(build: Path) -> dict:
    return json.loads((build / "data_dictionary.json").read_text())["files"]


@pytest.fixture(scope="module")
def manifest(build: Path) -> dict:
    return json.loads((build / "manifest.json").read_text())


def test_each_assumption_gets_its_own_share_and_market_file(build: Path) -> None:
    for assumption in ("visits", "peak"):
        shares = pq.read_table(build / f"shares_{assumption}.parquet")
        markets = pq.read_table(build / f"markets_{assumption}.parquet")
        assert set(shares.column("assumption").to_pylist()) == {assumption}
        assert set(markets.column("assumption").to_pylist()) == {assumption}
        # 4 stores x 6 weeks = 24 markets of 6 products plus the fringe
        assert (shares.num_rows, markets.num_rows) == (24 * 7, 24)
    for name in ("choices", "choosers", "ledger", "ledger_reasons", "quarantine"):
        assert (build / f"{name}.parquet").is_file()


def test_parquet_is_zstd_with_fixed_row_groups_and_sorted(build: Path) -> None:
    choices = pq.ParquetFile(build / "choices.parquet")
    sizes = [choices.metadata.row_group(i).num_rows for i in range(choices.num_row_groups)]
    assert sizes == [1024, 1024, 52]  # 300 occasions x 7 alternatives, row_group_rows = 1024
    group = choices.metadata.row_group(0)
    assert {group.column(i).compression for i in range(group.num_columns)} == {"ZSTD"}
    names = choices.schema_arrow.names
    assert [names[c.column_index] for c in group.sorting_columns] == ["occasion", "alternative"]
    rows = choices.read(columns=["occasion", "alternative"]).to_pylist()
    keys = [(r["occasion"], r["alternative"]) for r in rows]
    assert keys == sorted(keys)
    shares = pq.read_table(build / "shares_visits.parquet", columns=["market", "product"])
    share_keys = list(
        zip(*(shares.column(c).to_pylist() for c in ("market", "product")), strict=True)
    )
    assert share_keys == sorted(share_keys)


def test_dictionary_covers_every_column_of_every_output(build: Path, dictionary: dict) -> None:
    data_files = sorted(build.glob("*.parquet")) + sorted(build.glob("csv/*.csv"))
    data_files += sorted(build.glob("dta/*.dta"))
    assert len(data_files) == 3 * 9
    for path in data_files:
        entries = {item["column"]: item for item in dictionary[f"{path.stem}.parquet"]}
        for column in _columns(path):
            assert column in entries, f"{path.name}: {column} has no dictionary entry"
            assert entries[column]["description"].strip(), f"{path.name}: {column}"


def test_parquet_fields_carry_their_dictionary_entries(build: Path, dictionary: dict) -> None:
    schema = pq.read_schema(build / "shares_peak.parquet")
    entries = {item["column"]: item for item in dictionary["shares_peak.parquet"]}
    for item in schema:
        metadata = {k.decode(): v.decode() for k, v in (item.metadata or {}).items()}
        assert metadata["description"] == entries[item.name]["description"]
        assert entries[item.name]["type"] == str(item.type)
    share_field = Shares.to_schema().columns["share"]  # the one source of the text
    assert schema.field("share").metadata[b"formula"] == share_field.metadata["formula"].encode()
    assert schema.field("share").metadata[b"description"] == share_field.description.encode()
    rival_sum = schema.field("iv_rival_sum_organic").metadata[b"description"]
    assert rival_sum.startswith(b"Sum of organic over rival firms")
    assert schema.field("roast_level").metadata[b"description"].startswith(b"Product char")
    assert schema.metadata[b"demandprep.assumption"] == b"peak"


def test_no_file_of_the_build_holds_a_raw_card_id(build: Path) -> None:
    files = [p for p in build.rglob("*") if p.is_file()]
    for path in files:
        if path.suffix == ".parquet":
            table = pq.read_table(path)
            text = " ".join(
                str(v)
                for column in table.columns
                if pa.types.is_string(column.type)
                for v in column.to_pylist()
            )
        else:
            text = path.read_bytes().decode("latin-1")
        assert RAW_CARD not in text, path.name


def test_quarantine_keeps_line_text_only_for_sources_without_a_card_column(build: Path) -> None:
    rows = pq.read_table(build / "quarantine.parquet").to_pylist()
    by_source = {(r["source"], r["line_no"]): r for r in rows}
    assert len(rows) == 5
    catalogue = by_source[("catalogue", 5)]
    assert catalogue["original_text"].startswith("=HYPERLINK(")
    assert catalogue["original_text_withheld"] is False
    receipts = [r for r in rows if r["source"] == "receipts"]
    assert len(receipts) == 4
    assert all(r["original_text"] is None and r["original_text_withheld"] for r in receipts)
    assert {r["detail"] for r in receipts} >= {"amount 'x'", "+store S99"}


def test_csv_cells_starting_like_a_formula_are_escaped(build: Path) -> None:
    with (build / "csv" / "quarantine.csv").open(newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    details = {row["detail"] for row in rows}
    # OWASP "CSV Injection": a leading apostrophe makes a spreadsheet show the cell as text.
    assert {"'=sku C1 twice", "'-amount", "'@amount", "'+store S99", "amount 'x'"} == details
    catalogue = next(row for row in rows if row["source"] == "catalogue")
    assert catalogue["original_text"].startswith("'=HYPERLINK(")


def test_escaping_touches_only_risky_text() -> None:
    values = pa.array(["=1+1", "+x", "-x", "@x", "\tx", "plain", "a=b", "", None])
    escaped = escape_formula_cells(values).to_pylist()
    assert escaped == ["'=1+1", "'+x", "'-x", "'@x", "'\tx", "plain", "a=b", "", None]


def test_csv_numbers_stay_numbers(build: Path) -> None:
    frame = pd.read_csv(build / "csv" / "shares_visits.csv")
    parquet = pq.read_table(build / "shares_visits.parquet").to_pandas()
    assert frame["log_share_ratio"].dtype == float
    assert (frame["log_share_ratio"] < 0).any()  # negative numbers are not escaped
    pd.testing.assert_series_equal(frame["price"], parquet["price"])


def test_stata_copy_has_every_row_and_the_dictionary_as_labels(
    build: Path, dictionary: dict
) -> None:
    # reference: pandas' own Stata reader
    with pd.read_stata(build / "dta" / "choices.dta", iterator=True) as reader:
        labels = reader.variable_labels()
        frame = reader.read()
    parquet = pq.read_table(build / "choices.parquet").to_pandas()
    assert len(frame) == len(parquet) == 2100
    assert list(frame["occasion"]) == list(parquet["occasion"])
    assert frame["chosen"].sum() == parquet["chosen"].sum() == 300
    entries = {item["column"]: item["description"] for item in dictionary["choices.parquet"]}
    assert labels["household_size"] == entries["household_size"][:80]
    assert pd.Timestamp(frame["occasion_at"].iloc[0]) == parquet["occasion_at"].iloc[0]


def test_manifest_records_inputs_outputs_timings_and_warnings(build: Path, manifest: dict) -> None:
    assert manifest["build_id"] == build.name
    assert manifest["built_at"] == "2024-04-15T02:30:00+00:00"
    assert len(manifest["config_hash"]) == 64
    assert manifest["config"]["export"]["row_group_rows"] == 1024
    assert [i["path"] for i in manifest["inputs"]][0] == "/data/coffee/catalogue.csv"
    assert {i["rows"] for i in manifest["inputs"]} == {7, 1100, 1200}
    listed = {o["path"]: o for o in manifest["outputs"]}
    on_disk = {p.relative_to(build).as_posix() for p in build.rglob("*") if p.is_file()}
    assert set(listed) == on_disk - {
        "manifest.json",
        MARKER,
    }  # the marker is the folder's, not data
    for path, record in listed.items():
        assert record["sha256"] == file_sha256(build / path)
    assert listed["choices.parquet"]["rows"] == 2100
    assert {"name": "chosen", "type": "bool"} in listed["choices.parquet"]["columns"]
    assert {"export.parquet", "export.report", "market.shares"} <= set(manifest["timings_seconds"])
    assert any("outside share below the floor" in w for w in manifest["warnings"])
    assert any("added to their occasion's choice set" in w for w in manifest["warnings"])
    assert manifest["facts"]["first_stage"]["partial_f"] == 42.5
    assert {e["method"] for e in manifest["quick_logit"]} == {"ols", "iv"}


def test_fixture_tables_follow_the_step_schemas() -> None:
    # The export is tested on these tables, so they must be what the steps really write.
    from demandprep.choices.validation import validate_choices
    from demandprep.schemas import choices, ingest, instruments, market
    from demandprep.validate import validate_table

    con = duckdb.connect()
    fill_warehouse(con, occasions=60)
    con.execute(
        "create view shares as select * exclude (iv_hausman_price, iv_hausman_missing, "
        "iv_rival_sum_organic) from share_table"
    )
    checks = {
        "shares": market.Shares,
        "markets": market.Markets,
        "share_table": instruments.ShareTableModel,
        "instrument_columns": instruments.InstrumentColumnsModel,
        "choosers": choices.Choosers,
        "ledger": ingest.Ledger,
        "ledger_reasons": ingest.LedgerReasons,
        "quarantine": ingest.Quarantine,
    }
    for table, model in checks.items():
        assert validate_table(con, table, model) > 0, table
    assert validate_choices(con) == 60 * 7


def test_a_table_with_a_card_column_is_refused(tmp_path: Path) -> None:
    config = export_config(tmp_path)
    con = duckdb.connect()
    fill_warehouse(con, occasions=5)
    con.execute("alter table choosers add column card varchar")
    output = OutputTable("choosers", "choosers", "choosers", ("chooser",))
    with pytest.raises(UserError, match="raw card ids are never exported"):
        output_query(con, output, config)


def _columns(path: Path) -> list[str]:
    if path.suffix == ".parquet":
        return pq.read_schema(path).names
    if path.suffix == ".csv":
        with path.open(newline="", encoding="utf-8") as handle:
            return next(csv.reader(handle))
    with pd.read_stata(path, iterator=True) as reader:
        return list(reader.variable_labels())


def test_stata_copy_shortens_long_names_uniquely_and_keeps_them_in_the_labels(
    tmp_path: Path,
) -> None:
    # Stata names hold 32 characters; before, pandas cut these two to names that swapped their
    # meaning between tables ('_0caffeine...') and dropped their labels, without a word
    from demandprep.export import stata

    hot, cold = "caffeine_milligrams_per_serving_hot", "caffeine_milligrams_per_serving_cold"
    source = tmp_path / "t.parquet"
    pq.write_table(pa.table({"product": ["a", "b"], hot: [1.0, 2.0], cold: [3.0, 4.0]}), source)
    labels = {"product": "the product", hot: "served hot", cold: "served cold"}
    rows, renamed = stata.write_dta(source, tmp_path / "t.dta", labels)
    assert rows == 2
    # reference: pandas' own Stata reader
    with pd.read_stata(tmp_path / "t.dta", iterator=True) as reader:
        read_labels = reader.variable_labels()
        frame = reader.read()
    assert list(frame.columns) == ["product", renamed[hot], renamed[cold]]
    assert all(len(name) <= 32 for name in frame.columns)
    assert len(set(frame.columns)) == 3
    assert renamed[hot].startswith(hot[:27])
    # the same Stata name in every table, whichever other long names it holds
    assert stata.stata_names([cold]) == {cold: renamed[cold]}
    assert list(frame[renamed[cold]]) == [3.0, 4.0]
    assert read_labels[renamed[hot]] == f"{hot}: served hot"
    assert read_labels[renamed[cold]] == f"{cold}: served cold"
    assert read_labels["product"] == "the product"


def test_a_build_without_choices_writes_no_choice_file_left_in_the_warehouse(
    tmp_path: Path,
) -> None:
    # choices turned off after a build with them: the warehouse still holds that build's
    # choices and choosers; before, every later build exported them again, stale
    from demandprep.export.tables import plan_outputs

    con = duckdb.connect()
    fill_warehouse(con, occasions=30)
    with_choices = {table.name for table in plan_outputs(con, export_config(tmp_path))}
    assert {"choices", "choosers"} <= with_choices
    without = {table.name for table in plan_outputs(con, export_config(tmp_path, choices=False))}
    assert without == with_choices - {"choices", "choosers"}
