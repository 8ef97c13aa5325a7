"""What the ingest decides about whole files and values: mostly-bad files are refused, changed
settings re-read a source, files can be reloaded and withdrawn, gone files keep their rows,
numbers are read strictly, and every failed file keeps its reason."""

from __future__ import annotations

import shutil
from datetime import datetime
from pathlib import Path

import duckdb
import pytest
from ingest_fixtures import drop_catalogue_line
from typer.testing import CliRunner

from demandprep.cli import app
from demandprep.config import load_config
from demandprep.errors import UserError
from demandprep.export.input_warnings import files_gone
from demandprep.export.manifest import file_sha256
from demandprep.export.parquet import write_query_parquet
from demandprep.export.tables import output_query, output_table
from demandprep.ingest.runner import ingest_all
from demandprep.ingest.withdraw import withdraw_files
from demandprep.sqlfiles import run_sql
from demandprep.warehouse import open_warehouse

RUNNER = CliRunner()

CONFIG = """
[warehouse]
path = "warehouse/w.duckdb"
memory_limit = "1GB"
threads = 2
temp_directory = "warehouse/tmp"

[sources.receipts]
files = ["receipts/*.csv"]
delimiter = ";"
decimal = "{decimal}"
timestamp_format = "{timestamp_format}"
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
grams = "grams"

[sources.stores]
files = ["stores.csv"]

[sources.stores.columns]
store = "shop"

[markets]
categories = ["coffee"]

[products]
keys = ["grams"]

[market_size.visits]
method = "visits"
units_per_visit = 1.0
"""

HEADER = "ticket;row;shop;stamp;item;qty;value;card"


def receipt_lines(count: int, amount: str = "12,50", qty: str = "1", day: int = 1) -> list[str]:
    """`count` valid-looking lines of one day (amount written as given)."""
    return [
        f"T{day:02d}{n:05d};1;S1;2024-03-{day:02d} 10:{n % 60:02d}:00;K1;{qty};{amount};C-{n}"
        for n in range(count)
    ]


def write_project(
    folder: Path,
    receipts: dict[str, list[str]],
    decimal: str = ",",
    timestamp_format: str = "%Y-%m-%d %H:%M:%S",
    receipt_extra: str = "",
    catalogue_grams: str = "250",
) -> Path:
    """A tiny project: one store, one SKU, the given receipts files; returns the config path."""
    (folder / "receipts").mkdir(parents=True, exist_ok=True)
    (folder / "catalogue.csv").write_text(f"item,category,grams\nK1,coffee,{catalogue_grams}\n")
    (folder / "stores.csv").write_text("shop\nS1\n")
    for name, lines in receipts.items():
        (folder / "receipts" / name).write_text("\n".join([HEADER, *lines]) + "\n")
    config = folder / "demandprep.toml"
    config.write_text(
        CONFIG.format(
            decimal=decimal, timestamp_format=timestamp_format, receipt_extra=receipt_extra
        )
    )
    return config


def ingest(config_path: Path, reload: list[str] | None = None):
    config = load_config(config_path)
    with open_warehouse(config.warehouse) as con:
        return ingest_all(con, config, reload=reload)


def query(config_path: Path, sql: str, params=None) -> list[tuple]:
    config = load_config(config_path, check_files=False)
    with open_warehouse(config.warehouse) as con:
        return con.execute(sql, params).fetchall()


def by_name(summary) -> dict[str, object]:
    return {result.path.name: result for result in summary.files}


def warehouse_rows(config_path: Path) -> tuple[int, int, int]:
    return query(
        config_path,
        "select (select count(*) from raw_lines), (select count(*) from quarantine), "
        "(select count(*) from ref_catalogue)",
    )[0]


# ---- 1. reject limit -------------------------------------------------------------------------


def test_a_file_of_decimal_points_under_a_comma_config_is_refused_whole(tmp_path: Path) -> None:
    config = write_project(
        tmp_path,
        {"a.csv": receipt_lines(10, "1,00"), "bad.csv": receipt_lines(240, "12.50", day=2)},
    )
    summary = ingest(config)
    bad = by_name(summary)["bad.csv"]
    path = tmp_path / "receipts" / "bad.csv"
    assert bad.status == "refused"
    assert bad.error == (
        f"{path}: refused: 240 of 240 lines quarantined (100%), mostly unparseable_field "
        "(first: line 2, amount shaped '99.99'). Hint: check sources.receipts.decimal, delimiter, "
        "timestamp_format and the columns mapping."
    )
    assert by_name(summary)["a.csv"].status == "new"
    assert not summary.ok
    # nothing of the refused file is kept; the good file went in whole
    assert warehouse_rows(config) == (10, 0, 1)
    rows = query(
        config,
        "select status, rows_read, rows_accepted, rows_quarantined, reason from ledger "
        "where path = $path",
        {"path": str(path)},
    )
    assert rows == [
        (
            "refused",
            0,
            0,
            0,
            "240 of 240 lines quarantined (100%), mostly unparseable_field (first: line 2, amount)",
        )
    ]


def test_a_file_refused_for_its_dates_is_hinted_at_the_validity_window(tmp_path: Path) -> None:
    # before: the hint named decimal, delimiter, timestamp format and mapping, never the window
    config = write_project(
        tmp_path, {"early.csv": receipt_lines(240)}, receipt_extra='valid_from = "2024-04-01"'
    )
    early = by_name(ingest(config))["early.csv"]
    assert early.status == "refused"
    assert early.error.endswith(
        "mostly timestamp_out_of_range (first: line 2, sold_at shaped '9999-99-99 99:99:99'). "
        "Hint: check "
        "sources.receipts.valid_from and valid_to, then timestamp_format and timezone."
    ), early.error


def test_a_refused_file_is_not_read_again_until_its_settings_change(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"bad.csv": receipt_lines(240, "12.50")})
    assert by_name(ingest(config))["bad.csv"].status == "refused"
    again = ingest(config)
    assert by_name(again)["bad.csv"].status == "unchanged"
    assert again.ok
    # a later night says the file is still held back, rather than nothing at all
    assert again.warnings == [
        f"{tmp_path / 'receipts' / 'bad.csv'}: refused before and unchanged since, so its rows "
        "are still out; fix the file or the source's settings, or read it again with --reload."
    ]
    config.write_text(config.read_text().replace('decimal = ","', 'decimal = "."'))
    fixed = by_name(ingest(config))["bad.csv"]
    assert (fixed.status, fixed.rows_accepted, fixed.rows_quarantined) == ("new", 240, 0)


def test_a_refused_file_is_read_again_when_its_checksum_changes(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"bad.csv": receipt_lines(240, "12.50")})
    ingest(config)
    (tmp_path / "receipts" / "bad.csv").write_text("\n".join([HEADER, *receipt_lines(5)]) + "\n")
    fixed = by_name(ingest(config))["bad.csv"]
    assert (fixed.status, fixed.rows_accepted) == ("new", 5)


def test_a_few_bad_lines_do_not_refuse_a_file(tmp_path: Path) -> None:
    # 110 of 260 quarantined: past 100 lines but not past half of the file
    lines = receipt_lines(150) + receipt_lines(110, "1.5", day=2)
    config = write_project(tmp_path, {"some_bad.csv": lines})
    result = by_name(ingest(config))["some_bad.csv"]
    assert (result.status, result.rows_accepted, result.rows_quarantined) == ("new", 150, 110)


def test_a_small_file_below_the_line_limit_is_not_refused(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"small.csv": receipt_lines(40, "1.5")})
    result = by_name(ingest(config))["small.csv"]
    assert (result.status, result.rows_quarantined) == ("new", 40)


def test_the_reject_limit_is_set_per_source(tmp_path: Path) -> None:
    config = write_project(
        tmp_path,
        {"small.csv": receipt_lines(40, "1.5")},
        receipt_extra="reject_limit_lines = 10\nreject_limit_fraction = 0.25",
    )
    result = by_name(ingest(config))["small.csv"]
    assert result.status == "refused"
    assert "40 of 40 lines quarantined (100%)" in result.error


def test_a_refused_card_bearing_file_never_quotes_the_card(tmp_path: Path) -> None:
    lines = [f"T{n:05d};x;S1;2024-03-01 10:00:00;K1;1;1,00;SECRET-{n}" for n in range(150)]
    config = write_project(tmp_path, {"cards.csv": lines})
    result = by_name(ingest(config))["cards.csv"]
    assert result.status == "refused"
    assert "SECRET" not in result.error
    assert "(first: line 2, line shaped 'a')" in result.error


def test_a_card_id_shifted_into_another_field_is_not_quoted_by_a_refusal(tmp_path: Path) -> None:
    # a line missing its amount moves the card id into the amount field: the message shows
    # only the value's shape (digits 9, letters a), as every message about a card-bearing source
    lines = [f"T{n:05d};1;S1;2024-03-01 10:00:00;K1;1;SECRET-{n};" for n in range(150)]
    config = write_project(tmp_path, {"shifted.csv": lines})
    result = by_name(ingest(config))["shifted.csv"]
    assert result.status == "refused"
    assert "SECRET" not in result.error
    assert "(first: line 2, amount shaped 'aaaaaa-9')" in result.error


def test_a_refused_households_file_names_the_card_column_without_its_value(
    tmp_path: Path,
) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(3)})
    (tmp_path / "households.csv").write_text("card,size\n" + "SECRET-1,2\n" * 150)
    extra = '[sources.households]\nfiles = ["households.csv"]\n\n'
    extra += '[sources.households.columns]\ncard = "card"\nsize = "size"\n\n[markets]'
    config.write_text(config.read_text().replace("[markets]", extra))
    result = by_name(ingest(config))["households.csv"]
    assert result.status == "refused"
    assert "SECRET" not in result.error
    assert "mostly duplicate_key (first: line 3, card)." in result.error
    assert "raise sources.households.reject_limit_fraction or reject_limit_lines" in result.error


def test_a_refused_correction_keeps_the_previous_version(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(150)})
    ingest(config)
    bad = "\n".join([HEADER, *receipt_lines(150, "1.5")]) + "\n"
    (tmp_path / "receipts" / "a.csv").write_text(bad)
    assert by_name(ingest(config))["a.csv"].status == "refused"
    assert warehouse_rows(config) == (150, 0, 1)
    rows = query(config, "select version, status from ledger where source = 'receipts' order by 1")
    assert rows == [(1, "current"), (2, "refused")]
    assert by_name(ingest(config))["a.csv"].status == "unchanged"


def test_ingest_prints_one_line_per_refused_or_failed_file_then_exits_1(tmp_path: Path) -> None:
    receipts = {f"bad_{n:02d}.csv": receipt_lines(120, "1.5", day=n + 1) for n in range(12)}
    config = write_project(tmp_path, receipts)
    result = RUNNER.invoke(app, ["ingest", str(config)], terminal_width=400)
    assert result.exit_code == 1, result.output
    errors = [line for line in result.output.splitlines() if line.startswith("error:")]
    assert len(errors) == 10
    assert errors[0].startswith(f"error: {tmp_path / 'receipts' / 'bad_00.csv'}: refused: 120 of")
    assert "… and 2 more" in result.output
    assert all(": refused: 120 of 120 lines quarantined (100%)" in line for line in errors)
    assert result.output.splitlines()[-1] == "… and 2 more"


# ---- 2. settings fingerprint and --reload -------------------------------------------------------


def test_fixing_the_timestamp_format_rereads_the_files(tmp_path: Path) -> None:
    config = write_project(
        tmp_path, {"a.csv": receipt_lines(20)}, timestamp_format="%d/%m/%Y %H:%M"
    )
    first = by_name(ingest(config))["a.csv"]
    assert (first.status, first.rows_quarantined) == ("new", 20)
    assert by_name(ingest(config))["a.csv"].status == "unchanged"
    config.write_text(config.read_text().replace("%d/%m/%Y %H:%M", "%Y-%m-%d %H:%M:%S"))
    fixed = by_name(ingest(config))["a.csv"]
    assert (fixed.status, fixed.rows_accepted, fixed.rows_quarantined) == ("replaced", 20, 0)
    assert warehouse_rows(config) == (20, 0, 1)
    statuses = query(config, "select status from ledger where source = 'receipts' order by version")
    assert statuses == [("superseded",), ("current",)]
    prints = query(
        config,
        "select count(distinct settings_fingerprint) from ledger where source = 'receipts'",
    )
    assert prints == [(2,)]


def test_an_old_warehouse_gains_the_new_ledger_columns(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(5)})
    loaded = load_config(config)
    with open_warehouse(loaded.warehouse) as con:
        con.execute(
            "create table ledger (file_id varchar not null, source varchar not null, "
            "path varchar not null, version bigint not null, bytes bigint not null, "
            "sha256 varchar not null, first_sold_at timestamp, last_sold_at timestamp, "
            "rows_read bigint not null, rows_accepted bigint not null, "
            "rows_quarantined bigint not null, status varchar not null, "
            "ingested_at timestamp not null)"
        )
    assert by_name(ingest(config))["a.csv"].status == "new"
    columns = query(config, "select column_name from duckdb_columns() where table_name = 'ledger'")
    assert [name for (name,) in columns][-2:] == ["reason", "settings_fingerprint"]


def test_changing_only_the_file_globs_rereads_nothing(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(20)})
    ingest(config)
    config.write_text(config.read_text().replace('"receipts/*.csv"', '"receipts/a*.csv"'))
    assert by_name(ingest(config))["a.csv"].status == "unchanged"


def test_a_reference_setting_change_retypes_the_reference(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(3)})
    (tmp_path / "catalogue.csv").write_text("item;category;grams\nK1;coffee;250,5\n")
    catalogue = '[sources.catalogue]\nfiles = ["catalogue.csv"]\ndelimiter = ";"\n'
    text = config.read_text().replace('[sources.catalogue]\nfiles = ["catalogue.csv"]\n', catalogue)
    config.write_text(text)
    ingest(config)
    assert query(config, "select typeof(grams) from catalogue") == [("VARCHAR",)]
    config.write_text(text.replace(catalogue, catalogue + 'decimal = ","\n'))
    result = by_name(ingest(config))["catalogue.csv"]
    assert result.status == "replaced"
    assert query(config, "select grams from catalogue") == [(250.5,)]


def test_a_new_reference_mapping_replaces_its_rows_in_one_transaction(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(3)})
    (tmp_path / "catalogue.csv").write_text("item,category,grams,maker\nK1,coffee,250,Roastery\n")
    ingest(config)
    config.write_text(
        config.read_text().replace('grams = "grams"\n', 'grams = "grams"\nfirm = "maker"\n')
    )
    result = by_name(ingest(config))["catalogue.csv"]
    assert result.status == "replaced"
    assert query(config, "select sku, firm from catalogue") == [("K1", "Roastery")]
    rows = query(config, "select status from ledger where source = 'catalogue' order by version")
    assert rows == [("superseded",), ("current",)]


def test_reload_rereads_a_source_or_a_glob(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(5), "b.csv": receipt_lines(3, day=2)})
    ingest(config)
    by_source = by_name(ingest(config, reload=["receipts"]))
    assert (by_source["a.csv"].status, by_source["b.csv"].status) == ("replaced", "replaced")
    assert by_source["catalogue.csv"].status == "unchanged"
    by_glob = by_name(ingest(config, reload=[str(tmp_path / "receipts" / "b*")]))
    assert (by_glob["a.csv"].status, by_glob["b.csv"].status) == ("unchanged", "replaced")
    assert warehouse_rows(config) == (8, 0, 1)


def test_reloading_one_reference_file_of_an_old_warehouse_keeps_the_others(
    tmp_path: Path,
) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(3)})
    (tmp_path / "catalogue_2.csv").write_text("item,category,grams\nK2,coffee,500\n")
    config.write_text(config.read_text().replace('["catalogue.csv"]', '["catalogue*.csv"]'))
    ingest(config)
    # ledger rows from before fingerprints were recorded
    query(config, "update ledger set settings_fingerprint = null")
    result = by_name(ingest(config, reload=[str(tmp_path / "catalogue_2.csv")]))
    assert (result["catalogue.csv"].status, result["catalogue_2.csv"].status) == (
        "unchanged",
        "replaced",
    )
    assert query(config, "select sku from catalogue order by sku") == [("K1",), ("K2",)]


def test_reload_of_nothing_known_is_a_user_error(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(5)})
    with pytest.raises(UserError, match="--reload 'nope.csv' matches no configured source"):
        ingest(config, reload=["nope.csv"])


def test_cli_ingest_reload(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(5)})
    ingest(config)
    result = RUNNER.invoke(app, ["ingest", str(config), "--reload", "receipts"])
    assert result.exit_code == 0, result.output
    assert query(config, "select count(*) from ledger where status = 'superseded'") == [(1,)]


# ---- 3. gone files and withdraw ----------------------------------------------------------------


def test_an_archived_drop_folder_keeps_its_rows_with_a_warning(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(5)})
    ingest(config)
    shutil.move(tmp_path / "receipts" / "a.csv", tmp_path / "a.csv.archived")
    result = RUNNER.invoke(app, ["ingest", str(config)], terminal_width=400)
    assert result.exit_code == 0, result.output
    warnings = [line for line in result.output.splitlines() if line.startswith("warning:")]
    assert warnings == [
        f"warning: {config}: key 'sources.receipts.files': no file matches "
        f"{tmp_path / 'receipts' / '*.csv'}; the warehouse keeps the 1 file(s) ingested before."
    ]
    assert warehouse_rows(config) == (5, 0, 1)
    with open_warehouse(load_config(config).warehouse) as con:
        gone = files_gone(con)  # what the build's manifest and report warn about
    assert [(item.source, item.name) for item in gone] == [("receipts", "a.csv")]


def test_a_glob_matching_nothing_on_the_first_run_is_still_an_error(tmp_path: Path) -> None:
    config = write_project(tmp_path, {})
    result = RUNNER.invoke(app, ["ingest", str(config)], terminal_width=400)
    assert result.exit_code == 1
    assert "'sources.receipts.files': no file matches" in result.output


def test_withdraw_removes_a_files_rows_and_keeps_it_out(tmp_path: Path) -> None:
    config = write_project(
        tmp_path, {"a.csv": receipt_lines(5), "b.csv": receipt_lines(3, "x", day=2)}
    )
    ingest(config)
    assert warehouse_rows(config) == (5, 3, 1)
    result = RUNNER.invoke(
        app, ["withdraw", str(config), str(tmp_path / "receipts" / "b*"), "--reason", "test day"]
    )
    assert result.exit_code == 0, result.output
    assert warehouse_rows(config) == (5, 0, 1)
    rows = query(config, "select status, reason from ledger where path like '%b.csv'")
    assert rows == [("withdrawn", "test day")]
    assert by_name(ingest(config))["b.csv"].status == "unchanged"
    assert warehouse_rows(config) == (5, 0, 1)
    (tmp_path / "receipts" / "b.csv").write_text("\n".join([HEADER, *receipt_lines(2)]) + "\n")
    assert by_name(ingest(config))["b.csv"].status == "new"


def test_a_matched_link_to_no_file_is_warned_about_not_skipped_silently(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(2)})
    folder = tmp_path / "receipts"
    (folder / "moved.csv").symlink_to(folder / "gone_elsewhere.csv")  # its target is gone
    (folder / "loop.csv").symlink_to(folder / "loop.csv")  # points at itself
    (folder / "folder.csv").mkdir()  # a folder matched by the glob is no input: no warning
    summary = ingest(config)
    assert by_name(summary)["a.csv"].rows_accepted == 2
    assert not {"moved.csv", "loop.csv", "folder.csv"} & set(by_name(summary))
    links = [warning for warning in summary.warnings if "symbolic link" in warning]
    assert links == [
        f"{config}: key 'sources.receipts.files': {folder / name} is a symbolic link to no file "
        "(its target is gone, or the links form a loop), so it is not read; point it at the "
        "file or remove it."
        for name in ("loop.csv", "moved.csv")
    ]


def test_withdraw_of_nothing_is_a_user_error(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(5)})
    ingest(config)
    loaded = load_config(config)
    with open_warehouse(loaded.warehouse) as con, pytest.raises(UserError, match="no current"):
        withdraw_files(con, loaded, "nothing*.csv", "why")


# ---- 4. strict values --------------------------------------------------------------------------


def test_thousands_underscores_are_unparseable(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(3, qty="1_000")})
    result = by_name(ingest(config))["a.csv"]
    assert result.quarantined == {"unparseable_field": 3}


def test_values_beyond_the_exact_decimal_range_are_quarantined(tmp_path: Path) -> None:
    lines = receipt_lines(2, amount="1000000000000") + receipt_lines(1, day=2)
    config = write_project(tmp_path, {"a.csv": lines}, receipt_extra="max_amount = 1e15")
    result = by_name(ingest(config))["a.csv"]
    assert result.quarantined == {"value_out_of_range": 2}
    assert result.rows_accepted == 1


def test_values_past_the_plausibility_bounds_are_quarantined(tmp_path: Path) -> None:
    lines = receipt_lines(1, qty="10001") + receipt_lines(1, amount="1000001", day=2)
    lines += receipt_lines(1, day=3)
    config = write_project(tmp_path / "a", {"a.csv": lines})
    result = by_name(ingest(config))["a.csv"]
    assert (result.quarantined, result.rows_accepted) == ({"value_out_of_range": 2}, 1)
    bounded = write_project(
        tmp_path / "b", {"a.csv": lines}, receipt_extra="max_quantity = 5\nmax_amount = 10"
    )
    assert by_name(ingest(bounded))["a.csv"].quarantined == {"value_out_of_range": 3}


def test_a_number_too_large_for_a_double_is_out_of_range_not_unparseable(tmp_path: Path) -> None:
    # '1e400' is a number written in digits; only its size is wrong ('inf' and 'nan' are not
    # numbers at all and stay unparseable)
    lines = receipt_lines(1, qty="1e400") + receipt_lines(1, amount="-1e400", day=2)
    lines += receipt_lines(1, qty="inf", day=3) + receipt_lines(1, day=4)
    config = write_project(tmp_path, {"a.csv": lines})
    result = by_name(ingest(config))["a.csv"]
    assert result.quarantined == {"value_out_of_range": 2, "unparseable_field": 1}
    details = query(config, "select reason, detail from quarantine order by line_no")
    assert details == [
        ("value_out_of_range", "quantity: beyond the sources.receipts bounds"),
        ("value_out_of_range", "amount: beyond the sources.receipts bounds"),
        ("unparseable_field", "quantity: not a number"),
    ]


def test_reference_numbers_are_read_strictly(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(1)})
    skus = "".join(f"K{n},coffee,{250 + n}.5\n" for n in range(1, 10))
    (tmp_path / "catalogue.csv").write_text(f"item,category,grams\n{skus}K10,coffee,1_000\n")
    result = by_name(ingest(config))["catalogue.csv"]
    assert result.quarantined == {"unparseable_field": 1}


# ---- 5. failure reasons ------------------------------------------------------------------------


def test_a_failed_file_keeps_its_reason_in_the_ledger(tmp_path: Path) -> None:
    config = write_project(tmp_path, {"a.csv": receipt_lines(3)})
    (tmp_path / "receipts" / "broken.csv").write_text("ticket;nope\nT1;x\n")
    result = by_name(ingest(config))["broken.csv"]
    assert result.status == "failed"
    rows = query(config, "select status, reason from ledger where path like '%broken.csv'")
    assert rows[0][0] == "failed"
    assert rows[0][1] and rows[0][1] in result.error


# ---- 6. determinism of the exported ledger ------------------------------------------------------


def test_two_from_scratch_ingests_export_byte_identical_ledgers(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    config_path = write_project(tmp_path, {"a.csv": receipt_lines(5), "b.csv": ["broken;line"]})
    config = load_config(config_path)
    hashes = []
    for day in (1, 2):
        monkeypatch.setattr("demandprep.ingest.ledger.datetime", _clock(datetime(2024, 5, day)))
        shutil.rmtree(config.warehouse.path.parent, ignore_errors=True)
        with open_warehouse(config.warehouse) as con:
            ingest_all(con, config)
            query_ = output_query(con, output_table("ledger"), config)
            target = tmp_path / f"ledger_{day}.parquet"
            write_query_parquet(con, query_.sql, query_.params, target, 1024, {}, {}, ("path",))
        hashes.append(file_sha256(target))
    assert hashes[0] == hashes[1]


def _clock(moment: datetime) -> type:
    class Fixed(datetime):
        @classmethod
        def now(cls, tz=None) -> datetime:
            return moment

    return Fixed


@pytest.mark.parametrize(
    ("text", "mark", "expected"),
    [
        ("12.50", ".", 12.5),
        ("12,50", ",", 12.5),
        ("12.50", ",", None),
        ("1_000", ".", None),
        ("1 000", ".", None),
        ("1,000", ".", None),
        ("1e3", ".", 1000.0),
        ("-4.5", ".", -4.5),
        ("inf", ".", None),
        ("nan", ".", None),
        ("0x10", ".", None),
    ],
)
def test_the_number_macro_reads_only_plain_decimal_notation(
    text: str, mark: str, expected: float | None
) -> None:
    con = duckdb.connect()
    run_sql(con, "ingest/005_ingest_macros.sql")
    assert con.execute("select ingest_number($t, $m)", {"t": text, "m": mark}).fetchone() == (
        expected,
    )


@pytest.mark.parametrize(
    ("text", "expected"),
    [("7", 7), ("+7", 7), ("007", 7), ("1_000", None), ("0x10", None), (".5", None), ("1e5", None)],
)
def test_the_integer_macro_reads_only_digits(text: str, expected: int | None) -> None:
    con = duckdb.connect()
    run_sql(con, "ingest/005_ingest_macros.sql")
    assert con.execute("select ingest_integer($t)", {"t": text}).fetchone() == (expected,)


def test_lines_of_an_unknown_sku_are_read_again_once_the_catalogue_lists_it(
    tmp_path: Path,
) -> None:
    # a new product sells before the catalogue lists it: before, its lines stayed quarantined
    # as unknown_sku after the catalogue was corrected, and no build ever saw them
    new_sku = [line.replace(";K1;", ";K2;") for line in receipt_lines(3, day=2)]
    config = write_project(tmp_path, {"a.csv": receipt_lines(5) + new_sku})
    ingest(config)
    assert warehouse_rows(config) == (5, 3, 1)
    catalogue = tmp_path / "catalogue.csv"
    catalogue.write_text(catalogue.read_text() + "K2,coffee,500\n")
    second = by_name(ingest(config))
    assert second["a.csv"].status == "replaced"
    assert warehouse_rows(config) == (8, 0, 2)
    # read against today's catalogue: nothing stale left, so a third night reads nothing
    third = by_name(ingest(config))
    assert third["a.csv"].status == "unchanged"
    assert query(config, "select count(*) from ledger where path like '%a.csv'")[0] == (2,)


def test_unknown_sku_lines_of_a_warehouse_without_their_keys_come_back_with_the_catalogue(
    tmp_path: Path,
) -> None:
    # a warehouse ingested by a version before quarantined_keys has no keys for its unknown_sku
    # lines: they must still come in once the catalogue lists the SKU, as in a fresh warehouse.
    # Before, such lines stayed quarantined for good (only a --reload brought them in)
    new_sku = [line.replace(";K1;", ";K2;") for line in receipt_lines(3, day=2)]
    other_sku = [line.replace(";K1;", ";K9;") for line in receipt_lines(2, day=3)]
    config = write_project(tmp_path, {"a.csv": receipt_lines(5) + new_sku + other_sku})
    ingest(config)
    assert warehouse_rows(config) == (5, 5, 1)
    query(config, "delete from quarantined_keys")  # as that version left it
    catalogue = tmp_path / "catalogue.csv"
    catalogue.write_text(catalogue.read_text() + "K2,coffee,500\n")
    assert by_name(ingest(config))["a.csv"].status == "replaced"
    assert warehouse_rows(config) == (8, 2, 2)
    # read again, its keys are recorded (K9): an edit that lists no key of it reads nothing
    catalogue.write_text(catalogue.read_text() + "K3,coffee,250\n")
    assert by_name(ingest(config))["a.csv"].status == "unchanged"


def test_shelf_prices_and_receipts_of_an_unlisted_sku_come_back_with_the_catalogue(
    coffee_sample: Path, tmp_path: Path
) -> None:
    # the catalogue arrives without C0102 one night and with it the next: shelf prices and
    # receipts lines of C0102 must be in the warehouse as a first ingest with it puts them
    folder = tmp_path / "sample"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    catalogue = folder / "catalogue.csv"
    listed = catalogue.read_text(encoding="utf-8")
    unlisted = "".join(
        line for line in listed.splitlines(keepends=True) if not line.startswith("C0102,")
    )
    catalogue.write_text(unlisted, encoding="utf-8")
    config = folder / "demandprep.toml"
    ingest(config)
    counts_sql = (
        "select (select count(*) from raw_lines where sku = 'C0102'), "
        "(select count(*) from shelf_prices where sku = 'C0102'), "
        "(select count(*) from quarantine where reason = 'unknown_sku')"
    )
    before = query(config, counts_sql)[0]
    assert before[0] == 0 and before[1] == 0 and before[2] > 0
    catalogue.write_text(listed, encoding="utf-8")
    ingest(config)
    fresh = tmp_path / "fresh"
    shutil.copytree(coffee_sample, fresh, ignore=shutil.ignore_patterns("warehouse", "builds"))
    ingest(fresh / "demandprep.toml")
    expected = query(fresh / "demandprep.toml", counts_sql)[0]
    assert expected[0] > 0 and expected[1] > 0
    assert query(config, counts_sql)[0] == expected


def test_lines_of_a_sku_the_catalogue_drops_are_quarantined_as_a_fresh_ingest_does(
    tmp_path: Path,
) -> None:
    # the catalogue lists K2 one night and not the next (a mislabelled product taken out): its
    # lines must leave raw_lines for the quarantine, as a first ingest against today's
    # catalogue puts them. Before, they stayed accepted and still counted visits
    lines = receipt_lines(5) + [x.replace(";K1;", ";K2;") for x in receipt_lines(3, day=2)]
    config = write_project(tmp_path, {"a.csv": lines})
    catalogue = tmp_path / "catalogue.csv"
    listed = catalogue.read_text()
    catalogue.write_text(listed + "K2,coffee,500\n")
    ingest(config)
    assert warehouse_rows(config) == (8, 0, 2)
    catalogue.write_text(listed)
    assert by_name(ingest(config))["a.csv"].status == "replaced"
    fresh = write_project(tmp_path / "fresh", {"a.csv": lines})
    ingest(fresh)
    reasons = "select reason, line_no from quarantine order by all"
    assert warehouse_rows(config) == warehouse_rows(fresh) == (5, 3, 1)
    assert _accepted_lines(config) == _accepted_lines(fresh)
    assert query(config, reasons) == query(fresh, reasons)
    # compared with today's catalogue once: the next night reads nothing again
    assert {result.status for result in ingest(config).files} == {"unchanged"}


def _two_catalogues(folder: Path, lines: list[str], first: str) -> Path:
    """A project whose catalogue is catalogue.csv (`first`, after K1) and catalogue_b.csv (K2)."""
    config = write_project(folder, {"a.csv": lines})
    config.write_text(config.read_text().replace('["catalogue.csv"]', '["catalogue*.csv"]'))
    (folder / "catalogue.csv").write_text(f"item,category,grams\nK1,coffee,250\n{first}")
    (folder / "catalogue_b.csv").write_text("item,category,grams\nK2,coffee,500\n")
    return config


def test_a_reference_duplicate_key_is_judged_again_when_its_accepted_copy_leaves(
    tmp_path: Path,
) -> None:
    # K2 is listed by catalogue.csv and by catalogue_b.csv (read after it: duplicate_key). When
    # catalogue.csv stops listing K2, K2 must stay listed (from catalogue_b.csv) and its receipts
    # lines accepted, as in a fresh ingest. Before, catalogue_b.csv's verdict was never judged
    # again: K2 left the catalogue and its lines went to the quarantine as unknown_sku
    lines = receipt_lines(3) + [x.replace(";K1;", ";K2;") for x in receipt_lines(2, day=2)]
    config = _two_catalogues(tmp_path, lines, "K2,coffee,500\n")
    ingest(config)
    assert warehouse_rows(config) == (5, 1, 2)
    (tmp_path / "catalogue.csv").write_text("item,category,grams\nK1,coffee,250\n")
    ingest(config)
    fresh = _two_catalogues(tmp_path / "fresh", lines, "")
    ingest(fresh)
    listed = "select sku from catalogue order by all"
    reasons = "select reason, line_no from quarantine order by all"
    assert query(config, listed) == query(fresh, listed) == [("K1",), ("K2",)]
    assert _accepted_lines(config) == _accepted_lines(fresh)
    assert query(config, reasons) == query(fresh, reasons) == []
    assert {result.status for result in ingest(config).files} == {"unchanged"}


def test_a_duplicate_of_a_line_whose_sku_the_catalogue_drops_is_judged_again(
    tmp_path: Path,
) -> None:
    # b.csv repeats a line of a.csv (same store, day, receipt and line) but names K1 where a.csv
    # names K2: b's copy is a duplicate while a's line is accepted. When the catalogue drops
    # K2, a's line goes to the quarantine and b's copy must be accepted, as a fresh ingest
    # does. Before, a's reading again left no departure, so b's verdict stayed
    k2_line = receipt_lines(1, day=2)[0].replace(";K1;", ";K2;")
    files = {"a.csv": [*receipt_lines(3), k2_line], "b.csv": [k2_line.replace(";K2;", ";K1;")]}
    config = write_project(tmp_path, files)
    catalogue = tmp_path / "catalogue.csv"
    listed = catalogue.read_text()
    catalogue.write_text(listed + "K2,coffee,500\n")
    ingest(config)
    assert warehouse_rows(config)[:2] == (4, 1)
    catalogue.write_text(listed)
    summary = ingest(config)
    fresh = write_project(tmp_path / "fresh", files)
    ingest(fresh)
    reasons = "select reason, line_no from quarantine order by all"
    assert _accepted_lines(config) == _accepted_lines(fresh)
    assert query(config, reasons) == query(fresh, reasons) == [("unknown_sku", 5)]
    # each file once in the night's summary, with its last status
    assert sorted(result.path.name for result in summary.files) == [
        "a.csv",
        "b.csv",
        "catalogue.csv",
        "stores.csv",
    ]


def test_a_reading_again_refused_is_reported_and_not_tried_again_each_night(
    tmp_path: Path,
) -> None:
    # the catalogue drops K2, the SKU of most of a.csv's lines: read again, a.csv is past the
    # reject limit. The version read before stays (a refusal never takes rows out of a file
    # read with the same bytes and settings) and each night says so; the next nights neither
    # read it again nor add a refused ledger row. Before, it was read and refused every night
    lines = receipt_lines(10) + [x.replace(";K1;", ";K2;") for x in receipt_lines(150, day=2)]
    config = write_project(tmp_path, {"a.csv": lines})
    catalogue = tmp_path / "catalogue.csv"
    listed = catalogue.read_text()
    catalogue.write_text(listed + "K2,coffee,500\n")
    ingest(config)
    catalogue.write_text(listed)
    assert by_name(ingest(config))["a.csv"].status == "refused"
    ledger_sql = "select status from ledger where path like '%a.csv' order by version"
    assert query(config, ledger_sql) == [("current",), ("refused",)]
    later = ingest(config)
    assert by_name(later)["a.csv"].status == "unchanged"
    assert query(config, ledger_sql) == [("current",), ("refused",)]
    assert any("so the rows of the version read before stay in" in w for w in later.warnings)
    assert warehouse_rows(config)[:2] == (160, 0)


def test_rows_of_a_dropped_sku_in_a_file_away_that_night_leave_when_it_returns(
    tmp_path: Path,
) -> None:
    # a.csv is out of its folder the night the catalogue drops K2 and back, unchanged, the
    # next night: its K2 line must then go to the quarantine. Before, that night recorded the
    # new list as compared, and the line stayed accepted for good
    lines = [*receipt_lines(3), receipt_lines(1, day=2)[0].replace(";K1;", ";K2;")]
    config = write_project(tmp_path, {"a.csv": lines})
    catalogue = tmp_path / "catalogue.csv"
    listed = catalogue.read_text()
    catalogue.write_text(listed + "K2,coffee,500\n")
    ingest(config)
    away = tmp_path / "a.csv.away"
    (tmp_path / "receipts" / "a.csv").rename(away)
    catalogue.write_text(listed)
    ingest(config)
    away.rename(tmp_path / "receipts" / "a.csv")
    ingest(config)
    assert query(config, "select count(*) from raw_lines where sku = 'K2'") == [(0,)]
    assert query(config, "select reason from quarantine") == [("unknown_sku",)]


def test_a_quiet_night_after_a_dropped_sku_reads_no_file(tmp_path: Path) -> None:
    # a.csv (with a duplicate of its own line) and b.csv are read again in one batch when the
    # catalogue drops K1; every older version of a batch leaves before any file of it is
    # judged, so a.csv's duplicate is not stale afterwards. Before, a.csv was read once more on
    # the next, quiet night (its number was below b.csv's departure)
    twice = receipt_lines(1)[0].replace(";K1;", ";K2;")
    files = {
        "a.csv": [twice, receipt_lines(2)[1], twice],
        "b.csv": [receipt_lines(4)[2], receipt_lines(4)[3].replace(";K1;", ";K2;")],
    }
    config = write_project(tmp_path, files)
    catalogue = tmp_path / "catalogue.csv"
    catalogue.write_text(catalogue.read_text() + "K2,coffee,500\n")
    ingest(config)
    catalogue.write_text("item,category,grams\nK2,coffee,500\n")
    night = by_name(ingest(config))
    assert (night["a.csv"].status, night["b.csv"].status) == ("replaced", "replaced")
    assert {result.status for result in ingest(config).files} == {"unchanged"}


def test_a_refused_reading_keeps_the_dropped_keys_until_the_file_is_read(
    tmp_path: Path,
) -> None:
    # the catalogue drops K2 and K3 one night: read again, a.csv is refused (most lines K2) and
    # its version before stays. The next night lists K2 again but not K3: a.csv must be read
    # again and its K3 lines quarantined, as a fresh ingest does. Before, the refusal counted
    # as judged, K3 was forgotten, and its lines stayed accepted for good
    lines = (
        receipt_lines(10)
        + [x.replace(";K1;", ";K2;") for x in receipt_lines(150, day=2)]
        + [x.replace(";K1;", ";K3;") for x in receipt_lines(10, day=3)]
    )
    config = write_project(tmp_path, {"a.csv": lines})
    catalogue = tmp_path / "catalogue.csv"
    listed = catalogue.read_text()
    catalogue.write_text(listed + "K2,coffee,500\nK3,coffee,250\n")
    ingest(config)
    catalogue.write_text(listed)
    assert by_name(ingest(config))["a.csv"].status == "refused"
    catalogue.write_text(listed + "K2,coffee,500\n")
    assert by_name(ingest(config))["a.csv"].status == "replaced"
    fresh = write_project(tmp_path / "fresh", {"a.csv": lines})
    (tmp_path / "fresh" / "catalogue.csv").write_text(listed + "K2,coffee,500\n")
    ingest(fresh)
    assert warehouse_rows(config)[:2] == warehouse_rows(fresh)[:2] == (160, 10)
    assert {result.status for result in ingest(config).files} == {"unchanged"}


def test_a_file_refused_for_an_unknown_sku_is_read_once_the_catalogue_lists_it(
    tmp_path: Path,
) -> None:
    # n.csv arrives with 150 lines of K9, which the catalogue does not list yet: refused. The
    # next night's catalogue lists K9, and n.csv must come in as a fresh ingest takes it.
    # Before, a refused file waited for new bytes or settings (or --reload) for good
    config = write_project(tmp_path, {"a.csv": receipt_lines(5)})
    ingest(config)
    new_file = [x.replace(";K1;", ";K9;") for x in receipt_lines(150, day=2)]
    (tmp_path / "receipts" / "n.csv").write_text("\n".join([HEADER, *new_file]) + "\n")
    assert by_name(ingest(config))["n.csv"].status == "refused"
    quiet = ingest(config)
    assert by_name(quiet)["n.csv"].status == "unchanged"
    assert any("n.csv: refused before" in warning for warning in quiet.warnings)
    catalogue = tmp_path / "catalogue.csv"
    catalogue.write_text(catalogue.read_text() + "K9,coffee,250\n")
    night = ingest(config)
    assert by_name(night)["n.csv"].status == "new"
    assert not any("n.csv" in warning for warning in night.warnings)
    assert warehouse_rows(config)[:2] == (155, 0)
    assert {result.status for result in ingest(config).files} == {"unchanged"}


def test_a_catalogue_delivered_again_with_the_same_skus_compares_no_accepted_line(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # a nightly catalogue export with new bytes but the same SKUs: the comparison with every
    # accepted line (073) must not run, it costs a scan of raw_lines each night
    config = write_project(tmp_path, {"a.csv": receipt_lines(5)})
    ingest(config)
    catalogue = tmp_path / "catalogue.csv"
    catalogue.write_text(catalogue.read_text().replace("coffee,250", "coffee,260"))
    ran: list[str] = []

    def recording(con, name, params=None):
        ran.append(name)
        return run_sql(con, name, params)

    monkeypatch.setattr("demandprep.ingest.unlisted_keys.run_sql", recording)
    assert by_name(ingest(config))["catalogue.csv"].status == "replaced"
    assert "ingest/073_unlisted_receipt_keys.sql" not in ran
    # and one that drops a SKU does compare (K1 leaves: its lines go to the quarantine)
    catalogue.write_text("item,category,grams\nK5,coffee,250\n")
    assert by_name(ingest(config))["a.csv"].status == "replaced"
    assert "ingest/073_unlisted_receipt_keys.sql" in ran
    assert warehouse_rows(config)[:2] == (0, 5)


def test_shelf_prices_and_receipts_of_a_sku_the_catalogue_drops_leave_the_tables(
    coffee_sample: Path, tmp_path: Path
) -> None:
    folder = tmp_path / "sample"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config = folder / "demandprep.toml"
    ingest(config)
    catalogue = folder / "catalogue.csv"
    drop_catalogue_line(catalogue, "C0102")
    counts_sql = (
        "select (select count(*) from raw_lines where sku = 'C0102'), "
        "(select count(*) from shelf_prices where sku = 'C0102'), "
        "(select count(*) from quarantine where reason = 'unknown_sku')"
    )
    assert query(config, counts_sql)[0][:2] != (0, 0)
    ingest(config)
    fresh = tmp_path / "fresh"
    shutil.copytree(folder, fresh, ignore=shutil.ignore_patterns("warehouse", "builds"))
    ingest(fresh / "demandprep.toml")
    expected = query(fresh / "demandprep.toml", counts_sql)[0]
    assert expected[:2] == (0, 0) and expected[2] > 0
    assert query(config, counts_sql)[0] == expected


def _accepted_lines(config: Path) -> list[tuple]:
    return query(config, "select store, sold_at, receipt, line from raw_lines order by all")


@pytest.mark.parametrize("departure", ["withdrawn", "corrected"])
def test_a_duplicate_is_accepted_once_the_copy_accepted_before_leaves(
    tmp_path: Path, departure: str
) -> None:
    # b.csv re-sends a.csv's first line; when a.csv leaves (withdrawn, or corrected without
    # that line), the line must be in the warehouse once, as a first ingest without it gives.
    # Before: it stayed quarantined as duplicate_line and was in no table at all
    first_day = receipt_lines(5)
    config = write_project(tmp_path, {"a.csv": first_day, "b.csv": receipt_lines(4, day=2)})
    (tmp_path / "receipts" / "b.csv").write_text(
        "\n".join([HEADER, *receipt_lines(4, day=2), first_day[0]]) + "\n"
    )
    ingest(config)
    assert warehouse_rows(config)[:2] == (9, 1)
    if departure == "withdrawn":
        loaded = load_config(config)
        with open_warehouse(loaded.warehouse) as con:
            withdraw_files(con, loaded, str(tmp_path / "receipts" / "a.csv"), "test")
        expected_files = {"b.csv": receipt_lines(4, day=2) + first_day[:1]}
    else:
        (tmp_path / "receipts" / "a.csv").write_text("\n".join([HEADER, *first_day[1:]]) + "\n")
        expected_files = {"a.csv": first_day[1:], "b.csv": receipt_lines(4, day=2) + first_day[:1]}
    ingest(config)
    fresh = write_project(tmp_path / "fresh", expected_files)
    ingest(fresh)
    assert warehouse_rows(fresh)[:2] == (len(_accepted_lines(fresh)), 0)
    assert _accepted_lines(config) == _accepted_lines(fresh)
    assert query(config, "select count(*) from quarantine")[0] == (0,)
    # judged against today's files: the next night reads nothing again
    assert {result.status for result in ingest(config).files} == {"unchanged"}


def test_a_duplicate_of_a_warehouse_without_its_sale_days_is_judged_again(tmp_path: Path) -> None:
    # a warehouse ingested by a version before duplicate_days has no sale days for its
    # duplicate_line verdicts: when a receipts file leaves after the upgrade, the line must be
    # in the warehouse once, as a first ingest without that file gives. Before, it stayed
    # quarantined and was in no table
    first_day = receipt_lines(5)
    config = write_project(tmp_path, {"a.csv": first_day, "b.csv": receipt_lines(4, day=2)})
    (tmp_path / "receipts" / "b.csv").write_text(
        "\n".join([HEADER, *receipt_lines(4, day=2), first_day[0]]) + "\n"
    )
    ingest(config)
    query(config, "delete from duplicate_days")  # as that version left it
    (tmp_path / "receipts" / "a.csv").write_text("\n".join([HEADER, *first_day[1:]]) + "\n")
    ingest(config)
    fresh = write_project(
        tmp_path / "fresh",
        {"a.csv": first_day[1:], "b.csv": receipt_lines(4, day=2) + first_day[:1]},
    )
    ingest(fresh)
    assert _accepted_lines(config) == _accepted_lines(fresh)
    assert query(config, "select count(*) from quarantine")[0] == (0,)
    assert {result.status for result in ingest(config).files} == {"unchanged"}


def test_withdraw_reads_again_at_once_a_file_whose_duplicate_lost_its_copy(tmp_path: Path) -> None:
    # a build right after the withdrawal must see the line, not only the next ingest
    first_day = receipt_lines(5)
    config = write_project(tmp_path, {"a.csv": first_day})
    (tmp_path / "receipts" / "b.csv").write_text(
        "\n".join([HEADER, *receipt_lines(4, day=2), first_day[0]]) + "\n"
    )
    ingest(config)
    assert warehouse_rows(config)[:2] == (9, 1)
    result = CliRunner().invoke(
        app, ["withdraw", str(config), str(tmp_path / "receipts" / "a.csv")], terminal_width=2000
    )
    assert result.exit_code == 0, result.output
    assert f"read again {tmp_path / 'receipts' / 'b.csv'} (5 rows accepted)" in result.output
    assert warehouse_rows(config)[:2] == (5, 0)


def test_a_file_refused_under_new_settings_takes_its_old_rows_out(tmp_path: Path) -> None:
    # valid_to narrowed to the first day: the second day's file, read again, is refused (all
    # its lines out of the window); before, its old version stayed current and its rows stayed
    # in every build, although the settings in force refuse them
    receipts = {"a.csv": receipt_lines(240), "b.csv": receipt_lines(240, day=2)}
    config = write_project(tmp_path, receipts)
    ingest(config)
    assert warehouse_rows(config)[:2] == (480, 0)
    narrowed = 'valid_to = "2024-03-01"'
    write_project(tmp_path, receipts, receipt_extra=narrowed)
    second = by_name(ingest(config))
    assert second["b.csv"].status == "refused"
    fresh = write_project(tmp_path / "fresh", receipts, receipt_extra=narrowed)
    assert by_name(ingest(fresh))["b.csv"].status == "refused"
    assert warehouse_rows(config)[:2] == warehouse_rows(fresh)[:2] == (240, 0)
    statuses = "select version, status from ledger where path like '%b.csv' order by version"
    assert query(config, statuses) == [(1, "superseded"), (2, "refused")]


def _catalogue_type(config: Path, column: str) -> str:
    return query(
        config,
        "select data_type from information_schema.columns "
        "where table_name = 'catalogue' and column_name = $column",
        {"column": column},
    )[0][0]


def test_a_reference_file_the_sniffer_refuses_is_typed_from_its_values(tmp_path: Path) -> None:
    # a stray CR makes DuckDB's sniffer refuse the file; before, every column was then text
    config = write_project(tmp_path, {"a.csv": receipt_lines(3)})
    catalogue = tmp_path / "catalogue.csv"
    catalogue.write_text(catalogue.read_text() + "K8,coffee,500\nK9,cof\rfee,9\n")
    ingest(config)
    assert _catalogue_type(config, "grams") == "BIGINT"
    reasons = "select reason from quarantine where source = 'catalogue'"
    assert query(config, reasons) == [("stray_carriage_return",)]


def test_a_corrected_reference_file_is_typed_afresh(tmp_path: Path) -> None:
    # version 1 writes its grams as text ('250 g'): text; version 2, corrected, as numbers.
    # Before: the stored text type stayed for good, also after --reload
    config = write_project(tmp_path, {"a.csv": receipt_lines(3)}, catalogue_grams="250 g")
    ingest(config)
    assert _catalogue_type(config, "grams") == "VARCHAR"
    write_project(tmp_path, {"a.csv": receipt_lines(3)})
    ingest(config)
    assert _catalogue_type(config, "grams") == "BIGINT"


def test_a_moved_project_folder_reads_no_file_again(tmp_path: Path) -> None:
    # the ledger keys files by absolute path: before, every file of a moved project was new,
    # all its lines duplicates of themselves, and every file refused; a night with nothing built
    before = tmp_path / "before"
    config = write_project(before, {"a.csv": receipt_lines(5), "b.csv": receipt_lines(4, day=2)})
    ingest(config)
    rows = warehouse_rows(config)
    after = tmp_path / "after"
    shutil.move(before, after)
    moved = after / "demandprep.toml"
    results = ingest(moved)
    assert {result.status for result in results.files} == {"unchanged"}
    assert results.ok
    assert warehouse_rows(moved) == rows
    paths = query(moved, "select path from ledger where status = 'current' order by path")
    assert all(path.startswith(str(after)) for (path,) in paths)


def test_duplicates_judged_again_settle_and_the_next_nights_read_nothing(tmp_path: Path) -> None:
    # a.csv holds a line twice; b.csv repeats a's first line and has a line of its own on that
    # day. a is corrected: b is read again. Before: re-reading one file counted as its old
    # version leaving, which made the other's duplicate stale again, and the two files were
    # read by turns every night
    lines = receipt_lines(5, day=3)
    config = write_project(tmp_path, {"a.csv": [*lines[:4], lines[1]]})
    (tmp_path / "receipts" / "b.csv").write_text("\n".join([HEADER, lines[0], lines[4]]) + "\n")
    ingest(config)
    corrected = [*lines[:4], lines[1], *receipt_lines(1, day=6)]
    (tmp_path / "receipts" / "a.csv").write_text("\n".join([HEADER, *corrected]) + "\n")
    ingest(config)
    for _night in range(2):
        assert {result.status for result in ingest(config).files} == {"unchanged"}


def test_a_catalogue_edit_that_lists_no_unknown_sku_reads_no_receipts_file_again(
    tmp_path: Path,
) -> None:
    # only a quarantined SKU the catalogue now lists makes a file be read again; before, any
    # catalogue change read again every file with an unknown_sku line
    new_sku = [line.replace(";K1;", ";K2;") for line in receipt_lines(3, day=2)]
    config = write_project(tmp_path, {"a.csv": receipt_lines(5) + new_sku})
    ingest(config)
    catalogue = tmp_path / "catalogue.csv"
    catalogue.write_text(catalogue.read_text() + "K7,coffee,750\n")
    assert by_name(ingest(config))["a.csv"].status == "unchanged"
    assert warehouse_rows(config)[:2] == (5, 3)


def test_a_catalogue_missing_skus_for_one_night_loses_no_receipts_line(tmp_path: Path) -> None:
    # night 2's catalogue lacks K1; night 3's is whole again. Before: night 2 read again the
    # files with an unknown SKU, refused them (most lines unknown now) and took their rows out
    # as for new settings; night 3 held them back as refused, and their rows stayed out
    unknown = [line.replace(";K1;", ";K9;") for line in receipt_lines(3, day=2)]
    config = write_project(tmp_path, {"a.csv": receipt_lines(200) + unknown})
    ingest(config)
    assert warehouse_rows(config)[:2] == (200, 3)
    catalogue = tmp_path / "catalogue.csv"
    whole = catalogue.read_text()
    catalogue.write_text("item,category,grams\nK2,coffee,500\n")
    ingest(config)
    catalogue.write_text(whole)
    ingest(config)
    assert warehouse_rows(config)[:2] == (200, 3)


def test_a_withdrawn_file_stays_out_after_the_project_folder_moves(tmp_path: Path) -> None:
    # before: moves were only looked for among current files, so the withdrawn file was new
    # under its new path and its rows went back in
    before = tmp_path / "before"
    config = write_project(before, {"a.csv": receipt_lines(5), "b.csv": receipt_lines(4, day=2)})
    ingest(config)
    loaded = load_config(config)
    with open_warehouse(loaded.warehouse) as con:
        withdraw_files(con, loaded, str(before / "receipts" / "b.csv"), "test")
    after = tmp_path / "after"
    shutil.move(before, after)
    moved = after / "demandprep.toml"
    results = ingest(moved)
    assert {result.status for result in results.files} == {"unchanged"}
    assert warehouse_rows(moved)[:2] == (5, 0)
    statuses = "select status from ledger where path = $path order by version"
    assert query(moved, statuses, {"path": str(after / "receipts" / "b.csv")}) == [("withdrawn",)]
