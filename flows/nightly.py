"""The nightly rebuild as a Prefect flow: discover, ingest, build stages, validate, export, publish.

The flow only calls the same functions the CLI's direct runner calls, as tasks, in order. It
opens the warehouse once and holds its writer lock for the whole night, and the export root's
lock from writing the build to pruning; every task runs in the flow's own thread (tasks are
called, not submitted), so they share the one DuckDB connection.
Tasks never cache or persist results: their inputs (a live connection) cannot be hashed or stored.
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import duckdb
from prefect import Task, flow, get_run_logger, task
from prefect.cache_policies import NO_CACHE
from prefect.context import get_run_context
from prefect.states import Completed, Failed, State
from prefect.utilities.annotations import quote

from demandprep.config import ProjectConfig, load_config
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.export.folder import (
    check_export_root,
    export_root_lock,
    prune,
    publish_build,
    write_staged_build,
)
from demandprep.export.tables import output_query, plan_outputs
from demandprep.flows.build_log import append_build_log
from demandprep.flows.incremental import files_to_ingest, latest_build_is_current
from demandprep.flows.retry import raise_if_failed, retry_read_errors
from demandprep.ingest.files import DiscoveredFile, discovery_warnings
from demandprep.ingest.results import FileResult
from demandprep.ingest.runner import (
    discover_files,
    ensure_tables,
    ingest_file,
    judge_stale_again,
    still_refused,
)
from demandprep.stage import Stage, run_stage
from demandprep.stages import build_stages, split_at_choices
from demandprep.warehouse import open_warehouse

# Reading a file can fail for a moment (a network share, a file still being copied in).
INGEST_RETRIES = 2
INGEST_RETRY_DELAY_SECONDS = [5, 30]

# A live DuckDB connection is a task input: nothing may try to hash or store it.
NO_RESULTS: dict[str, Any] = {"cache_policy": NO_CACHE, "persist_result": False}


@task(name="discover files", **NO_RESULTS)
def discover_task(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[DiscoveredFile]:
    """Every input file with its status against the ledger: new, changed or unchanged."""
    ensure_tables(con)
    # as the direct ingest does: a source whose files were archived after their ingest keeps
    # its rows, with a warning (a changed reading setting reads its files again as replaced)
    warnings = discovery_warnings(con, config)
    found = discover_files(con, config)
    for warning in warnings + still_refused(found):
        get_run_logger().warning(warning)
    return found


@task(
    name="ingest file",
    retries=INGEST_RETRIES,
    retry_delay_seconds=INGEST_RETRY_DELAY_SECONDS,
    retry_condition_fn=retry_read_errors,
    **NO_RESULTS,
)
def ingest_task(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, discovered: DiscoveredFile
) -> FileResult:
    """Ingest one new or changed file; a file that cannot be read fails the task (and retries)."""
    return raise_if_failed(ingest_file(con, config, discovered))


@task(name="read again", **NO_RESULTS)
def read_again_task(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[FileResult]:
    """After the night's files, read again the files whose verdicts the night made stale (a SKU
    or store listed or no longer listed, a receipts file that left), as the direct ingest does;
    a refusal is logged, not raised: the version read before stays."""
    results = judge_stale_again(con, config)
    for result in results:
        message = f"read again {result.path} ({result.status})"
        if result.status in ("refused", "failed"):
            get_run_logger().warning(f"{message}: {result.error}")
        else:
            get_run_logger().info(message)
    return results


@task(name="stage", **NO_RESULTS)
def stage_task(stage: Stage, ctx: BuildContext) -> None:
    """Run one build stage (its SQL, then its schema check) and record its timing."""
    run_stage(stage, ctx)


@task(name="validate outputs", **NO_RESULTS)
def validate_task(ctx: BuildContext) -> int:
    """Check before writing that every output table exists, sorts and holds no raw card id."""
    outputs = plan_outputs(ctx.con, ctx.config)
    for output in outputs:
        output_query(ctx.con, output, ctx.config)
    return len(outputs)


@task(name="write build", **NO_RESULTS)
def write_task(ctx: BuildContext) -> Path:
    """Write the whole build folder into staging; a failed write leaves nothing behind."""
    return write_staged_build(ctx, datetime.now(UTC))


@task(name="publish build", **NO_RESULTS)
def publish_task(ctx: BuildContext, staging: Path) -> Path:
    """Move the written build into place, then point `latest` at it."""
    return publish_build(ctx, staging)


@task(name="prune old builds", **NO_RESULTS)
def prune_task(config: ProjectConfig) -> list[Path]:
    """Delete published builds beyond `export.keep_last`, never the one `latest` names."""
    return prune(config.export.root, config.export.keep_last)


@flow(name="demandprep-nightly", description="Ingest new files and rebuild the datasets.")
def nightly_flow(config_path: str, force_rebuild: bool = False) -> State:
    """One night: ingest what is new, rebuild and publish; nothing new means no new build."""
    config = load_config(config_path)
    run_id = str(get_run_context().flow_run.id)
    try:
        outcome = run_night(config, force_rebuild)
    except Exception as error:  # noqa: BLE001 - any failure ends the night, with its reason
        reason = failure_reason(error)
        # a user error is its one line; anything else is a bug and keeps its traceback
        get_run_logger().error(reason, exc_info=not isinstance(error, UserError))
        append_build_log(config, run_id, "failed", reason)
        return Failed(message=reason)
    append_build_log(config, run_id, outcome["status"], outcome["message"])
    return Completed(message=outcome["message"], data=outcome)


def run_night(config: ProjectConfig, force_rebuild: bool) -> dict[str, Any]:
    """The night's tasks in order, under one warehouse writer lock; returns what happened."""
    logger = get_run_logger()
    # a restored `latest` folder or a linked `.staging` would only stop the export: say so now
    check_export_root(config.export.root)
    with open_warehouse(config.warehouse) as con:
        discovered = call(discover_task, con, config)
        todo = files_to_ingest(discovered)
        for item in todo:
            call(
                ingest_task.with_options(task_run_name=f"ingest {item.path.name}"),
                con,
                config,
                item,
            )
        call(read_again_task, con, config)
        if not force_rebuild and latest_build_is_current(con, config):
            message = f"nothing new since the latest build ({len(discovered)} files unchanged)"
            logger.info(message)
            return {"status": "skipped", "message": message, "ingested": [], "build": None}
        ctx = BuildContext(con=con, config=config)
        market_level, choice_stages = split_at_choices(build_stages(config))
        with ctx.atomic():  # as the direct runner: one commit for the market-level stages
            for stage in market_level:
                call(stage_task.with_options(name=f"stage {stage.name}"), stage, ctx)
        for stage in choice_stages:
            call(stage_task.with_options(name=f"stage {stage.name}"), stage, ctx)
        call(validate_task, ctx)
        # one publisher at a time per export root, from the staging cleanup to the pruning
        with export_root_lock(config.export.root, config.warehouse.lock_timeout_seconds):
            staging = call(write_task, ctx)
            build = call(publish_task, ctx, staging)
            call(prune_task, config)
    message = f"published {build.name} ({len(todo)} new or changed files)"
    logger.info(message)
    for warning in ctx.warnings:
        logger.warning(warning)
    ingested = [str(item.path) for item in todo]
    return {"status": "published", "message": message, "ingested": ingested, "build": str(build)}


def call(task_to_run: Task, *args: Any) -> Any:
    """Run a task in the flow's thread with its arguments quoted.

    Quoting keeps Prefect from walking into the arguments (a live connection, the config model)
    to look for upstream results; the task still receives the plain objects.
    """
    return task_to_run(*(quote(arg) for arg in args))


def failure_reason(error: BaseException) -> str:
    """One line saying why the night failed: the user message, or the bug's type and text."""
    if isinstance(error, UserError):
        return error.one_line()
    return f"{type(error).__name__}: {' '.join(str(error).split())}"
