"""The few lines a finished build prints: markets, products, warnings, first-stage F, file rows."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from demandprep.context import BuildContext
from demandprep.export.manifest import MANIFEST_NAME


def summary_lines(folder: Path, ctx: BuildContext) -> list[str]:
    """One headline of the build's facts, then one line per data file with its rows."""
    lines = [_headline(ctx)]
    lines += [
        f"  {output['path']}: {output['rows']:,} rows"
        for output in _outputs(folder)
        if output.get("rows") is not None
    ]
    return lines


def _headline(ctx: BuildContext) -> str:
    if not ctx.config.market_build_enabled:
        occasions = ctx.facts.get("choices", {}).get("occasions", 0)
        return (
            f"summary: market build off (choice data only), {occasions:,} occasions, "
            f"{len(ctx.warnings)} warnings"
        )
    market = ctx.facts.get("market", {})
    first_assumption = next(iter(ctx.config.market_size))
    markets = market.get("assumptions", {}).get(first_assumption, {}).get("markets", 0)
    partial_f = ctx.facts.get("first_stage", {}).get("partial_f")
    f_text = "undefined" if partial_f is None else f"{partial_f:.1f}"
    return (
        f"summary: {markets} markets, {market.get('products_kept', 0)} products, "
        f"{len(ctx.warnings)} warnings, first-stage F {f_text}"
    )


def _outputs(folder: Path) -> list[dict[str, Any]]:
    # the export lists what it wrote, with rows, in the manifest
    manifest = json.loads((folder / MANIFEST_NAME).read_text(encoding="utf-8"))
    return list(manifest.get("outputs", []))
