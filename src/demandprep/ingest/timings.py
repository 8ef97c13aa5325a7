"""Seconds per ingest phase, summed over a run's batches (`IngestSummary.timings_seconds`).

The phases never nest, so their sum is at most the run's wall time; what is left over is the
time between them (progress callbacks, transactions, failed batches' rollbacks):
- discover: finding the files and their checksums, comparing them with the ledger;
- read: cutting each file into its lines and handing them to DuckDB;
- classify: splitting the lines into fields, refusing the lines the reader cannot take, typing
  the fields and applying the source's rules;
- dedupe: the duplicate rule (receipts: against the batch and the lines stored before);
- insert: the batch's file ids, removing replaced versions' rows, appending the accepted rows
  and the quarantine;
- ledger: counts per file, the balance, the refusal check and the ledger rows;
- validate: the pandera guards on what the batch added.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import datetime

import duckdb

PHASES = ("discover", "read", "classify", "dedupe", "insert", "ledger", "validate")


@dataclass
class PhaseTimer:
    """Adds up the seconds spent in each phase; every phase starts at zero."""

    seconds: dict[str, float] = field(default_factory=lambda: dict.fromkeys(PHASES, 0.0))

    @contextmanager
    def phase(self, name: str) -> Iterator[None]:
        """Time the block as part of `name` (phases must not nest)."""
        started = time.perf_counter()
        try:
            yield
        finally:
            self.seconds[name] += time.perf_counter() - started


def record_timings(
    con: duckdb.DuckDBPyConnection, seconds: dict[str, float], run_seconds: float
) -> None:
    """Append one run's phase timings to `ingest_runs` (never into an exported table)."""
    phases = list(seconds)
    con.execute(
        "insert into ingest_runs select $run_at, unnest($phases), unnest($seconds), $run_seconds",
        {
            "run_at": datetime.now(),
            "phases": phases,
            "seconds": [seconds[phase] for phase in phases],
            "run_seconds": run_seconds,
        },
    )
