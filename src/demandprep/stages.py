"""The build's stage list, defined once; the CLI's direct runner and the Prefect flow walk it.

This registry imports the step packages; they import only the kernel (`stage.py`).
"""

from __future__ import annotations

from collections.abc import Callable

from demandprep.choices.stages import CHOICE_STAGES, CHOICES_OFF_STAGES
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.demographics import DEMOGRAPHIC_STAGES
from demandprep.export.unpublished import record_unpublished_periods
from demandprep.instruments.stages import INSTRUMENT_STAGES
from demandprep.market.stages import MARKET_STAGES
from demandprep.stage import Stage, run_stage

# after the market and instrument stages and in their transaction, so a build that dies later
# leaves its periods to the next manifest (export/unpublished.py); the partitions' maps stop
# before it, at the period summaries
UNPUBLISHED_PERIODS = Stage("unpublished_periods", record_unpublished_periods)


def build_stages(config: ProjectConfig) -> tuple[Stage, ...]:
    """Every stage of a build, in the order they run, for this config."""
    # a choice-only project (no market-size assumption) runs no market or instrument stage
    stages: tuple[Stage, ...] = ()
    if config.market_build_enabled:
        stages = (*MARKET_STAGES, *INSTRUMENT_STAGES, UNPUBLISHED_PERIODS)
    if config.market_build_enabled and config.demographic_draws.draws is not None:
        stages += DEMOGRAPHIC_STAGES
    stages += CHOICE_STAGES if config.choices.enabled else CHOICES_OFF_STAGES
    return stages


def split_at_choices(stages: tuple[Stage, ...]) -> tuple[tuple[Stage, ...], tuple[Stage, ...]]:
    """The stages before the choice build (small tables: the direct runner commits them once)
    and the choice stages (hundreds of millions of rows, committed stage by stage)."""
    before = tuple(stage for stage in stages if stage not in CHOICE_STAGES)
    return before, tuple(stage for stage in stages if stage in CHOICE_STAGES)


def run_build_stages(ctx: BuildContext, on_stage: Callable[[Stage], None] | None = None) -> None:
    """Run every stage in order; `on_stage` is told before each one (for progress display)."""
    for stage in build_stages(ctx.config):
        if on_stage is not None:
            on_stage(stage)
        run_stage(stage, ctx)
