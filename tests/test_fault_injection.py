"""Kill ingest, build and export at every boundary (SIGKILL) and check the exact recovery.

tests/fault_runner.py runs each ingest or build in a forked child and kills it at the Nth call
of a boundary function (see its TRAPS); nothing in the production code knows about it. After
every kill this test checks, from the outside:

- the warehouse opens; the ledger adds up (each current file: read = accepted + quarantined,
  matching the rows really in raw_lines / ref_<table> and quarantine); no rows belong to a file
  the ledger does not hold as current (nothing half-loaded); one current row per path;
- `latest` is the build it was before the kill (or absent), whose files are unchanged, unless
  the kill came after `latest` moved: then `latest` is the new build, complete;
- after the next successful build: no staging folder or other debris under the export root,
  and the Parquet files are byte-identical (sha256) to an uninterrupted run of the same inputs
  (ledger.parquet included).

The world is a small invented demo world (4 stores, 2 weeks), not the committed sample, to
keep the default run short. `pytest -m slow tests/test_fault_injection.py` adds kills at every
batch of the ingest and random kills (random boundary and call, or a random delay), with
DEMANDPREP_FAULT_ROUNDS (default 5) and DEMANDPREP_FAULT_SEED (default 1).
"""

from __future__ import annotations

import json
import os
import random
import shutil
import subprocess
import sys
from collections import Counter
from collections.abc import Iterator
from pathlib import Path

import pytest

from demandprep.config import ProjectConfig, load_config
from demandprep.demo.world import WorldSpec, generate_world
from demandprep.export.folder import BUILD_ID, LATEST, STAGING, latest_build
from demandprep.export.manifest import file_sha256
from demandprep.export.root_lock import LOCK_FILE
from demandprep.stages import build_stages
from demandprep.warehouse import open_warehouse

REPO = Path(__file__).resolve().parents[1]
RUNNER = Path(__file__).with_name("fault_runner.py")
SAMPLE_CONFIG = REPO / "data_samples" / "coffee_sample" / "demandprep.toml"
SPEC = WorldSpec(
    seed=3, n_stores=4, n_regions=2, weeks=2, visits_per_store_day=15.0, households=200
)
# the sample's config, cut to the small world's two weeks; keep one build so every build prunes
CONFIG_EDITS = {
    'valid_to = "2024-02-18"': 'valid_to = "2024-01-14"',
    "keep_last = 5": "keep_last = 1",
}
REFERENCE_BATCHES = 6  # catalogue, stores, households, shelf prices, market sizes, cost shifters
ACCEPTED_TABLES = {
    "receipts": "raw_lines",
    "catalogue": "ref_catalogue",
    "stores": "ref_stores",
    "households": "ref_households",
    "shelf_prices": "ref_shelf_prices",
    "market_sizes": "ref_market_size_table",
    "cost_shifters": "ref_cost_shifters",
}
# export boundaries before `latest` moves, in the order an export reaches them
EXPORT_BEFORE_LATEST = (
    ("export.staging_opened", 1),
    ("export.parquet", 1),
    ("export.manifest", 1),
    ("export.rename", 1),
    ("export.latest", 1),
)
EXPORT_AFTER_LATEST = (("export.latest_moved", 1), ("export.pruning", 2))
STEP_FIRST_STAGES = ("market_settings", "instrument_inputs", "choice_inputs")


class FaultRunner:
    """The fork server of tests/fault_runner.py, one command at a time."""

    def __init__(self) -> None:
        self.process = subprocess.Popen(
            [sys.executable, str(RUNNER)],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
            cwd=REPO,
        )

    def run(
        self,
        action: str,
        config: Path,
        trap: tuple[str, int] | None = None,
        kill_after_seconds: float | None = None,
        full_report: bool = False,
    ) -> str:
        """Run ingest or build in a child; returns 'killed', 'completed' or 'error'."""
        command = {
            "action": action,
            "config": str(config),
            "trap": {"target": trap[0], "call": trap[1]} if trap else None,
            "kill_after_seconds": kill_after_seconds,
            "full_report": full_report,
        }
        assert self.process.stdin is not None and self.process.stdout is not None
        self.process.stdin.write(json.dumps(command) + "\n")
        self.process.stdin.flush()
        answer = json.loads(self.process.stdout.readline())
        return answer["outcome"]

    def close(self) -> None:
        """Stop the server (its stdin closes, it exits) and close its output pipe."""
        assert self.process.stdin is not None and self.process.stdout is not None
        self.process.stdin.close()
        self.process.wait(timeout=60)
        self.process.stdout.close()


@pytest.fixture(scope="module")
def runner() -> Iterator[FaultRunner]:
    server = FaultRunner()
    yield server
    server.close()


def make_world(folder: Path) -> Path:
    """The small demo world with the sample's config; returns the config path."""
    generate_world(folder, SPEC)
    text = SAMPLE_CONFIG.read_text(encoding="utf-8")
    for old, new in CONFIG_EDITS.items():
        assert old in text
        text = text.replace(old, new)
    (folder / "demandprep.toml").write_text(text, encoding="utf-8")
    return folder / "demandprep.toml"


def parquet_fingerprint(build: Path) -> dict[str, str]:
    """file -> sha256 of every Parquet file of a build."""
    return {path.name: file_sha256(path) for path in sorted(build.glob("*.parquet"))}


def reference_run(runner: FaultRunner, config_path: Path) -> dict[str, object]:
    """Ingest and build without faults, then forget the warehouse and builds; the fingerprint."""
    assert runner.run("ingest", config_path) == "completed"
    assert runner.run("build", config_path) == "completed"
    config = load_config(config_path)
    fingerprint = parquet_fingerprint(latest_build(config.export.root))
    shutil.rmtree(config.warehouse.path.parent)
    shutil.rmtree(config.export.root)
    return fingerprint


def ledger_problems(config: ProjectConfig) -> list[str]:
    """Where the warehouse (opened as the next run would) breaks the ledger's promise."""
    problems = []
    with open_warehouse(config.warehouse) as con:
        tables = {
            row[0] for row in con.execute("select table_name from duckdb_tables()").fetchall()
        }
        if "ledger" not in tables:
            return []  # killed before the ingest's tables were committed: nothing went in
        current = con.execute(
            "select file_id, source, path, rows_read, rows_accepted, rows_quarantined "
            "from ledger where status = 'current'"
        ).fetchall()
        paths = [row[2] for row in current]
        if len(paths) != len(set(paths)):
            problems.append("a path has two current ledger rows")
        current_ids = {row[0] for row in current}
        for _, _, path, read, accepted, quarantined in current:
            if read != accepted + quarantined:
                problems.append(f"{path}: read {read} != {accepted} + {quarantined}")
        for source, table in ACCEPTED_TABLES.items():
            if table not in tables:
                continue
            counts = dict(
                con.execute(f"select file_id, count(*) from {table} group by all").fetchall()  # noqa: S608
            )
            for file_id, row_source, path, _, accepted, _ in current:
                if row_source == source and counts.get(file_id, 0) != accepted:
                    problems.append(f"{path}: {counts.get(file_id, 0)} rows, ledger {accepted}")
            orphans = set(counts) - current_ids
            if orphans:
                problems.append(f"{table} holds rows of files not current: {sorted(orphans)}")
        quarantined = dict(
            con.execute("select file_id, count(*) from quarantine group by all").fetchall()
        )
        for file_id, _, path, _, _, expected in current:
            if quarantined.get(file_id, 0) != expected:
                problems.append(
                    f"{path}: {quarantined.get(file_id, 0)} quarantined, ledger {expected}"
                )
        if set(quarantined) - current_ids:
            problems.append("the quarantine holds rows of files not current")
    return problems


def export_debris(root: Path) -> list[str]:
    """Anything under the export root besides published builds, `latest`, the publishers' lock
    file and an empty staging."""
    if not root.exists():
        return []
    found = [
        entry.name
        for entry in root.iterdir()
        if entry.name not in (LATEST, STAGING, LOCK_FILE)
        and not (entry.is_dir() and BUILD_ID.match(entry.name))
    ]
    staging = root / STAGING
    if staging.exists():
        found += [f"{STAGING}/{entry.name}" for entry in staging.iterdir()]
    return sorted(found)


def check_after_kill(
    config: ProjectConfig, before: Path | None, before_files: dict | None, published: bool
) -> None:
    """The warehouse adds up; `latest` is the previous build, untouched, or (killed after
    `latest` moved) a new complete build."""
    assert ledger_problems(config) == []
    latest = latest_build(config.export.root)
    if not published:
        assert (latest and latest.name) == (before and before.name)
    else:
        assert latest is not None and (before is None or latest.name != before.name)
        assert (latest / "manifest.json").is_file()
    if latest is not None and before is not None and latest.name == before.name:
        assert parquet_fingerprint(latest) == before_files


def check_rebuilt(runner: FaultRunner, config_path: Path, reference: dict) -> Path:
    """A clean build after the faults: identical Parquet, no staging folder left; returns it."""
    assert runner.run("build", config_path) == "completed"
    config = load_config(config_path)
    latest = latest_build(config.export.root)
    assert latest is not None
    assert parquet_fingerprint(latest) == reference
    assert staging_folders(config.export.root) == []
    return latest


def staging_folders(root: Path) -> list[str]:
    """Folders left in the export's staging area (a build being written, or parked to delete)."""
    staging = root / STAGING
    if not staging.exists():
        return []
    return sorted(entry.name for entry in staging.iterdir() if entry.is_dir())


def kill_ingest(runner: FaultRunner, config_path: Path, trap: tuple[str, int]) -> None:
    """One ingest killed at `trap`, then the warehouse checks (no build exists yet)."""
    assert runner.run("ingest", config_path, trap) == "killed", trap
    config = load_config(config_path)
    assert ledger_problems(config) == [], trap
    assert latest_build(config.export.root) is None


# in one warehouse, one after another: each run starts where the last kill left it
INGEST_KILLS = (
    ("ingest.staged", 1),  # the first batch read, nothing written
    ("ingest.ledgered", 2),  # batch 1 committed, batch 2 written but not committed
    ("ingest.committed", 2),  # two more batches committed
    ("ingest.ledgered", REFERENCE_BATCHES - 2),  # the receipts batch, before its commit
)


def test_ingest_killed_at_each_boundary_recovers_exactly(
    runner: FaultRunner, tmp_path: Path
) -> None:
    config_path = make_world(tmp_path / "world")
    reference = reference_run(runner, config_path)
    for trap in INGEST_KILLS:
        kill_ingest(runner, config_path, trap)
    assert runner.run("ingest", config_path) == "completed"
    assert ledger_problems(load_config(config_path)) == []
    check_rebuilt(runner, config_path, reference)


def first_stage_of_each_step(config: ProjectConfig) -> list[int]:
    """1-based positions of the first market, instrument and choice stage."""
    names = [stage.name for stage in build_stages(config)]
    firsts = [names.index(name) + 1 for name in STEP_FIRST_STAGES if name in names]
    assert firsts[0] == 1 and len(firsts) == len(STEP_FIRST_STAGES)
    return firsts


def built_world(runner: FaultRunner, folder: Path) -> tuple[Path, Path, dict[str, object]]:
    """The small world ingested and built once without faults: config, build, fingerprint."""
    config_path = make_world(folder)
    assert runner.run("ingest", config_path) == "completed"
    assert runner.run("build", config_path) == "completed"
    build = latest_build(load_config(config_path).export.root)
    assert build is not None
    return config_path, build, parquet_fingerprint(build)


def kill_and_check(
    runner: FaultRunner, config_path: Path, action: str, trap: tuple[str, int], state: list
) -> None:
    """Kill `action` at `trap`; check the warehouse and `latest`; `state` = [build, files]."""
    config = load_config(config_path)
    assert runner.run(action, config_path, trap) == "killed", trap
    published = trap in EXPORT_AFTER_LATEST
    check_after_kill(config, state[0], state[1], published=published)
    if published:
        state[0] = latest_build(config.export.root)
        assert parquet_fingerprint(state[0]) == state[1], trap


def test_build_and_export_killed_at_each_boundary_keep_latest_and_rebuild_identically(
    runner: FaultRunner, tmp_path: Path
) -> None:
    config_path, before, reference = built_world(runner, tmp_path / "world")
    state = [before, reference]
    # between steps: before the first stage of market, instruments and choices
    for position in first_stage_of_each_step(load_config(config_path)):
        kill_and_check(runner, config_path, "build", ("build.stage", position), state)
    # after the last stage: the export's boundaries, reached by exporting the stage tables
    for trap in EXPORT_BEFORE_LATEST + EXPORT_AFTER_LATEST:
        kill_and_check(runner, config_path, "export", trap, state)
    check_rebuilt(runner, config_path, reference)
    # last, so that everything above is known to hold when only this fails
    root = load_config(config_path).export.root
    debris = export_debris(root)
    assert debris == [], f"killed publications left files the next build kept: {debris}"


@pytest.mark.slow
def test_build_killed_before_every_stage_keeps_latest_and_rebuilds_identically(
    runner: FaultRunner, tmp_path: Path
) -> None:
    config_path, before, reference = built_world(runner, tmp_path / "world")
    state = [before, reference]
    for position in range(1, len(build_stages(load_config(config_path))) + 1):
        kill_and_check(runner, config_path, "build", ("build.stage", position), state)
    for trap in EXPORT_BEFORE_LATEST + EXPORT_AFTER_LATEST:
        kill_and_check(runner, config_path, "build", trap, state)
    check_rebuilt(runner, config_path, reference)


@pytest.mark.slow
def test_ingest_killed_at_every_batch_boundary_recovers_exactly(
    runner: FaultRunner, tmp_path: Path
) -> None:
    config_path = make_world(tmp_path / "world")
    config = load_config(config_path)
    reference = reference_run(runner, config_path)
    for target in ("ingest.staged", "ingest.ledgered", "ingest.committed"):
        for call in range(1, REFERENCE_BATCHES + 2):
            shutil.rmtree(config.warehouse.path.parent, ignore_errors=True)
            kill_ingest(runner, config_path, (target, call))
            assert runner.run("ingest", config_path) == "completed"
            assert ledger_problems(config) == [], (target, call)
    check_rebuilt(runner, config_path, reference)


def random_kill(
    runner: FaultRunner, rng: random.Random, action: str, config_path: Path, kills: Counter
) -> str:
    """Kill `action` at a random boundary and call, or after a random delay; counts the kills."""
    if rng.random() < 0.5:
        delay = rng.uniform(0.0, 4.0)
        outcome = runner.run(action, config_path, kill_after_seconds=delay, full_report=True)
        kills[f"{action} after a random delay"] += outcome == "killed"
        return outcome
    if action == "ingest":
        target = rng.choice(("ingest.staged", "ingest.ledgered", "ingest.committed"))
        call = rng.randint(1, REFERENCE_BATCHES + 1)
    else:
        target = rng.choice(("build.stage",) * 4 + tuple(t for t, _ in EXPORT_BEFORE_LATEST))
        stages = len(build_stages(load_config(config_path)))
        call = rng.randint(1, stages if target == "build.stage" else 3)
    outcome = runner.run(action, config_path, (target, call), full_report=True)
    kills[target] += outcome == "killed"
    return outcome


@pytest.mark.slow
def test_random_kills_recover_exactly(runner: FaultRunner, tmp_path: Path) -> None:
    rng = random.Random(int(os.environ.get("DEMANDPREP_FAULT_SEED", "1")))
    rounds = int(os.environ.get("DEMANDPREP_FAULT_ROUNDS", "5"))
    config_path = make_world(tmp_path / "world")
    config = load_config(config_path)
    reference = reference_run(runner, config_path)
    kills: Counter[str] = Counter()
    for _ in range(rounds):
        shutil.rmtree(config.warehouse.path.parent, ignore_errors=True)
        while (outcome := random_kill(runner, rng, "ingest", config_path, kills)) == "killed":
            assert ledger_problems(config) == []
        assert outcome == "completed"
        assert runner.run("ingest", config_path) == "completed"
        before = latest_build(config.export.root)
        before_files = parquet_fingerprint(before) if before else None
        for _ in range(rng.randint(1, 6)):
            if random_kill(runner, rng, "build", config_path, kills) == "killed":
                latest = latest_build(config.export.root)
                published = latest is not None and (before is None or latest.name != before.name)
                check_after_kill(config, before, before_files, published=published)
                if published:
                    before, before_files = latest, parquet_fingerprint(latest)
                    assert before_files == reference
            else:
                before = latest_build(config.export.root)
                before_files = parquet_fingerprint(before)
                assert before_files == reference
        check_rebuilt(runner, config_path, reference)
    print(f"random kills in {rounds} rounds: {sum(kills.values())} {dict(sorted(kills.items()))}")
