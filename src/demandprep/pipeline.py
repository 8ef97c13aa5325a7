"""The direct runner: ingest, build and export without an orchestrator (what the CLI calls)."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import duckdb

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.ingest.results import PROBLEM_STATUSES
from demandprep.stage import Stage, run_stage
from demandprep.warehouse import open_warehouse

StageDone = Callable[[Stage, float], None]


@dataclass(frozen=True)
class BuildOutcome:
    """A published build (folder and context), or the `latest` build a skipped night kept."""

    folder: Path | None = None
    ctx: BuildContext | None = None
    kept: Path | None = None

    @property
    def skipped(self) -> bool:
        """True when nothing changed since `latest`, so no build was made."""
        return self.folder is None


@contextmanager
def warehouse_for(
    config: ProjectConfig, con: duckdb.DuckDBPyConnection | None = None
) -> Iterator[duckdb.DuckDBPyConnection]:
    """The connection given (`run` holds one for ingest and build), else the warehouse opened."""
    if con is not None:
        yield con
        return
    with open_warehouse(config.warehouse) as opened:
        yield opened


def run_ingest(
    config: ProjectConfig,
    progress=None,
    reload: list[str] | None = None,
    con: duckdb.DuckDBPyConnection | None = None,
):
    """Ingest every new or changed input file into the warehouse; returns the ingest summary."""
    from demandprep.ingest.runner import ingest_all

    with warehouse_for(config, con) as opened:
        return ingest_all(opened, config, progress=progress, reload=reload)


def every_receipts_file_failed(summary) -> bool:
    """True when the ingest met receipts files and none of them is in the warehouse."""
    receipts = [result for result in summary.files if result.source == "receipts"]
    return bool(receipts) and all(result.status in PROBLEM_STATUSES for result in receipts)


def run_build(
    config: ProjectConfig, on_stage: Callable[[Stage], None] | None = None
) -> tuple[Path, BuildContext]:
    """Run every build stage on the warehouse and export a build folder; returns its path."""
    outcome = build_unless_current(config, force=True, on_stage=on_stage)
    assert outcome.folder is not None and outcome.ctx is not None  # forced builds never skip
    return outcome.folder, outcome.ctx


def build_unless_current(
    config: ProjectConfig,
    force: bool = False,
    on_stage: Callable[[Stage], None] | None = None,
    on_stage_done: StageDone | None = None,
    con: duckdb.DuckDBPyConnection | None = None,
) -> BuildOutcome:
    """Build and publish, unless `latest` was made from these very inputs and settings."""
    from demandprep.export.folder import check_export_root, latest_build

    # the nightly flow's own test of "nothing new" (no Prefect is imported with it)
    from demandprep.flows.incremental import latest_build_is_current

    # a restored `latest` folder or a linked `.staging` would only stop the export: say so now
    check_export_root(config.export.root)
    with warehouse_for(config, con) as con:
        if not force and latest_build_is_current(con, config):
            return BuildOutcome(kept=latest_build(config.export.root))
        # the stage list and the export import every step (pandas, pandera): a skipped night
        # and `ingest` need none of them
        from demandprep.export.folder import export_build
        from demandprep.stages import build_stages, split_at_choices

        ctx = BuildContext(con=con, config=config)
        market_level, choice_stages = split_at_choices(build_stages(config))
        # one commit for the market-level stages: a failing stage leaves the warehouse as it
        # was, and a commit per statement cost more than many of these small statements
        with ctx.atomic():
            for stage in market_level:
                _run_reported(stage, ctx, on_stage, on_stage_done)
        for stage in choice_stages:
            _run_reported(stage, ctx, on_stage, on_stage_done)
        return BuildOutcome(folder=export_build(ctx), ctx=ctx)


def _run_reported(
    stage: Stage,
    ctx: BuildContext,
    on_stage: Callable[[Stage], None] | None,
    on_stage_done: StageDone | None,
) -> None:
    if on_stage is not None:
        on_stage(stage)
    run_stage(stage, ctx)
    if on_stage_done is not None:
        on_stage_done(stage, ctx.timings[stage.name])
