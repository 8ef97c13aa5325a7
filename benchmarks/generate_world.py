"""Benchmark: time and peak memory to generate demo worlds of growing size.

Each size runs in its own child process (so peak memory is its own) into a temporary folder.
The first size is the baseline; later rows print their ratios to it side by side. Generation is
day by day, so time should grow about linearly with lines and peak memory should stay flat.

    .venv/bin/python benchmarks/generate_world.py                 # 24 stores x 8 weeks
    .venv/bin/python benchmarks/generate_world.py --weeks 104 --visits 60   # the default demo
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path


def run_one(visits: float, weeks: int, receipt_format: str) -> dict:
    """Generate one world in this process and return its measurements."""
    from demandprep.demo.world import WorldSpec, generate_world

    spec = replace(WorldSpec(), visits_per_store_day=visits, weeks=weeks)
    spec = replace(spec, receipt_format=receipt_format)
    with tempfile.TemporaryDirectory() as folder:
        started = time.perf_counter()
        summary = generate_world(Path(folder) / "world", spec)
        seconds = time.perf_counter() - started
        size = sum(p.stat().st_size for p in (Path(folder) / "world").rglob("*") if p.is_file())
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return {
        "visits": visits,
        "lines": summary.line_counts["receipts"],
        "seconds": seconds,
        "peak_mb": peak_mb,
        "disk_mb": size / 1e6,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--weeks", type=int, default=8)
    parser.add_argument("--visits", type=float, nargs="+", default=[15.0, 60.0, 240.0])
    parser.add_argument("--format", default="csv.gz", choices=["csv.gz", "parquet"])
    parser.add_argument("--one", type=float, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one is not None:
        print(json.dumps(run_one(args.one, args.weeks, args.format)))
        return
    rows = []
    for visits in args.visits:
        command = [sys.executable, __file__, "--one", str(visits), "--weeks", str(args.weeks)]
        output = subprocess.run(
            command + ["--format", args.format], check=True, capture_output=True, text=True
        ).stdout
        rows.append(json.loads(output))
    base = rows[0]
    print(
        f"{'visits/day':>10} {'lines':>11} {'seconds':>8} {'lines/s':>10} {'peak MB':>8} "
        f"{'disk MB':>8} | {'x lines':>7} {'x time':>7} {'x peak':>7}"
    )
    for row in rows:
        print(
            f"{row['visits']:>10g} {row['lines']:>11,} {row['seconds']:>8.1f} "
            f"{row['lines'] / row['seconds']:>10,.0f} {row['peak_mb']:>8.0f} "
            f"{row['disk_mb']:>8.1f} | "
            f"{row['lines'] / base['lines']:>7.2f} {row['seconds'] / base['seconds']:>7.2f} "
            f"{row['peak_mb'] / base['peak_mb']:>7.2f}"
        )


if __name__ == "__main__":
    main()
