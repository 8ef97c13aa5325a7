"""Progress outside a terminal: one plain log line per batch of ingested files and per stage."""

from __future__ import annotations

from pathlib import Path

from demandprep.progress import BuildLog, IngestLog
from demandprep.stage import Stage


def test_a_batch_retried_file_by_file_is_still_one_line() -> None:
    lines: list[str] = []
    log = IngestLog(lines.append)
    log.update("start", files=3, bytes=2_500_000)
    log.update("file_done", source="catalogue", path=Path("c.csv"), status="unchanged", rows=0)
    for name in ("a.csv", "b.csv"):
        log.update("file_start", source="receipts", path=Path(name), status="new", bytes=1)
    log.update("file_done", source="receipts", path=Path("a.csv"), status="failed", rows=0)
    assert len(lines) == 1  # b.csv is still pending: the batch is not done
    log.update("file_done", source="receipts", path=Path("b.csv"), status="new", rows=1_234)
    log.update("done")
    assert lines[0] == "ingesting 3 files (2.5 MB to read)"
    assert lines[1].startswith("ingest receipts: 2 files done in ")
    assert lines[1].endswith(" s (1,234 rows read, 1 failed)")
    assert lines[2:] == ["ingest unchanged: 1 file already in the warehouse"]


def test_each_stage_is_one_line_with_its_time() -> None:
    lines: list[str] = []
    BuildLog(lines.append).stage_done(Stage("shares", lambda ctx: None), 1.234)
    assert lines == ["stage shares done in 1.2 s"]
