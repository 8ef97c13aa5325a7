"""Time the pandera checks of a built warehouse's tables under each polars engine, side by side.

Reads up to --rows rows of every warehouse table that has a model (the size a night validates:
the periods it recomputed), then validates them --repeats times with polars' default engine
and with the in-memory engine that `demandprep.validate` uses. Prints the best pass of each,
wall and CPU, and their ratio. The warehouse is opened read-only.

    python benchmarks/validation_engine.py CONFIG [--rows 2000] [--repeats 5]
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import duckdb
import polars as pl

from demandprep.config import load_config
from demandprep.export.dictionary import schema_models

ENGINES = ("auto", "in-memory")


def table_frames(con: duckdb.DuckDBPyConnection, rows: int) -> list[tuple[type, pl.DataFrame]]:
    """(model, frame of the table's first `rows` rows) for every model whose table exists."""
    present = {name for (name,) in con.execute("select table_name from duckdb_tables()").fetchall()}
    frames = []
    for table, models in sorted(schema_models().items()):
        if table in present:
            frame = con.sql(f"select * from {table} limit {int(rows)}").pl()  # noqa: S608
            frames += [(model, frame) for model in models]
    return frames


def timed_pass(frames: list[tuple[type, pl.DataFrame]], engine: str) -> tuple[float, float]:
    """Wall and CPU seconds of validating every frame once under `engine`."""
    wall, cpu = time.perf_counter(), time.process_time()
    with pl.Config(engine_affinity=engine):
        for model, frame in frames:
            model.validate(frame, lazy=True)
    return time.perf_counter() - wall, time.process_time() - cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("config", type=Path)
    parser.add_argument("--rows", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    config = load_config(args.config)
    con = duckdb.connect(str(config.warehouse.path), read_only=True)
    frames = table_frames(con, args.rows)
    con.close()
    print(f"{len(frames)} tables, up to {args.rows:,} rows each, best of {args.repeats} passes")
    best: dict[str, tuple[float, float]] = {}
    for _ in range(args.repeats):
        for engine in ENGINES:  # alternated, so a slow moment hits both
            wall, cpu = timed_pass(frames, engine)
            before = best.get(engine, (float("inf"), float("inf")))
            best[engine] = (min(before[0], wall), min(before[1], cpu))
    for engine in ENGINES:
        wall, cpu = best[engine]
        print(f"  engine {engine:<10} wall {wall:7.3f} s  cpu {cpu:7.3f} s")
    (base_wall, base_cpu), (wall, cpu) = best["auto"], best["in-memory"]
    print(f"  in-memory / auto: wall {wall / base_wall:.2f}, cpu {cpu / base_cpu:.2f}")


if __name__ == "__main__":
    main()
