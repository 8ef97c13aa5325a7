"""Prepare the demo: invent the world, write its config beside it, provide a pseudonym key."""

from __future__ import annotations

import os
import secrets
from importlib import resources
from pathlib import Path

from demandprep.config import ChoicesSection

DEMO_CONFIG_NAME = "demandprep.toml"
DEMO_KEY_FILE = ".pseudonym_key"


def prepare_demo(out: Path, scale: float = 1.0, seed: int = 7) -> Path:
    """Generate the demo world into `out/world` (once) and return the path of its config."""
    from demandprep.demo.world import WorldSpec, generate_world

    world = out.resolve() / "world"
    if not (world / "truth.json").exists():
        defaults = WorldSpec()
        visits = max(1.0, defaults.visits_per_store_day * scale)
        generate_world(world, WorldSpec(seed=seed, visits_per_store_day=visits))
    config_path = world / DEMO_CONFIG_NAME
    template = resources.files("demandprep.templates").joinpath("demo.toml").read_text()
    config_path.write_text(template, encoding="utf-8")
    ensure_demo_pseudonym_key(world)
    return config_path


def ensure_demo_pseudonym_key(world: Path) -> None:
    """Give the demo a random pseudonym key kept beside its data, unless the user set one.

    Real projects set the key in the environment; the demo makes one so the quick start
    needs no set-up, and keeps it so rebuilds of the same demo are identical.
    """
    variable = ChoicesSection().pseudonym_key_env
    if os.environ.get(variable):
        return
    key_file = world / DEMO_KEY_FILE
    if not key_file.exists():
        key_file.write_text(secrets.token_hex(32))
        key_file.chmod(0o600)
    os.environ[variable] = key_file.read_text().strip()
