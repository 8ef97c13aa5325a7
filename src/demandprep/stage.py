"""What a build stage is and how one runs: the shared kernel the step packages build on.

The step packages (market, instruments, choices) import `Stage` from here and never the stage
list, so imports run one way: registry (`stages.py`) -> step packages -> this module.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

from demandprep.context import BuildContext
from demandprep.memory import out_of_memory_reported


@dataclass(frozen=True)
class Stage:
    """One build step: a name for logs and timings, and the function that runs it."""

    name: str
    run: Callable[[BuildContext], None]


def run_stage(stage: Stage, ctx: BuildContext) -> None:
    """Run one stage and record how long it took; DuckDB out of memory becomes one line."""
    started = time.perf_counter()
    with out_of_memory_reported(stage.name, ctx.config.warehouse):
        stage.run(ctx)
    ctx.timings[stage.name] = round(time.perf_counter() - started, 3)
