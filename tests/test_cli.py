"""The `demandprep` command: verbs, exit codes and one-line failures."""

from __future__ import annotations

import json
import re
import shutil
from dataclasses import dataclass
from pathlib import Path

import pytest
from ingest_fixtures import copy_faults
from typer.testing import CliRunner

from demandprep import __version__
from demandprep.cli import app
from demandprep.config import load_config
from demandprep.config_reference import starter_toml
from demandprep.export.folder import published_builds

RUNNER = CliRunner()
TEMPLATES = Path(__file__).resolve().parents[1] / "src" / "demandprep" / "templates"


def test_version_prints_the_package_version() -> None:
    result = RUNNER.invoke(app, ["--version"])
    assert result.exit_code == 0
    assert result.output.strip() == __version__


def test_init_writes_a_starter_that_validates(tmp_path: Path) -> None:
    target = tmp_path / "project.toml"
    result = RUNNER.invoke(app, ["init", str(target)])
    assert result.exit_code == 0, result.output
    assert target.read_text() == starter_toml()
    assert load_config(target, check_files=False).markets.period == "week"


def test_init_refuses_to_overwrite(tmp_path: Path) -> None:
    target = tmp_path / "project.toml"
    target.write_text("keep me")
    result = RUNNER.invoke(app, ["init", str(target)])
    assert result.exit_code == 1
    assert "already exists" in result.output
    assert target.read_text() == "keep me"


def test_check_of_a_broken_config_lists_every_problem_one_line_each(tmp_path: Path) -> None:
    config = tmp_path / "demandprep.toml"
    config.write_text(starter_toml(), encoding="utf-8")
    result = RUNNER.invoke(app, ["check", str(config)], terminal_width=2000)
    assert result.exit_code == 1
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert [line.split("'")[1] for line in lines] == [
        "sources.receipts.files",
        "sources.catalogue.files",
        "sources.stores.files",
    ], result.output
    assert all(line.startswith(f"error: {config}: key 'sources.") for line in lines)
    assert "Traceback" not in result.output


def test_check_lists_every_source_it_would_read(coffee_sample: Path) -> None:
    result = RUNNER.invoke(
        app, ["check", str(coffee_sample / "demandprep.toml")], terminal_width=200
    )
    assert result.exit_code == 0, result.output
    for source in ("receipts", "catalogue", "stores", "households", "shelf_prices"):
        assert source in result.output
    assert "is valid" in result.output


def test_ingest_with_an_unreadable_file_loads_the_rest_and_exits_1(tmp_path: Path) -> None:
    project = copy_faults(tmp_path).parent
    broken = project / "receipts" / "receipts_zz_broken.csv"
    broken.write_bytes(b"\xff\xfe\x00garbage\x00\n\x00\x01")
    result = RUNNER.invoke(app, ["ingest", str(project / "demandprep.toml")], terminal_width=300)
    assert result.exit_code == 1, result.output
    error_lines = [line for line in result.output.splitlines() if line.startswith("error:")]
    assert len(error_lines) == 1
    assert error_lines[0].startswith(f"error: {broken}: ")
    assert "files new" in result.output


def error_lines(output: str) -> list[str]:
    return [line for line in output.splitlines() if line.startswith("error:")]


def test_bracketed_text_from_a_file_header_prints_literally(tmp_path: Path) -> None:
    config = copy_faults(tmp_path)
    stores = config.parent / "stores.csv"
    stores.write_text(stores.read_text().replace("branch;town;area", "branch;[/]town;zone", 1))
    result = RUNNER.invoke(app, ["ingest", str(config)], terminal_width=2000)
    assert "Traceback" not in result.output
    assert result.exit_code == 1, result.output
    lines = error_lines(result.output)
    assert len(lines) == 3, result.output  # the stores file, then both receipts files need it
    assert lines[0] == (
        f"error: {stores}: the mapping names column 'area' (for 'region') but the file has "
        "no such column; its columns are branch, [/]town, zone. Hint: fix the source's columns "
        "mapping in the config (names are case-sensitive)."
    )


def test_hint_naming_a_config_section_prints_it(tmp_path: Path) -> None:
    # the fault fixture maps no pack size, which the default weight unit needs
    config = copy_faults(tmp_path)
    assert RUNNER.invoke(app, ["ingest", str(config)]).exit_code == 0
    result = RUNNER.invoke(app, ["build", str(config)], terminal_width=2000)
    assert result.exit_code == 1, result.output
    assert error_lines(result.output) == [
        "error: config key 'products.equivalent_unit.size_column': column 'pack_size' is not in "
        "the catalogue table (columns: sku, category, firm, pack_grams). Hint: map it under "
        "[sources.catalogue.columns] and ingest again."
    ]


def test_run_stops_after_the_ingest_when_every_receipts_file_fails(tmp_path: Path) -> None:
    config = copy_faults(tmp_path)
    receipts = sorted((config.parent / "receipts").glob("*.csv"))
    for path in receipts:
        path.write_bytes(path.read_bytes().replace(b"ticket;", b"tikket;", 1))
    result = RUNNER.invoke(app, ["run", str(config)], terminal_width=2000)
    assert result.exit_code == 1, result.output
    lines = error_lines(result.output)
    assert len(lines) == 1 + len(receipts), result.output
    assert lines[0] == "error: every receipts file failed or was refused, so nothing was built."
    for line, path in zip(lines[1:], receipts, strict=True):
        assert line.startswith(f"error: {path}: the mapping names column 'ticket'")
    assert "keep rules" not in result.output
    assert not (config.parent / "builds").exists()


@dataclass
class SampleRun:
    """The committed sample, copied and built once by `run`, with that first run's output."""

    config: Path
    output: str

    @property
    def builds(self) -> Path:
        return self.config.parent / "builds"

    def published(self) -> list[str]:
        return [build.name for build in published_builds(self.builds)]


@pytest.fixture(scope="module")
def sample_run(tmp_path_factory: pytest.TempPathFactory, coffee_sample: Path) -> SampleRun:
    # module-scoped, not shared: its tests run the build again, and the ledger keeps the paths
    project = tmp_path_factory.mktemp("cli") / "coffee_sample"
    shutil.copytree(coffee_sample, project)
    config = project / "demandprep.toml"
    result = RUNNER.invoke(app, ["run", str(config)], terminal_width=2000)
    assert result.exit_code == 0, result.output
    return SampleRun(config, result.output)


def test_build_ends_with_a_summary_of_what_it_made(sample_run: SampleRun) -> None:
    (build,) = sample_run.published()
    manifest = json.loads((sample_run.builds / build / "manifest.json").read_text())
    facts = manifest["facts"]
    markets = facts["market"]["assumptions"]["visits"]["markets"]
    products = facts["market"]["products_kept"]
    f_stat = facts["first_stage"]["partial_f"]
    lines = sample_run.output.splitlines()
    assert (
        f"summary: {markets} markets, {products} products, {len(manifest['warnings'])} "
        f"warnings, first-stage F {f_stat:.1f}"
    ) in lines
    for output in manifest["outputs"]:
        if "rows" in output:
            assert f"  {output['path']}: {output['rows']:,} rows" in lines


def test_outside_a_terminal_progress_is_one_log_line_per_stage_and_batch(
    sample_run: SampleRun,
) -> None:
    lines = sample_run.output.splitlines()
    stage_lines = [line for line in lines if line.startswith("stage ")]
    assert stage_lines[0].startswith("stage market_settings done in ")
    assert all(re.fullmatch(r"stage \w+ done in \d+\.\d s", line) for line in stage_lines)
    batch_lines = [line for line in lines if line.startswith("ingest ")]
    assert re.fullmatch(
        r"ingest catalogue: 1 file done in \d+\.\d s \(\d+ rows read, 0 failed\)", batch_lines[0]
    )
    assert any(line.startswith("ingest receipts: ") for line in batch_lines)


def test_second_run_with_nothing_new_skips_publishing(sample_run: SampleRun) -> None:
    before = sample_run.published()
    for command in ("run", "build"):
        result = RUNNER.invoke(app, [command, str(sample_run.config)], terminal_width=2000)
        assert result.exit_code == 0, result.output
        assert result.output.splitlines()[-1] == (
            f"nothing new since the latest build {before[-1]}: no input file, setting or "
            "demandprep code changed; skipped (pass --force to rebuild)"
        )
        assert sample_run.published() == before


def test_force_rebuilds_when_nothing_changed(sample_run: SampleRun) -> None:
    before = sample_run.published()
    result = RUNNER.invoke(app, ["build", "--force", str(sample_run.config)], terminal_width=2000)
    assert result.exit_code == 0, result.output
    after = sample_run.published()
    assert len(after) == len(before) + 1
    assert f"built {sample_run.builds / after[-1]}" in result.output


def test_check_reports_every_problem_it_can_find_before_a_run(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = copy_faults(tmp_path)
    text = config.read_text()
    text = text.replace('amount = "value"', 'amount = "line_value"', 1)
    text = text.replace('files = ["stores.csv"]\ndelimiter = ";"', 'files = ["stores.csv"]', 1)
    text = text.replace('keys = ["firm", "pack_grams"]', 'keys = ["firm", "pack_grams", "roast"]')
    text = text.replace('categories = ["coffee"]', 'categories = ["coffee", "tea"]', 1)
    config.write_text(text + '\n[products.equivalent_unit]\nkind = "item"\n')
    monkeypatch.delenv("DEMANDPREP_PSEUDONYM_KEY", raising=False)
    result = RUNNER.invoke(app, ["check", str(config)], terminal_width=2000)
    assert result.exit_code == 1, result.output
    lines = error_lines(result.output)
    receipts = config.parent / "receipts" / "receipts_2024-03-01.csv"
    assert lines[0].startswith(f"error: {receipts}: "), lines
    assert "'line_value'" in lines[0]
    assert lines[1:] == [
        f"error: {config.parent / 'stores.csv'}: the header has one column; the file seems to "
        "use ';'. Hint: set delimiter = \";\" under [sources.stores].",
        "error: config key 'products.keys' names 'roast', which sources.catalogue.columns does "
        "not map (it maps sku, category, firm, pack_grams). Hint: map it under "
        "[sources.catalogue.columns] or remove it from products.keys.",
        f"error: config key 'markets.categories': 'tea' does not occur in column 'aisle' of "
        f"{config.parent / 'catalogue.csv'} (it has coffee, grocery). Hint: list categories "
        "exactly as the catalogue spells them.",
        "error: environment variable DEMANDPREP_PSEUDONYM_KEY is not set; the choice build needs "
        "it as the key that pseudonymises loyalty-card ids. Hint: export "
        "DEMANDPREP_PSEUDONYM_KEY=<a long random secret> (keep it out of the config and the "
        "repository), or set choices.enabled = false.",
    ]


def test_check_refuses_a_short_pseudonym_key(
    monkeypatch: pytest.MonkeyPatch, coffee_sample: Path
) -> None:
    config = coffee_sample / "demandprep.toml"
    monkeypatch.setenv("DEMANDPREP_PSEUDONYM_KEY", "short")
    result = RUNNER.invoke(app, ["check", str(config)], terminal_width=2000)
    assert result.exit_code == 1, result.output
    assert error_lines(result.output) == [
        "error: environment variable DEMANDPREP_PSEUDONYM_KEY holds a pseudonym key shorter "
        "than 16 bytes (spaces aside); anyone holding the card ids could then guess the key and "
        "recompute the pseudonyms. Hint: set DEMANDPREP_PSEUDONYM_KEY to a long random secret, "
        'made for instance with python -c "import secrets; print(secrets.token_hex(32))".'
    ]


def test_check_of_a_sound_project_passes(coffee_sample: Path) -> None:
    config = coffee_sample / "demandprep.toml"
    result = RUNNER.invoke(app, ["check", str(config)], terminal_width=2000)
    assert result.exit_code == 0, result.output
    assert error_lines(result.output) == []
    assert result.output.splitlines()[-1].startswith(f"ok {config} is valid")


def test_check_names_each_role_column_its_source_does_not_provide(tmp_path: Path) -> None:
    config = copy_faults(tmp_path)
    config.write_text(
        config.read_text()
        + '\n[products.equivalent_unit]\nkind = "item"\n'
        + '\n[market_size.catchment]\nmethod = "population"\nunits_per_person_per_day = 0.01\n'
        + '\n[instruments]\ncharacteristic_sums = ["pack_grams"]\n'
        + 'cost_shifters = { join_on = ["period"], columns = ["fuel_index"] }\n'
        + '\n[choices]\ndemographics = ["income_band"]\n'
    )
    result = RUNNER.invoke(app, ["check", str(config)], terminal_width=2000)
    assert result.exit_code == 1, result.output
    assert error_lines(result.output) == [
        "error: config key 'market_size.catchment.population_column' names 'population', which "
        "sources.stores.columns does not map (it maps store, region). Hint: map it under "
        "[sources.stores.columns] or remove it from market_size.catchment.population_column.",
        "error: config key 'instruments.cost_shifters.columns' names 'fuel_index' but there is "
        "no [sources.cost_shifters] section. Hint: configure [sources.cost_shifters] or remove "
        "it from instruments.cost_shifters.columns.",
        "error: config key 'instruments.cost_shifters.join_on' names 'period' but there is no "
        "[sources.cost_shifters] section. Hint: configure [sources.cost_shifters] or remove it "
        "from instruments.cost_shifters.join_on.",
        "error: config key 'choices.demographics' names 'income_band' but there is no "
        "[sources.households] section. Hint: configure [sources.households] or remove it from "
        "choices.demographics.",
        "error: config key 'instruments.characteristic_sums' names 'pack_grams', which "
        "products.characteristics does not list. Hint: list it in products.characteristics so "
        "the market build carries it.",
    ]


def test_help_names_the_partitioning_section_literally() -> None:
    # the help is rendered as console markup, where a bracketed word would vanish
    result = RUNNER.invoke(app, ["partitioned", "--help"], terminal_width=200)
    assert result.exit_code == 0
    assert "on a Dask cluster (section partitioning)." in " ".join(result.output.split())


def test_a_receipts_header_with_a_mapped_column_twice_fails_check_and_ingest(
    tmp_path: Path,
) -> None:
    config = copy_faults(tmp_path)
    daily = sorted((config.parent / "receipts").rglob("*.csv"))[0]
    lines = daily.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(";")
    # a second 'qty' column at the end: before, its values replaced the first one's silently
    lines = [lines[0] + ";qty"] + [line + ";7" for line in lines[1:]]
    daily.write_text("\n".join(lines) + "\n", encoding="utf-8")
    expected = (
        f"error: {daily}: the header names column 'qty' (mapped to 'quantity') twice, as "
        f"columns {header.index('qty') + 1} and {len(header) + 1}. Hint: rename or remove one "
        "of them in the file."
    )
    for command in ("check", "ingest"):
        result = RUNNER.invoke(app, [command, str(config)], terminal_width=2000)
        assert "Traceback" not in result.output
        assert result.exit_code == 1, result.output
        assert expected in error_lines(result.output), result.output
