"""The direct runner: ingest, build and export without an orchestrator (what the CLI calls)."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.stages import Stage, run_build_stages
from demandprep.warehouse import open_warehouse


def run_ingest(config: ProjectConfig, progress=None):
    """Ingest every new or changed input file into the warehouse; returns the ingest summary."""
    from demandprep.ingest.runner import ingest_all

    with open_warehouse(config.warehouse) as con:
        return ingest_all(con, config, progress=progress)


def run_build(
    config: ProjectConfig, on_stage: Callable[[Stage], None] | None = None
) -> tuple[Path, BuildContext]:
    """Run every build stage on the warehouse and export a build folder; returns its path."""
    from demandprep.export.folder import check_export_root, export_build

    # a restored `latest` folder or a linked `.staging` would only stop the export: say so now
    check_export_root(config.export.root)
    with open_warehouse(config.warehouse) as con:
        ctx = BuildContext(con=con, config=config)
        run_build_stages(ctx, on_stage=on_stage)
        return export_build(ctx), ctx
