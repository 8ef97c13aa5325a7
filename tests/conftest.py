"""Test-session set-up shared by every test module."""

from __future__ import annotations

import atexit
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

# Prefect reads its settings at import: give the session its own home, no telemetry, no network.
_PREFECT_HOME = Path(tempfile.mkdtemp(prefix="demandprep-prefect-"))
atexit.register(shutil.rmtree, _PREFECT_HOME, ignore_errors=True)
os.environ.setdefault("PREFECT_HOME", str(_PREFECT_HOME))
os.environ.setdefault("PREFECT_SERVER_ANALYTICS_ENABLED", "false")
os.environ.setdefault("DO_NOT_TRACK", "1")
os.environ.setdefault("DEMANDPREP_PSEUDONYM_KEY", "test-session-key-not-secret")

import pytest  # noqa: E402
from demo_worlds import (  # noqa: E402
    CLEAN,
    FAULTY,
    LOGIT,
    NESTED_LOGIT,
    NESTED_STORE_WEEK,
    SMALL,
    DemoWorlds,
)

REPO = Path(__file__).resolve().parents[1]
HARNESS_START_TIMEOUT_SECONDS = 180
TEMPLATES = REPO / "src" / "demandprep" / "templates"
COFFEE_SAMPLE = REPO / "data_samples" / "coffee_sample"


@pytest.fixture(scope="session")
def repo_root() -> Path:
    """The repository's root folder."""
    return REPO


@pytest.fixture(scope="session")
def prefect_server() -> Iterator[None]:
    """One Prefect test server for every flow run of the session (it takes ~20 s to start)."""
    from prefect.testing.utilities import prefect_test_harness

    with prefect_test_harness(server_startup_timeout=HARNESS_START_TIMEOUT_SECONDS):
        yield


# ---------- demo worlds: generated once per session; copy one before writing into it ----------


@pytest.fixture(scope="session")
def demo_worlds(tmp_path_factory: pytest.TempPathFactory) -> DemoWorlds:
    """The session's cache of generated demo worlds (tests/demo_worlds.py names their specs)."""
    return DemoWorlds(tmp_path_factory.mktemp("demo-worlds"))


@pytest.fixture(scope="session")
def small_world(demo_worlds: DemoWorlds) -> Path:
    """Four stores, two weeks, default switches and fault rates (read-only)."""
    return demo_worlds.folder(SMALL)


@pytest.fixture(scope="session")
def faulty_world(demo_worlds: DemoWorlds) -> Path:
    """The small world with a 5% fault rate, so every fault kind occurs (read-only)."""
    return demo_worlds.folder(FAULTY)


@pytest.fixture(scope="session")
def clean_world(demo_worlds: DemoWorlds) -> Path:
    """The small world without faults, returns or voids (read-only)."""
    return demo_worlds.folder(CLEAN)


@pytest.fixture(scope="session")
def nested_store_week_world(demo_worlds: DemoWorlds) -> Path:
    """One large nested-logit store-week without demand shocks (read-only)."""
    return demo_worlds.folder(NESTED_STORE_WEEK)


@pytest.fixture(scope="session")
def logit_world(demo_worlds: DemoWorlds) -> Path:
    """Plain-logit recovery world: large store-weeks, every switch off (read-only)."""
    return demo_worlds.folder(LOGIT)


@pytest.fixture(scope="session")
def nested_logit_world(demo_worlds: DemoWorlds) -> Path:
    """Nested-logit recovery world: no demand shock, more price variation (read-only)."""
    return demo_worlds.folder(NESTED_LOGIT)


# ---------- the committed sample and the export fixture build ----------


@pytest.fixture()
def one_line_report(monkeypatch: pytest.MonkeyPatch) -> None:
    """Exports write a one-line report.html: for tests about folders and bytes, not plots."""

    def write_one_line_report(ctx, staging_dir: Path, inputs) -> Path:
        path = staging_dir / "report.html"
        path.write_text(f"<!DOCTYPE html><title>{inputs.build_id}</title>", encoding="utf-8")
        return path

    monkeypatch.setattr("demandprep.export.build.write_report", write_one_line_report)


@pytest.fixture(scope="session")
def coffee_sample() -> Path:
    """The committed sample folder (data_samples/coffee_sample); copy it before running on it."""
    return COFFEE_SAMPLE


@pytest.fixture(scope="session")
def single_process_build(coffee_sample: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The sample built once by the one-process runner: the partitioned tests' reference."""
    from demandprep.config import load_config
    from demandprep.pipeline import run_build, run_ingest

    folder = tmp_path_factory.mktemp("single") / "sample"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config = load_config(folder / "demandprep.toml")
    run_ingest(config)
    build, _ = run_build(config)
    return build


@pytest.fixture(scope="session")
def filled_warehouses(tmp_path_factory: pytest.TempPathFactory):
    """The export fixture's hand-filled warehouses, each filled once; `.copy(target, occasions)`."""
    from export_fixtures import FilledWarehouses

    return FilledWarehouses(tmp_path_factory.mktemp("filled-warehouses"))


@pytest.fixture(scope="session")
def shared_export_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One full export of the hand-filled warehouse (Parquet, CSV, Stata, report), read-only."""
    from export_fixtures import SHARED_NOW, build_fixture_folder

    return build_fixture_folder(
        tmp_path_factory.mktemp("export-shared"),
        {"extra_formats": ["csv", "dta"], "row_group_rows": 1024},
        now=SHARED_NOW,
    )
