"""The nightly flow run under Prefect's test harness (one local test server for the session).

A first night over the committed sample's first two weeks runs once; each test restores that
state into the same folder (the ledger holds absolute paths) and plays the next night, usually
with the following day's file delivered. The flow runs in this process, so a stage can be
monkeypatched to fail.
"""

from __future__ import annotations

import gzip
import hashlib
import shutil
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pytest
from ingest_fixtures import drop_catalogue_line

from demandprep.config import ProjectConfig, load_config
from demandprep.errors import UserError
from demandprep.export import folder as export_folder
from demandprep.export.folder import latest_build, published_builds
from demandprep.export.root_lock import export_root_lock
from demandprep.flows import nightly
from demandprep.flows.build_log import build_log_path
from demandprep.pipeline import run_build, run_ingest
from demandprep.stage import Stage
from demandprep.warehouse import writer_lock

REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "data_samples" / "coffee_sample"
# two weeks keep each night short; the sample's later days are left out
FIRST_NIGHT_UNTIL = "2024-01-14"
NEXT_DAY = Path("receipts/2024/receipts_2024-01-15.csv.gz")


# one Prefect test server for the session (conftest), started by the first module that needs it
pytestmark = pytest.mark.usefixtures("prefect_server")


@dataclass(frozen=True)
class NightOne:
    """The sample folder after one flow run, and a pristine copy of it to restore from."""

    folder: Path
    snapshot: Path
    build_name: str

    @property
    def config_path(self) -> Path:
        return self.folder / "demandprep.toml"

    def restore(self) -> ProjectConfig:
        """Put the folder back exactly as the first night left it; returns its config."""
        shutil.rmtree(self.folder, ignore_errors=True)
        shutil.copytree(self.snapshot, self.folder, symlinks=True)
        return load_config(self.config_path)


@pytest.fixture(scope="module")
def night_one(tmp_path_factory: pytest.TempPathFactory, prefect_server: None) -> NightOne:
    """The first night: the references and two weeks of receipts, ingested and published."""
    base = tmp_path_factory.mktemp("nightly")
    folder = base / "sample"
    shutil.copytree(SAMPLE, folder)  # with the sample's own demandprep.toml
    for receipts in (folder / NEXT_DAY).parent.glob("receipts_*.csv.gz"):
        if receipts.name > f"receipts_{FIRST_NIGHT_UNTIL}.csv.gz":
            receipts.unlink()
    state = run_night(folder / "demandprep.toml")
    assert state.is_completed(), state.message
    snapshot = base / "snapshot"
    shutil.copytree(folder, snapshot, symlinks=True)
    return NightOne(folder, snapshot, Path(state.result()["build"]).name)


def run_night(config_path: Path):
    """One nightly flow run; returns its final Prefect state."""
    return nightly.nightly_flow(str(config_path), return_state=True)


def add_next_day(night: NightOne, content: bytes | None = None) -> Path:
    """Deliver the next day's receipts file (or other bytes under its name); returns its path."""
    target = night.folder / NEXT_DAY
    target.write_bytes((SAMPLE / NEXT_DAY).read_bytes() if content is None else content)
    return target


def parquet_digests(build: Path) -> dict[str, str]:
    """sha256 of every Parquet file of a build folder, by its path inside the folder."""
    return {
        path.relative_to(build).as_posix(): hashlib.sha256(path.read_bytes()).hexdigest()
        for path in sorted(build.rglob("*.parquet"))
    }


def ledger_rows(config: ProjectConfig, path: Path) -> list[tuple[int, str]]:
    """The (version, status) ledger rows of one input file, oldest first."""
    with duckdb.connect(str(config.warehouse.path), read_only=True) as con:
        return con.execute(
            "select version, status from ledger where path = $path order by version",
            {"path": str(path)},
        ).fetchall()


def last_log_line(config: ProjectConfig) -> str:
    """The newest line of the build log."""
    return build_log_path(config).read_text(encoding="utf-8").splitlines()[-1]


def fail_stage(stages: tuple[Stage, ...], name: str, reason: str) -> tuple[Stage, ...]:
    """The stage list with stage `name` replaced by one that raises a UserError."""

    def broken(ctx) -> None:
        raise UserError(reason)

    assert name in [stage.name for stage in stages]
    return tuple(Stage(s.name, broken) if s.name == name else s for s in stages)


def test_flow_publishes_the_same_build_as_the_direct_runner(night_one: NightOne) -> None:
    config = night_one.restore()
    flowed = config.export.root / night_one.build_name
    flow_digests = parquet_digests(flowed)
    # the same inputs at the same paths, into a fresh warehouse and build root
    shutil.rmtree(config.warehouse.path.parent)
    shutil.rmtree(config.export.root)

    run_ingest(config)
    direct, _ = run_build(config)

    direct_digests = parquet_digests(direct)
    assert {"ledger.parquet", "quarantine.parquet", "choices.parquet"} <= set(direct_digests)
    # the exported ledger leaves out load times, so even it is byte-identical
    assert flow_digests == direct_digests


def test_adding_one_day_ingests_exactly_that_file(night_one: NightOne) -> None:
    config = night_one.restore()
    delivered = add_next_day(night_one)

    state = run_night(night_one.config_path)

    assert state.is_completed(), state.message
    assert state.result()["ingested"] == [str(delivered)]
    assert ledger_rows(config, delivered) == [(1, "current")]
    latest = latest_build(config.export.root)
    assert latest is not None and latest.name != night_one.build_name
    assert delivered.name in (latest / "manifest.json").read_text(encoding="utf-8")


def test_night_with_nothing_new_makes_no_build_and_says_so(night_one: NightOne) -> None:
    config = night_one.restore()
    builds_before = published_builds(config.export.root)

    state = run_night(night_one.config_path)

    assert state.is_completed(), state.message
    assert state.result()["status"] == "skipped"
    assert "nothing new" in state.message
    assert published_builds(config.export.root) == builds_before
    assert " status=skipped nothing new" in last_log_line(config)


def test_failing_stage_leaves_latest_and_fails_the_run_with_its_reason(
    night_one: NightOne, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = night_one.restore()
    add_next_day(night_one)
    stages = nightly.build_stages(config)
    victim = stages[len(stages) // 2].name
    reason = f"forced failure in stage {victim}"
    monkeypatch.setattr(nightly, "build_stages", lambda cfg: fail_stage(stages, victim, reason))

    state = run_night(night_one.config_path)

    assert state.is_failed()
    assert reason in state.message
    assert latest_build(config.export.root).name == night_one.build_name
    assert [b.name for b in published_builds(config.export.root)] == [night_one.build_name]
    line = last_log_line(config)
    assert (
        " status=failed " in line
        and reason in line
        and str(state.state_details.flow_run_id) in line
    )


def test_night_holds_the_warehouse_writer_lock_between_its_tasks(
    night_one: NightOne, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = night_one.restore()
    add_next_day(night_one)
    seen: list[str] = []

    def probe_lock(cfg: ProjectConfig) -> tuple[Stage, ...]:
        # the stage list is asked for in the flow body, after the ingest tasks and before the
        # stage tasks: another writer arriving then must be refused
        try:
            with writer_lock(cfg.warehouse.path, timeout_seconds=0):
                seen.append("free")
        except UserError:
            seen.append("held")
        raise UserError("probe done")

    monkeypatch.setattr(nightly, "build_stages", probe_lock)

    state = run_night(night_one.config_path)

    assert seen == ["held"]
    assert state.is_failed() and "probe done" in state.message
    with writer_lock(config.warehouse.path, timeout_seconds=0):
        pass  # and released once the night is over


def stored_summary_files(config: ProjectConfig) -> list[tuple[str, str]]:
    """The receipts files each kept period summary was built from."""
    with duckdb.connect(str(config.warehouse.path), read_only=True) as con:
        return con.execute(
            "select summary, file_id from market_summary_files order by all"
        ).fetchall()


def test_a_stage_failing_after_the_summaries_leaves_them_as_they_were(
    night_one: NightOne, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = night_one.restore()
    before = stored_summary_files(config)
    add_next_day(night_one)
    stages = nightly.build_stages(config)
    reason = "forced failure in stage share_table"
    monkeypatch.setattr(
        nightly, "build_stages", lambda cfg: fail_stage(stages, "share_table", reason)
    )

    state = run_night(night_one.config_path)

    assert state.is_failed() and reason in state.message
    assert stored_summary_files(config) == before


@pytest.mark.slow
def test_night_after_a_failure_rebuilds_without_new_files(
    night_one: NightOne, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = night_one.restore()
    add_next_day(night_one)
    stages = nightly.build_stages(config)
    with monkeypatch.context() as patch:
        patch.setattr(nightly, "build_stages", lambda cfg: fail_stage(stages, stages[-1].name, "x"))
        assert run_night(night_one.config_path).is_failed()

    state = run_night(night_one.config_path)

    # the failed night ingested the next day already: nothing is left to ingest tonight, but
    # `latest` lacks that day, so the night must rebuild
    assert state.is_completed(), state.message
    assert (state.result()["status"], state.result()["ingested"]) == ("published", [])
    assert latest_build(config.export.root).name != night_one.build_name


@pytest.mark.slow
def test_corrected_file_is_reingested_and_rebuilt(night_one: NightOne) -> None:
    config = night_one.restore()
    corrected = night_one.folder / "shelf_prices.csv"
    lines = corrected.read_text(encoding="utf-8").splitlines(keepends=True)
    corrected.write_text("".join(lines[:-1]), encoding="utf-8")  # the last price withdrawn

    state = run_night(night_one.config_path)

    assert state.is_completed(), state.message
    assert state.result()["ingested"] == [str(corrected)]
    assert [status for _, status in ledger_rows(config, corrected)] == ["superseded", "current"]
    manifest = (latest_build(config.export.root) / "manifest.json").read_text(encoding="utf-8")
    assert hashlib.sha256(corrected.read_bytes()).hexdigest() in manifest


class CountingIngest:
    """Wraps `ingest_file` to count how often the next day's file is attempted."""

    def __init__(self, real) -> None:
        self.real, self.attempts = real, 0

    def __call__(self, con, config, discovered):
        if discovered.path.name == NEXT_DAY.name:
            self.attempts += 1
        return self.real(con, config, discovered)


@pytest.fixture
def counted_ingest(monkeypatch: pytest.MonkeyPatch) -> CountingIngest:
    """The real ingest, counted, with ingest retries that do not wait."""
    counter = CountingIngest(nightly.ingest_file)
    monkeypatch.setattr(nightly, "ingest_file", counter)
    quick = nightly.ingest_task.with_options(retry_delay_seconds=0)
    monkeypatch.setattr(nightly, "ingest_task", quick)
    return counter


def test_unreadable_file_is_retried_then_fails_the_night(
    night_one: NightOne, counted_ingest: CountingIngest
) -> None:
    config = night_one.restore()
    whole = (SAMPLE / NEXT_DAY).read_bytes()
    add_next_day(night_one, whole[: len(whole) // 2])  # a gzip cut off mid-copy

    state = run_night(night_one.config_path)

    assert state.is_failed()
    assert counted_ingest.attempts == 1 + nightly.INGEST_RETRIES
    assert NEXT_DAY.name in state.message and "cannot be read" in state.message
    assert latest_build(config.export.root).name == night_one.build_name


def test_file_breaking_the_schema_is_not_retried(
    night_one: NightOne, counted_ingest: CountingIngest
) -> None:
    config = night_one.restore()
    text = gzip.decompress((SAMPLE / NEXT_DAY).read_bytes()).decode("utf-8")
    header, rest = text.split("\n", 1)
    assert "qty" in header.split(",")
    add_next_day(night_one, gzip.compress((header.replace("qty", "amount") + "\n" + rest).encode()))

    state = run_night(night_one.config_path)

    assert state.is_failed()
    assert counted_ingest.attempts == 1
    assert "'qty'" in state.message
    assert latest_build(config.export.root).name == night_one.build_name


def test_night_with_a_restored_latest_folder_fails_in_one_line_and_touches_nothing(
    night_one: NightOne, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = night_one.restore()
    add_next_day(night_one)
    root = config.export.root
    (root / "latest").unlink()
    shutil.copytree(root / night_one.build_name, root / "latest")  # what a copy-restore makes
    asked: list[str] = []
    monkeypatch.setattr(nightly, "build_stages", lambda cfg: asked.append("stages") or ())

    state = run_night(night_one.config_path)

    assert state.is_failed()
    assert state.message == (
        f"{root}/latest is a folder, not the link demandprep keeps. "
        "Hint: move it away (it looks like a restored copy) and build again."
    )
    assert asked == []
    assert [b.name for b in published_builds(root)] == [night_one.build_name]
    assert (root / "latest").is_dir() and not (root / "latest").is_symlink()


def test_night_holds_the_export_root_lock_while_it_publishes(
    night_one: NightOne, monkeypatch: pytest.MonkeyPatch
) -> None:
    config = night_one.restore()
    add_next_day(night_one)
    seen: list[str] = []
    real_publish = export_folder.publish  # the flow publishes through folder.publish_build

    def probing_publish(staging: Path, root: Path) -> Path:
        try:
            with export_root_lock(root, timeout_seconds=0):
                seen.append("free")
        except UserError:
            seen.append("held")
        return real_publish(staging, root)

    monkeypatch.setattr(export_folder, "publish", probing_publish)

    state = run_night(night_one.config_path)

    assert state.is_completed(), state.message
    assert seen == ["held"]
    with export_root_lock(config.export.root, timeout_seconds=0):
        pass  # and released once the night is over


def test_night_reads_again_the_files_a_catalogue_change_judges_anew(
    night_one: NightOne, tmp_path: Path
) -> None:
    # the catalogue stops listing C0102: the night must read again the receipts and shelf-price
    # files with its rows, as the direct ingest does, so the warehouse equals a fresh ingest of
    # the same files. Before, the flow ingested only new and changed files and kept every row
    config = night_one.restore()
    catalogue = night_one.folder / "catalogue.csv"
    drop_catalogue_line(catalogue, "C0102")
    fresh = tmp_path / "fresh"
    shutil.copytree(night_one.folder, fresh, ignore=shutil.ignore_patterns("warehouse", "builds"))
    run_ingest(load_config(fresh / "demandprep.toml"))

    state = run_night(night_one.config_path)

    assert state.is_completed(), state.message
    counts = (
        "select (select count(*) from raw_lines where sku = 'C0102'), "
        "(select count(*) from shelf_prices where sku = 'C0102'), "
        "(select count(*) from quarantine where reason = 'unknown_sku')"
    )
    with duckdb.connect(str(fresh / "warehouse" / "demandprep.duckdb"), read_only=True) as con:
        expected = con.execute(counts).fetchone()
    with duckdb.connect(str(config.warehouse.path), read_only=True) as con:
        assert con.execute(counts).fetchone() == expected
    assert expected[:2] == (0, 0) and expected[2] > 0
