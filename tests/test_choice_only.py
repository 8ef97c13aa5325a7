"""A project may leave the market build out: a config without [market_size] builds choices only."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from sample_builds import choice_only_text, copy_sample

from demandprep.build_summary import summary_lines
from demandprep.config import ProjectConfig, load_config, parse_config
from demandprep.errors import UserError
from demandprep.pipeline import run_build, run_ingest
from demandprep.preflight import role_problems
from demandprep.stages import build_stages


@pytest.fixture(scope="module")
def choice_only(tmp_path_factory: pytest.TempPathFactory, coffee_sample: Path):
    config = copy_sample(coffee_sample, tmp_path_factory.mktemp("choice_only") / "sample")
    config.write_text(choice_only_text(config.read_text()))
    loaded = load_config(config)
    run_ingest(loaded)
    return run_build(loaded)


def _config(text: str, tmp_path: Path) -> ProjectConfig:
    import tomllib

    return parse_config(tomllib.loads(text), tmp_path / "demandprep.toml", check_files=False)


def test_a_config_without_market_sizes_turns_the_market_build_off(
    coffee_sample: Path, tmp_path: Path
) -> None:
    text = (coffee_sample / "demandprep.toml").read_text()
    assert _config(text, tmp_path).market_build_enabled
    config = _config(choice_only_text(text), tmp_path)
    assert not config.market_build_enabled
    names = [stage.name for stage in build_stages(config)]
    assert names[0] == "choice_inputs"
    assert not any(name.startswith(("market", "instrument", "share")) for name in names)


def test_a_config_that_builds_nothing_is_refused(coffee_sample: Path, tmp_path: Path) -> None:
    text = choice_only_text((coffee_sample / "demandprep.toml").read_text())
    with pytest.raises(UserError) as caught:
        _config(text.replace("[choices]\nenabled = true", "[choices]\nenabled = false"), tmp_path)
    assert caught.value.message == (
        f"{tmp_path / 'demandprep.toml'}: nothing to build: no [market_size] assumption and "
        "choices.enabled = false."
    )


def test_check_asks_for_no_market_only_column(coffee_sample: Path, tmp_path: Path) -> None:
    text = choice_only_text((coffee_sample / "demandprep.toml").read_text())
    text = text.replace('geography = "store"', 'geography = "district"')
    text = text.replace("hausman = { enabled = true }", 'hausman = { exclude_same = "zone" }')
    text = text.replace('columns = ["green_coffee_index"]', 'columns = ["rainfall"]')
    assert role_problems(_config(text, tmp_path)) == []


def test_choice_only_build_exports_choices_and_no_market_table(choice_only) -> None:
    folder, _ctx = choice_only
    files = sorted(path.name for path in folder.glob("*.parquet"))
    assert files == [
        "choices.parquet",
        "choosers.parquet",
        "ledger.parquet",
        "ledger_reasons.parquet",
        "quarantine.parquet",
    ]
    manifest = json.loads((folder / "manifest.json").read_text())
    assert manifest["market_build"] == {
        "enabled": False,
        "reason": "no [market_size] assumption in the config: choice data only",
    }
    assert "first_stage" not in manifest["facts"]
    assert not any("product_universe" in warning for warning in manifest["warnings"])
    dictionary = json.loads((folder / "data_dictionary.json").read_text())
    assert dictionary["market_build"]["enabled"] is False
    assert "market build: off" in (folder / "data_dictionary.md").read_text()


def test_choice_only_rows_have_no_market(choice_only) -> None:
    import polars as pl

    folder, _ctx = choice_only
    choices = pl.read_parquet(folder / "choices.parquet")
    assert choices.height > 0
    assert choices["market"].null_count() == choices.height


def test_choice_only_summary_says_the_market_build_is_off(choice_only) -> None:
    folder, ctx = choice_only
    occasions = ctx.facts["choices"]["occasions"]
    assert summary_lines(folder, ctx)[0] == (
        f"summary: market build off (choice data only), {occasions:,} occasions, "
        f"{len(ctx.warnings)} warnings"
    )


def test_a_product_key_value_holding_the_separator_stops_a_choice_only_build(
    coffee_sample: Path, tmp_path: Path
) -> None:
    # the choice build joins the key values with '|' itself when no market build ran; before,
    # ('A|B', 'C') and ('A', 'B|C') gave one alternative without a word
    config = copy_sample(coffee_sample, tmp_path / "sample")
    config.write_text(choice_only_text(config.read_text()))
    catalogue = config.parent / "catalogue.csv"
    lines = catalogue.read_text(encoding="utf-8").splitlines(keepends=True)
    lines[1] = lines[1].replace(",beans,", ",beans|x,", 1)
    catalogue.write_text("".join(lines), encoding="utf-8")
    sku = lines[1].split(",")[0]
    loaded = load_config(config)
    run_ingest(loaded)
    with pytest.raises(UserError) as caught:
        run_build(loaded)
    assert caught.value.one_line().startswith(
        "config key 'products.keys': 1 in-scope catalogue SKUs have a key value holding '|', "
        f"which joins the key values into the product id: {sku} (format 'beans|x')."
    ), caught.value.one_line()
