"""Write every file of one build into its staging folder: data, dictionary, report, manifest."""

from __future__ import annotations

import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from demandprep.context import BuildContext
from demandprep.export import csv_safe, stata
from demandprep.export.choices_file import Layout, write_choices_file, write_output_query
from demandprep.export.dictionary import (
    ColumnEntry,
    ModelMap,
    NoteMap,
    dictionary_document,
    document_columns,
    schema_models,
    step_notes,
    table_record,
    with_size_formula,
    write_dictionary,
)
from demandprep.export.drift import since_last_build
from demandprep.export.input_warnings import input_warnings
from demandprep.export.logit_alongside import estimates_alongside, warn_on_positive_price
from demandprep.export.manifest import (
    OutputFile,
    build_manifest,
    input_records,
    write_manifest,
)
from demandprep.export.quick_logit import LogitEstimate
from demandprep.export.report import ReportInputs, write_report
from demandprep.export.tables import OutputTable, output_query, plan_outputs


@dataclass
class BuildOutputs:
    """What `write_build` wrote: the folder, its data files and everything else it holds."""

    folder: Path
    build_id: str
    built_at: datetime
    tables: list[OutputFile] = field(default_factory=list)
    others: list[OutputFile] = field(default_factory=list)
    estimates: list[LogitEstimate] = field(default_factory=list)
    manifest: Path | None = None


def write_build(
    ctx: BuildContext,
    staging_dir: Path,
    built_at: datetime | None = None,
    models: ModelMap | None = None,
    previous: Path | None = None,
) -> BuildOutputs:
    """Write the whole build into `staging_dir` (named by the build id); the manifest comes last.

    `previous` is the published build this one is compared with (drift), None for a first."""
    built = BuildOutputs(staging_dir, staging_dir.name, built_at or datetime.now(UTC))
    for message in input_warnings(ctx.con, ctx.config):
        ctx.warn(message)
    models = schema_models() if models is None else models
    notes = step_notes(ctx.con, ctx.config)
    entries: dict[str, list[tuple[ColumnEntry, str]]] = {}
    grains: dict[str, dict] = {}
    with estimates_alongside(ctx) as estimates:
        with _timed(ctx, "export.parquet"):
            for output in plan_outputs(ctx.con, ctx.config):
                table, documented = write_output_table(ctx, output, staging_dir, models, notes)
                built.tables.append(table)
                entries[output.file_name] = documented
                grains[output.file_name] = table_record(
                    output.kind, output.sort_keys, output.keys_unique
                )
        built.others += [
            OutputFile(path)
            for path in write_dictionary(
                staging_dir, dictionary_document(_sized(ctx, entries), grains, ctx.config)
            )
        ]
        with _timed(ctx, "export.extra_formats"):
            built.others += write_extra_formats(ctx, built.tables, entries)
        # what is left of the estimates once the files are written
        with _timed(ctx, "export.quick_logit"):
            built.estimates = estimates.result()
    warn_on_positive_price(ctx, built.estimates)
    with _timed(ctx, "export.drift"):
        drift = since_last_build(
            ctx.con,
            ctx.config,
            previous,
            staging_dir,
            {
                "inputs": input_records(ctx.con),
                "outputs": [
                    {"path": table.path.relative_to(staging_dir).as_posix(), "rows": table.rows}
                    for table in built.tables
                ],
                "facts": ctx.facts,
                "quick_logit": [estimate.as_dict() for estimate in built.estimates],
            },
        )
    if drift.get("pseudonym_key_changed"):
        ctx.warn(
            f"choices: the pseudonym key is not the one of build {drift['previous_build']}: "
            "every chooser and occasion id changed, so ids do not join across the two builds"
        )
    with _timed(ctx, "export.report"):
        report = write_report(
            ctx,
            staging_dir,
            ReportInputs(
                built.build_id,
                built.built_at.isoformat(timespec="seconds"),
                _outputs_frame(staging_dir, built.tables),
                built.estimates,
                drift,
            ),
        )
    built.others.append(OutputFile(report))
    built.manifest = write_manifest(
        staging_dir,
        build_manifest(
            ctx,
            built.build_id,
            built.built_at,
            staging_dir,
            built.tables + built.others,
            {
                "quick_logit": [estimate.as_dict() for estimate in built.estimates],
                "since_last_build": drift,
            },
        ),
    )
    return built


def write_output_table(
    ctx: BuildContext,
    output: OutputTable,
    folder: Path,
    models: ModelMap,
    notes: NoteMap | None = None,
) -> tuple[OutputFile, list[tuple[ColumnEntry, str]]]:
    """Write one data file with its columns documented; returns it and its dictionary entries."""
    query = output_query(ctx.con, output, ctx.config)
    columns = ctx.con.sql(query.sql, params=query.params).columns
    docs = document_columns(output.kind, columns, ctx.config, models, notes)
    layout = Layout(
        ctx.config.export.row_group_rows,
        {name: entry.as_metadata() for name, entry in docs.items()},
        {
            "demandprep.table": output.kind,
            **{f"demandprep.{k}": v for k, v in output.metadata.items()},
        },
    )
    path = folder / output.file_name
    if output.kind == "choices":
        written = write_choices_file(ctx, output, query, path, layout)
    else:
        written = write_output_query(ctx, output, query, path, layout)
    types = {item.name: str(item.type) for item in written.schema}
    return (
        OutputFile(written.path, written.rows, written.schema, sha256=written.sha256),
        [(docs[name], types[name]) for name in columns],
    )


def write_extra_formats(
    ctx: BuildContext,
    tables: list[OutputFile],
    entries: dict[str, list[tuple[ColumnEntry, str]]],
) -> list[OutputFile]:
    """CSV and Stata copies of the data files, as configured in `export.extra_formats`."""
    written: list[OutputFile] = []
    formats = ctx.config.export.extra_formats
    for table in tables:
        source = table.path.name
        if "csv" in formats:
            path = _subfolder(table.path, "csv") / f"{table.path.stem}.csv"
            rows = csv_safe.write_safe_csv(table.path, path)
            written.append(OutputFile(path, rows, table.schema, derived_from=source))
        if "dta" in formats:
            written += _dta_copy(ctx, table, entries[source])
    return written


def _sized(
    ctx: BuildContext, entries: dict[str, list[tuple[ColumnEntry, str]]]
) -> dict[str, list[tuple[ColumnEntry, str]]]:
    # Why only in the dictionary: the Parquet field metadata keeps the generic formula, so
    # the share and market files stay byte-identical to earlier builds of the same inputs
    sized = dict(entries)
    for name, assumption in ctx.config.market_size.items():
        for kind in ("shares", "markets"):
            file_name = f"{kind}_{name}.parquet"
            if file_name in sized:
                sized[file_name] = with_size_formula(sized[file_name], assumption)
    return sized


def _dta_copy(
    ctx: BuildContext, table: OutputFile, entries: list[tuple[ColumnEntry, str]]
) -> list[OutputFile]:
    if not stata.dta_fits(table.path):
        ctx.warn(
            f"{table.path.stem}.dta not written: {table.rows} rows exceed the "
            f"{stata.MAX_ROWS}-row limit for Stata copies; use the Parquet or CSV file"
        )
        return []
    path = _subfolder(table.path, "dta") / f"{table.path.stem}.dta"
    labels = {entry.column: entry.description for entry, _ in entries}
    rows, renamed = stata.write_dta(table.path, path, labels)
    if renamed:
        pairs = ", ".join(f"{name} -> {short}" for name, short in renamed.items())
        ctx.warn(
            f"dta/{path.name}: names longer than Stata's {stata.NAME_CHARS} characters were "
            f"shortened ({pairs}); each label starts with the full name"
        )
    return [OutputFile(path, rows, derived_from=table.path.name)]


def _subfolder(data_file: Path, name: str) -> Path:
    folder = data_file.parent / name
    folder.mkdir(exist_ok=True)
    return folder


def _outputs_frame(folder: Path, tables: list[OutputFile]) -> pd.DataFrame:
    return pd.DataFrame(
        [
            {
                "file": table.path.relative_to(folder).as_posix(),
                "rows": table.rows,
                "columns": len(table.schema) if table.schema is not None else None,
                "MB": round(table.path.stat().st_size / 1e6, 3),
            }
            for table in tables
        ]
    )


@contextmanager
def _timed(ctx: BuildContext, name: str) -> Iterator[None]:
    started = time.perf_counter()
    try:
        yield
    finally:
        ctx.timings[name] = round(time.perf_counter() - started, 3)
