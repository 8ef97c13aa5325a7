"""`report.html`: one self-contained page of plots and tables about a build.

Images are inline PNGs (base64 data URLs); a Content-Security-Policy forbids every network or
file fetch, so the page renders the same offline and cannot leak anything when opened.
"""

from __future__ import annotations

import base64
import html
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
from matplotlib.figure import Figure

from demandprep import __version__
from demandprep.context import BuildContext
from demandprep.export import report_data, report_plots
from demandprep.export.choice_only_report import choice_only_page
from demandprep.export.input_warnings import files_needing_attention
from demandprep.export.quick_logit import LogitEstimate

REPORT_NAME = "report.html"
CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
STYLE = """
body { font-family: sans-serif; margin: 2em auto; max-width: 60em; color: #222; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 2em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.5em 0; }
td, th { border: 1px solid #ccc; padding: 0.2em 0.5em; text-align: left; }
th { background: #f3f3f3; }
img.plot { max-width: 100%; display: block; margin: 0.5em 0; }
.warning { color: #8a4b00; } .note { color: #555; font-size: 0.9em; }
section.warnings { border: 2px solid #d9a441; background: #fff8e8; padding: 0 1em 0.5em; }
section.warnings h2 { border-bottom: none; margin-top: 0.5em; }
"""


@dataclass(frozen=True)
class ReportInputs:
    """What the report shows besides the warehouse tables."""

    build_id: str
    built_at: str
    outputs: pd.DataFrame
    estimates: Sequence[LogitEstimate]


def write_report(ctx: BuildContext, folder: Path, inputs: ReportInputs) -> Path:
    """Render the report for this build into `folder/report.html`."""
    path = folder / REPORT_NAME
    with path.open("w", encoding="utf-8") as handle:
        handle.write(render_report(ctx, inputs))
        handle.flush()
        os.fsync(handle.fileno())
    return path


def render_report(ctx: BuildContext, inputs: ReportInputs) -> str:
    """The report page as one HTML string."""
    if not ctx.config.market_build_enabled:  # tables helper: choice-only projects
        return choice_only_page(ctx, inputs, STYLE, CSP)
    sections = [
        _warnings_box(ctx),
        _section("Build", _build_table(ctx, inputs)),
        _section("Files", _table(inputs.outputs)),
        _section("Shares", _shares_body(ctx)),
        _section("Outside share", _outside_share_body(ctx)),
        _section("Prices", _prices_body(ctx)),
        _section("Ledger", _ledger_body(ctx)),
        _section("Zero shares", _zero_shares_body(ctx)),
        _section("Instruments", _instruments_body(ctx, inputs)),
        _section("Market-size sensitivity", _sensitivity_body(ctx, inputs)),
        _section("Quick logit", _quick_logit_body(inputs)),
    ]
    title = html.escape(f"demandprep build {inputs.build_id}")
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">\n'
        f"<title>{title}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n"
        f"<h1>{title}</h1>\n" + "\n".join(sections) + "\n</body>\n</html>\n"
    )


def _shares_body(ctx: BuildContext) -> str:
    histogram = report_data.share_histogram(ctx.con)
    return _plot(report_plots.share_distribution(histogram), "share distribution")


def _outside_share_body(ctx: BuildContext) -> str:
    bands = report_data.outside_share_bands(ctx.con)
    lines = report_data.outside_share_lines(ctx.con)
    figure = report_plots.outside_share_over_time(bands, lines)
    return _plot(figure, "outside share by market over time")


def _prices_body(ctx: BuildContext) -> str:
    # Prices do not depend on the market-size assumption, so the first one stands for all.
    first_assumption = next(iter(ctx.config.market_size))
    quantiles = report_data.price_quantiles(ctx.con, first_assumption)
    return _plot(report_plots.price_dispersion(quantiles), "price dispersion by product")


def _ledger_body(ctx: BuildContext) -> str:
    figure = report_plots.ledger_outcomes(report_data.ledger_by_file(ctx.con))
    return (
        _table(report_data.ledger_totals(ctx.con))
        + _table(report_data.quarantine_reasons(ctx.con))
        + _plot(figure, "ledger per file")
    )


def _zero_shares_body(ctx: BuildContext) -> str:
    figure = report_plots.zero_shares(report_data.zero_share_counts(ctx.con))
    zeros = ctx.facts.get("market", {}).get("zero_share_product_markets")
    counted = "" if zeros is None else f"; {zeros} product-markets on the shelf without sales"
    policy = _note(f"zero-share policy: {ctx.config.shares.zero_shares}{counted}")
    return policy + _plot(figure, "zero-share counts")


def _instruments_body(ctx: BuildContext, inputs: ReportInputs) -> str:
    first_stage = ctx.facts.get("first_stage") or {}
    threshold = ctx.config.instruments.weak_instrument_f
    figure = report_plots.first_stage_strength(inputs.estimates, first_stage, threshold)
    return _plot(figure, "first-stage strength")


def _sensitivity_body(ctx: BuildContext, inputs: ReportInputs) -> str:
    outside = report_data.mean_outside_share(ctx.con)
    figure = report_plots.market_size_sensitivity(outside, inputs.estimates)
    return _table(outside) + _plot(figure, "market-size sensitivity")


def _quick_logit_body(inputs: ReportInputs) -> str:
    figure = report_plots.elasticity_ranges(inputs.estimates)
    return (
        _logit_note() + _estimates_table(inputs.estimates) + _plot(figure, "own-price elasticities")
    )


def _build_table(ctx: BuildContext, inputs: ReportInputs) -> str:
    rows = pd.DataFrame(
        {
            "item": [
                "build id",
                "built at (UTC)",
                "tool version",
                "project",
                "config hash",
                "assumptions",
            ],
            "value": [
                inputs.build_id,
                inputs.built_at,
                __version__,
                ctx.config.project.name,
                ctx.config.config_hash()[:16],
                ", ".join(ctx.config.market_size),
            ],
        }
    )
    return _table(rows)


def _warnings_box(ctx: BuildContext) -> str:
    """Every warning of the build, then the input files behind them, above everything else."""
    body = _warnings(ctx.warnings) + _attention_table(ctx)
    return f'<section id="warnings" class="warnings">\n<h2>Warnings</h2>\n{body}\n</section>'


def _warnings(warnings: Sequence[str]) -> str:
    if not warnings:
        return _note("no warnings")
    items = "".join(f'<li class="warning">{html.escape(w)}</li>' for w in warnings)
    return f"<ul>{items}</ul>"


def _attention_table(ctx: BuildContext) -> str:
    files = files_needing_attention(ctx.con)
    if not files:
        return ""
    rows = pd.DataFrame(
        {
            "file": [item.name for item in files],
            "source": [item.source for item in files],
            "status": [item.status for item in files],
            "reason": [item.reason or "" for item in files],
        }
    )
    return _note("input files needing attention (latest version of each)") + _table(rows)


def _estimates_table(estimates: Sequence[LogitEstimate]) -> str:
    rows = pd.DataFrame(
        [
            {
                "assumption": e.assumption,
                "method": e.method.upper(),
                "rows": e.rows,
                "price coefficient": f"{e.price_coefficient:.4f}",
                "std. error": f"{e.price_std_error:.4f}",
                "median elasticity": f"{e.elasticity_median:.3f}",
                "elasticity p10-p90": f"{e.elasticity_p10:.3f} to {e.elasticity_p90:.3f}",
                "share positive": f"{e.positive_elasticity_share:.1%}",
                "instruments": ", ".join(e.instruments) or "-",
                "first-stage F": "-" if e.first_stage_f is None else f"{e.first_stage_f:.1f}",
            }
            for e in estimates
        ]
    )
    return _table(rows) if estimates else _note("too few rows for a quick logit estimate")


def _logit_note() -> str:
    return _note(
        "ln s_j - ln s_0 regressed on price and the product characteristics (fringe and zero "
        "shares left out), by OLS and by two-stage least squares with the price instruments. "
        "Own-price elasticity of the logit: -alpha p (1 - s), alpha = -(price coefficient). "
        "A diagnostic, not the study's model."
    )


def _plot(figure: Figure, label: str) -> str:
    encoded = base64.b64encode(report_plots.png_bytes(figure)).decode("ascii")
    alt = html.escape(label)
    return f'<img class="plot" alt="{alt}" src="data:image/png;base64,{encoded}">'


def _table(frame: pd.DataFrame) -> str:
    if frame.empty:
        return _note("none")
    return frame.to_html(index=False, border=0, escape=True, na_rep="")


def _section(title: str, body: str) -> str:
    return f"<section>\n<h2>{html.escape(title)}</h2>\n{body}\n</section>"


def _note(text: str) -> str:
    return f'<p class="note">{html.escape(text)}</p>'
