"""The nightly deployment, built from the config's [schedule] section, and the process serving it.

A config with `partitioning.by` set is served the partitioned night (`flows/partitioned.py`).

Prefect's scheduler runs only in a full server, so when no server is configured (no
PREFECT_API_URL) `serve_nightly` starts a temporary one on 127.0.0.1 for as long as it serves.
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.request
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from prefect import Flow, serve
from prefect.client.schemas.schedules import CronSchedule
from prefect.deployments.runner import EntrypointType, RunnerDeployment
from prefect.exceptions import ParameterTypeError
from prefect.schedules import Cron, Schedule
from prefect.settings import PREFECT_API_URL, temporary_settings

from demandprep.config import ProjectConfig, load_config
from demandprep.errors import UserError
from demandprep.flows.nightly import nightly_flow
from demandprep.flows.partitioned import partitioned_night

SERVER_START_TIMEOUT_SECONDS = 120.0
SERVER_STOP_TIMEOUT_SECONDS = 30.0


def nightly_schedule(config: ProjectConfig) -> Schedule:
    """The cron schedule of [schedule], checked: a bad cron or timezone names its key."""
    section = config.schedule
    try:
        ZoneInfo(section.timezone)
    except (ZoneInfoNotFoundError, ValueError):
        raise UserError(
            f"{config.config_path}: key 'schedule.timezone': unknown timezone "
            f"{section.timezone!r}.",
            "use an IANA name such as 'Europe/Berlin' or 'UTC'.",
        ) from None
    try:
        CronSchedule(cron=section.cron, timezone=section.timezone)
    except ValueError:
        raise UserError(
            f"{config.config_path}: key 'schedule.cron': {section.cron!r} is not a valid cron "
            "expression.",
            "five fields: minute hour day-of-month month day-of-week, e.g. '30 2 * * *'.",
        ) from None
    return Cron(section.cron, timezone=section.timezone)


def scheduled_flow(config: ProjectConfig) -> Flow:
    """The flow a night runs: the partitioned build when [partitioning] names a key."""
    return nightly_flow if config.partitioning.by is None else partitioned_night


def deployment_parameters(config: ProjectConfig) -> dict[str, Any]:
    """The parameters of every scheduled run: this config's path, then [schedule.parameters]."""
    extra = dict(config.schedule.parameters)
    night = scheduled_flow(config)
    allowed = [name for name in night.parameters.properties if name != "config_path"]
    unknown = [name for name in extra if name not in allowed]
    if unknown:
        raise UserError(
            f"{config.config_path}: key 'schedule.parameters.{unknown[0]}': not a parameter of "
            "the nightly flow.",
            f"allowed: {', '.join(allowed)}.",
        )
    parameters = {"config_path": str(config.config_path), **extra}
    try:
        return night.validate_parameters(parameters)
    except ParameterTypeError as error:
        raise UserError(
            f"{config.config_path}: key 'schedule.parameters': {error}.",
            f"allowed: {', '.join(allowed)}.",
        ) from None


def build_deployment(config: ProjectConfig) -> RunnerDeployment:
    """The nightly deployment of this config: its name, cron schedule, timezone and parameters."""
    return scheduled_flow(config).to_deployment(
        name=config.schedule.deployment_name,
        schedule=nightly_schedule(config),
        parameters=deployment_parameters(config),
        description=f"Nightly rebuild of {config.project.name} ({config.config_path}).",
        tags=["demandprep"],
        # a module path keeps the served flow importable whatever the working directory is
        entrypoint_type=EntrypointType.MODULE_PATH,
    )


def serve_nightly(config_path: Path | str) -> None:
    """Serve the nightly deployment of a config until stopped (Ctrl-C), one run at a time."""
    deployment = build_deployment(load_config(config_path))
    if PREFECT_API_URL.value():
        serve(deployment, limit=1)
        return
    with temporary_local_server() as url, temporary_settings(updates={PREFECT_API_URL: url}):
        # the server's history goes when this process ends: no schedule is left to pause
        serve(deployment, limit=1, pause_on_shutdown=False)


@contextmanager
def temporary_local_server() -> Iterator[str]:
    """A Prefect server with its scheduler on 127.0.0.1, in a throw-away home; yields its API."""
    home = Path(tempfile.mkdtemp(prefix="demandprep-prefect-server-"))
    port = free_local_port()
    url = f"http://127.0.0.1:{port}/api"
    env = {**os.environ, "PREFECT_HOME": str(home)}
    env.pop("PREFECT_API_URL", None)
    command = [sys.executable, "-m", "prefect", "server", "start", "--host", "127.0.0.1",
               "--port", str(port), "--no-ui", "--analytics-off", "--scheduler"]  # fmt: skip
    log_path = home / "server.log"
    with log_path.open("wb") as log:
        # its own session: Ctrl-C reaches only us, and we stop the server once serving ended
        process = subprocess.Popen(
            command, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True
        )
    try:
        wait_until_healthy(url, process, log_path, SERVER_START_TIMEOUT_SECONDS)
        yield url
    finally:
        stop_process(process, SERVER_STOP_TIMEOUT_SECONDS)
        shutil.rmtree(home, ignore_errors=True)


def free_local_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def wait_until_healthy(
    url: str, process: subprocess.Popen[bytes], log_path: Path, timeout_seconds: float
) -> None:
    """Poll the server's health endpoint until it answers; stop with its log if it never does."""
    # no proxy: the server is on this machine, and a proxy setting must not send the poll away
    opener = urllib.request.build_opener(urllib.request.ProxyHandler({}))
    deadline = time.monotonic() + timeout_seconds
    while time.monotonic() < deadline and process.poll() is None:
        try:
            with opener.open(f"{url}/health", timeout=2) as response:
                if response.status == 200:
                    return
        except (urllib.error.URLError, OSError):
            time.sleep(0.5)
    tail = log_path.read_text(errors="replace")[-2000:]
    raise UserError(
        f"the temporary Prefect server did not start within {timeout_seconds:g} s: {tail}",
        "set PREFECT_API_URL to a running Prefect server instead (see README).",
    )


def stop_process(process: subprocess.Popen[bytes], timeout_seconds: float) -> None:
    """Ask a child process to stop, and kill it if it has not stopped in time."""
    if process.poll() is not None:
        return
    process.terminate()
    try:
        process.wait(timeout=timeout_seconds)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()
