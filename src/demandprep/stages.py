"""The build's stage list, defined once; the CLI's direct runner and the Prefect flow walk it."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.memory import out_of_memory_reported


@dataclass(frozen=True)
class Stage:
    """One build step: a name for logs and timings, and the function that runs it."""

    name: str
    run: Callable[[BuildContext], None]


def build_stages(config: ProjectConfig) -> tuple[Stage, ...]:
    """Every stage of a build, in the order they run, for this config."""
    from demandprep.choices.stages import CHOICE_STAGES
    from demandprep.instruments.stages import INSTRUMENT_STAGES
    from demandprep.market.stages import MARKET_STAGES

    stages = MARKET_STAGES + INSTRUMENT_STAGES
    if config.choices.enabled:
        stages += CHOICE_STAGES
    return stages


def run_stage(stage: Stage, ctx: BuildContext) -> None:
    """Run one stage and record how long it took; DuckDB out of memory becomes one line."""
    started = time.perf_counter()
    with out_of_memory_reported(stage.name, ctx.config.warehouse):
        stage.run(ctx)
    ctx.timings[stage.name] = round(time.perf_counter() - started, 3)


def run_build_stages(ctx: BuildContext, on_stage: Callable[[Stage], None] | None = None) -> None:
    """Run every stage in order; `on_stage` is told before each one (for progress display)."""
    for stage in build_stages(ctx.config):
        if on_stage is not None:
            on_stage(stage)
        run_stage(stage, ctx)
