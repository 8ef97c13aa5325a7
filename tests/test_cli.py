"""The `demandprep` command: verbs, exit codes and one-line failures."""

from __future__ import annotations

import shutil
from pathlib import Path

from typer.testing import CliRunner

from demandprep import __version__
from demandprep.cli import app
from demandprep.config import load_config

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
    assert target.read_text() == (TEMPLATES / "starter.toml").read_text()
    assert load_config(target, check_files=False).markets.period == "week"


def test_init_refuses_to_overwrite(tmp_path: Path) -> None:
    target = tmp_path / "project.toml"
    target.write_text("keep me")
    result = RUNNER.invoke(app, ["init", str(target)])
    assert result.exit_code == 1
    assert "already exists" in result.output
    assert target.read_text() == "keep me"


def test_check_of_a_broken_config_exits_1_with_one_line(tmp_path: Path) -> None:
    config = tmp_path / "demandprep.toml"
    shutil.copy(TEMPLATES / "starter.toml", config)
    result = RUNNER.invoke(app, ["check", str(config)])
    assert result.exit_code == 1
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1, result.output
    assert lines[0].startswith("error:")
    assert "'sources.receipts.files'" in lines[0]
    assert "Traceback" not in result.output


def test_check_lists_every_source_it_would_read(tmp_path: Path) -> None:
    config = tmp_path / "demandprep.toml"
    shutil.copy(TEMPLATES / "demo.toml", config)
    names = ["catalogue.csv", "stores.csv", "households.csv", "shelf_prices.csv"]
    names += ["market_sizes.csv", "cost_shifters.csv", "receipts/2024/receipts_2024-01-01.csv.gz"]
    for name in names:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_text("x\n")
    result = RUNNER.invoke(app, ["check", str(config)], terminal_width=200)
    assert result.exit_code == 0, result.output
    for source in ("receipts", "catalogue", "stores", "households", "shelf_prices"):
        assert source in result.output
    assert "is valid" in result.output


def test_ingest_with_an_unreadable_file_loads_the_rest_and_exits_1(tmp_path: Path) -> None:
    project = tmp_path / "faults"
    shutil.copytree(Path(__file__).resolve().parents[1] / "data_samples" / "faults", project)
    broken = project / "receipts" / "receipts_zz_broken.csv"
    broken.write_bytes(b"\xff\xfe\x00garbage\x00\n\x00\x01")
    result = RUNNER.invoke(app, ["ingest", str(project / "demandprep.toml")], terminal_width=300)
    assert result.exit_code == 1, result.output
    error_lines = [line for line in result.output.splitlines() if line.startswith("error:")]
    assert len(error_lines) == 1
    assert error_lines[0].startswith(f"error: {broken}: ")
    assert "files new" in result.output
