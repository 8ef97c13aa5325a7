"""Progress of long work, fed by plain callbacks: rich bars in a terminal, log lines elsewhere.

Outside a terminal (cron, a pipe) a live display would print nothing useful, so the ingest
writes one line per batch of files and the build one line per stage, each with its time: a log
then shows where a night stopped.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn


class IngestProgress:
    """A files bar and a running row count, driven by the ingest's progress events."""

    def __init__(self, console: Console) -> None:
        self._progress = Progress(
            TextColumn("[bold]{task.description}"),
            BarColumn(),
            MofNCompleteColumn(),
            TextColumn("{task.fields[rows]:,} rows"),
            TimeElapsedColumn(),
            console=console,
            transient=False,
        )
        self._files = self._progress.add_task("ingest files", total=None, rows=0)

    def __enter__(self) -> IngestProgress:
        self._progress.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._progress.stop()

    def update(self, event: str, **info: Any) -> None:
        """Take one ingest event: 'start' (total files), 'file_done' (rows of that file)."""
        if event == "start":
            self._progress.update(self._files, total=info.get("files"))
        elif event == "file_done":
            task = self._progress.tasks[self._files]
            rows = task.fields["rows"] + int(info.get("rows", 0))
            self._progress.update(self._files, advance=1, rows=rows)


class IngestLog:
    """Plain log lines for a log file (cron): one per batch of files, with its time."""

    def __init__(self, write: Callable[[str], None]) -> None:
        self._write = write
        self._pending: set[Path] = set()
        self._batch: list[dict[str, Any]] = []
        self._started = 0.0
        self._unchanged = 0

    def update(self, event: str, **info: Any) -> None:
        """Take one ingest event (see `ingest.runner`): write a line when a batch is done."""
        if event == "start":
            self._write(f"ingesting {info.get('files', 0):,} files ({_megabytes(info)} to read)")
        elif event == "file_start":
            if not self._pending:
                self._started = time.perf_counter()
            self._pending.add(Path(info["path"]))
        elif event == "file_done":
            self._file_done(info)
        elif event == "done" and self._unchanged:
            count = self._unchanged
            self._write(f"ingest unchanged: {_files(count)} already in the warehouse")

    def _file_done(self, info: dict[str, Any]) -> None:
        path = Path(info["path"])
        if path not in self._pending:
            self._unchanged += 1
            return
        self._pending.discard(path)
        self._batch.append(info)
        if not self._pending:
            self._write(batch_line(self._batch, time.perf_counter() - self._started))
            self._batch = []


def batch_line(files: list[dict[str, Any]], seconds: float) -> str:
    """`ingest receipts: 12 files done in 1.2 s (34,567 rows read, 0 failed)`."""
    count = len(files)
    rows = sum(int(item.get("rows") or 0) for item in files)
    failed = sum(1 for item in files if item.get("status") in ("failed", "refused"))
    return (
        f"ingest {files[0]['source']}: {_files(count)} done in {seconds:.1f} s "
        f"({rows:,} rows read, {failed} failed)"
    )


def _files(count: int) -> str:
    return f"{count:,} file" if count == 1 else f"{count:,} files"


def _megabytes(info: dict[str, Any]) -> str:
    return f"{int(info.get('bytes') or 0) / 1e6:,.1f} MB"


class BuildLog:
    """Plain log lines for a log file (cron): one per stage with its time, then the export's."""

    def __init__(self, write: Callable[[str], None]) -> None:
        self._write = write
        self._last = time.perf_counter()

    def stage_done(self, stage: Any, seconds: float) -> None:
        """Write `stage <name> done in <seconds> s`."""
        self._write(f"stage {stage.name} done in {seconds:.1f} s")
        self._last = time.perf_counter()

    def export_done(self) -> None:
        """Write how long writing and publishing the build folder took."""
        self._write(f"export done in {time.perf_counter() - self._last:.1f} s")
