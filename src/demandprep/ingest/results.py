"""What one ingest run did, per file and in total, and its summary table for the console."""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

from rich.table import Table
from rich.text import Text

FileStatus = Literal["new", "unchanged", "replaced", "failed", "refused", "empty", "withdrawn"]
FILE_STATUSES: tuple[FileStatus, ...] = (
    "new",
    "unchanged",
    "replaced",
    "failed",
    "refused",
    "empty",
    "withdrawn",
)
# statuses that make `ingest` and `run` exit non-zero
PROBLEM_STATUSES: tuple[FileStatus, ...] = ("failed", "refused")
SHOWN_PROBLEMS = 10


@dataclass(frozen=True)
class FileResult:
    """The outcome of one input file: its status, row counts and, when it failed, why."""

    source: str
    path: Path
    status: FileStatus
    file_id: str | None = None
    rows_read: int = 0
    rows_accepted: int = 0
    quarantined: dict[str, int] = field(default_factory=dict)
    error: str | None = None
    # the file could not be opened or decoded at all (a later attempt may succeed)
    unreadable: bool = False

    @property
    def rows_quarantined(self) -> int:
        """Rows of this file sent to quarantine, all reasons together."""
        return sum(self.quarantined.values())

    def __str__(self) -> str:
        # a failure's message already starts with the file's path
        return self.error or str(self.path)


@dataclass
class IngestSummary:
    """Every file's result for one run, in the order the files were ingested."""

    files: list[FileResult] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    # seconds per phase (ingest/timings.py), summed over the run's batches
    timings_seconds: dict[str, float] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        """False when any file failed or was refused (the CLI then exits non-zero)."""
        return not self.problems

    @property
    def failed(self) -> list[FileResult]:
        """The files that could not be ingested; each prints as its one-line error message."""
        return [result for result in self.files if result.status == "failed"]

    @property
    def problems(self) -> list[FileResult]:
        """The files that failed or were refused, in ingest order."""
        return [result for result in self.files if result.status in PROBLEM_STATUSES]

    def problem_lines(self) -> list[str]:
        """One line per failed or refused file (the first SHOWN_PROBLEMS), then how many more."""
        problems = self.problems
        lines = [str(result) for result in problems[:SHOWN_PROBLEMS]]
        if len(problems) > SHOWN_PROBLEMS:
            lines.append(f"… and {len(problems) - SHOWN_PROBLEMS} more")
        return lines

    def count(self, status: FileStatus) -> int:
        """How many files ended with `status`."""
        return sum(1 for result in self.files if result.status == status)

    @property
    def rows_read(self) -> int:
        """Rows read this run, over every file."""
        return sum(result.rows_read for result in self.files)

    @property
    def rows_accepted(self) -> int:
        """Rows accepted this run, over every file."""
        return sum(result.rows_accepted for result in self.files)

    @property
    def quarantined(self) -> dict[str, int]:
        """Rows quarantined this run, by reason, over every file."""
        total: Counter[str] = Counter()
        for result in self.files:
            total.update(result.quarantined)
        return dict(sorted(total.items()))


def timings_line(summary: IngestSummary) -> str:
    """`ingest phases (s): discover 0.01, read 1.20, ...` in phase order."""
    parts = [f"{phase} {seconds:.2f}" for phase, seconds in summary.timings_seconds.items()]
    return "ingest phases (s): " + ", ".join(parts)


def summary_table(summary: IngestSummary) -> Table:
    """The run's summary as a rich table: files by status, then rows by outcome and reason."""
    table = Table(title="ingest summary", show_header=True, header_style="bold")
    table.add_column("what")
    table.add_column("count", justify="right")
    for status in FILE_STATUSES:
        table.add_row(f"files {status}", f"{summary.count(status):,}")
    table.add_section()
    table.add_row("rows read", f"{summary.rows_read:,}")
    table.add_row("rows accepted", f"{summary.rows_accepted:,}")
    quarantined = summary.quarantined
    table.add_row("rows quarantined", f"{sum(quarantined.values()):,}")
    for reason, rows in quarantined.items():
        table.add_row(f"  {reason}", f"{rows:,}")
    for result in summary.problems:
        table.add_row(Text(f"{result.status}: {result.path.name}", style="red"), "")
    for result in summary.files:
        if result.status == "empty":  # a warning: ledgered once, not read again unless changed
            table.add_row(Text(f"empty: {result.path.name}", style="yellow"), "")
    return table
