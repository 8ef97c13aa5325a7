"""What one build carries from stage to stage: the connection, the config and what it noticed."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import duckdb

from demandprep.config import ProjectConfig


@dataclass
class BuildContext:
    """State shared by the stages of one build run."""

    con: duckdb.DuckDBPyConnection
    config: ProjectConfig
    warnings: list[str] = field(default_factory=list)
    facts: dict[str, Any] = field(default_factory=dict)
    timings: dict[str, float] = field(default_factory=dict)

    def warn(self, message: str) -> None:
        """Record a warning for the manifest, the report and the console."""
        if message not in self.warnings:
            self.warnings.append(message)
