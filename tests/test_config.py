"""The config loader: typed sections, one-line errors naming file and key, resolved paths."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from demandprep.config import INGEST_OWN_COLUMNS, load_config
from demandprep.config_reference import starter_toml
from demandprep.errors import UserError

TEMPLATES = Path(__file__).resolve().parents[1] / "src" / "demandprep" / "templates"
DEMO_INPUTS = [
    "catalogue.csv",
    "stores.csv",
    "households.csv",
    "shelf_prices.csv",
    "market_sizes.csv",
    "cost_shifters.csv",
    "receipts/2024/receipts_2024-01-01.csv.gz",
]


@pytest.fixture()
def demo_config(tmp_path: Path) -> Path:
    """The demo template beside empty files with the names it reads."""
    for name in DEMO_INPUTS:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).touch()
    target = tmp_path / "demandprep.toml"
    shutil.copy(TEMPLATES / "demo.toml", target)
    return target


def edited(path: Path, old: str, new: str) -> Path:
    text = path.read_text()
    assert old in text, f"fixture text {old!r} not in {path.name}"
    path.write_text(text.replace(old, new, 1))
    return path


def error_of(path: Path) -> str:
    with pytest.raises(UserError) as caught:
        load_config(path)
    message = caught.value.one_line()
    assert "\n" not in message
    return message


def test_demo_template_validates_and_resolves_paths(demo_config: Path) -> None:
    config = load_config(demo_config)
    assert config.warehouse.path == demo_config.parent / "warehouse" / "demandprep.duckdb"
    assert config.sources.receipts.resolved_files() == [
        demo_config.parent / "receipts/2024/receipts_2024-01-01.csv.gz"
    ]
    assert set(config.market_size) == {"visits", "peak", "catchment"}


def test_starter_config_validates_without_its_files(tmp_path: Path) -> None:
    target = tmp_path / "starter.toml"
    target.write_text(starter_toml(), encoding="utf-8")
    config = load_config(target, check_files=False)
    assert config.products.keys == ["brand", "format", "pack_size"]


def test_unknown_key_names_file_key_and_allowed_keys(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "threads = 2", "threads = 2\nthreadz = 3"))
    assert str(demo_config) in message
    assert message == (
        f"{demo_config}: unknown key 'warehouse.threadz'. Hint: allowed here: "
        "path (DuckDB warehouse file), memory_limit (Memory the process may use), "
        "threads (DuckDB worker threads), "
        "temp_directory (Where DuckDB spills beyond memory_limit), "
        "lock_timeout_seconds (How long a second writer waits); see docs/config.md."
    )


def test_unknown_key_inside_a_named_assumption_lists_the_method_keys(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "units_per_visit = 1.0", "units_per_visit = 1\nk = 2"))
    assert "'market_size.visits.k'" in message
    assert "units_per_visit" in message


def test_wrong_type_names_the_key_and_value(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "threads = 2", 'threads = "two"'))
    assert "'warehouse.threads'" in message
    assert "'two'" in message


def test_wrong_choice_lists_the_allowed_values(demo_config: Path) -> None:
    message = error_of(edited(demo_config, 'period = "week"', 'period = "fortnight"'))
    assert "'markets.period'" in message
    assert "'day', 'week', 'month' or 'quarter'" in message


def test_missing_file_names_the_source_and_the_pattern(demo_config: Path) -> None:
    (demo_config.parent / "stores.csv").unlink()
    message = error_of(demo_config)
    assert "'sources.stores.files'" in message
    assert str(demo_config.parent / "stores.csv") in message


def test_missing_required_receipt_column_is_named(demo_config: Path) -> None:
    message = error_of(edited(demo_config, 'amount = "line_value"\n', ""))
    assert "columns must map amount" in message


def test_method_without_its_parameter_is_refused(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "multiple = 3.0", ""))
    assert "'market_size.peak'" in message
    assert "needs multiple" in message


def test_invalid_toml_is_one_line(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "[markets]", "[markets"))
    assert "not valid TOML" in message


def test_missing_config_file_is_one_line(tmp_path: Path) -> None:
    message = error_of(tmp_path / "nope.toml")
    assert "config file not found" in message


def test_config_hash_changes_with_a_setting(demo_config: Path) -> None:
    before = load_config(demo_config).config_hash()
    after = load_config(edited(demo_config, "multiple = 3.0", "multiple = 2.5")).config_hash()
    assert before != after
    assert load_config(demo_config).config_hash() == after


def test_build_hash_moves_with_what_a_build_computes_only(demo_config: Path) -> None:
    config = load_config(demo_config)
    runs_elsewhere = config.model_copy(
        update={
            "warehouse": config.warehouse.model_copy(update={"threads": 1, "memory_limit": "3GB"}),
            "export": config.export.model_copy(update={"root": Path("/elsewhere/builds")}),
            "partitioning": config.partitioning.model_copy(update={"local_workers": 5}),
        }
    )
    assert runs_elsewhere.config_hash() != config.config_hash()
    assert runs_elsewhere.build_hash() == config.build_hash()
    # the file patterns are the ledger's business; the way a file is read is not
    receipts = config.sources.receipts
    moved_files = receipts.model_copy(update={"files": ["/elsewhere/receipts/*.csv.gz"]})
    other_delimiter = receipts.model_copy(update={"delimiter": ";"})
    for source, same in ((moved_files, True), (other_delimiter, False)):
        sources = config.sources.model_copy(update={"receipts": source})
        changed = config.model_copy(update={"sources": sources})
        assert (changed.build_hash() == config.build_hash()) is same
    shaped = load_config(edited(demo_config, "multiple = 3.0", "multiple = 2.5"))
    assert shaped.build_hash() != config.build_hash()


def test_committed_sample_config_validates_and_finds_its_files(coffee_sample: Path) -> None:
    config = load_config(coffee_sample / "demandprep.toml")
    receipts = config.sources.receipts.resolved_files()
    assert len(receipts) == 49  # 7 weeks of daily drops (SAMPLE.md)
    assert config.sources.receipts.valid_to.isoformat() == "2024-02-18"


def test_quoted_number_is_refused_with_a_hint(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "top_n = 20", 'top_n = "20"'))
    assert message == (
        f"{demo_config}: key 'products.universe.top_n': got '20' (text), expected an integer. "
        "Hint: write numbers and true/false without quotes, e.g. top_n = 20."
    )


def test_quoted_flag_is_refused_not_coerced(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "\nenabled = true", '\nenabled = "yes"'))
    assert message == (
        f"{demo_config}: key 'choices.enabled': got 'yes' (text), expected true or false. "
        "Hint: write numbers and true/false without quotes, e.g. enabled = true."
    )


def test_number_where_text_belongs_is_refused(demo_config: Path) -> None:
    message = error_of(edited(demo_config, 'memory_limit = "4GB"', "memory_limit = 4"))
    assert message == (
        f"{demo_config}: key 'warehouse.memory_limit': got 4, expected text in quotes. "
        "Hint: put text in double quotes."
    )


def test_list_item_error_names_its_position(demo_config: Path) -> None:
    message = error_of(edited(demo_config, 'keys = ["roaster"', 'keys = [3, "roaster"'))
    assert message.startswith(
        f"{demo_config}: key 'products.keys[0]': got 3, expected text in quotes."
    )


def test_wrong_choice_names_given_and_allowed_with_a_hint(demo_config: Path) -> None:
    message = error_of(edited(demo_config, 'period = "week"', 'period = "fortnight"'))
    assert message == (
        f"{demo_config}: key 'markets.period': got 'fortnight', expected 'day', 'week', "
        "'month' or 'quarter'. Hint: use one of the allowed values."
    )


def test_value_out_of_range_names_the_bound(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "threads = 2", "threads = 0"))
    assert message == (
        f"{demo_config}: key 'warehouse.threads': got 0, expected a value >= 1. "
        "Hint: pick a value in the allowed range."
    )


def test_missing_key_says_what_it_is_and_points_at_the_reference(demo_config: Path) -> None:
    message = error_of(edited(demo_config, 'categories = ["coffee"]\n', ""))
    assert message == (
        f"{demo_config}: missing required key 'markets.categories'. "
        "Hint: Catalogue categories in scope; see docs/config.md."
    )


def test_native_toml_values_and_quoted_dates_still_load(demo_config: Path) -> None:
    # integers where floats belong, paths and dates as text, TOML's own dates
    text = edited(demo_config, "units_per_visit = 1.0", "units_per_visit = 1").read_text()
    assert 'valid_from = "' in text
    config = load_config(demo_config)
    assert config.market_size["visits"].units_per_visit == 1.0
    assert isinstance(config.warehouse.path, Path)
    native = edited(demo_config, 'valid_from = "2024-01-01"', "valid_from = 2024-01-01")
    assert load_config(native).sources.receipts.valid_from.isoformat() == "2024-01-01"


def test_fraction_where_an_integer_belongs_asks_for_a_whole_number(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "threads = 2", "threads = 2.5"))
    assert message == (
        f"{demo_config}: key 'warehouse.threads': got 2.5, expected an integer. "
        "Hint: write a whole number."
    )


def test_number_where_a_flag_belongs_asks_for_true_or_false(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "\nenabled = true", "\nenabled = 1"))
    assert message == (
        f"{demo_config}: key 'choices.enabled': got 1, expected true or false. "
        "Hint: write true or false."
    )


def test_several_problems_print_as_the_first_and_say_how_many_more(demo_config: Path) -> None:
    edited(demo_config, "threads = 2", 'threads = "2"')
    message = error_of(edited(demo_config, "top_n = 20", 'top_n = "20"'))
    assert message == (
        f"{demo_config}: key 'warehouse.threads': got '2' (text), expected an integer. "
        "Hint: write numbers and true/false without quotes, e.g. threads = 2. "
        "(1 more problem: `demandprep check` lists them all.)"
    )


@pytest.mark.parametrize("name", sorted(INGEST_OWN_COLUMNS) + ["Line_No"])
def test_a_column_named_like_the_ingest_own_columns_is_refused(
    demo_config: Path, name: str
) -> None:
    # before the refusal, `path` silently held the file's path and `line_no` failed the file
    # with a Binder error
    message = error_of(edited(demo_config, 'organic = "organic"\n', f'{name} = "organic"\n'))
    assert "'sources.catalogue.columns'" in message
    assert f"{name!r}" in message
    assert "another name" in message


def test_two_columns_whose_names_differ_only_in_case_are_refused(demo_config: Path) -> None:
    # DuckDB names are case-insensitive: both would become one column
    message = error_of(edited(demo_config, 'organic = "organic"\n', 'Roaster = "organic"\n'))
    assert "'sources.catalogue.columns'" in message
    assert "'roaster' and 'Roaster'" in message


def test_tables_left_out_resolve_their_paths_against_the_config_folder(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # a config without [partitioning] or [export] gets their default folders beside the config
    # file whatever the working directory, so its hash (and "nothing new") does not change with
    # the folder a command runs from. Before, the defaults were resolved against the working
    # directory when the module was imported
    folder = tmp_path / "project"
    folder.mkdir()
    kept = []
    for block in starter_toml().split("\n["):
        if not block.startswith(("export]", "partitioning]")):
            kept.append(block)
    path = folder / "demandprep.toml"
    path.write_text("\n[".join(kept), encoding="utf-8")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    seen = []
    for cwd in (folder, elsewhere):
        monkeypatch.chdir(cwd)
        config = load_config(path, check_files=False)
        seen.append((config.partitioning.root, config.export.root, config.config_hash()))
    assert seen[0] == seen[1]
    assert seen[0][:2] == (folder / "partitions", folder / "builds")
