"""Benchmark: demandprep against bare DuckDB, polars and pandas on the same receipt files.

    .venv/bin/python benchmarks/side_by_side.py --lines 10000000 50000000 \
        --choices-occasions 10000000
    .venv/bin/python benchmarks/side_by_side.py --lines 200000 --no-doc   # quick look, no doc

Generates a demo world (daily gzip CSV receipt files with the demo's seeded faults) of about
--lines receipt lines (each size given, smallest first), or reuses the one cached in --workdir
for that size and seed. The last day's file is held back. Then runs every contender in its own
child process, one after the other (the disks synced before each, untimed), and measures its
wall time, CPU time (user + sys of the child, from os.wait4) and peak RSS (the child's
ru_maxrss):

  duckdb query    one typed read_csv over all files, join the catalogue, aggregate to the
                  visits-based store x week x product share table; nothing persisted (baseline)
  duckdb persist  the same files into one table of a fresh DuckDB file, all text, file name kept
  polars          a practitioner's script: read each file, concat, group
  pandas          the same with pandas (both scripts are skipped, saying so, where their peak
                  memory scaled from a smaller size would not fit in this machine's memory)
  demandprep ingest  `demandprep ingest` alone on an empty warehouse (against the persist)
  demandprep run  `demandprep run` on an empty warehouse, choices off
  + one day       `demandprep run` again after the held-back day's file arrives
  (optional)      the same two runs with the choice build on, in a warehouse of their own
                  (--with-choices): what a night costs a project that builds choices
  (optional)      benchmarks/choices_scale.py, the choice build against its bare query, on its
                  own synthetic warehouse (--choices-occasions N)

The share table (the demo config's visits assumption): a visit is (store, business day,
receipt) with at least one sale line; units are sale plus void lines (voids are negative, so
netted), returns left out of demand; one pack is one equivalent unit; share = units / visits
per store-week; rows with units <= 0 dropped. demandprep runs with the demo config changed so
it builds exactly that table: no product-universe cut, only the visits assumption, no outside
share floor, choices off. Each contender prints a checksum (rows, sum of shares, sum of units);
the bare contenders read every line the typed read accepts, demandprep quarantines the seeded
faults (and drops the re-sent duplicate lines), so small differences are expected and the
quarantine counts are printed beside them.

Prints a table of targets (the speed ratios, and how time grows from one size to the next), a
table per size with ratios to the baseline, and the five slowest stages of the build (from the
build's manifest.json), and writes it all to docs/benchmarks.md unless --no-doc.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import shutil
import statistics
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from ingest_throughput import (  # noqa: E402
    LINES_PER_STORE,
    RECEIPT_TYPES,
    write_config,
)
from ingest_throughput import VISITS_PER_STORE_DAY as VISITS  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
DOC = REPO / "docs" / "benchmarks.md"
RECEIPTS_GLOB = "receipts/*/receipts_*.csv.gz"
TIMESTAMP_FORMAT = "%Y-%m-%d %H:%M:%S"
# measured: receipt lines of the demo's first three stores per visit a store-day (74,403 at 11.3)
THREE_STORE_LINES_PER_VISIT = 6_600
PRODUCT_KEYS = ("roaster", "format", "pack_grams")  # demo.toml [products] keys

CONTENDERS = {
    "duckdb_query": "duckdb query (baseline)",
    "duckdb_persist": "duckdb persist (all text)",
    "polars": "polars script",
    "pandas": "pandas script",
    "demandprep_ingest": "demandprep ingest (empty)",
    "demandprep_run": "demandprep run (empty)",
    "demandprep_one_day": "demandprep run (+1 day)",
    "demandprep_nothing_new": "demandprep run (nothing new)",
    "demandprep_run_choices": "demandprep run, choices on (empty)",
    "demandprep_one_day_choices": "demandprep run, choices on (+1 day)",
}
BARE_CONTENDERS = ("duckdb_query", "duckdb_persist", "polars", "pandas")
# peak RSS per receipt line of the bare scripts, measured at 9,945,513 lines on 2026-12-02
# (polars 4.53 GiB, pandas 5.64 GiB); used to skip them where they would not fit in memory
PEAK_BYTES_PER_LINE = {"polars": 4.53 * 2**30 / 9_945_513, "pandas": 5.64 * 2**30 / 9_945_513}
MEMORY_MARGIN = 0.8  # of the memory available when the run starts

# ---------------------------------------------------------------- the world and its cache


def ensure_world(workdir: Path, lines: int, seed: int) -> dict:
    """Generate the world for (lines, seed) unless cached; hold back its last day's file."""
    from demandprep.demo.world import generate_world

    folder = workdir / f"world_{lines}_seed{seed}"
    marker = folder / "side_by_side.json"
    if marker.exists():
        return json.loads(marker.read_text())
    started = time.perf_counter()
    spec = world_spec(lines, seed)
    summary = generate_world(folder / "world", spec, overwrite=True)
    seconds = time.perf_counter() - started
    last = sorted((folder / "world").glob(RECEIPTS_GLOB), key=lambda p: p.name)[-1]
    held = folder / "held_back" / last.relative_to(folder / "world")
    held.parent.mkdir(parents=True, exist_ok=True)
    shutil.move(last, held)
    info = {
        "folder": str(folder),
        "receipt_lines": int(summary.line_counts["receipts"]),
        "stores": spec.n_stores,
        "weeks": spec.weeks,
        "visits_per_store_day": spec.visits_per_store_day,
        "seed": seed,
        "generate_seconds": round(seconds, 1),
        "held_back": str(held.relative_to(folder / "held_back")),
    }
    marker.write_text(json.dumps(info, indent=2))
    return info


def world_spec(lines: int, seed: int):
    """ingest_throughput's busy stores, at least three (the demo's three regions); below three
    busy stores' worth of lines, three stores with fewer visits a day."""
    from demandprep.demo.spec import WorldSpec

    stores = max(3, math.ceil(lines * 1.05 / LINES_PER_STORE))  # margin, as there
    visits = VISITS if stores > 3 else min(VISITS, lines / THREE_STORE_LINES_PER_VISIT)
    return WorldSpec(n_stores=stores, visits_per_store_day=round(visits, 1), seed=seed)


def receipt_files(world: Path) -> list[str]:
    """The receipt files present, in name order."""
    return [str(p) for p in sorted(world.glob(RECEIPTS_GLOB), key=lambda p: p.name)]


# ---------------------------------------------------------------- the contenders (children)

DUCKDB_QUERY = """
with
lines as materialized (
    select * from read_csv($files, header = true, auto_detect = false, columns = $columns,
                           timestampformat = $timestamp_format, ignore_errors = true)
),
products as (
    select item_code, concat_ws('|', roaster, format, pack_grams) as product
    from read_csv($catalogue, header = true, all_varchar = true)
    where category = 'coffee'
),
visits as (
    select shop_id as store, date_trunc('week', scanned_at)::date as week,
        count(distinct (scanned_at::date, ticket_no)) as visits
    from lines where line_type = 'sale' group by all
),
demand as (
    select shop_id as store, date_trunc('week', scanned_at)::date as week, product,
        sum(qty) as units
    from lines join products using (item_code)
    where line_type in ('sale', 'void')
    group by all having sum(qty) > 0
)
select count(*), sum(units / visits), sum(units), (select count(*) from lines)
from demand join visits using (store, week)
"""


def run_duckdb_query(world: Path, threads: int, memory: str) -> dict:
    import duckdb

    con = duckdb.connect(config={"threads": threads, "memory_limit": memory})
    rows, share, units, lines = con.execute(
        DUCKDB_QUERY,
        {
            "files": receipt_files(world),
            "columns": RECEIPT_TYPES,
            "timestamp_format": TIMESTAMP_FORMAT,
            "catalogue": str(world / "catalogue.csv"),
        },
    ).fetchone()
    return {"lines": lines, "rows": rows, "share_sum": share, "units_sum": units}


def run_duckdb_persist(world: Path, threads: int, memory: str, database: Path) -> dict:
    import duckdb

    database.unlink(missing_ok=True)
    con = duckdb.connect(str(database), config={"threads": threads, "memory_limit": memory})
    con.execute(
        "create table receipt_lines as select * from read_csv($files, header = true, "
        "auto_detect = false, columns = $columns, filename = true, null_padding = true, "
        "ignore_errors = true)",
        {"files": receipt_files(world), "columns": dict.fromkeys(RECEIPT_TYPES, "VARCHAR")},
    )
    lines = con.execute("select count(*) from receipt_lines").fetchone()[0]
    con.close()
    return {"lines": lines}


def run_polars(world: Path) -> dict:
    import polars as pl

    frames = [
        pl.read_csv(path, infer_schema=False, truncate_ragged_lines=True)
        for path in receipt_files(world)
    ]
    lines = pl.concat(frames, how="diagonal").with_columns(
        pl.col("qty").cast(pl.Float64, strict=False),
        pl.col("scanned_at").str.strptime(pl.Datetime, TIMESTAMP_FORMAT, strict=False),
    )
    lines = lines.drop_nulls(["qty", "scanned_at"]).with_columns(
        pl.col("scanned_at").dt.date().alias("day"),
        pl.col("scanned_at").dt.truncate("1w").dt.date().alias("week"),
    )
    catalogue = pl.read_csv(world / "catalogue.csv", infer_schema=False)
    products = catalogue.filter(pl.col("category") == "coffee").select(
        "item_code", pl.concat_str([pl.col(k) for k in PRODUCT_KEYS], separator="|").alias("p")
    )
    visits = (
        lines.filter(pl.col("line_type") == "sale")
        .select("shop_id", "week", "day", "ticket_no")
        .unique()
        .group_by("shop_id", "week")
        .agg(pl.len().alias("visits"))
    )
    demand = (
        lines.filter(pl.col("line_type").is_in(["sale", "void"]))
        .join(products, on="item_code")
        .group_by("shop_id", "week", "p")
        .agg(pl.col("qty").sum().alias("units"))
        .filter(pl.col("units") > 0)
    )
    shares = demand.join(visits, on=["shop_id", "week"]).with_columns(
        (pl.col("units") / pl.col("visits")).alias("share")
    )
    return {
        "lines": lines.height,
        "rows": shares.height,
        "share_sum": shares["share"].sum(),
        "units_sum": shares["units"].sum(),
    }


def run_pandas(world: Path) -> dict:
    import pandas as pd

    frames = [
        pd.read_csv(path, dtype=str, on_bad_lines="skip", engine="c")
        for path in receipt_files(world)
    ]
    lines = pd.concat(frames, ignore_index=True)
    lines["qty"] = pd.to_numeric(lines["qty"], errors="coerce")
    lines["scanned_at"] = pd.to_datetime(
        lines["scanned_at"], format=TIMESTAMP_FORMAT, errors="coerce"
    )
    lines = lines.dropna(subset=["qty", "scanned_at"])
    lines["day"] = lines["scanned_at"].dt.normalize()
    lines["week"] = lines["day"] - pd.to_timedelta(lines["day"].dt.dayofweek, unit="D")
    catalogue = pd.read_csv(world / "catalogue.csv", dtype=str)
    products = catalogue[catalogue["category"] == "coffee"].copy()
    products["p"] = products[list(PRODUCT_KEYS)].agg("|".join, axis=1)
    sales = lines[lines["line_type"] == "sale"]
    visits = (
        sales[["shop_id", "week", "day", "ticket_no"]]
        .drop_duplicates()
        .groupby(["shop_id", "week"])
        .size()
        .rename("visits")
        .reset_index()
    )
    demand_lines = lines[lines["line_type"].isin(["sale", "void"])]
    demand = (
        demand_lines.merge(products[["item_code", "p"]], on="item_code")
        .groupby(["shop_id", "week", "p"])["qty"]
        .sum()
        .rename("units")
        .reset_index()
    )
    shares = demand[demand["units"] > 0].merge(visits, on=["shop_id", "week"])
    shares["share"] = shares["units"] / shares["visits"]
    return {
        "lines": len(lines),
        "rows": len(shares),
        "share_sum": float(shares["share"].sum()),
        "units_sum": float(shares["units"].sum()),
    }


def run_contender(name: str, world: Path, threads: int, memory: str, workdir: Path) -> dict:
    """Run one bare contender in this (child) process."""
    if name == "duckdb_query":
        return run_duckdb_query(world, threads, memory)
    if name == "duckdb_persist":
        return run_duckdb_persist(world, threads, memory, workdir / "bare_persist.duckdb")
    if name == "polars":
        return run_polars(world)
    return run_pandas(world)


# ---------------------------------------------------------------- demandprep


def demandprep_config(
    world: Path, run_dir: Path, memory: str, threads: int, choices: bool = False
) -> Path:
    """The demo config on this world, changed to build only the bare contenders' table (and,
    with `choices`, the choice build as well)."""
    path = write_config(world, run_dir, memory, threads)
    text = path.read_text(encoding="utf-8")
    changes = {
        # no universe cut: every product is kept (the others would lump products together)
        "top_n = 20\nmin_volume_share = 0.0\nmin_market_presence = 0.2\n": "",
        # only the visits assumption
        '\n[market_size.peak]\nmethod = "peak_multiple"\nmultiple = 3.0\n': "",
        '\n[market_size.catchment]\nmethod = "population"\nunits_per_person_per_day = 0.01\n': "",
        "outside_share_floor = 0.05": "outside_share_floor = 0.0",
    }
    if not choices:
        changes["[choices]\nenabled = true"] = "[choices]\nenabled = false"
    for old, new in changes.items():
        if old not in text:
            raise SystemExit(f"the demo config changed; cannot find {old!r}")
        text = text.replace(old, new)
    path.write_text(text, encoding="utf-8")
    return path


def latest_build(run_dir: Path) -> Path:
    """The newest build folder (the one holding the newest manifest.json)."""
    manifests = sorted(run_dir.glob("builds/**/manifest.json"), key=lambda p: p.stat().st_mtime)
    return manifests[-1].parent


def build_checksum(build: Path) -> dict:
    """Rows, sum of shares and sum of units of the build's visits share table."""
    import duckdb

    shares = next(p for p in build.rglob("shares*.parquet"))
    rows, share, units = duckdb.execute(
        "select count(*), sum(share), sum(units) from read_parquet($p) where assumption = 'visits'",
        {"p": str(shares)},
    ).fetchone()
    return {"rows": rows, "share_sum": share, "units_sum": units}


def ledger_numbers(run_dir: Path) -> dict:
    """Lines read, accepted and quarantined (by reason) from the warehouse."""
    import duckdb

    con = duckdb.connect(str(run_dir / "warehouse" / "demandprep.duckdb"), read_only=True)
    raw = con.execute("select count(*) from raw_lines").fetchone()[0]
    reasons = dict(con.execute("select reason, count(*) from quarantine group by 1").fetchall())
    con.close()
    return {"accepted": raw, "quarantined": reasons}


# ---------------------------------------------------------------- measuring


class ChildFailed(Exception):
    """A contender's process exited non-zero (for a bare script: out of memory, typically)."""


def measure(command: list[str], log: Path, env: dict[str, str] | None = None) -> tuple[dict, str]:
    """Run a child; return wall seconds, CPU seconds and peak RSS (MiB) with its stdout.

    The disks are synced first, untimed: a contender does not pay for writing back the files
    the one before it left in the page cache. Without it, the `+1 day` run's first commit
    waited 0.38 s for the kernel to write back the full run's warehouse (an fdatasync under
    strace, 39.8M lines), which a real night, a day after the last, never meets."""
    os.sync()
    started = time.perf_counter()
    with log.open("w") as errors:
        child = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=errors, text=True, env=env)
        output = child.stdout.read()
        _, status, usage = os.wait4(child.pid, 0)
        child.returncode = os.waitstatus_to_exitcode(status)
    seconds = time.perf_counter() - started
    if child.returncode != 0:
        raise ChildFailed(f"{' '.join(command)} failed ({child.returncode}); see {log}")
    return {
        "wall": seconds,
        "cpu": usage.ru_utime + usage.ru_stime,
        "peak_mib": usage.ru_maxrss / 1024,
    }, output


def run_bare(name: str, args: argparse.Namespace, world: Path, workdir: Path) -> dict:
    command = [sys.executable, __file__, "--child", name, "--workdir", str(workdir)]
    command += ["--world", str(world), "--threads", str(args.threads)]
    command += ["--memory-limit", args.memory_limit]
    try:
        timing, output = measure(command, workdir / f"{name}.log")
    except ChildFailed as failed:
        return {"skipped": f"failed: {failed}"}
    return timing | json.loads(output.strip().splitlines()[-1])


def run_demandprep(
    command: str, config: Path, log: Path, env: dict[str, str] | None = None
) -> dict:
    binary = Path(sys.executable).parent / "demandprep"
    try:
        timing, _ = measure([str(binary), command, str(config)], log, env)
    except ChildFailed as failed:
        raise SystemExit(str(failed)) from None
    return timing


def memory_skip(name: str, lines: int, measured: dict[int, dict]) -> str | None:
    """Why a bare script would not fit this machine's memory at `lines`, or None.

    Its peak is taken as proportional to the lines, from its run at a smaller size in this
    invocation, else from PEAK_BYTES_PER_LINE.
    """
    if name not in PEAK_BYTES_PER_LINE:
        return None
    smaller = [size for size in measured if size < lines and "peak_mib" in measured[size][name]]
    if smaller:
        size = max(smaller)
        per_line = measured[size][name]["peak_mib"] * 2**20 / size
        source = f"its peak at {size:,} lines in this run"
    else:
        per_line = PEAK_BYTES_PER_LINE[name]
        source = "its peak measured at 10M lines on 2026-12-02"
    needed = per_line * lines
    available = available_bytes()
    if needed <= MEMORY_MARGIN * available:
        return None
    return (
        f"skipped: would need about {needed / 2**30:.1f} GiB (scaled from {source}), more "
        f"than {MEMORY_MARGIN:.0%} of the {available / 2**30:.1f} GiB available"
    )


def available_bytes() -> int:
    meminfo = Path("/proc/meminfo").read_text().splitlines()
    kib = int(next(line for line in meminfo if line.startswith("MemAvailable")).split()[1])
    return kib * 1024


# ---------------------------------------------------------------- reporting


def machine() -> str:
    """nproc, memory and CPU model of this machine."""
    meminfo = Path("/proc/meminfo").read_text().splitlines()
    total_kib = int(next(line for line in meminfo if line.startswith("MemTotal")).split()[1])
    cpuinfo = Path("/proc/cpuinfo").read_text().splitlines()
    model = next((line.split(":", 1)[1].strip() for line in cpuinfo if "model name" in line), "?")
    return (
        f"nproc {os.cpu_count()}, {total_kib / 2**20:.1f} GiB memory, {model}; "
        f"Python {platform.python_version()}, {platform.system()} {platform.release()}"
    )


def code_version() -> str:
    """The commit the benchmark runs (with '+changes' when the tree differs from it)."""
    try:
        commit = _git("rev-parse", "--short", "HEAD")
        changed = _git("status", "--porcelain", "--untracked-files=no")
    except (OSError, subprocess.CalledProcessError):
        return "unknown (no git)"
    return commit + (" +changes" if changed else "")


def _git(*args: str) -> str:
    repo = Path(__file__).resolve().parents[1]
    done = subprocess.run(
        ["git", "-C", str(repo), *args], capture_output=True, text=True, check=True
    )
    return done.stdout.strip()


def table_lines(results: dict[str, dict]) -> list[str]:
    base = results["duckdb_query"]
    lines = [
        "| contender | wall s | CPU s | peak RSS MiB | x wall | x CPU | x RSS "
        "| lines used | rows | sum of shares | sum of units |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for name, row in results.items():
        if "skipped" in row:
            lines.append(f"| {CONTENDERS[name]} | {row['skipped']} |||||||||| ")
            continue
        checks = f"{row['lines']:,} | " + (
            f"{row['rows']:,} | {row['share_sum']:.4f} | {row['units_sum']:,.0f}"
            if "rows" in row
            else "n/a | n/a | n/a"
        )
        lines.append(
            f"| {CONTENDERS[name]} | {row['wall']:.1f} | {row['cpu']:.1f} | "
            f"{row['peak_mib']:.0f} | {row['wall'] / base['wall']:.2f} | "
            f"{row['cpu'] / base['cpu']:.2f} | {row['peak_mib'] / base['peak_mib']:.2f} | "
            f"{checks} |"
        )
    return lines


def build_timings(build: Path) -> dict[str, float]:
    """Seconds per build stage and export step, from the build's manifest.json."""
    return json.loads((build / "manifest.json").read_text())["timings_seconds"]


def choice_scope(build: Path) -> dict | None:
    """What the build's choice stages recomputed (manifest facts; None without choices)."""
    return json.loads((build / "manifest.json").read_text())["facts"].get("choice_scope")


def choices_file(build: Path) -> dict | None:
    """How the build's export wrote the choices file (manifest facts; None without choices)."""
    return json.loads((build / "manifest.json").read_text())["facts"].get("choices_file")


def top_costs(timings: dict[str, float], count: int = 5) -> list[str]:
    slowest = sorted(timings.items(), key=lambda item: -item[1])[:count]
    return [f"{name}: {seconds:.2f} s" for name, seconds in slowest]


def write_doc(text: str) -> None:
    DOC.write_text(text, encoding="utf-8")
    print(f"wrote {DOC.relative_to(REPO)}")


# ---------------------------------------------------------------- targets


def ratio(results: dict, name: str, base: str, measure_name: str) -> float | None:
    row, base_row = results.get(name, {}), results.get(base, {})
    if measure_name not in row or measure_name not in base_row:
        return None
    return row[measure_name] / base_row[measure_name]


def target_rows(results: dict) -> list[tuple[str, float | None, str, bool | None]]:
    """(target, measured, aim, met) for one size's results."""
    checks = [
        ("ingest / bare persist, wall", "demandprep_ingest", "duckdb_persist", "wall", 1.5),
        ("ingest / bare persist, CPU", "demandprep_ingest", "duckdb_persist", "cpu", 1.5),
        ("full run / bare query, wall", "demandprep_run", "duckdb_query", "wall", 2.5),
        ("full run / bare query, CPU", "demandprep_run", "duckdb_query", "cpu", 2.5),
        ("one more day / full run, wall", "demandprep_one_day", "demandprep_run", "wall", 0.05),
    ]
    rows = []
    for label, name, base, measure_name, aim in checks:
        value = ratio(results, name, base, measure_name)
        rows.append((label, value, f"<= {aim:g}", None if value is None else value <= aim))
    # not a target: the share of a full run that a run with nothing to do already costs
    value = ratio(results, "demandprep_nothing_new", "demandprep_run", "wall")
    rows.append(("(floor of the above) nothing-new run / full run, wall", value, "info", None))
    if "demandprep_one_day_choices" in results:
        value = ratio(results, "demandprep_one_day_choices", "demandprep_run_choices", "wall")
        rows.append(("one more day / full run, choices on, wall", value, "<= 0.05", value <= 0.05))
    value = ratio(results, "pandas", "demandprep_run", "wall")
    rows.append(
        ("pandas script / full run, wall", value, ">= 4", None if value is None else value >= 4)
    )
    return rows


def scaling_rows(by_size: dict[int, dict]) -> list[tuple[str, float | None, str, bool | None]]:
    """Time per line growth between consecutive sizes: (time ratio) / (lines ratio) <= 1.1."""
    sizes = sorted(by_size)
    rows = []
    for small, large in zip(sizes, sizes[1:], strict=False):
        for name in ("demandprep_run", "demandprep_ingest"):
            low, high = by_size[small].get(name, {}), by_size[large].get(name, {})
            if "wall" not in low or "wall" not in high:
                continue
            growth = (high["wall"] / low["wall"]) / (large / small)
            label = f"{CONTENDERS[name]}: time ratio / lines ratio, {small:,} -> {large:,}"
            rows.append((label, growth, "<= 1.1", growth <= 1.1))
    return rows


def targets_lines(rows: list[tuple[str, float | None, str, bool | None]]) -> list[str]:
    lines = ["| target | measured | aim | met |", "|---|---:|---|---|"]
    for label, value, aim, met in rows:
        shown = "n/a" if value is None else f"{value:.3f}"
        verdict = "n/a" if met is None else ("yes" if met else "**no**")
        lines.append(f"| {label} | {shown} | {aim} | {verdict} |")
    return lines


# ---------------------------------------------------------------- main


def parse_args() -> argparse.Namespace:
    parser = argparse.ArgumentParser(
        description=__doc__.splitlines()[0],
        epilog="\n".join(__doc__.splitlines()[2:]),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "--lines",
        type=int,
        nargs="+",
        default=[1_000_000],
        help="receipt lines to generate (about); several sizes run one after the other",
    )
    parser.add_argument("--seed", type=int, default=7, help="demo world seed (default 7)")
    parser.add_argument(
        "--workdir",
        type=Path,
        default=Path("/tmp/demandprep_side_by_side"),
        help="cache of generated worlds (one per lines and seed) and the run folders",
    )
    parser.add_argument(
        "--runs", type=int, default=1, help="rounds of all contenders; medians are shown"
    )
    parser.add_argument("--threads", type=int, default=2, help="DuckDB threads (all contenders)")
    parser.add_argument("--memory-limit", default="4GB", help="DuckDB memory limit")
    parser.add_argument(
        "--choices-occasions",
        type=int,
        default=0,
        help="also run benchmarks/choices_scale.py with this many occasions (0: skip)",
    )
    parser.add_argument(
        "--with-choices",
        action="store_true",
        help="also run demandprep with the choice build on, from an empty warehouse and after "
        "one more day (in a run folder of its own)",
    )
    parser.add_argument(
        "--skip",
        nargs="*",
        default=[],
        choices=list(BARE_CONTENDERS),
        help="bare contenders to leave out (they are also left out when they would not fit "
        "in memory)",
    )
    parser.add_argument("--no-doc", action="store_true", help="do not write docs/benchmarks.md")
    parser.add_argument("--child", choices=list(BARE_CONTENDERS), help=argparse.SUPPRESS)
    parser.add_argument("--world", type=Path, help=argparse.SUPPRESS)
    return parser.parse_args()


def main() -> None:
    args = parse_args()
    if args.child:
        result = run_contender(
            args.child, args.world, args.threads, args.memory_limit, args.workdir
        )
        print(json.dumps(result))
        return
    command = "benchmarks/side_by_side.py " + " ".join(sys.argv[1:])
    by_size: dict[int, dict] = {}
    sections = []
    for lines in sorted(args.lines):
        info = ensure_world(args.workdir, lines, args.seed)
        folder = Path(info["folder"])
        print(
            f"world: {info['receipt_lines']:,} receipt lines, {info['stores']} stores x "
            f"{info['weeks']} weeks, generated in {info['generate_seconds']} s; held back "
            f"{info['held_back']}"
        )
        # keyed by the lines the world really has: the generator rounds to whole stores
        generated = info["receipt_lines"]
        rounds = [one_round(args, info, folder, by_size, generated) for _ in range(args.runs)]
        results = median_results([results for results, _, _ in rounds])
        by_size[generated] = results
        _, ledger, first_build = rounds[-1]
        sections.append(render_size(info, results, ledger, build_timings(first_build)))
    report = render(command, sections, by_size)
    if args.choices_occasions:
        print("running benchmarks/choices_scale.py ...", flush=True)
        report += choices_section(args.choices_occasions, args.memory_limit)
    print(report)
    if not args.no_doc:
        write_doc(report)


def choices_section(occasions: int, memory: str) -> str:
    """Run choices_scale.py (its own synthetic warehouse) and quote its summary."""
    script = Path(__file__).resolve().parent / "choices_scale.py"
    command = ["--occasions", str(occasions), "--memory-limit", memory]
    output = subprocess.run(
        [sys.executable, str(script), *command], check=True, capture_output=True, text=True
    ).stdout
    return "\n".join(
        [
            "",
            "## The choice build against its bare query",
            "",
            f"`.venv/bin/python benchmarks/choices_scale.py {' '.join(command)}` (run by the "
            "command above; target: build / baseline time at most 2.5 at 10M occasions). Its "
            "input is its own synthetic warehouse, not the world above; each side runs in its "
            "own process. Its output:",
            "",
            "```",
            output.strip(),
            "```",
            "",
        ]
    )


def one_round(
    args: argparse.Namespace, info: dict, folder: Path, by_size: dict[int, dict], lines: int
) -> tuple[dict, dict, Path]:
    """Every contender once; returns their results, the first run's ledger and its build."""
    world = folder / "world"
    results: dict[str, dict] = {}
    for name in BARE_CONTENDERS:
        reason = "skipped: --skip" if name in args.skip else memory_skip(name, lines, by_size)
        if reason:
            print(f"{CONTENDERS[name]}: {reason}", flush=True)
            results[name] = {"skipped": reason}
            continue
        print(f"running {CONTENDERS[name]} ...", flush=True)
        results[name] = run_bare(name, args, world, folder)
    results["demandprep_ingest"] = ingest_only(args, world, folder)
    run_dir = fresh_folder(folder / "run")
    config = demandprep_config(world, run_dir, args.memory_limit, args.threads)
    print("running demandprep run (empty warehouse) ...", flush=True)
    results["demandprep_run"] = run_demandprep("run", config, folder / "demandprep_run.log")
    first_build = latest_build(run_dir)
    results["demandprep_run"] |= build_checksum(first_build)
    ledger = ledger_numbers(run_dir)
    results["demandprep_run"]["lines"] = ledger["accepted"]
    arrived = world / info["held_back"]
    shutil.copy2(folder / "held_back" / info["held_back"], arrived)
    try:
        print("running demandprep run (one more day) ...", flush=True)
        one_day = run_demandprep("run", config, folder / "demandprep_day.log")
        # read before the nothing-new run adds its own ingest_runs rows
        results["demandprep_one_day"] = with_night_split(one_day, run_dir)
        # the same files again: what every nightly run costs before it has anything to do
        print("running demandprep run (nothing new) ...", flush=True)
        results["demandprep_nothing_new"] = run_demandprep(
            "run", config, folder / "demandprep_nothing_new.log"
        )
    finally:
        arrived.unlink()
    results["demandprep_one_day"] = with_build_numbers(results["demandprep_one_day"], run_dir)
    results["demandprep_nothing_new"]["lines"] = results["demandprep_one_day"]["lines"]
    if args.with_choices:
        results |= runs_with_choices(args, info, folder)
    return results, ledger, first_build


# invented data only: the pseudonyms of a benchmark world protect nobody
BENCHMARK_PSEUDONYM_KEY = "side-by-side benchmark key, invented world"


def runs_with_choices(args: argparse.Namespace, info: dict, folder: Path) -> dict[str, dict]:
    """`demandprep run` with the choice build on: from an empty warehouse, then once more
    after the held-back day arrives (its own run folder, so the runs above stay as they were)."""
    world = folder / "world"
    run_dir = fresh_folder(folder / "run_choices")
    config = demandprep_config(world, run_dir, args.memory_limit, args.threads, choices=True)
    env = os.environ | {"DEMANDPREP_PSEUDONYM_KEY": BENCHMARK_PSEUDONYM_KEY}
    results = {}
    print("running demandprep run, choices on (empty warehouse) ...", flush=True)
    log = folder / "demandprep_run_choices.log"
    results["demandprep_run_choices"] = with_build_numbers(
        run_demandprep("run", config, log, env), run_dir
    )
    arrived = world / info["held_back"]
    shutil.copy2(folder / "held_back" / info["held_back"], arrived)
    try:
        print("running demandprep run, choices on (one more day) ...", flush=True)
        log = folder / "demandprep_day_choices.log"
        one_day = run_demandprep("run", config, log, env)
    finally:
        arrived.unlink()
    results["demandprep_one_day_choices"] = with_build_numbers(
        with_night_split(one_day, run_dir), run_dir
    )
    return results


def with_night_split(result: dict, run_dir: Path) -> dict:
    """A one-more-day run's result with what its split needs: the round's own wall (the table
    shows the median over rounds), its ingest phases and its build's timings."""
    return result | {
        "round_wall": result["wall"],
        "phases": ingest_phases(run_dir),
        "build_timings": build_timings(latest_build(run_dir)),
        "choice_scope": choice_scope(latest_build(run_dir)),
        "choices_file": choices_file(latest_build(run_dir)),
    }


def with_build_numbers(result: dict, run_dir: Path) -> dict:
    """A run's result with its latest build's checksum and the lines its warehouse accepted."""
    lines = ledger_numbers(run_dir)["accepted"]
    return result | build_checksum(latest_build(run_dir)) | {"lines": lines}


def ingest_only(args: argparse.Namespace, world: Path, folder: Path) -> dict:
    """`demandprep ingest` alone on an empty warehouse (its own process), with its phases."""
    run_dir = fresh_folder(folder / "ingest_only")
    config = demandprep_config(world, run_dir, args.memory_limit, args.threads)
    print("running demandprep ingest (empty warehouse) ...", flush=True)
    result = run_demandprep("ingest", config, folder / "demandprep_ingest.log")
    result["lines"] = ledger_numbers(run_dir)["accepted"]
    result["phases"] = ingest_phases(run_dir)
    return result


def ingest_phases(run_dir: Path) -> dict[str, float]:
    """Seconds per ingest phase of the warehouse's latest ingest (its `ingest_runs` rows)."""
    import duckdb

    con = duckdb.connect(str(run_dir / "warehouse" / "demandprep.duckdb"), read_only=True)
    rows = con.execute(
        "select phase, seconds from ingest_runs "
        "where run_at = (select max(run_at) from ingest_runs) order by phase"
    ).fetchall()
    con.close()
    return dict(rows)


def fresh_folder(path: Path) -> Path:
    shutil.rmtree(path, ignore_errors=True)
    path.mkdir(parents=True)
    return path


def median_results(rounds: list[dict[str, dict]]) -> dict[str, dict]:
    """Per contender, the median wall, CPU and peak RSS over rounds (checksums of the last)."""
    merged = {}
    for name, last in rounds[-1].items():
        merged[name] = dict(last)
        if "skipped" in last:
            continue
        for measure_name in ("wall", "cpu", "peak_mib"):  # phases stay the last round's
            merged[name][measure_name] = statistics.median(r[name][measure_name] for r in rounds)
    return merged


def render(command: str, sections: list[str], by_size: dict[int, dict]) -> str:
    """The whole page: command and machine, one section per size, then the targets."""
    labelled = [
        (f"{size:,} lines: {label}", value, aim, met)
        for size in sorted(by_size)
        for label, value, aim, met in target_rows(by_size[size])
    ]
    lines = [
        "# Benchmarks",
        "",
        "## demandprep side by side with bare DuckDB, polars and pandas",
        "",
        f"Command: `.venv/bin/python {command}`",
        "",
        f"Date: {datetime.now(UTC):%Y-%m-%d %H:%M} UTC. Code: commit {code_version()}. "
        f"Machine: {machine()}.",
        "",
        "Each contender runs alone in its own process, one after the other, after the disks "
        "are synced (untimed). Wall time from the parent; CPU time is user + sys of the child "
        "and peak RSS its ru_maxrss (os.wait4). "
        "Ratios are to the bare DuckDB query. With --runs above one, every contender runs once "
        "per round and the table shows the median per contender. A bare script whose peak "
        "memory, scaled from a smaller size, would not fit in this machine's memory is "
        "skipped and says so.",
        "",
        "### Targets",
        "",
        *targets_lines(labelled + scaling_rows(by_size)),
        "",
        *sections,
        WHAT_THEY_DO,
    ]
    return "\n".join(lines)


def render_size(info: dict, results: dict, ledger: dict, timings: dict) -> str:
    files = len(receipt_files(Path(info["folder"]) / "world"))
    quarantined = ", ".join(f"{k} {v:,}" for k, v in sorted(ledger["quarantined"].items()))
    lines = [
        f"### {info['receipt_lines']:,} receipt lines",
        "",
        f"Input: a demo world (seed {info['seed']}, {info['stores']} stores x {info['weeks']} "
        f"weeks, {info['visits_per_store_day']:g} visits per store-day), "
        f"{info['receipt_lines']:,} receipt lines in daily gzip CSV files; the last day "
        f"({info['held_back']}) is held back, so every contender but `+1 day` reads {files} "
        f"files. Generated in {info['generate_seconds']} s (not in the table).",
        "",
        *table_lines(results),
        "",
        f"demandprep's ingest of the first run: {ledger['accepted']:,} lines accepted; "
        f"quarantined: {quarantined or 'none'}.",
        "",
        "Five largest costs of the first `demandprep run`'s build (manifest.json, "
        "timings_seconds, last round): " + "; ".join(top_costs(timings)) + f". The build's "
        f"timings add up to {sum(timings.values()):.1f} s of the run's "
        f"{results['demandprep_run']['wall']:.1f} s (median wall).",
        "",
        *ingest_phase_lines(results["demandprep_ingest"]),
        *one_day_lines(results["demandprep_one_day"]),
    ]
    if "demandprep_one_day_choices" in results:
        lines += one_day_lines(results["demandprep_one_day_choices"], "`+1 day` (choices on)")
    return "\n".join(lines)


def ingest_phase_lines(ingest: dict) -> list[str]:
    """The ingest's five largest phases (warehouse table `ingest_runs`, last round)."""
    phases = ingest.get("phases", {})
    return [
        "Five largest phases of `demandprep ingest` (its `ingest_runs` rows, last round): "
        + "; ".join(top_costs(phases))
        + f". They add up to {sum(phases.values()):.1f} s of its {ingest['wall']:.1f} s "
        "(median wall); the rest is process start-up (imports) and closing the warehouse.",
        "",
    ]


def one_day_lines(one_day: dict, run: str = "`+1 day`") -> list[str]:
    """Where the `+1 day` run's wall time goes: its ingest phases (`ingest_runs`), its build
    stages and export steps (manifest.json), and the rest that no timing covers."""
    phases = one_day.get("phases", {})
    timings = one_day.get("build_timings", {})
    stages = {name: s for name, s in timings.items() if not name.startswith("export.")}
    export = {name: s for name, s in timings.items() if name.startswith("export.")}
    parts = [("ingest", phases, 3), ("build stages", stages, 5), ("export", export, 3)]
    wall = one_day.get("round_wall", one_day["wall"])
    rest = wall - sum(sum(part.values()) for _, part, _ in parts)
    spent = "; ".join(
        f"{label} {sum(part.values()):.1f} s ({'; '.join(top_costs(part, count))})"
        for label, part, count in parts
    )
    text = (
        f"Where the {run} run's {wall:.1f} s go (last round): {spent}; the rest {rest:.1f} s "
        "(process start-up and imports, opening and closing the warehouse, and what no phase or "
        "stage timing covers)."
    )
    scope = choice_scope_words(one_day.get("choice_scope"))
    return [text + scope + choices_file_words(one_day.get("choices_file")), ""]


def choice_scope_words(scope: dict | None) -> str:
    """' The choice build was ...' for a run with choices, '' without."""
    if scope is None:
        return ""
    if scope["build_mode"] == "full":
        return f" The choice build was full ({scope['full_build_reason']})."
    first = scope["first_day_rebuilt"]
    if first is None:
        return " The choice build was incremental and recomputed no occasion."
    return f" The choice build was incremental, from {first} on."


def choices_file_words(facts: dict | None) -> str:
    """' The choices file kept ...' for a run with choices, '' without."""
    if facts is None:
        return ""
    kept, written = facts["row_groups_kept"], facts["row_groups_written"]
    if kept == 0:
        return f" The choices file was written whole ({facts['written_whole_because']})."
    return (
        f" The choices file kept {kept:,} of its {kept + written:,} row groups from the last "
        "build's file."
    )


WHAT_THEY_DO = """### How to read the checksums

`lines used`: the receipt lines each contender kept (the bare ones after their read and casts;
demandprep: lines accepted into the warehouse). The checksum is over the visits share table
(store x week x product): rows, sum of shares, sum of units. `+1 day` is over the table
including the added day, so it is larger by construction; `duckdb persist` and `demandprep
ingest` build no share table. `nothing new` runs `demandprep run` once more on the same files:
it finds no new file and no changed setting and builds nothing, so its time (interpreter and
imports, opening the warehouse, checking every file against the ledger, closing) is the floor
under `+1 day`; its row in the targets table says how much of the 5% it already takes.

The seeded faults explain the small differences in the checksums: the bare contenders keep
every line their read accepts, so a clean line re-sent the next day counts twice and a zero or
negative quantity is summed; a line with an unknown SKU or no SKU falls out of the catalogue
join. All three drop a line whose quantity or time does not parse and keep one with a bad amount
or discount (no contender uses those columns; DuckDB does not even parse them). They differ
among themselves only on lines with an extra field: DuckDB (ignore_errors) and pandas
(on_bad_lines='skip') drop them, polars (truncate_ragged_lines) keeps them cut to the header's
columns.

What the bare contenders do and what differs from demandprep:

- duckdb query: one `read_csv` over all files with the column names and types given, broken
  lines skipped, the catalogue joined for coffee SKUs, visits = distinct (store, day, receipt)
  with a sale line per store-week, units = sale + void lines, returns out, one pack = one unit,
  rows with units <= 0 dropped. No checks, nothing kept.
- duckdb persist: all text columns plus the file name into one table of a new DuckDB file
  (lines with an extra field skipped); no share table. The baseline of the ingest.
- polars / pandas: read each file as text, concat, cast quantity and time (bad values dropped),
  then the same grouping.
- demandprep ingest: `demandprep ingest` on an empty warehouse: every reference table, the
  receipts with reject capture, rules, duplicates, quarantine, ledger and schema checks.
- demandprep run: the demo config with no product-universe cut, only the visits assumption, no
  outside-share floor and choices off, so its table is the same one; it also ingests every
  reference table, keeps a ledger and quarantine, validates every table, builds instruments and
  writes Parquet outputs. Its visit counts the visit in the period of its first sale line (the
  same week here). The choice build is off in these runs; --choices-occasions adds
  benchmarks/choices_scale.py, which times it against its bare query on its own synthetic
  warehouse.
- demandprep run, choices on (with --with-choices): the same config with the demo's choice
  build on (chooser-alternative rows for every loyalty-card visit, exported as Parquet), in a
  warehouse of its own, from empty and then after the held-back day; its share table is the
  same as above, so its checksum is too.
"""


if __name__ == "__main__":
    main()
