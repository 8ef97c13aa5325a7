"""Ingest phase timings: summed over batches, kept in the warehouse, printed only when asked."""

from __future__ import annotations

import time
from pathlib import Path

from ingest_fixtures import copy_faults, faults_config
from typer.testing import CliRunner

from demandprep.cli import app
from demandprep.ingest.runner import ingest_all
from demandprep.warehouse import open_warehouse

PHASES = {"discover", "read", "classify", "dedupe", "insert", "ledger", "validate"}
RUNNER = CliRunner()


def test_ingest_times_each_phase_within_its_wall_time(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    with open_warehouse(config.warehouse) as con:
        started = time.perf_counter()
        summary = ingest_all(con, config)
        wall = time.perf_counter() - started
    timings = summary.timings_seconds
    assert set(timings) == PHASES
    assert all(seconds >= 0 for seconds in timings.values())
    assert sum(timings.values()) <= wall
    # every phase ran: the fault fixture has references, receipts, rejects and duplicates
    assert all(seconds > 0 for seconds in timings.values())


def test_each_run_writes_its_phase_timings_to_the_warehouse(tmp_path: Path) -> None:
    config = faults_config(tmp_path)
    with open_warehouse(config.warehouse) as con:
        first = ingest_all(con, config)
        second = ingest_all(con, config)  # nothing new: discovery only
        rows = con.execute(
            "select run_at, phase, seconds from ingest_runs order by run_at, phase"
        ).fetchall()
    runs = sorted({run_at for run_at, _, _ in rows})
    assert len(runs) == 2
    by_run = [{phase: s for run_at, phase, s in rows if run_at == run} for run in runs]
    assert by_run[0] == first.timings_seconds
    assert by_run[1] == second.timings_seconds
    assert second.timings_seconds["read"] == 0


def test_ingest_prints_its_phases_only_when_asked(tmp_path: Path) -> None:
    config = copy_faults(tmp_path)
    plain = RUNNER.invoke(app, ["ingest", str(config)], terminal_width=300)
    assert "ingest phases" not in plain.output
    timed = RUNNER.invoke(app, ["ingest", str(config), "--timings"], terminal_width=300)
    (line,) = [line for line in timed.output.splitlines() if line.startswith("ingest phases")]
    assert line.startswith("ingest phases (s): discover ")
    assert {part.split()[0] for part in line.split(": ", 1)[1].split(", ")} == PHASES
