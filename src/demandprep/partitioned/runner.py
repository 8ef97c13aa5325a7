"""A partitioned build from start to publication, with the map step handed in.

The map is a function from the partitions to their summaries: the Prefect flow
(`flows/partitioned.py`) runs it as tasks on a Dask cluster, a test may run it in-process.
It must return only when every partition finished, and raise when one failed: the reduce and
the export come after it, so a failed partition publishes nothing and `latest` stays. Only the
partitions whose inputs changed since their last map are handed to it; the others' summary files
are reused as they are. It may be called twice in a night: when the partitions report lines of
a file in a partition that did not read it (a wrong routing hint, `routing.py`), that partition
is mapped again with the file.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable
from dataclasses import replace

import duckdb

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.ingest.files import SOURCE_ORDER
from demandprep.ingest.runner import discover_files, ingest_all
from demandprep.partitioned.attached import partition_lines_view, partitions_attached
from demandprep.partitioned.buckets import remove_every_bucket
from demandprep.partitioned.choice_reduce import MapBuckets, map_buckets_in_process
from demandprep.partitioned.map import PartitionSummaries, build_partition, kept_summaries
from demandprep.partitioned.plan import (
    Partition,
    candidate_partitions,
    check_partitioning,
    check_visits_stay_in_stores,
    current_receipts_files,
    partition_is_current,
    plan_partitions,
    read_routing_record,
    require_partition_key,
)
from demandprep.partitioned.receipts_ledger import (
    read_again_in_partitions,
    record_receipts_files,
)
from demandprep.partitioned.reduce import reduce_stages
from demandprep.partitioned.routing import misrouted, route_files
from demandprep.pipeline import BuildOutcome
from demandprep.stage import run_stage
from demandprep.warehouse import open_warehouse

MapPartitions = Callable[[list[Partition]], list[PartitionSummaries]]
# the sources the coordinator ingests itself (small); receipts go to the partitions
REFERENCE_SOURCES = tuple(name for name in SOURCE_ORDER if name != "receipts")


def map_in_process(config: ProjectConfig) -> MapPartitions:
    """The map step run here, one partition after another (no cluster)."""
    return lambda partitions: [build_partition(config, item) for item in partitions]


def build_partitioned(
    config: ProjectConfig,
    map_partitions: MapPartitions,
    force: bool = False,
    map_buckets: MapBuckets | None = None,
) -> BuildOutcome:
    """Route the receipts files, map the partitions, ledger their files, reduce and publish.

    The choice build is a second map, by chooser bucket (`map_buckets`, in this process when
    None), run after the market reduce.
    """
    from demandprep.export.folder import check_export_root, export_build, latest_build
    from demandprep.flows.incremental import latest_build_is_current

    check_export_root(config.export.root)
    require_partition_key(config)
    check_visits_stay_in_stores(config)
    with open_warehouse(config.warehouse) as con:
        ingest_all(con, with_sources(config, keep=REFERENCE_SOURCES))
        files, fresh = receipts_files(con, config)
        if not force and not fresh and latest_build_is_current(con, config):
            return BuildOutcome(kept=latest_build(config.export.root))
        check_partitioning(con, config)
        summaries = map_routed_partitions(con, config, files, map_partitions, force)
        if not summaries:
            raise UserError(
                f"{config.config_path}: partitioning.by is set, but sources.receipts matches no "
                "file to partition.",
                "check sources.receipts.files, or leave partitioning.by unset.",
            )
        partitions = [item.partition for item in summaries]
        with partitions_attached(con, config, partitions) as aliases:
            record_receipts_files(con, aliases, fresh | read_again_in_partitions(con, aliases))
            check_lines_add_up(con, config, summaries)
            ctx = BuildContext(con=con, config=config)
            with partition_lines_view(con, aliases):
                buckets = map_buckets or map_buckets_in_process(config)
                for stage in reduce_stages(config, summaries, buckets):
                    run_stage(stage, ctx)
                folder = export_build(ctx)
        if not config.choices.enabled:
            remove_every_bucket(config)
        return BuildOutcome(folder=folder, ctx=ctx)


def with_sources(config: ProjectConfig, keep: tuple[str, ...]) -> ProjectConfig:
    """The config with only the sources named in `keep` (the others unset, for the ingest)."""
    # receipts is a required source: unset on a copy made for the ingest's loop over sources
    dropped = {name: None for name in (*REFERENCE_SOURCES, "receipts") if name not in keep}
    return config.model_copy(update={"sources": config.sources.model_copy(update=dropped)})


def receipts_files(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig
) -> tuple[dict[str, str], dict[str, str]]:
    """The receipts files to build from and those new to the ledger (path to sha256 each).

    Found as the ingest finds them (checksums, settings, refused and withdrawn files held back),
    but read by the partitions: the coordinator ledgers them from the partitions' reports.
    """
    files = current_receipts_files(con)
    fresh = {
        str(item.path): item.sha256
        for item in discover_files(con, with_sources(config, keep=("receipts",)))
        if item.status != "unchanged" and item.held_back is None
    }
    return files | fresh, fresh


def map_routed_partitions(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    files: dict[str, str],
    map_partitions: MapPartitions,
    force: bool = False,
) -> list[PartitionSummaries]:
    """Map the partitions whose files changed, in rounds until every file reached its lines'.

    A round maps the partitions whose inputs changed; their reports place each file's lines,
    and a file placed in a partition that did not read it is routed there for the next round.
    """
    candidates = candidate_partitions(con, config)
    names = [item.name for item in candidates]
    records = {item.name: read_routing_record(config, item) for item in candidates}
    recorded = {name: record.get("files", []) for name, record in records.items()}
    placements = [record.get("placement", {}) for record in records.values()]
    routes = route_files(con, config, files, names, recorded, placements)
    mapped: dict[str, PartitionSummaries] = {}
    while True:
        planned = plan_partitions(con, config, routes, files)
        changed = [
            item
            for item in planned
            if (force and item.name not in mapped) or not partition_is_current(config, item)
        ]
        results = map_partitions(changed) if changed else []
        for item in results:
            earlier = mapped.get(item.partition.name)
            mapped[item.partition.name] = item if earlier is None else mapped_twice(earlier, item)
        missing = misrouted(routes, [item.placement for item in results], files)
        if not missing:
            return [mapped.get(item.name) or kept_summaries(config, item) for item in planned]
        for name, paths in missing.items():
            routes[name] |= paths


def mapped_twice(earlier: PartitionSummaries, later: PartitionSummaries) -> PartitionSummaries:
    """A partition mapped in both rounds: the later summaries, with what both rounds rebuilt."""
    scopes = [earlier.build_scope, later.build_scope]
    reasons = [scope.get("full_build_reason") for scope in scopes if scope.get("full_build_reason")]
    scope = {
        "build_mode": "full"
        if any(s.get("build_mode") == "full" for s in scopes)
        else "incremental",
        "periods_rebuilt": sorted(
            {period for s in scopes for period in s.get("periods_rebuilt", [])}
        ),
        "full_build_reason": reasons[0] if reasons else None,
    }
    return replace(later, build_scope=scope)


def check_lines_add_up(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, summaries: list[PartitionSummaries]
) -> None:
    """Refuse to reduce unless each receipts file's accepted lines are in the partitions once.

    The coordinator's ledger counts each file's lines once (receipts_ledger.py); every
    accepted line must sit in exactly one partition (a file withdrawn on the coordinator leaves
    the partitions that read it when they are mapped again: map.withdraw_unrouted_files).
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
