"""Builds of a private copy of the committed sample, for tests of the joinable tables."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

from demandprep.config import ProjectConfig, load_config
from demandprep.pipeline import run_build, run_ingest

# The sample config's market-size tables, from the comment above them to [shares].
MARKET_SIZE_BLOCK = re.compile(r"# Market-size assumptions.*?(?=\n\[shares\])", re.S)


def copy_sample(coffee_sample: Path, target: Path) -> Path:
    """A private copy of the sample folder; returns its config path."""
    shutil.copytree(coffee_sample, target)
    return target / "demandprep.toml"


def choice_only_text(config_text: str) -> str:
    """The sample config without its market-size tables: a choice-only project."""
    text, found = MARKET_SIZE_BLOCK.subn("", config_text)
    assert found == 1, "the sample config's market-size block moved"
    return text


def build_sample(config_path: Path) -> tuple[Path, ProjectConfig]:
    """Ingest and build the project at `config_path`; returns the build folder and config."""
    config = load_config(config_path)
    run_ingest(config)
    folder, _ctx = run_build(config)
    return folder, config
