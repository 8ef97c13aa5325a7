"""The partitioned build as a Prefect flow: one task per partition, then per chooser bucket.

The coordinator (this flow's process) ingests the reference files into the configured
warehouse, routes the receipts files, submits each partition's map step (`partitioned/map.py`:
its ingest and summaries) to the Dask task runner, waits for every one (a second round when a
file's lines turned up in a partition that did not read it), then ledgers the receipts files
and reduces the market build in its own thread; then it submits one task per chooser bucket
(`partitioned/buckets.py`: the choice stages for the bucket's choosers), waits for every one,
loads their tables and publishes. A task that fails is retried
(`partitioning.partition_retries`); a worker that dies mid-task has its task rerun by Dask
on another worker. Rerunning a partition is safe: its ingest and its summaries are atomic and
incremental, so a rerun finishes what the lost one began; a bucket rebuilds its tables whole.
"""

from __future__ import annotations

import os
from datetime import date
from typing import Any

from prefect import flow, get_run_logger, task
from prefect.futures import wait

from demandprep.config import ProjectConfig, load_config
from demandprep.flows.nightly import NO_RESULTS
from demandprep.partitioned.buckets import BucketOutputs, ChooserBucket, build_bucket
from demandprep.partitioned.map import PartitionSummaries, build_partition
from demandprep.partitioned.plan import Partition
from demandprep.partitioned.runner import build_partitioned


@task(name="build partition", **NO_RESULTS)
def partition_task(
    config_path: str,
    key: str | None,
    stores: list[str],
    files: list[str],
    inputs: str,
    period_range: list[str | None],
) -> PartitionSummaries:
    """One partition's ingest and period summaries, in its own warehouse on a worker.

    The task gets the config's path, not the model: the Dask runner walks a task's arguments,
    and a config model is not a plain collection (a section has a field named `keys`). The
    config file sits on the storage every worker sees, beside the partitions. The partition
    travels as plain values for the same reason.
    """
    first, after = (None if day is None else date.fromisoformat(day) for day in period_range)
    partition = Partition(key, tuple(stores), tuple(files), inputs, first, after)
    return build_partition(load_config(config_path), partition)


def map_on_cluster(config: ProjectConfig):
    """The map step as Prefect tasks on the flow's task runner; returns when all finished."""

    def run(partitions: list[Partition]) -> list[PartitionSummaries]:
        futures = [
            partition_task.with_options(
                task_run_name=f"partition {item.label}",
                retries=config.partitioning.partition_retries,
            ).submit(
                str(config.config_path),
                item.key,
                list(item.stores),
                list(item.files),
                item.inputs,
                [None if day is None else day.isoformat() for day in period_range(item)],
            )
            for item in partitions
        ]
        wait(futures)  # every partition ends before the first failure is raised
        return [future.result() for future in futures]

    return run


@task(name="build chooser bucket", **NO_RESULTS)
def bucket_task(config_path: str, index: int, count: int, warehouses: list[str]) -> BucketOutputs:
    """The choice stages of one chooser bucket, in its own warehouse on a worker.

    Plain values again (see partition_task). The pseudonym key is read from the worker's
    environment, never passed: task arguments are recorded by Prefect.
    """
    return build_bucket(load_config(config_path), ChooserBucket(index, count), warehouses)


def map_buckets_on_cluster(config: ProjectConfig):
    """The chooser buckets as Prefect tasks on the flow's task runner; returns when all finished."""

    def run(buckets: list[ChooserBucket], warehouses: list[str]) -> list[BucketOutputs]:
        futures = [
            bucket_task.with_options(
                task_run_name=f"chooser bucket {item.label}",
                retries=config.partitioning.partition_retries,
            ).submit(str(config.config_path), item.index, item.count, warehouses)
            for item in buckets
        ]
        wait(futures)  # every bucket ends before the first failure is raised
        outputs = [future.result() for future in futures]
        logger = get_run_logger()
        for item in outputs:
            logger.info(
                f"chooser bucket {item.bucket.label}: {item.rows['choosers']} choosers, "
                f"{item.rows['choices']} choice rows, built by process {item.process}"
            )
        return outputs

    return run


@flow(name="demandprep-partitioned", description="Build partition by partition on Dask.")
def partitioned_flow(config_path: str, force_rebuild: bool = False) -> dict[str, Any]:
    """Ingest, build every partition on the cluster, reduce and publish; or keep `latest`."""
    config = load_config(config_path)
    outcome = build_partitioned(
        config, map_on_cluster(config), force_rebuild, map_buckets_on_cluster(config)
    )
    if outcome.skipped:
        message = f"nothing new since the latest build {outcome.kept}"
        get_run_logger().info(message)
        return {"status": "skipped", "message": message, "build": None}
    message = f"published {outcome.folder.name}"
    get_run_logger().info(message)
    return {"status": "published", "message": message, "build": str(outcome.folder)}


@flow(name="demandprep-partitioned-night", description="A scheduled partitioned build.")
def partitioned_night(config_path: str, force_rebuild: bool = False) -> dict[str, Any]:
    """The night `demandprep serve` schedules for a partitioned project: the flow on its cluster.

    The task runner depends on the config (its cluster address), so the served flow picks it
    at run time and runs the partitioned flow with it, as `demandprep partitioned` does.
    """
    return run_partitioned(config_path, force_rebuild)


def period_range(partition: Partition) -> tuple[date | None, date | None]:
    """The partition's first day and the day after its last (None: open-ended)."""
    return partition.first_day, partition.after_last_day


def cluster_address(config: ProjectConfig) -> str | None:
    """The scheduler address from the config, else from its environment variable, else None."""
    settings = config.partitioning
    return settings.cluster_address or os.environ.get(settings.cluster_address_env) or None


def dask_task_runner(config: ProjectConfig):
    """A Dask task runner on the configured cluster, or on a local cluster of worker processes."""
    from prefect_dask import DaskTaskRunner

    address = cluster_address(config)
    if address is not None:
        return DaskTaskRunner(address=address)
    return DaskTaskRunner(
        cluster_class="distributed.LocalCluster",
        cluster_kwargs={
            "n_workers": config.partitioning.local_workers,
            "processes": True,
            "threads_per_worker": 1,
        },
    )


def run_partitioned(config_path: str, force_rebuild: bool = False) -> dict[str, Any]:
    """Run the partitioned flow on the cluster its config names."""
    config = load_config(config_path)
    flow_on_cluster = partitioned_flow.with_options(task_runner=dask_task_runner(config))
    return flow_on_cluster(config_path, force_rebuild)
