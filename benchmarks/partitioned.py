"""Benchmark: the partitioned build on a local Dask cluster of 1 and 2 workers, and one process.

    .venv/bin/python benchmarks/partitioned.py                      # the committed sample
    .venv/bin/python benchmarks/partitioned.py --partitioned 1 2    # worker counts to compare
    .venv/bin/python benchmarks/partitioned.py --folder WORLD       # a generated world's folder
    .venv/bin/python benchmarks/partitioned.py --layout region      # files split per region
    .venv/bin/python benchmarks/partitioned.py --skip-single        # the partitioned runs alone

Each contender runs in its own child process on a fresh copy of the folder (ingest, build,
export from an empty warehouse), with `partitioning.by = region`. `--layout daily` keeps the
folder's files (the sample's daily files hold every store, so every partition reads every
file); `--layout region` first splits each file by region into `receipts/<region>/` (lines of
no region into `receipts/unplaced/`), so each partition reads only its region's files:

- single:          the one-process build (`pipeline.run_ingest` + `run_build`);
- partitioned N:   `partitioned.runner.build_partitioned` with the map on a local Dask cluster
                   of N worker processes (one thread each), the partitions submitted through a
                   plain Dask client (Prefect's server start is left out of the figures).

It prints wall time and CPU time (this process plus the workers, each worker's own count read
before the cluster closes), and what the reduce exchanged: raw receipt lines against the rows and
bytes of the partitions' summary files (with the map rounds and the receipts bytes the
partitions read), and what the chooser buckets exchanged: the inputs file the coordinator
writes for them, and the rows and bytes of their choices, choosers and store-day files.
No assertion: this is a measurement.
"""

from __future__ import annotations

import argparse
import csv
import gzip
import json
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "data_samples" / "coffee_sample"
PARTITIONING = '\n[partitioning]\nby = "region"\n'


def cpu_seconds() -> float:
    """User plus system CPU time of this process so far."""
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def fresh_copy(source: Path, target: Path):
    """A copy of the folder without warehouse or builds, partitioned by region; its config."""
    from demandprep.config import load_config

    shutil.copytree(source, target, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config_path = target / "demandprep.toml"
    config_path.write_text(config_path.read_text(encoding="utf-8") + PARTITIONING, "utf-8")
    return load_config(config_path)


def split_by_region(config) -> None:
    """Split each receipts file of the copy by region, under `receipts/<region>/`."""
    folder = config.config_path.parent
    with (folder / "stores.csv").open(encoding="utf-8", newline="") as stores:
        regions = {
            row["shop_id"]: row["region"].lower().replace(" ", "-")
            for row in csv.DictReader(stores)
        }
    for original in sorted((folder / "receipts").glob("*/receipts_*.csv.gz")):
        header, *lines = gzip.decompress(original.read_bytes()).split(b"\n")
        store_at = header.decode().split(",").index("shop_id")
        split: dict[str, list[bytes]] = {}
        for line in filter(None, lines):
            fields = next(csv.reader([line.decode("utf-8", "replace")]))
            region = regions.get(fields[store_at]) if len(fields) > store_at else None
            split.setdefault(region or "unplaced", []).append(line)
        original.unlink()
        for region, kept in split.items():
            target = folder / "receipts" / region / original.name
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(gzip.compress(b"\n".join([header, *kept, b""]), mtime=0))


def run_single(config) -> dict:
    """The one-process build; its wall and CPU time."""
    from demandprep.pipeline import run_build, run_ingest

    started, cpu = time.perf_counter(), cpu_seconds()
    run_ingest(config)
    run_build(config)
    return {"wall": time.perf_counter() - started, "cpu": cpu_seconds() - cpu}


def run_partitioned(config, workers: int) -> dict:
    """The partitioned build on a local cluster of `workers` processes; times and sizes."""
    from distributed import Client, LocalCluster

    from demandprep.partitioned.buckets import build_bucket
    from demandprep.partitioned.choice_inputs import choice_inputs_path
    from demandprep.partitioned.map import build_partition
    from demandprep.partitioned.runner import build_partitioned
    from demandprep.warehouse import connect

    exchanged: dict = {}
    with (
        LocalCluster(
            n_workers=workers, processes=True, threads_per_worker=1, dashboard_address=None
        ) as cluster,
        Client(cluster) as client,
    ):
        worker_cpu_before = sum(client.run(cpu_seconds).values())

        def map_with_client(partitions):
            futures = [
                client.submit(build_partition, config, item, pure=False) for item in partitions
            ]
            summaries = client.gather(futures)
            # a second round (a file the routing hint missed) maps a partition again
            exchanged["rounds"] = exchanged.get("rounds", 0) + 1
            exchanged["partition_maps"] = exchanged.get("partition_maps", 0) + len(summaries)
            # receipts bytes read: each partition reads its routed files (the coordinator none)
            read = {path for item in summaries for path in item.partition.files}
            exchanged["partition_file_reads"] = sum(len(item.partition.files) for item in summaries)
            exchanged["partition_bytes_read"] = sum(
                Path(path).stat().st_size for item in summaries for path in item.partition.files
            )
            exchanged["distinct_files_read"] = len(read)
            for summary in ("market_store_visits", "market_sku_sales"):
                exchanged[summary] = {
                    "rows": sum(item.rows[summary] for item in summaries),
                    "bytes": sum(item.files[summary].stat().st_size for item in summaries),
                }
            return summaries

        def map_buckets_with_client(buckets, warehouses):
            futures = [
                client.submit(build_bucket, config, item, warehouses, pure=False)
                for item in buckets
            ]
            outputs = client.gather(futures)
            exchanged["chooser_buckets"] = len(outputs)
            exchanged["bucket_inputs_bytes"] = choice_inputs_path(config).stat().st_size
            for name in ("choices", "choosers", "choice_store_days"):
                exchanged[f"bucket_{name}"] = {
                    "rows": sum(item.rows[name] for item in outputs),
                    "bytes": sum(item.files[name].stat().st_size for item in outputs),
                }
            return outputs

        started, cpu = time.perf_counter(), cpu_seconds()
        build_partitioned(config, map_with_client, map_buckets=map_buckets_with_client)
        wall, own_cpu = time.perf_counter() - started, cpu_seconds() - cpu
        worker_cpu = sum(client.run(cpu_seconds).values()) - worker_cpu_before
    con = connect(config.warehouse, read_only=True)
    # the coordinator holds no line: the accepted lines as its ledger counts them
    exchanged["raw_lines"] = con.execute(
        "select sum(rows_accepted) from ledger where source = 'receipts' and status = 'current'"
    ).fetchone()[0]
    exchanged["coordinator_raw_lines"] = con.execute(
        "select count(*) from main.raw_lines"
    ).fetchone()[0]
    exchanged["receipts_bytes"] = con.execute(
        "select sum(bytes) from ledger where source = 'receipts' and status = 'current'"
    ).fetchone()[0]
    con.close()
    return {"wall": wall, "cpu": own_cpu + worker_cpu, "exchanged": exchanged}


def child(folder: Path, contender: str, layout: str) -> None:
    """Run one contender on a fresh copy and print its figures as JSON."""
    with tempfile.TemporaryDirectory() as scratch:
        config = fresh_copy(folder, Path(scratch) / "world")
        if layout == "region":
            split_by_region(config)  # before the clock starts
        figures = (
            run_single(config) if contender == "single" else run_partitioned(config, int(contender))
        )
    print(json.dumps(figures))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--folder", type=Path, default=SAMPLE)
    parser.add_argument("--partitioned", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--layout", choices=["daily", "region"], default="daily")
    parser.add_argument(
        "--skip-single", action="store_true", help="leave the one-process build out"
    )
    parser.add_argument("--child", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.folder, args.child, args.layout)
        return
    print(f"folder: {args.folder} (layout: {args.layout})")
    print(f"{'contender':<16}{'wall s':>9}{'CPU s':>9}")
    single = [] if args.skip_single else ["single"]
    for contender in [*single, *map(str, args.partitioned)]:
        command = [sys.executable, __file__, "--folder", str(args.folder), "--child", contender,
                   "--layout", args.layout]  # fmt: skip
        output = subprocess.run(command, check=True, capture_output=True, text=True).stdout
        figures = json.loads(output.strip().splitlines()[-1])
        name = contender if contender == "single" else f"partitioned {contender}"
        print(f"{name:<16}{figures['wall']:>9.1f}{figures['cpu']:>9.1f}")
        if "exchanged" in figures:
            print(f"  exchanged: {json.dumps(figures['exchanged'])}")


if __name__ == "__main__":
    main()
