"""The partitioned flow on a local Dask cluster of two worker processes started by the test.

Slow (Prefect's test server, a cluster, three builds of the sample): opt in with -m slow.
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
from distributed import Client, LocalCluster
from test_partitioned_build import PARTITIONING, assert_same_tables, sample_copy

from demandprep.export.folder import latest_build
from demandprep.flows.partitioned import partitioned_night, run_partitioned

WAIT_SECONDS = 600


# one Prefect test server for the session (conftest), started by the first module that needs it
pytestmark = [pytest.mark.slow, pytest.mark.usefixtures("prefect_server")]


@pytest.fixture(scope="module")
def cluster() -> Iterator[LocalCluster]:
    """Two worker processes of one thread each, as the issue asks, shared by the module.

    The killed worker's nanny starts a new process, so a later test still has two workers.
    """
    with LocalCluster(
        n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None
    ) as local:
        yield local


def on_cluster(address: str) -> str:
    return PARTITIONING + f'cluster_address = "{address}"\n'


def test_partitioned_flow_on_two_workers_gives_the_single_process_tables(
    single_process_build: Path, coffee_sample: Path, tmp_path: Path, cluster: LocalCluster
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", on_cluster(cluster.scheduler_address))
    result = run_partitioned(str(config.config_path))
    assert result["status"] == "published"
    assert latest_build(config.export.root) == Path(result["build"])
    assert_same_tables(single_process_build, Path(result["build"]))
    assert_choice_files_identical(single_process_build, Path(result["build"]))
    # the choice stages ran as one task per chooser bucket on the workers, not here
    manifest = json.loads((Path(result["build"]) / "manifest.json").read_text("utf-8"))
    buckets = manifest["facts"]["choice_buckets"]
    assert [item["bucket"] for item in buckets] == ["1 of 3", "2 of 3", "3 of 3"]
    assert os.getpid() not in {item["process"] for item in buckets}
    assert "choice_occasions" not in manifest["timings_seconds"]


def assert_choice_files_identical(expected: Path, actual: Path) -> None:
    for name in ("choices.parquet", "choosers.parquet"):
        assert (expected / name).read_bytes() == (actual / name).read_bytes(), name


def test_the_served_partitioned_night_runs_the_flow_on_the_configured_cluster(
    single_process_build: Path, coffee_sample: Path, tmp_path: Path, cluster: LocalCluster
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", on_cluster(cluster.scheduler_address))
    # the flow `demandprep serve` deploys for a partitioned config (flows/schedule.py)
    result = partitioned_night(str(config.config_path))
    assert result["status"] == "published"
    assert_same_tables(single_process_build, Path(result["build"]))


def test_a_worker_killed_mid_partition_is_replaced_and_the_tables_agree(
    single_process_build: Path, coffee_sample: Path, tmp_path: Path, cluster: LocalCluster
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", on_cluster(cluster.scheduler_address))
    result = night_with_a_worker_killed(config, "partition-*/warehouse.duckdb", cluster)
    assert result["status"] == "published"
    assert_same_tables(single_process_build, Path(result["build"]))


def test_a_worker_killed_mid_chooser_bucket_is_replaced_and_the_choices_agree(
    single_process_build: Path, coffee_sample: Path, tmp_path: Path, cluster: LocalCluster
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", on_cluster(cluster.scheduler_address))
    result = night_with_a_worker_killed(config, "choice-buckets/bucket-*/warehouse.duckdb", cluster)
    assert result["status"] == "published"
    assert_choice_files_identical(single_process_build, Path(result["build"]))


def night_with_a_worker_killed(config, started: str, cluster: LocalCluster) -> dict:
    """Run the partitioned night while a worker is killed once a task's warehouse `started`."""
    outcome: dict = {}

    def night() -> None:
        try:
            outcome["result"] = run_partitioned(str(config.config_path))
        except BaseException as error:  # noqa: BLE001 - handed to the test's thread
            outcome["error"] = error

    runner = threading.Thread(target=night)
    runner.start()
    with Client(cluster.scheduler_address) as client:
        killed = kill_a_worker_inside_a_task(client, config.partitioning.root, started)
    runner.join(WAIT_SECONDS)
    assert not runner.is_alive()
    assert "error" not in outcome, outcome.get("error")
    with pytest.raises(ProcessLookupError):
        os.kill(killed, 0)  # the process really ended
    return outcome["result"]


def kill_a_worker_inside_a_task(client: Client, partitions_root: Path, started: str) -> int:
    """SIGKILL the first worker seen running a task once a warehouse matching `started` exists."""
    deadline = time.monotonic() + WAIT_SECONDS
    while time.monotonic() < deadline:
        busy = [address for address, keys in client.processing().items() if keys]
        if busy and list(partitions_root.glob(started)):
            pid = client.run(os.getpid, workers=[busy[0]])[busy[0]]
            os.kill(pid, signal.SIGKILL)
            return pid
        time.sleep(0.05)
    raise AssertionError(f"no task made {started} on the cluster")
