"""The `demandprep` command: starter config, check, ingest, build, serve, and the demo."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.table import Table
from rich.text import Text

from demandprep import __version__
from demandprep.config import ConfigInvalid, ProjectConfig, load_config
from demandprep.config_reference import starter_toml
from demandprep.errors import UserError
from demandprep.process_tuning import freeze_for_exit, tune_process

app = typer.Typer(
    help="Turn receipt logs into validated datasets for discrete-choice demand estimation.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


def entry() -> None:
    """The console script: tune this process (`process_tuning.py`), run the command, and leave
    without a cycle hunt."""
    tune_process()
    try:
        app()
    finally:
        freeze_for_exit()


# Messages quote file headers, paths and config text: never read them as console markup.
console = Console(stderr=True, markup=False, highlight=False)

ConfigArg = Annotated[Path, typer.Argument(help="The project's TOML config file.")]
ForceOption = Annotated[
    bool, typer.Option("--force", help="Build even when nothing changed since `latest`.")
]


def say(message: str, label: str = "", style: str = "") -> None:
    """Print one message literally on stderr, after an optional styled label."""
    text = Text.assemble((label, style), " " if label else "", message)
    console.print(text, soft_wrap=True)


@contextmanager
def user_errors() -> Iterator[None]:
    """Turn a UserError into one red line on stderr and exit code 1; bugs keep their traceback."""
    try:
        yield
    except UserError as error:
        say(error.one_line(), "error:", "bold red")
        raise typer.Exit(code=1) from None


@app.callback(invoke_without_command=True)
def main(
    version: Annotated[bool, typer.Option("--version", help="Print the version and exit.")] = False,
) -> None:
    """demandprep: receipts in, share tables and choice data out."""
    if version:
        typer.echo(__version__)
        raise typer.Exit()


@app.command("init")
def init_command(
    path: Annotated[Path, typer.Argument(help="Where to write the config.")] = Path(
        "demandprep.toml"
    ),
    force: Annotated[bool, typer.Option(help="Overwrite an existing file.")] = False,
) -> None:
    """Write a commented starter config to edit for a new project."""
    with user_errors():
        if path.exists() and not force:
            raise UserError(f"{path}: already exists.", "pass --force to overwrite it.")
        path.write_text(starter_toml(), encoding="utf-8")
        say(f"wrote {path}; edit the [sources] paths, then run `demandprep check {path}`")


@app.command("check")
def check_command(config: ConfigArg) -> None:
    """Check a config and the files it names; list every problem a build would meet."""
    from demandprep.preflight import preflight_problems

    with user_errors():
        try:
            project = load_config(config)
        except ConfigInvalid as error:
            stop_with(error.problems)
        Console().print(inputs_table(project))
        stop_with(preflight_problems(project))
        say(f"{config} is valid (config hash {project.config_hash()[:12]})", "ok", "green")


def stop_with(problems: list[UserError]) -> None:
    """Print every problem on its own line and exit 1; nothing to print, nothing happens."""
    for problem in problems[:-1]:
        say(problem.one_line(), "error:", "bold red")
    if problems:
        raise problems[-1]


def inputs_table(project: ProjectConfig) -> Table:
    """A table of every input source with its file count and total size."""
    table = Table(title=Text(f"inputs of {project.project.name}"))
    for column in ("source", "format", "files", "MB", "first file"):
        table.add_column(column, justify="right" if column in ("files", "MB") else "left")
    for name, source in project.sources:
        if source is None:
            continue
        files = source.resolved_files()
        size = sum(path.stat().st_size for path in files) / 1e6
        # with a warehouse, a source may match nothing (files archived after their ingest);
        # a path is shown as it is, brackets included (Text is never read as markup)
        first = Text(str(files[0])) if files else Text("(none)")
        table.add_row(name, source.format, str(len(files)), f"{size:,.1f}", first)
    return table


ReloadOption = Annotated[
    list[str] | None,
    typer.Option(
        "--reload",
        help="Read these files again: a source name (e.g. receipts) or a glob of paths. "
        "Repeatable.",
    ),
]


TimingsOption = Annotated[
    bool, typer.Option("--timings", help="Also print the seconds of each ingest phase.")
]


@app.command("ingest")
def ingest_command(
    config: ConfigArg, reload: ReloadOption = None, timings: TimingsOption = False
) -> None:
    """Load new and changed input files into the warehouse, quarantining bad lines."""
    with user_errors():
        summary = ingest_with_progress(load_config(config), reload=reload, timings=timings)
    exit_on_problems(summary)


def ingest_with_progress(
    project: ProjectConfig, reload: list[str] | None = None, timings: bool = False, con=None
):
    """Run the ingest with a progress bar (log lines outside a terminal), then its summary.

    `con`: the warehouse connection to use (`run` holds one), else the warehouse is opened."""
    from demandprep.ingest.results import timings_line
    from demandprep.ingest.runner import summary_table
    from demandprep.pipeline import run_ingest
    from demandprep.progress import IngestLog, IngestProgress

    if console.is_terminal:
        with IngestProgress(console) as progress:
            summary = run_ingest(project, progress=progress.update, reload=reload, con=con)
    else:
        summary = run_ingest(project, progress=IngestLog(say).update, reload=reload, con=con)
    Console().print(summary_table(summary))
    if timings:
        say(timings_line(summary))
    for warning in summary.warnings:
        say(warning, "warning:", "yellow")
    return summary


def exit_on_problems(summary) -> None:
    """One red line per failed or refused file (the first ten), then exit 1; else nothing."""
    if summary.ok:
        return
    for line in summary.problem_lines():
        say(line, "" if line.startswith("…") else "error:", "bold red")
    raise typer.Exit(code=1)


@app.command("withdraw")
def withdraw_command(
    config: ConfigArg,
    path: Annotated[str, typer.Argument(help="An ingested file's path, or a glob of paths.")],
    reason: Annotated[
        str, typer.Option(help="Why the rows are withdrawn (kept in the ledger).")
    ] = "withdrawn by hand",
) -> None:
    """Remove the rows of ingested files from the warehouse; the ledger keeps why."""
    from demandprep.ingest.runner import ensure_tables, judge_stale_again
    from demandprep.ingest.withdraw import withdraw_files
    from demandprep.warehouse import open_warehouse

    with user_errors():
        project = load_config(config, check_files=False)
        with open_warehouse(project.warehouse) as con:
            ensure_tables(con)
            withdrawn = withdraw_files(con, project, path, reason)
            # a duplicate whose accepted copy was withdrawn is judged again now
            again = judge_stale_again(con, project)
        for result in withdrawn:
            say(f"{result.path} ({result.rows_read:,} rows)", "withdrawn")
        for result in again:
            if result.error:
                say(result.error, "read again:", "red")
            else:
                say(f"{result.path} ({result.rows_accepted:,} rows accepted)", "read again")


@app.command("build")
def build_command(config: ConfigArg, force: ForceOption = False) -> None:
    """Run the build stages on the warehouse and export a new build folder."""
    with user_errors():
        build_with_progress(load_config(config), force)


def build_with_progress(project: ProjectConfig, force: bool = False, con=None) -> Path | None:
    """Build with a status line (log lines outside a terminal) and print what it made.

    Returns the published folder, or None when nothing changed since `latest` and not `force`.
    `con`: the warehouse connection to use (`run` holds one), else the warehouse is opened.
    """
    from demandprep.build_summary import summary_lines
    from demandprep.pipeline import build_unless_current
    from demandprep.progress import BuildLog

    if console.is_terminal:
        with console.status("building") as status:
            outcome = build_unless_current(
                project, force, on_stage=lambda s: status.update(f"stage {s.name}"), con=con
            )
    else:
        log = BuildLog(say)
        outcome = build_unless_current(project, force, on_stage_done=log.stage_done, con=con)
        if not outcome.skipped:
            log.export_done()
    if outcome.folder is None or outcome.ctx is None:
        kept = outcome.kept.name if outcome.kept is not None else "latest"
        say(
            f"nothing new since the latest build {kept}: no input file, setting or demandprep "
            "code changed; skipped (pass --force to rebuild)"
        )
        return None
    for warning in outcome.ctx.warnings:
        say(warning, "warning:", "yellow")
    say(str(outcome.folder), "built", "green")
    for line in summary_lines(outcome.folder, outcome.ctx):
        say(line)
    return outcome.folder


@app.command("run")
def run_command(
    config: ConfigArg, force: ForceOption = False, timings: TimingsOption = False
) -> None:
    """Ingest, then build: what a nightly job does, without an orchestrator."""
    from demandprep.pipeline import every_receipts_file_failed
    from demandprep.warehouse import open_warehouse

    with user_errors():
        project = load_config(config)
        # one connection for both: opening and closing (a checkpoint) the warehouse costs
        with open_warehouse(project.warehouse) as con:
            summary = ingest_with_progress(project, timings=timings, con=con)
            if every_receipts_file_failed(summary):
                say(
                    "every receipts file failed or was refused, so nothing was built.",
                    "error:",
                    "bold red",
                )
                exit_on_problems(summary)
            build_with_progress(project, force, con=con)
    exit_on_problems(summary)


@app.command("partitioned")
def partitioned_command(config: ConfigArg, force: ForceOption = False) -> None:
    """Ingest and build partition by partition on a Dask cluster (section partitioning)."""
    with user_errors():
        project = load_config(config)
        from demandprep.partitioned.plan import require_partition_key

        require_partition_key(project)  # before Prefect starts
        try:
            import distributed  # noqa: F401 - the optional extra, checked before any work
            import prefect_dask  # noqa: F401
        except ImportError as error:
            raise UserError(
                f"the partitioned build needs {error.name}, which is not installed.",
                "install the extra: pip install 'demandprep[distributed]'.",
            ) from None
        from demandprep.flows.partitioned import run_partitioned

        say(run_partitioned(str(project.config_path), force)["message"])


@app.command("serve")
def serve_command(config: ConfigArg) -> None:
    """Serve the nightly flow on the config's schedule with Prefect (runs until stopped)."""
    with user_errors():
        from demandprep.flows.schedule import serve_nightly

        serve_nightly(load_config(config).config_path)


@app.command("demo")
def demo_command(
    out: Annotated[Path, typer.Option(help="Folder for the invented world and its builds.")] = Path(
        "demo_out"
    ),
    scale: Annotated[float, typer.Option(help="Multiplies the visits per store and day.")] = 1.0,
    seed: Annotated[int, typer.Option(help="Seed of the invented world.")] = 7,
) -> None:
    """Invent a coffee-aisle world, then ingest and build it end to end."""
    from demandprep.demo_runner import prepare_demo

    with user_errors():
        with console.status("inventing the demo world"):
            config_path = prepare_demo(out, scale=scale, seed=seed)
        project = load_config(config_path)
        ingest_with_progress(project)
        folder = build_with_progress(project, force=True)
        assert folder is not None  # a forced build is never skipped
        say(f"demo config: {config_path}")
        say(f"report: {folder / 'report.html'}")
