"""What one build carries from stage to stage: the connection, the config and what it noticed."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.warehouse import transaction


@dataclass
class BuildContext:
    """State shared by the stages of one build run."""

    con: duckdb.DuckDBPyConnection
    config: ProjectConfig
    warnings: list[str] = field(default_factory=list)
    facts: dict[str, Any] = field(default_factory=dict)
    timings: dict[str, float] = field(default_factory=dict)
    in_transaction: bool = False

    def warn(self, message: str) -> None:
        """Record a warning for the manifest, the report and the console."""
        if message not in self.warnings:
            self.warnings.append(message)

    @contextmanager
    def atomic(self) -> Iterator[None]:
        """The block in one transaction, or in the one already open (DuckDB does not nest them,
        and a second `begin` would abort the open one): its commit or rollback covers both."""
        if self.in_transaction:
            yield
            return
        self.in_transaction = True
        try:
            with transaction(self.con):
                yield
        finally:
            self.in_transaction = False
