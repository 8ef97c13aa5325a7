"""Benchmark: `demandprep ingest` against a bare DuckDB persist of the same files, with phases.

    .venv/bin/python benchmarks/ingest_phases.py --lines 1000000 [--runs 3]

Reuses (or generates) side_by_side.py's demo world for --lines and --seed in --workdir, then
runs, each in its own child process and one after the other: side_by_side's bare persist (one
multi-file read_csv of every receipt file into one table, all text, file name kept) and
`demandprep ingest` on an empty warehouse (side_by_side's config: memory limit, threads). For
each it prints wall time, CPU time (user + sys of the child, from os.wait4) and peak RSS, then
the ratios ingest / persist and the ingest's five costliest phases (the warehouse's
`ingest_runs` table, the same numbers as `IngestSummary.timings_seconds`).

With --runs N the pair runs N times, persist and ingest alternating, and each round's ratios
are printed, then their medians: on a shared machine whose speed drifts, the ratio within a
round is steadier than either time.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from side_by_side import (  # noqa: E402
    demandprep_config,
    ensure_world,
    measure,
    run_duckdb_persist,
)


def parse_args() -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--lines", type=int, default=1_000_000, help="receipt lines (about)")
    parser.add_argument("--seed", type=int, default=7, help="demo world seed (default 7)")
    parser.add_argument(
        "--workdir",
        type=Path,
        default=Path("/tmp/demandprep_side_by_side"),
        help="side_by_side.py's cache of worlds; runs go to <workdir>/ingest_phases",
    )
    parser.add_argument("--threads", type=int, default=2, help="DuckDB threads")
    parser.add_argument("--memory-limit", default="4GB", help="DuckDB memory limit")
    parser.add_argument("--runs", type=int, default=1, help="rounds of the pair (medians shown)")
    parser.add_argument("--skip-persist", action="store_true", help="run the ingest only")
    parser.add_argument("--child-persist", type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--world", type=Path, help=argparse.SUPPRESS)
    return parser.parse_args()


def phase_seconds(warehouse: Path) -> dict[str, float]:
    """The last ingest run's seconds per phase, from the warehouse's ingest_runs table."""
    import duckdb

    con = duckdb.connect(str(warehouse), read_only=True)
    rows = con.execute(
        "select phase, seconds from ingest_runs "
        "where run_at = (select max(run_at) from ingest_runs) order by seconds desc"
    ).fetchall()
    con.close()
    return dict(rows)


def main() -> None:
    args = parse_args()
    if args.child_persist:
        result = run_duckdb_persist(args.world, args.threads, args.memory_limit, args.child_persist)
        print(json.dumps(result))
        return
    info = ensure_world(args.workdir, args.lines, args.seed)
    world = Path(info["folder"]) / "world"
    runs = args.workdir / "ingest_phases"
    print(f"world: {info['receipt_lines']:,} receipt lines ({world})")
    print(f"threads {args.threads}, memory limit {args.memory_limit}")
    ratios = []
    for round_number in range(1, args.runs + 1):
        if args.runs > 1:
            print(f"round {round_number} of {args.runs}")
        results = one_round(args, world, runs)
        show_round(results)
        if "bare persist" in results:
            ratios.append(ratio_of(results))
        show_phases(runs)
    if len(ratios) > 1:
        wall, cpu, peak = (statistics.median(r[i] for r in ratios) for i in range(3))
        print(
            f"median of {len(ratios)} rounds, ingest / persist: wall {wall:.2f}, cpu {cpu:.2f}, "
            f"peak {peak:.2f}"
        )


def one_round(args: argparse.Namespace, world: Path, runs: Path) -> dict[str, dict]:
    """The bare persist (unless skipped), then the ingest, each in its own child process."""
    shutil.rmtree(runs, ignore_errors=True)
    runs.mkdir(parents=True)
    results = {}
    if not args.skip_persist:
        command = [sys.executable, __file__, "--child-persist", str(runs / "persist.duckdb")]
        command += ["--world", str(world), "--threads", str(args.threads)]
        command += ["--memory-limit", args.memory_limit]
        timing, output = measure(command, runs / "persist.log")
        results["bare persist"] = timing | json.loads(output.strip().splitlines()[-1])
    config = demandprep_config(world, runs, args.memory_limit, args.threads)
    binary = Path(sys.executable).parent / "demandprep"
    timing, _ = measure([str(binary), "ingest", str(config)], runs / "ingest.log")
    results["demandprep ingest"] = timing
    return results


def ratio_of(results: dict[str, dict]) -> tuple[float, float, float]:
    """Ingest / persist: wall, CPU and peak RSS."""
    base, ours = results["bare persist"], results["demandprep ingest"]
    return (
        ours["wall"] / base["wall"],
        ours["cpu"] / base["cpu"],
        ours["peak_mib"] / base["peak_mib"],
    )


def show_round(results: dict[str, dict]) -> None:
    for name, row in results.items():
        print(
            f"{name:18s} wall {row['wall']:6.1f} s  cpu {row['cpu']:6.1f} s  "
            f"peak RSS {row['peak_mib']:6.0f} MiB"
        )
    if "bare persist" in results:
        wall, cpu, peak = ratio_of(results)
        print(f"ratio ingest / persist: wall {wall:.2f}, cpu {cpu:.2f}, peak {peak:.2f}")


def show_phases(runs: Path) -> None:
    try:
        phases = phase_seconds(runs / "warehouse" / "demandprep.duckdb")
    except Exception as error:  # an ingest from before phase timings: no ingest_runs table
        print(f"no phase timings ({str(error).splitlines()[0]})")
        return
    print("top phases: " + ", ".join(f"{k} {v:.2f} s" for k, v in list(phases.items())[:5]))
    print(f"sum of phases: {sum(phases.values()):.2f} s")


if __name__ == "__main__":
    main()
