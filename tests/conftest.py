"""Test-session set-up shared by every test module."""

from __future__ import annotations

import atexit
import os
import shutil
import tempfile
from pathlib import Path

# Prefect reads its settings at import: give the session its own home, no telemetry, no network.
_PREFECT_HOME = Path(tempfile.mkdtemp(prefix="demandprep-prefect-"))
atexit.register(shutil.rmtree, _PREFECT_HOME, ignore_errors=True)
os.environ.setdefault("PREFECT_HOME", str(_PREFECT_HOME))
os.environ.setdefault("PREFECT_SERVER_ANALYTICS_ENABLED", "false")
os.environ.setdefault("DO_NOT_TRACK", "1")
os.environ.setdefault("DEMANDPREP_PSEUDONYM_KEY", "test-session-key-not-secret")

import pytest  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
TEMPLATES = REPO / "src" / "demandprep" / "templates"


@pytest.fixture(scope="session")
def repo_root() -> Path:
    """The repository's root folder."""
    return REPO
