"""Every source goes through the same reader: references with their own rules, Parquet,
compressed and re-encoded CSV, timezones, and the demo world's injected faults."""

from __future__ import annotations

import json
from pathlib import Path

import duckdb
import pytest
from ingest_fixtures import ingest, query

BASE_CONFIG = """
[warehouse]
path = "warehouse/w.duckdb"
memory_limit = "1GB"
threads = 2
temp_directory = "warehouse/tmp"

[sources.receipts]
files = ["receipts/*"]
format = "{receipt_format}"
encoding = "{encoding}"
timestamp_format = "%Y-%m-%d %H:%M:%S"
{receipt_extra}

[sources.receipts.columns]
receipt = "ticket"
line = "row"
store = "shop"
sold_at = "stamp"
sku = "item"
quantity = "qty"
amount = "value"
card = "card"

[sources.catalogue]
files = ["catalogue.csv"]

[sources.catalogue.columns]
sku = "item"
category = "category"
pack_grams = "grams"

[sources.stores]
files = ["stores.csv"]

[sources.stores.columns]
store = "shop"
region = "region"
timezone = "zone"

[sources.shelf_prices]
files = ["shelf_prices.csv"]

[sources.shelf_prices.columns]
store = "shop"
date = "week"
sku = "item"
price = "price"
promo = "promo"

[sources.market_sizes]
files = ["market_sizes.csv"]

[sources.market_sizes.columns]
geography = "area"
period = "week"
size = "units"

[markets]
categories = ["coffee"]

[products]
keys = ["sku"]

[market_size.visits]
method = "visits"
units_per_visit = 1.0
"""

CATALOGUE = (
    "item,category,grams\n"
    + "".join(f"K{k},coffee,{250 * k}\n" for k in range(1, 11))
    + "K2,coffee,1000\nK11,,250\nK12,coffee,heavy\n"
)
STORES = """shop,region,zone
S1,north,Europe/Berlin
S2,south,
S3,south,Mars/Olympus
"""
SHELF_PRICES = """shop,week,item,price,promo
S1,2024-01-01,K1,4.50,0
S1,2024-01-01,K2,8.00,1
S1,2024-01-01,K2,8.10,0
S2,2024-01-01,K1,cheap,0
S2,2024-01-01,K2,0,0
S9,2024-01-01,K1,4.50,0
S1,2024-01-01,K99,4.50,0
S2,2024-13-01,K1,4.50,0
"""
MARKET_SIZES = """area,week,units
north,2024-01-01,500
south,2024-01-01,-3
"""
RECEIPT_ROWS = [
    ("T1", 1, "S1", "2024-07-01 10:00:00", "K1", 1.0, 4.5, "C-é1"),
    ("T1", 2, "S1", "2024-07-01 10:00:05", "K2", 2.0, 16.0, "C-é1"),
    ("T2", 1, "S2", "2024-07-01 11:30:00", "K1", 1.0, 4.5, None),
    ("T3", 1, "S2", "2024-07-01 12:00:00", "K1", 1.0, -4.5, None),
]


def write_project(
    folder: Path,
    receipt_format: str = "csv",
    encoding: str = "utf-8",
    receipts_name: str = "receipts.csv",
    receipt_extra: str = "",
) -> Path:
    """A small project with every reference source and one receipts file."""
    (folder / "receipts").mkdir(parents=True)
    for name, text in [
        ("catalogue.csv", CATALOGUE),
        ("stores.csv", STORES),
        ("shelf_prices.csv", SHELF_PRICES),
        ("market_sizes.csv", MARKET_SIZES),
    ]:
        (folder / name).write_text(text, encoding="utf-8")
    write_receipts(folder / "receipts" / receipts_name, receipt_format, encoding)
    config = folder / "demandprep.toml"
    config.write_text(
        BASE_CONFIG.format(
            receipt_format=receipt_format, encoding=encoding, receipt_extra=receipt_extra
        )
    )
    return config


def write_receipts(path: Path, receipt_format: str, encoding: str) -> None:
    """The receipt rows as Parquet (typed) or CSV (plain, .gz, .zst; any encoding)."""
    con = duckdb.connect()
    con.execute(
        "create table r (ticket varchar, row bigint, shop varchar, stamp timestamp, "
        "item varchar, qty double, value double, card varchar)"
    )
    con.executemany("insert into r values (?, ?, ?, ?, ?, ?, ?, ?)", RECEIPT_ROWS)
    if receipt_format == "parquet":
        con.execute(f"copy r to '{path}' (format parquet)")
        return
    text = "ticket,row,shop,stamp,item,qty,value,card\n" + "".join(
        ",".join("" if v is None else str(v) for v in row) + "\n" for row in RECEIPT_ROWS
    )
    if path.suffix in (".gz", ".zst"):
        plain = path.with_suffix("")
        plain.write_text(text, encoding=encoding)
        codec = "gzip" if path.suffix == ".gz" else "zstd"
        con.execute(
            f"copy (select * from read_csv('{plain}', all_varchar = true)) to '{path}' "
            f"(header, compression {codec})"
        )
        plain.unlink()
    else:
        path.write_text(text, encoding=encoding)


def reasons_by_line(config, source: str) -> dict[int, str]:
    rows = query(config, "select line_no, reason from quarantine where source = $s", {"s": source})
    return dict(rows)


def test_reference_rows_breaking_a_rule_land_in_quarantine(tmp_path: Path) -> None:
    config, summary = ingest(write_project(tmp_path))
    assert summary.ok
    assert reasons_by_line(config, "catalogue") == {
        12: "duplicate_key",
        13: "missing_required_field",
        14: "unparseable_field",
    }
    assert reasons_by_line(config, "stores") == {4: "unknown_timezone"}
    assert reasons_by_line(config, "shelf_prices") == {
        4: "duplicate_key",
        5: "unparseable_field",
        6: "non_positive_value",
        7: "unknown_store",
        8: "unknown_sku",
        9: "unparseable_field",
    }
    assert reasons_by_line(config, "market_sizes") == {3: "non_positive_value"}
    balance = query(
        config, "select count(*) from ledger where rows_read <> rows_accepted + rows_quarantined"
    )
    assert balance == [(0,)]


def test_reference_tables_hold_exactly_the_mapped_columns_typed(tmp_path: Path) -> None:
    config, _ = ingest(write_project(tmp_path))
    describe = {
        table: query(
            config,
            f"select column_name, data_type from information_schema.columns "
            f"where table_name = '{table}' order by ordinal_position",
        )
        for table in ("catalogue", "stores", "shelf_prices", "market_size_table")
    }
    assert describe["catalogue"] == [
        ("sku", "VARCHAR"),
        ("category", "VARCHAR"),
        ("pack_grams", "BIGINT"),
    ]
    assert describe["stores"] == [
        ("store", "VARCHAR"),
        ("region", "VARCHAR"),
        ("timezone", "VARCHAR"),
    ]
    assert describe["shelf_prices"] == [
        ("store", "VARCHAR"),
        ("date", "DATE"),
        ("sku", "VARCHAR"),
        ("price", "DOUBLE"),
        ("promo", "BOOLEAN"),
    ]
    assert describe["market_size_table"] == [
        ("geography", "VARCHAR"),
        ("period", "DATE"),
        ("size", "DOUBLE"),
    ]
    assert query(
        config, "select sku, pack_grams from catalogue where sku in ('K1', 'K2') order by sku"
    ) == [("K1", 250), ("K2", 500)]
    assert query(config, "select count(*) from catalogue") == [(10,)]
    assert query(config, "select store, sku, price, promo from shelf_prices order by all") == [
        ("S1", "K1", 4.5, False),
        ("S1", "K2", 8.0, True),
    ]


def test_changed_reference_file_replaces_its_rows(tmp_path: Path) -> None:
    config_path = write_project(tmp_path)
    config, _ = ingest(config_path)
    (tmp_path / "catalogue.csv").write_text(
        "item,category,grams\nK1,coffee,250\nK2,coffee,500\nK3,coffee,250\nK4,coffee,100\n"
    )
    config, summary = ingest(config_path)
    (result,) = [r for r in summary.files if r.source == "catalogue"]
    assert result.status == "replaced"
    assert query(config, "select count(*) from catalogue") == [(4,)]
    assert query(config, "select count(*) from quarantine where source = 'catalogue'") == [(0,)]


def test_mapping_one_more_reference_column_reloads_that_source(tmp_path: Path) -> None:
    config_path = write_project(tmp_path)
    ingest(config_path)
    text = config_path.read_text()
    config_path.write_text(text.replace('region = "region"', 'region = "region"\nzone2 = "zone"'))
    config, summary = ingest(config_path)
    (result,) = [r for r in summary.files if r.source == "stores"]
    # a changed mapping is a changed reading setting: the file replaces its rows in one go
    assert result.status == "replaced"
    columns = query(
        config,
        "select column_name from information_schema.columns "
        "where table_name = 'stores' order by ordinal_position",
    )
    assert columns == [("store",), ("region",), ("zone2",), ("timezone",)]
    assert query(config, "select count(*) from stores") == [(2,)]
    assert query(config, "select status from ledger where source = 'stores' order by version") == [
        ("superseded",),
        ("current",),
    ]


@pytest.mark.parametrize(
    ("name", "encoding"),
    [
        ("receipts.csv.gz", "utf-8"),
        ("receipts.csv.zst", "utf-8"),
        ("receipts.csv", "latin-1"),
        ("receipts.csv", "utf-16"),
    ],
)
def test_compressed_and_encoded_csv_give_the_same_lines(
    tmp_path: Path, name: str, encoding: str
) -> None:
    plain, _ = ingest(write_project(tmp_path / "plain"))
    other, summary = ingest(
        write_project(tmp_path / "other", encoding=encoding, receipts_name=name)
    )
    assert summary.ok
    columns = "receipt, line, store, sold_at, sku, quantity, amount, card, line_no"
    lines = f"select {columns} from raw_lines order by all"
    assert query(other, lines) == query(plain, lines)
    assert query(other, "select card from raw_lines where receipt = 'T1'") == [("C-é1",)] * 2


def test_parquet_receipts_are_read_typed_with_row_numbers(tmp_path: Path) -> None:
    config, summary = ingest(write_project(tmp_path, "parquet", receipts_name="r.parquet"))
    assert summary.ok
    rows = query(
        config,
        "select receipt, line, sold_at::varchar, quantity, line_no from raw_lines order by line_no",
    )
    assert rows == [
        ("T1", 1, "2024-07-01 10:00:00", 1.0, 1),
        ("T1", 2, "2024-07-01 10:00:05", 2.0, 2),
        ("T2", 1, "2024-07-01 11:30:00", 1.0, 3),
    ]
    ((line_no, reason, text),) = query(
        config, "select line_no, reason, original_text from quarantine where source = 'receipts'"
    )
    assert (line_no, reason) == (4, "negative_amount")
    assert json.loads(text)["ticket"] == "T3"


def test_times_written_in_a_configured_timezone_become_store_local(tmp_path: Path) -> None:
    extra = 'timezone = "UTC"'
    config, summary = ingest(write_project(tmp_path, receipt_extra=extra))
    assert summary.ok
    rows = query(config, "select store, sold_at::varchar from raw_lines order by all")
    # S1 is in Europe/Berlin (UTC+2 in July); S2 has no zone, its times stay as written
    assert rows == [
        ("S1", "2024-07-01 12:00:00"),
        ("S1", "2024-07-01 12:00:05"),
        ("S2", "2024-07-01 11:30:00"),
    ]


def test_unknown_source_timezone_is_a_user_error(tmp_path: Path) -> None:
    from demandprep.errors import UserError

    with pytest.raises(UserError, match="not a known timezone"):
        ingest(write_project(tmp_path, receipt_extra='timezone = "Atlantis/Central"'))


def demo_config(world: Path, run_dir: Path) -> Path:
    template = Path(__file__).resolve().parents[1] / "src/demandprep/templates/demo.toml"
    text = template.read_text()
    for name in (
        "receipts/*/receipts_*.csv.gz",
        "catalogue.csv",
        "stores.csv",
        "households.csv",
        "shelf_prices.csv",
        "market_sizes.csv",
        "cost_shifters.csv",
    ):
        text = text.replace(f'files = ["{name}"]', f'files = ["{world / name}"]')
    run_dir.mkdir(parents=True, exist_ok=True)
    path = run_dir / "demandprep.toml"
    path.write_text(text)
    return path


def test_demo_world_faults_match_the_generators_truth(faulty_world: Path, tmp_path: Path) -> None:
    config, summary = ingest(demo_config(faulty_world, tmp_path))
    assert summary.ok
    truth = json.loads((faulty_world / "truth.json").read_text())
    faults = truth["faults"]
    # the generator's fault kinds (demo/faults.py) and the quarantine reason each must get
    expected = {
        "unparseable_field": faults["bad_number"] + faults["bad_timestamp"],
        "missing_required_field": faults["missing_field"],
        "unknown_sku": faults["unknown_sku"],
        "wrong_column_count": faults["extra_field"],
        "non_positive_quantity": faults["nonpositive_qty"],
        "negative_amount": faults["negative_sale_value"],
        "duplicate_line": faults["duplicate_line"],
    }
    found = dict(
        query(
            config, "select reason, count(*) from quarantine where source = 'receipts' group by all"
        )
    )
    assert found == {reason: n for reason, n in expected.items() if n}
    read = query(config, "select sum(rows_read) from ledger where source = 'receipts'")[0][0]
    assert read == truth["line_counts"]["receipts"]
    kinds = dict(query(config, "select line_kind, count(*) from raw_lines group by all"))
    assert kinds["return"] == truth["totals"]["returns"]
    assert kinds["void"] == truth["totals"]["voids"]
