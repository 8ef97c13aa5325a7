"""Peak memory of the choice build at scale, against the warehouse memory limit and a baseline.

    python benchmarks/choices_scale.py --occasions 10000000 --memory-limit 2GB

Generates a synthetic warehouse (card receipts buying one of `--alternatives` products, mostly
one of three favourites per household, and a weekly shelf-price file listing all of them)
straight in DuckDB, then runs, each in its own process:

- build:    every choice stage (occasions x alternatives rows, history, loyalty, prices,
            pandera validation in batches) on a warehouse opened with --memory-limit, then the
            export of choices.parquet and choosers.parquet (sorted, streamed to zstd Parquet);
- baseline: one bare DuckDB query writing a table of the same rows (occasion x shelf row,
            ordered the same way) under the same limit.

Each child reports its peak resident memory (VmHWM), wall time and CPU time (user + system over
all its threads, for the same span as the wall time; the build also per stage); the script
prints them, their ratios to the memory limit and to each other, and how far each peak lies
above the limit. The machine may be shared: CPU time shows what the work itself cost when the
wall time includes waiting for cores. No assertion: this is a measurement.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from demandprep.context import BuildContext

KEY_ENV = "DEMANDPREP_PSEUDONYM_KEY"
DAYS = 364
FIRST_DAY = "2024-01-01"


GENERATE_SQL = (
    """
    create or replace table catalogue as
    select
        'SKU' || lpad(cast(j as varchar), 3, '0') as sku,
        'coffee' as category,
        'P' || lpad(cast(j as varchar), 3, '0') as brand,
        'F' || cast(j % 5 as varchar) as firm,
        cast(j % 5 + 1 as bigint) as strength,
    from range($j) t(j)
    union all select 'GROCERY', 'bread', 'X', 'X', 0
    """,
    """
    create or replace table stores as
    select 'S' || lpad(cast(s as varchar), 4, '0') as store, 'R' || cast(s % 6 as varchar)
        as region
    from range($stores) t(s)
    """,
    """
    create or replace table households as
    select 'C' || lpad(cast(c as varchar), 9, '0') as card,
        cast(c % 5 + 1 as bigint) as household_size
    from range($choosers) t(c)
    """,
    """
    create or replace table shelf_prices as
    select
        'S' || lpad(cast(s as varchar), 4, '0') as store,
        cast($first_day as date) + cast(7 * w as integer) as date,
        'SKU' || lpad(cast(j as varchar), 3, '0') as sku,
        round(2.0 + j * 0.25 + (hash(s, w, j) % 100) / 200.0, 2) as price,
        hash(s, w, j, 1) % 10 = 0 as promo,
    from range($stores) a(s), range(52) b(w), range($j) c(j)
    """,
    """
    create or replace table raw_lines as
    with visits as (
        select
            i,
            'S' || lpad(cast(i % $stores as varchar), 4, '0') as store,
            cast($first_day as timestamp)
                + to_days(cast((i // $stores) % $days as integer))
                + to_seconds(cast(28800 + hash(i, 1) % 43200 as bigint)) as sold_at,
            hash(i, 2) % $choosers as chooser,
            'C' || lpad(cast(chooser as varchar), 9, '0') as card,
            -- households are loyal: four visits in five pick one of three favourite products
            cast(
                case
                    when hash(i, 4) % 5 = 0 then hash(i, 3) % $j
                    else (chooser * 7 + hash(i, 3) % 3) % $j
                end as integer
            ) as j,
        from range($n) t(i)
    )
    select 'bench' as file_id, 2 * i as line_no, 'R' || cast(i as varchar) as receipt,
        1 as line, store, sold_at, 'SKU' || lpad(cast(j as varchar), 3, '0') as sku,
        1.0 as quantity, 2.0 + j * 0.25 as amount, 0.0 as discount, card, 'sale' as line_kind
    from visits
    union all
    select 'bench', 2 * i + 1, 'R' || cast(i as varchar), 2, store, sold_at, 'GROCERY', 1.0,
        1.5, 0.0, card, 'sale'
    from visits
    where i % 2 = 0
    """,
)


def peak_rss_bytes() -> int:
    """The process's peak resident set size (VmHWM) in bytes."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) * 1024
    raise RuntimeError("no VmHWM in /proc/self/status")


def reset_peak_rss() -> None:
    """Start a new VmHWM measurement (Linux: writing 5 to clear_refs resets the peak)."""
    Path("/proc/self/clear_refs").write_text("5")


def sizes(occasions: int) -> dict[str, int]:
    """Stores and choosers for a number of occasions (about 40 visits per chooser and year)."""
    return {"stores": max(10, occasions // 50_000), "choosers": max(100, occasions // 40)}


def generate(database: Path, occasions: int, alternatives: int) -> None:
    """Write raw_lines, catalogue, stores, households and shelf_prices for the benchmark."""
    import duckdb

    size = sizes(occasions)
    con = duckdb.connect(str(database), config={"threads": 2, "memory_limit": "2GB"})
    params = {
        "n": occasions,
        "j": alternatives,
        "stores": size["stores"],
        "choosers": size["choosers"],
        "days": DAYS,
        "first_day": FIRST_DAY,
    }
    for statement in GENERATE_SQL:
        used = {k: v for k, v in params.items() if f"${k}" in statement}
        con.execute(statement, used)
    con.close()


def bench_config(database: Path, memory_limit: str):
    """A config whose warehouse settings apply the memory limit to the database."""
    from demandprep.config import ProjectConfig

    raw = {
        "warehouse": {
            "path": str(database),
            "memory_limit": memory_limit,
            "threads": 2,
            "temp_directory": str(database.parent / "tmp"),
        },
        "sources": {
            "receipts": {
                "files": ["x"],
                "columns": {
                    "receipt": "r",
                    "store": "s",
                    "sold_at": "t",
                    "sku": "i",
                    "quantity": "q",
                    "amount": "a",
                    "card": "c",
                },
            },
            "catalogue": {"files": ["x"], "columns": {"sku": "i", "category": "k"}},
            "stores": {"files": ["x"], "columns": {"store": "s"}},
        },
        "markets": {"period": "week", "categories": ["coffee"]},
        "products": {"keys": ["brand"], "firm": "firm", "characteristics": ["strength"]},
        "market_size": {"visits": {"method": "visits", "units_per_visit": 1.0}},
        "choices": {"occasions": "category_visits", "demographics": ["household_size"]},
    }
    return ProjectConfig.model_validate(raw, context={"base_dir": database.parent})


def run_build(database: Path, memory_limit: str) -> dict:
    """Every choice stage on the benchmark warehouse; returns rows, seconds and peak memory."""
    from demandprep.choices.stages import CHOICE_STAGES
    from demandprep.context import BuildContext
    from demandprep.stage import run_stage
    from demandprep.warehouse import connect

    config = bench_config(database, memory_limit)
    con = connect(config.warehouse)
    ctx = BuildContext(con=con, config=config)
    started = time.perf_counter()
    cpu_started = time.process_time()
    peak = peak_rss_bytes()
    stage_peaks = {}
    stage_cpu = {}
    for stage in CHOICE_STAGES:
        reset_peak_rss()
        stage_started = time.process_time()
        run_stage(stage, ctx)
        stage_cpu[stage.name] = round(time.process_time() - stage_started, 1)
        stage_peaks[stage.name] = peak_rss_bytes()
        peak = max(peak, stage_peaks[stage.name])
    reset_peak_rss()
    stage_started = time.process_time()
    export_choice_files(ctx, database.parent / "export")
    stage_cpu["export"] = round(time.process_time() - stage_started, 1)
    stage_peaks["export"] = peak_rss_bytes()
    peak = max(peak, stage_peaks["export"])
    seconds = time.perf_counter() - started
    cpu_seconds = time.process_time() - cpu_started
    rows = con.execute("select count(*) from choices").fetchone()[0]
    con.close()
    return {
        "rows": rows,
        "seconds": round(seconds, 1),
        "cpu_seconds": round(cpu_seconds, 1),
        "peak_bytes": peak,
        "stage_seconds": ctx.timings,
        "stage_cpu_seconds": stage_cpu,
        "stage_peak_gib": {name: round(value / 2**30, 2) for name, value in stage_peaks.items()},
    }


def export_choice_files(ctx: BuildContext, folder: Path) -> None:
    """Write the build's choice files as the export does (its order, row groups, metadata)."""
    from demandprep.export.build import write_output_table
    from demandprep.export.dictionary import schema_models
    from demandprep.export.tables import output_table

    folder.mkdir(exist_ok=True)
    models = schema_models()
    started = time.perf_counter()
    for kind in ("choices", "choosers"):
        output = output_table(kind)
        write_output_table(ctx, output, folder, models)
        (folder / output.file_name).unlink()
    ctx.timings["export"] = round(time.perf_counter() - started, 1)


def run_baseline(database: Path, memory_limit: str) -> dict:
    """One bare DuckDB query writing the same occasion x alternative rows, ordered the same way."""
    from demandprep.warehouse import connect

    con = connect(bench_config(database, memory_limit).warehouse)
    con.execute("set preserve_insertion_order = true")
    started = time.perf_counter()
    cpu_started = time.process_time()
    con.execute(
        """
        create or replace table baseline_rows as
        with visits as (
            select store, receipt, min(sold_at) as sold_at, min(card) as card,
                min(sku) filter (where sku <> 'GROCERY') as sku,
            from raw_lines group by store, receipt
        )
        select v.card, v.store, v.receipt, v.sold_at, s.sku, s.price, s.promo, s.sku = v.sku
            as chosen
        from visits v
        join shelf_prices s
            on s.store = v.store
            and s.date = cast(v.sold_at as date) - cast(isodow(v.sold_at) - 1 as integer)
        where v.sku is not null
        order by v.card, v.sold_at, v.receipt, s.sku
        """
    )
    seconds = time.perf_counter() - started
    cpu_seconds = time.process_time() - cpu_started
    rows = con.execute("select count(*) from baseline_rows").fetchone()[0]
    con.execute("drop table baseline_rows")
    con.close()
    return {
        "rows": rows,
        "seconds": round(seconds, 1),
        "cpu_seconds": round(cpu_seconds, 1),
        "peak_bytes": peak_rss_bytes(),
    }


def child(mode: str, args: argparse.Namespace) -> dict:
    """Run one mode in a fresh Python process and read its JSON report."""
    command = [
        sys.executable,
        __file__,
        "--child",
        mode,
        "--workdir",
        str(args.workdir),
        "--occasions",
        str(args.occasions),
        "--alternatives",
        str(args.alternatives),
        "--memory-limit",
        args.memory_limit,
    ]
    env = {**os.environ, KEY_ENV: os.environ.get(KEY_ENV) or "benchmark-key-0123456789abcdef"}
    output = subprocess.run(command, capture_output=True, text=True, env=env)
    if output.returncode:
        raise SystemExit(f"{mode} failed:\n{output.stderr[-3000:]}")
    return json.loads(output.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--occasions", type=int, default=10_000_000)
    parser.add_argument("--alternatives", type=int, default=15)
    parser.add_argument("--memory-limit", default="2GB")
    parser.add_argument(
        "--workdir", type=Path, default=Path(tempfile.gettempdir()) / "demandprep_choices_scale"
    )
    parser.add_argument("--child", choices=("generate", "build", "baseline"))
    args = parser.parse_args()
    args.workdir.mkdir(parents=True, exist_ok=True)
    database = args.workdir / f"choices_{args.occasions}.duckdb"
    if args.child == "generate":
        generate(database, args.occasions, args.alternatives)
        print(json.dumps({"generated": str(database)}))
        return
    if args.child:
        runner = run_build if args.child == "build" else run_baseline
        print(json.dumps(runner(database, args.memory_limit)))
        return
    if not database.exists():
        child("generate", args)
    from demandprep.memory import parse_bytes

    limit = parse_bytes(args.memory_limit)
    baseline = child("baseline", args)
    build = child("build", args)
    gib = 2**30
    print(
        f"occasions {args.occasions:,} x {args.alternatives} alternatives, "
        f"memory_limit {args.memory_limit}, threads 2"
    )
    for name, result in (("baseline (bare DuckDB query)", baseline), ("choice build", build)):
        print(
            f"  {name:30s} rows {result['rows']:>13,}  {result['seconds']:>8.1f} s  "
            f"cpu {result['cpu_seconds']:>8.1f} s  "
            f"peak {result['peak_bytes'] / gib:6.2f} GiB  "
            f"peak / limit {result['peak_bytes'] / limit:5.2f}  "
            f"above limit {(result['peak_bytes'] - limit) / gib:5.2f} GiB"
        )
    print(
        f"  build / baseline: peak memory {build['peak_bytes'] / baseline['peak_bytes']:.2f}, "
        f"time {build['seconds'] / max(baseline['seconds'], 0.1):.2f}, "
        f"cpu {build['cpu_seconds'] / max(baseline['cpu_seconds'], 0.1):.2f}"
    )
    print(f"  stage seconds: {build['stage_seconds']}")
    print(f"  stage cpu seconds: {build['stage_cpu_seconds']}")
    print(f"  stage peak GiB: {build['stage_peak_gib']}")


if __name__ == "__main__":
    main()
