"""Time ingest discovery on a world's input files: hashing every file, then with stamp records.

Runs `discover_files` against a scratch warehouse (never the world's own), so the world's
folder is only read: the first pass hashes every file and records the stamps, the next passes
take the sha256 from the records. Prints wall and CPU seconds of each pass.

    python benchmarks/discovery_stamps.py WORLD_CONFIG [--passes 3]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import duckdb

from demandprep.config import load_config
from demandprep.ingest.runner import discover_files


def timed_discovery(con: duckdb.DuckDBPyConnection, config_path: Path) -> tuple[float, float, int]:
    """Wall seconds, CPU seconds (all threads) and files found of one discovery."""
    config = load_config(config_path)
    wall, cpu = time.perf_counter(), time.process_time()
    found = discover_files(con, config)
    return time.perf_counter() - wall, time.process_time() - cpu, len(found)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("config", type=Path)
    parser.add_argument("--passes", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="demandprep-stamps-") as scratch:
        con = duckdb.connect(str(Path(scratch) / "scratch.duckdb"))
        for number in range(1, args.passes + 1):
            wall, cpu, files = timed_discovery(con, args.config)
            stamps = con.execute("select count(*) from file_stamps").fetchone()[0]
            print(f"pass {number}: {files} files, {wall:.3f} s wall, {cpu:.3f} s CPU, ", end="")
            print(f"{stamps} stamps recorded")
        con.close()


if __name__ == "__main__":
    main()
