"""The side-by-side benchmark script: its bookkeeping, and (opt-in, slow) one run on a tiny world.

No timing is asserted: the script measures, the tests only check that it reports what it ran.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

BENCHMARKS = Path(__file__).resolve().parents[1] / "benchmarks"
sys.path.insert(0, str(BENCHMARKS))

import side_by_side  # noqa: E402


def test_a_bare_script_is_skipped_where_its_scaled_peak_would_not_fit(monkeypatch):
    monkeypatch.setattr(side_by_side, "available_bytes", lambda: 10 * 2**30)
    measured = {1_000_000: {"pandas": {"peak_mib": 600.0}}}  # 600 MiB per million lines

    assert side_by_side.memory_skip("pandas", 10_000_000, measured) is None  # ~5.9 GiB fits
    reason = side_by_side.memory_skip("pandas", 50_000_000, measured)
    assert reason is not None and reason.startswith("skipped: would need about 29.3 GiB")
    assert "its peak at 1,000,000 lines in this run" in reason
    # demandprep and the DuckDB contenders are never skipped for memory
    assert side_by_side.memory_skip("duckdb_query", 10**12, measured) is None


def test_targets_say_which_ratio_misses_its_aim():
    def row(wall, cpu):
        return {"wall": wall, "cpu": cpu, "peak_mib": 1.0}

    results = {
        "duckdb_query": row(10, 10),
        "duckdb_persist": row(10, 20),
        "pandas": row(90, 90),
        "demandprep_ingest": row(14, 40),
        "demandprep_run": row(20, 30),
        "demandprep_one_day": row(2, 2),
        "demandprep_nothing_new": row(1, 1),
    }
    met = {label: ok for label, _, _, ok in side_by_side.target_rows(results)}
    floor = {label: value for label, value, _, _ in side_by_side.target_rows(results)}

    assert met["ingest / bare persist, wall"] is True  # 1.4
    assert met["ingest / bare persist, CPU"] is False  # 2.0
    assert met["full run / bare query, wall"] is True  # 2.0
    assert met["one more day / full run, wall"] is False  # 0.1
    assert met["pandas script / full run, wall"] is True  # 4.5
    # the floor under the one-more-day run is shown, not judged
    assert floor["(floor of the above) nothing-new run / full run, wall"] == pytest.approx(0.05)
    assert met["(floor of the above) nothing-new run / full run, wall"] is None


def test_the_choice_build_night_is_judged_only_when_it_ran():
    def row(wall):
        return {"wall": wall, "cpu": wall, "peak_mib": 1.0}

    base = {"duckdb_query": row(10), "demandprep_run": row(20), "demandprep_one_day": row(1)}
    label = "one more day / full run, choices on, wall"
    assert label not in {row[0] for row in side_by_side.target_rows(base)}

    with_choices = base | {
        "demandprep_run_choices": row(100),
        "demandprep_one_day_choices": row(80),
    }
    rows = {name: (value, ok) for name, value, _, ok in side_by_side.target_rows(with_choices)}
    assert rows[label] == (pytest.approx(0.8), False)


def test_a_skipped_contender_leaves_its_targets_unmeasured():
    results = {"duckdb_query": {"wall": 1.0, "cpu": 1.0}, "pandas": {"skipped": "skipped: x"}}
    rows = {label: (value, ok) for label, value, _, ok in side_by_side.target_rows(results)}

    assert rows["pandas script / full run, wall"] == (None, None)


def test_scaling_compares_time_growth_with_line_growth():
    by_size = {
        1_000: {"demandprep_run": {"wall": 2.0}},
        10_000: {"demandprep_run": {"wall": 24.0}},
    }
    ((label, growth, aim, met),) = side_by_side.scaling_rows(by_size)

    assert growth == pytest.approx(1.2) and met is False and aim == "<= 1.1"
    assert "1,000 -> 10,000" in label


def test_the_one_more_day_run_is_split_into_ingest_build_export_and_the_rest():
    one_day = {
        "wall": 5.0,
        "phases": {"discover": 0.1, "classify": 0.3, "validate": 0.2},
        "build_timings": {"shares": 0.4, "instruments": 1.1, "export.parquet": 0.5},
    }
    (text,) = [line for line in side_by_side.one_day_lines(one_day) if line]

    assert "ingest 0.6 s (classify: 0.30 s; validate: 0.20 s; discover: 0.10 s)" in text
    assert "build stages 1.5 s (instruments: 1.10 s; shares: 0.40 s)" in text
    assert "export 0.5 s (export.parquet: 0.50 s)" in text
    # what no timing covers: 5.0 - 0.6 - 1.5 - 0.5
    assert "the rest 2.4 s" in text


def test_the_one_more_day_split_says_what_the_choice_build_recomputed():
    one_day = {
        "wall": 5.0,
        "build_timings": {"choices": 1.0},
        "choice_scope": {"build_mode": "incremental", "first_day_rebuilt": "2025-12-22"},
    }
    (text,) = [line for line in side_by_side.one_day_lines(one_day) if line]

    assert text.endswith("The choice build was incremental, from 2025-12-22 on.")


def test_the_one_more_day_split_says_how_the_choices_file_was_written():
    one_day = {
        "wall": 5.0,
        "choice_scope": {"build_mode": "incremental", "first_day_rebuilt": "2025-12-22"},
        "choices_file": {"row_groups_kept": 280, "row_groups_written": 7},
    }
    (text,) = [line for line in side_by_side.one_day_lines(one_day) if line]
    assert text.endswith(
        "from 2025-12-22 on. The choices file kept 280 of its 287 row groups from the last "
        "build's file."
    )
    whole = {"row_groups_kept": 0, "row_groups_written": 9, "written_whole_because": "why"}
    (text,) = [
        line for line in side_by_side.one_day_lines(one_day | {"choices_file": whole}) if line
    ]
    assert text.endswith("The choices file was written whole (why).")


@pytest.mark.slow
def test_the_benchmark_runs_every_contender_on_a_tiny_world(tmp_path):
    done = subprocess.run(
        [sys.executable, str(BENCHMARKS / "side_by_side.py"), "--lines", "20000", "--no-doc"]
        + ["--workdir", str(tmp_path), "--with-choices"],
        capture_output=True,
        text=True,
        check=True,
    )
    for label in side_by_side.CONTENDERS.values():
        assert f"| {label} | " in done.stdout
    assert re.search(r"\| [\d,]+ lines: full run / bare query, wall \| [\d.]+ \|", done.stdout)
    assert re.search(r"Five largest phases of `demandprep ingest` .*: \w+: [\d.]+ s", done.stdout)
    assert re.search(r"`\+1 day` .* ingest [\d.]+ s .* build stages [\d.]+ s", done.stdout)
    assert re.search(
        r"\| [\d,]+ lines: one more day / full run, choices on, wall \| [\d.]+ \|", done.stdout
    )
    # the choice build's stages show where that night's time goes
    assert re.search(
        r"`\+1 day` \(choices on\) run's .* build stages [\d.]+ s \(.*choice", done.stdout
    )
