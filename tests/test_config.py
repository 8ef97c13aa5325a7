"""The config loader: typed sections, one-line errors naming file and key, resolved paths."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from demandprep.config import load_config
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
    shutil.copy(TEMPLATES / "starter.toml", target)
    config = load_config(target, check_files=False)
    assert config.products.keys == ["brand", "format", "pack_size"]


def test_unknown_key_names_file_key_and_allowed_keys(demo_config: Path) -> None:
    message = error_of(edited(demo_config, "threads = 2", "threads = 2\nthreadz = 3"))
    assert str(demo_config) in message
    assert "'warehouse.threadz'" in message
    assert "allowed here: path, memory_limit, threads" in message


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


def test_committed_sample_config_validates_and_finds_its_files() -> None:
    sample = Path(__file__).resolve().parents[1] / "data_samples" / "coffee_sample"
    config = load_config(sample / "demandprep.toml")
    receipts = config.sources.receipts.resolved_files()
    assert len(receipts) == 49  # 7 weeks of daily drops (SAMPLE.md)
    assert config.sources.receipts.valid_to.isoformat() == "2024-02-18"
