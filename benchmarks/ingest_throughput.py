"""Time the ingest of generated receipt drops against a bare DuckDB read of the same files.

    .venv/bin/python benchmarks/ingest_throughput.py --lines 20000000 --workdir /tmp/ingest_bench

Generates a demo world (daily gzip CSV drops with the demo's injected faults) big enough for
`--lines` receipt lines, unless the work folder already holds one of that size. Then, in the
same run and with the same warehouse settings (memory limit, threads), times:
- bare (sniffed): one `read_csv` over every receipt file into a table of a fresh DuckDB file,
  DuckDB detecting dialect and types of each file, broken lines skipped;
- bare (known columns): the same with the column names and types given, no detection: the
  fastest plain read of the drops;
- ingest: `demandprep ingest` on a fresh warehouse (references, then receipts with reject
  capture, rules, duplicates, quarantine, ledger, schema checks).
Each runs in its own subprocess so its peak memory (max RSS) is measured alone. Prints both
wall and CPU times (CPU time is steadier on a shared machine), the ratios ingest / bare (aim:
at most 2) and each peak RSS against the memory limit.
"""

from __future__ import annotations

import argparse
import json
import math
import shutil
import subprocess
import sys
import textwrap
import time
from pathlib import Path

VISITS_PER_STORE_DAY = 400.0
# measured at 400 visits: 16.5M lines for 24 stores, 19.9M for 31 (store sizes vary): margin
LINES_PER_STORE = 620_000
TEMPLATE = Path(__file__).resolve().parents[1] / "src" / "demandprep" / "templates" / "demo.toml"

# the demo receipts' columns and types (demo/columns.py, demo/writer.py)
RECEIPT_TYPES = {
    "ticket_no": "VARCHAR",
    "row_no": "BIGINT",
    "shop_id": "VARCHAR",
    "scanned_at": "TIMESTAMP",
    "item_code": "VARCHAR",
    "qty": "DOUBLE",
    "line_value": "DOUBLE",
    "loyalty_card": "VARCHAR",
    "discount_value": "DOUBLE",
    "line_type": "VARCHAR",
}

BARE_READ = textwrap.dedent(
    """
    import json, resource, sys, time
    import duckdb
    database, memory, threads, pattern, mode, types = sys.argv[1:7]
    con = duckdb.connect(database, config={"memory_limit": memory, "threads": int(threads),
                                           "preserve_insertion_order": False})
    con.execute("set enable_progress_bar = false")
    options = "header = true, ignore_errors = true"
    params = {"files": pattern}
    if mode == "known":  # the columns and types given: no sniffing of each file
        options += ", auto_detect = false, columns = $columns"
        params["columns"] = json.loads(types)
    started, cpu = time.perf_counter(), time.process_time()
    con.execute(f"create table bare_lines as select * from read_csv($files, {options})", params)
    rows = con.execute("select count(*) from bare_lines").fetchone()[0]
    con.close()
    seconds, cpu = time.perf_counter() - started, time.process_time() - cpu
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(json.dumps({"seconds": seconds, "cpu": cpu, "rows": rows, "peak_bytes": peak}))
    """
)

INGEST = textwrap.dedent(
    """
    import json, resource, sys, time
    from demandprep.config import load_config
    from demandprep.pipeline import run_ingest
    config = load_config(sys.argv[1])
    started, cpu = time.perf_counter(), time.process_time()
    summary = run_ingest(config)
    seconds, cpu = time.perf_counter() - started, time.process_time() - cpu
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(json.dumps({"seconds": seconds, "cpu": cpu, "rows": summary.rows_read,
                      "accepted": summary.rows_accepted, "quarantined": summary.quarantined,
                      "failed": len(summary.failed), "peak_bytes": peak}))
    """
)


def world_spec_for(lines: int):
    """A demo world spec whose receipts hold at least `lines` lines (busier and more stores)."""
    from demandprep.demo.spec import WorldSpec

    stores = max(1, math.ceil(lines * 1.05 / LINES_PER_STORE))
    return WorldSpec(n_stores=stores, visits_per_store_day=VISITS_PER_STORE_DAY)


def ensure_world(folder: Path, lines: int) -> int:
    """Generate the world in `folder` unless one with at least `lines` lines is there."""
    from demandprep.demo.world import generate_world

    marker = folder / "benchmark_world.json"
    if marker.exists() and json.loads(marker.read_text())["receipt_lines"] >= lines:
        return json.loads(marker.read_text())["receipt_lines"]
    started = time.perf_counter()
    summary = generate_world(folder, world_spec_for(lines), overwrite=True)
    made = int(summary.line_counts["receipts"])
    marker.write_text(json.dumps({"receipt_lines": made}))
    print(f"generated {made:,} receipt lines in {time.perf_counter() - started:.0f} s")
    if made < lines:
        print(f"warning: fewer lines than the {lines:,} asked for")
    return made


def write_config(world: Path, run_dir: Path, memory: str, threads: int) -> Path:
    """The demo config pointing at the generated world, with its warehouse in `run_dir`."""
    text = TEMPLATE.read_text(encoding="utf-8")
    for name in (
        "receipts/*/receipts_*.csv.gz",
        "catalogue.csv",
        "stores.csv",
        "households.csv",
        "shelf_prices.csv",
        "market_sizes.csv",
        "cost_shifters.csv",
    ):
        text = text.replace(f'files = ["{name}"]', f'files = ["{world / name}"]')
    text = text.replace('memory_limit = "4GB"', f'memory_limit = "{memory}"')
    text = text.replace("threads = 2", f"threads = {threads}")
    path = run_dir / "demandprep.toml"
    path.write_text(text, encoding="utf-8")
    return path


def run_child(code: str, *args: str) -> dict:
    """Run a timing script in its own Python process; returns its JSON line."""
    done = subprocess.run(
        [sys.executable, "-c", code, *args], check=True, capture_output=True, text=True
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    """Generate (or reuse) the drops, time both reads, print the ratio."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--lines", type=int, default=20_000_000)
    parser.add_argument("--workdir", type=Path, default=Path("/tmp/demandprep_ingest_bench"))
    parser.add_argument("--memory-limit", default="4GB")
    parser.add_argument("--threads", type=int, default=2)
    args = parser.parse_args()
    world = args.workdir / "world"
    lines = ensure_world(world, args.lines)
    run_dir = args.workdir / "run"
    shutil.rmtree(run_dir, ignore_errors=True)
    run_dir.mkdir(parents=True)
    config = write_config(world, run_dir, args.memory_limit, args.threads)
    pattern = str(world / "receipts" / "*" / "receipts_*.csv.gz")
    bares = {
        mode: run_child(
            BARE_READ,
            str(run_dir / f"bare_{mode}.duckdb"),
            args.memory_limit,
            str(args.threads),
            pattern,
            mode,
            json.dumps(RECEIPT_TYPES),
        )
        for mode in ("sniffed", "known")
    }
    ingest = run_child(INGEST, str(config))
    print(f"receipt lines in the drops: {lines:,}")
    for mode, bare in bares.items():
        print(
            f"bare read ({mode}): {bare['seconds']:7.1f} s (cpu {bare['cpu']:.1f} s)  "
            f"rows {bare['rows']:,}  peak RSS {bare['peak_bytes'] / 2**30:.2f} GiB"
        )
    print(
        f"ingest:     {ingest['seconds']:8.1f} s (cpu {ingest['cpu']:.1f} s)  "
        f"rows read {ingest['rows']:,}  accepted {ingest['accepted']:,}  "
        f"failed files {ingest['failed']}  peak RSS {ingest['peak_bytes'] / 2**30:.2f} GiB"
    )
    print(f"quarantined by reason: {ingest['quarantined']}")
    print(f"memory limit: {args.memory_limit}, threads: {args.threads}")
    for mode, bare in bares.items():
        print(
            f"ratio ingest / bare read ({mode}): {ingest['seconds'] / bare['seconds']:.2f} wall, "
            f"{ingest['cpu'] / bare['cpu']:.2f} cpu (aim: <= 2)"
        )


if __name__ == "__main__":
    main()
