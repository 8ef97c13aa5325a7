"""The build log: one line per night beside the builds, saying what the night did and why."""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

from demandprep.config import ProjectConfig

BUILD_LOG_NAME = "build.log"


def build_log_path(config: ProjectConfig) -> Path:
    """Where the nights of this project are logged: `<export.root>/build.log`."""
    return config.export.root / BUILD_LOG_NAME


def append_build_log(config: ProjectConfig, run_id: str, status: str, message: str) -> Path:
    """Append `<UTC time> flow_run=<id> status=<status> <message>` as one line; returns its path."""
    path = build_log_path(config)
    path.parent.mkdir(parents=True, exist_ok=True)
    stamp = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    one_line = " ".join(message.split())
    with path.open("a", encoding="utf-8") as log:
        log.write(f"{stamp} flow_run={run_id} status={status} {one_line}\n")
    return path
