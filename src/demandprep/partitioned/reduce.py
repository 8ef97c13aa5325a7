"""The reduce: the coordinator loads every partition's summaries, then runs the later stages.

The build's own stage list is walked unchanged, except that the two scans of raw lines (and
their planning) are replaced by loading the partitions' summary files: every later stage reads
the summaries whole, as on one machine, so the same SQL files compute the same tables. The
choice stages are replaced by a second map, by chooser bucket, and its reduce
(`choice_reduce.py`): the coordinator runs no choice stage itself.
"""

from __future__ import annotations

from collections.abc import Callable

from demandprep.choices.stages import CHOICE_STAGES
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.market import checks
from demandprep.partitioned.attached import partition_warehouses
from demandprep.partitioned.choice_reduce import MapBuckets, choice_bucket_stages
from demandprep.partitioned.map import PartitionSummaries
from demandprep.schemas.market import MARKET_MODELS
from demandprep.stage import Stage
from demandprep.stages import build_stages
from demandprep.validate import validate_table

Check = Callable[[BuildContext], None]

# the summary stages' checks, run on the loaded summaries as the scans would run them
SUMMARY_CHECKS: dict[str, Check] = {
    "market_store_visits": checks.check_store_coverage,
    "market_sku_sales": checks.check_fractional_quantities,
}


def reduce_stages(
    config: ProjectConfig, summaries: list[PartitionSummaries], map_buckets: MapBuckets
) -> tuple[Stage, ...]:
    """The build's stages with the scans replaced by the partitions' files, the choice stages
    by the chooser buckets' map and reduce."""
    replaced = {
        "market_build_periods": Stage("market_build_periods", _scope_stage(summaries)),
        **{name: Stage(name, _load_stage(name, summaries)) for name in SUMMARY_CHECKS},
    }
    choice_names = {stage.name for stage in CHOICE_STAGES}
    stages = tuple(
        replaced.get(stage.name, stage)
        for stage in build_stages(config)
        if stage.name not in choice_names
    )
    if not config.choices.enabled:
        return stages
    warehouses = partition_warehouses(config, [item.partition for item in summaries])
    return stages + choice_bucket_stages(config, map_buckets, warehouses)


def _scope_stage(summaries: list[PartitionSummaries]) -> Check:
    def run(ctx: BuildContext) -> None:
        ctx.facts["build_scope"] = combined_build_scope(summaries)

    run.__doc__ = "Record what the partitions rebuilt: full or incremental, and which periods."
    return run


def combined_build_scope(summaries: list[PartitionSummaries]) -> dict:
    """One build scope for the night: full when any partition was, periods rebuilt anywhere."""
    scopes = [item.build_scope for item in sorted(summaries, key=lambda s: s.partition.name)]
    reasons = [scope.get("full_build_reason") for scope in scopes if scope.get("full_build_reason")]
    periods = sorted({period for scope in scopes for period in scope.get("periods_rebuilt", [])})
    full = any(scope.get("build_mode") == "full" for scope in scopes)
    return {
        "build_mode": "full" if full else "incremental",
        "periods_rebuilt": periods,
        "full_build_reason": reasons[0] if reasons else None,
        "partitions_rebuilt": sorted(
            item.partition.label for item in summaries if item.build_scope.get("periods_rebuilt")
        ),
    }


def _load_stage(summary: str, summaries: list[PartitionSummaries]) -> Check:
    def run(ctx: BuildContext) -> None:
        rows = load_summary(ctx, summary, summaries)
        ctx.facts.setdefault("market", {}).setdefault("rows", {})[summary] = rows
        SUMMARY_CHECKS[summary](ctx)

    run.__doc__ = f"Load the partitions' {summary} files into the coordinator and validate them."
    return run


def load_summary(ctx: BuildContext, summary: str, summaries: list[PartitionSummaries]) -> int:
    """Replace the coordinator's `summary` with the union of the partitions' files."""
    files = [str(item.files[summary]) for item in sorted(summaries, key=lambda s: s.partition.name)]
    # the table names are ours (SUMMARY_CHECKS), never the user's; the paths are bound
    ctx.con.execute(
        f"create or replace table {summary} as from read_parquet($files)",  # noqa: S608
        {"files": files},
    )
    return validate_table(ctx.con, summary, MARKET_MODELS[summary])
