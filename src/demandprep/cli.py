"""The `demandprep` command: starter config, check, ingest, build, serve, and the demo."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from importlib import resources
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from demandprep import __version__
from demandprep.config import ProjectConfig, load_config
from demandprep.errors import UserError

app = typer.Typer(
    help="Turn receipt logs into validated datasets for discrete-choice demand estimation.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
console = Console(stderr=True)

ConfigArg = Annotated[Path, typer.Argument(help="The project's TOML config file.")]


@contextmanager
def user_errors() -> Iterator[None]:
    """Turn a UserError into one red line on stderr and exit code 1; bugs keep their traceback."""
    try:
        yield
    except UserError as error:
        console.print(f"[bold red]error:[/] {error.one_line()}", highlight=False, soft_wrap=True)
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
        text = resources.files("demandprep.templates").joinpath("starter.toml").read_text()
        path.write_text(text, encoding="utf-8")
        console.print(f"wrote {path}; edit the [sources] paths, then run `demandprep check {path}`")


@app.command("check")
def check_command(config: ConfigArg) -> None:
    """Validate a config and list what a build would read."""
    with user_errors():
        project = load_config(config)
        Console().print(inputs_table(project))
        console.print(f"[green]ok[/] {config} is valid (config hash {project.config_hash()[:12]})")


def inputs_table(project: ProjectConfig) -> Table:
    """A table of every input source with its file count and total size."""
    table = Table(title=f"inputs of {project.project.name}")
    for column in ("source", "format", "files", "MB", "first file"):
        table.add_column(column, justify="right" if column in ("files", "MB") else "left")
    for name, source in project.sources:
        if source is None:
            continue
        files = source.resolved_files()
        size = sum(path.stat().st_size for path in files) / 1e6
        # with a warehouse, a source may match nothing (files archived after their ingest)
        first = str(files[0]) if files else "(none)"
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


@app.command("ingest")
def ingest_command(config: ConfigArg, reload: ReloadOption = None) -> None:
    """Load new and changed input files into the warehouse, quarantining bad lines."""
    with user_errors():
        summary = ingest_with_progress(load_config(config), reload=reload)
    exit_on_problems(summary)


def ingest_with_progress(project: ProjectConfig, reload: list[str] | None = None):
    """Run the ingest with a progress bar and print its summary table and warnings."""
    from demandprep.ingest.runner import summary_table
    from demandprep.pipeline import run_ingest
    from demandprep.progress import IngestProgress

    with IngestProgress(console) as progress:
        summary = run_ingest(project, progress=progress.update, reload=reload)
    Console().print(summary_table(summary))
    for warning in summary.warnings:
        console.print(f"[yellow]warning:[/] {warning}", highlight=False, soft_wrap=True)
    return summary


def exit_on_problems(summary) -> None:
    """One red line per failed or refused file (the first ten), then exit 1; else nothing."""
    if summary.ok:
        return
    for line in summary.problem_lines():
        prefix = "" if line.startswith("…") else "[bold red]error:[/] "
        console.print(f"{prefix}{escape(line)}", highlight=False, soft_wrap=True)
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
    from demandprep.ingest.runner import ensure_tables
    from demandprep.ingest.withdraw import withdraw_files
    from demandprep.warehouse import open_warehouse

    with user_errors():
        project = load_config(config, check_files=False)
        with open_warehouse(project.warehouse) as con:
            ensure_tables(con)
            withdrawn = withdraw_files(con, project, path, reason)
        for result in withdrawn:
            console.print(f"withdrawn {result.path} ({result.rows_read:,} rows)", highlight=False)


@app.command("build")
def build_command(config: ConfigArg) -> None:
    """Run the build stages on the warehouse and export a new build folder."""
    with user_errors():
        build_with_progress(load_config(config))


def build_with_progress(project: ProjectConfig) -> Path:
    """Run every build stage with a status line, then report the published folder."""
    from demandprep.pipeline import run_build

    with console.status("building") as status:
        folder, ctx = run_build(project, on_stage=lambda s: status.update(f"stage {s.name}"))
    for warning in ctx.warnings:
        console.print(f"[yellow]warning:[/] {warning}", highlight=False, soft_wrap=True)
    console.print(f"[green]built[/] {folder}")
    return folder


@app.command("run")
def run_command(config: ConfigArg) -> None:
    """Ingest, then build: what a nightly job does, without an orchestrator."""
    with user_errors():
        project = load_config(config)
        summary = ingest_with_progress(project)
        build_with_progress(project)
    exit_on_problems(summary)


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
        folder = build_with_progress(project)
        console.print(f"demo config: {config_path}\nreport: {folder / 'report.html'}")
