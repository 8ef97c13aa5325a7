"""Progress display for long work on the console (rich), fed by plain callbacks."""

from __future__ import annotations

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
