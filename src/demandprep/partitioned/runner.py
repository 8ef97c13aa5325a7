"""A partitioned build from start to publication, with the map step handed in.

The map is a function from the partitions to their summaries: the Prefect flow
(`flows/partitioned.py`) runs it as tasks on a Dask cluster, a test may run it in-process.
It must return only when every partition finished, and raise when one failed: the reduce and
the export come after it, so a failed partition publishes nothing and `latest` stays. Only the
partitions whose inputs changed since their last map are handed to it; the others' summary files
are reused as they are.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable

import duckdb

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.ingest.runner import ingest_all
from demandprep.partitioned.map import PartitionSummaries, build_partition, kept_summaries
from demandprep.partitioned.plan import (
    Partition,
    check_visits_stay_in_stores,
    partition_is_current,
    plan_partitions,
    require_partition_key,
)
from demandprep.partitioned.reduce import reduce_stages
from demandprep.pipeline import BuildOutcome
from demandprep.stage import run_stage
from demandprep.warehouse import open_warehouse

MapPartitions = Callable[[list[Partition]], list[PartitionSummaries]]


def map_in_process(config: ProjectConfig) -> MapPartitions:
    """The map step run here, one partition after another (no cluster)."""
    return lambda partitions: [build_partition(config, item) for item in partitions]


def build_partitioned(
    config: ProjectConfig, map_partitions: MapPartitions, force: bool = False
) -> BuildOutcome:
    """Ingest on the coordinator, map the partitions, reduce and publish (or keep `latest`)."""
    from demandprep.export.folder import check_export_root, export_build, latest_build
    from demandprep.flows.incremental import latest_build_is_current

    check_export_root(config.export.root)
    require_partition_key(config)
    check_visits_stay_in_stores(config)
    with open_warehouse(config.warehouse) as con:
        ingest_all(con, config)
        if not force and latest_build_is_current(con, config):
            return BuildOutcome(kept=latest_build(config.export.root))
        partitions = plan_partitions(con, config)
        if not partitions:
            raise UserError(
                f"{config.config_path}: partitioning.by is set, but no receipt lines are in the "
                "warehouse to partition.",
                "check sources.receipts.files, or leave partitioning.by unset.",
            )
        summaries = map_changed_partitions(config, partitions, map_partitions, force)
        check_lines_add_up(con, config, summaries)
        ctx = BuildContext(con=con, config=config)
        for stage in reduce_stages(config, summaries):
            run_stage(stage, ctx)
        return BuildOutcome(folder=export_build(ctx), ctx=ctx)


def map_changed_partitions(
    config: ProjectConfig,
    partitions: list[Partition],
    map_partitions: MapPartitions,
    force: bool = False,
) -> list[PartitionSummaries]:
    """Map the partitions whose inputs changed (all with `force`); keep the others' summaries."""
    changed = [item for item in partitions if force or not partition_is_current(config, item)]
    kept = [kept_summaries(config, item) for item in partitions if item not in changed]
    return (map_partitions(changed) if changed else []) + kept


def check_lines_add_up(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, summaries: list[PartitionSummaries]
) -> None:
    """Refuse to reduce unless each receipts file's accepted lines are in the partitions once.

    The ledger and the quarantine are the coordinator's (it reads every file): a line of a file
    that feeds several partitions is counted there, and must sit in exactly one partition.
    """
    held: Counter[str] = Counter()
    for item in summaries:
        held.update(item.lines)
    accepted = dict(
        con.execute(
            "select path, rows_accepted from ledger where source = 'receipts' "
            "and status = 'current' and rows_accepted > 0"
        ).fetchall()
    )
    for path in sorted(accepted.keys() | held.keys()):
        if accepted.get(path, 0) != held[path]:
            raise UserError(
                f"{path}: the coordinator accepted {accepted.get(path, 0)} lines of this "
                f"receipts file, but the partitions hold {held[path]}.",
                f"remove the partitions' folders under {config.partitioning.root} to rebuild "
                "them from their files.",
            )
