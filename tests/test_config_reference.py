"""The config documents itself: descriptions in the models, generated starter and reference."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest

from demandprep import config_reference
from demandprep.config import (
    ReceiptSource,
    config_models,
    documented_fields,
    field_unit,
    load_config,
    short_description,
)
from demandprep.config_reference import (
    REFERENCE_SECTIONS,
    STARTER_VALUES,
    Commented,
    reference_heading,
    reference_markdown,
    section_fields,
    starter_toml,
)

REPOSITORY = Path(__file__).resolve().parents[1]
DOCS_CONFIG = REPOSITORY / "docs" / "config.md"
REGENERATE = "python -m demandprep.config_reference > docs/config.md"
# a hint lists every key of a section with its short description: keep each one short
SHORT_LIMIT = 60


def test_every_config_field_has_a_description_with_a_short_first_sentence() -> None:
    for model in config_models():
        for name, field in documented_fields(model).items():
            assert field.description, f"{model.__name__}.{name} has no description"
            short = short_description(field)
            assert len(short) <= SHORT_LIMIT, f"{model.__name__}.{name}: {short!r} is too long"


def test_reference_documents_every_model_reachable_from_the_config() -> None:
    assert {model for _, model in REFERENCE_SECTIONS} == set(config_models())


def test_committed_docs_config_md_is_the_generated_one() -> None:
    committed = DOCS_CONFIG.read_text(encoding="utf-8") if DOCS_CONFIG.exists() else ""
    assert committed == reference_markdown(), f"docs/config.md is stale: run `{REGENERATE}`"


def test_reference_has_a_row_for_every_key_of_every_section() -> None:
    text = reference_markdown()
    for title, model in REFERENCE_SECTIONS:
        section = text.split(f"{reference_heading(title)}\n", 1)[1].split("\n## ", 1)[0]
        for name, field in section_fields(model).items():
            assert f"| `{name}` |" in section, f"{title}.{name} missing from docs/config.md"
            assert str(field.description).replace("|", "\\|") in section


def test_reference_row_shows_type_default_unit_and_allowed_values() -> None:
    text = reference_markdown()
    assert "| `units_per_visit` | number | unset | equivalent units per visit | > 0 |" in text
    assert '| `period` | text | `"week"` |  | `day`, `week`, `month`, `quarter` |' in text


def test_units_are_stated_where_a_number_has_one() -> None:
    fields = ReceiptSource.model_fields
    assert field_unit(fields["reject_limit_fraction"]) == "share 0..1 of a file's lines"
    assert field_unit(fields["max_amount"]) == "currency units per line"


def test_returns_in_demand_says_voids_always_net() -> None:
    # README "What is accepted": voids are netted against their sale whatever the setting
    description = str(ReceiptSource.model_fields["returns_in_demand"].description)
    assert "Voids always net against the sale they cancel" in description
    assert "returns and voids" not in starter_toml()


def test_starter_loads_once_the_files_it_names_exist(tmp_path: Path) -> None:
    target = tmp_path / "demandprep.toml"
    target.write_text(starter_toml(), encoding="utf-8")
    for name in ("raw/receipts/2024-01-01.csv.gz", "raw/catalogue.csv", "raw/stores.csv"):
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).touch()
    config = load_config(target)
    assert config.products.keys == ["brand", "format", "pack_size"]
    assert config.market_size["visits"].units_per_visit == 0.5


def test_starter_writes_each_description_above_its_key() -> None:
    lines = starter_toml().splitlines()
    written = 0
    for section, model in _starter_tables(lines):
        for name, field in section_fields(model).items():
            key_line = _key_line(lines, section, name)
            if key_line is None:
                continue
            comment = _comment_above(lines, key_line)
            first_words = " ".join(str(field.description).split()[:4])
            assert first_words in comment, f"[{section}] {name}: comment {comment!r}"
            written += 1
    assert written >= 60


def _starter_tables(lines: list[str]) -> list[tuple[str, type]]:
    titles = {title: model for title, model in REFERENCE_SECTIONS}
    tables = []
    for line in lines:
        if line.startswith("[") and line.endswith("]"):
            name = line.strip("[]")
            generic = name
            if name.startswith("market_size."):
                generic = "market_size.<name>"
            elif name.startswith("sources.") and name not in titles and name.count(".") == 1:
                generic = "sources.<name>"
            if generic in titles:
                tables.append((name, titles[generic]))
    return tables


def _key_line(lines: list[str], section: str, name: str) -> int | None:
    start = lines.index(f"[{section}]")
    for number in range(start + 1, len(lines)):
        if lines[number].startswith("["):
            return None
        if lines[number].startswith(f"{name} = "):
            return number
    return None


def _comment_above(lines: list[str], number: int) -> str:
    comment: list[str] = []
    while number > 0 and lines[number - 1].startswith("#"):
        number -= 1
        comment.insert(0, lines[number].lstrip("# "))
    return " ".join(comment)


def test_starter_examples_written_commented_out_are_valid_once_uncommented(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    monkeypatch.setattr(config_reference, "STARTER_VALUES", _uncommented(STARTER_VALUES))
    target = tmp_path / "demandprep.toml"
    target.write_text(starter_toml(), encoding="utf-8")
    config = load_config(target, check_files=False)
    assert config.sources.households is not None
    assert config.instruments.cost_shifters is not None
    assert config.market_size["agreed"].method == "table"


def _uncommented(value: Any) -> Any:
    if isinstance(value, Commented):
        return _uncommented(value.value)
    if isinstance(value, dict):
        return {key: _uncommented(item) for key, item in value.items()}
    return value
