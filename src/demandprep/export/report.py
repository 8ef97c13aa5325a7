"""`report.html`: one self-contained page about a build, readable from 800 px wide.

First screen: the project, the headline numbers, the warnings and what changed since the last
build; then cautions, the market sections (unless the market build is off), the choice table
(unless choices are off), the ledger and the build's details. Charts are inline SVG from
`report_plots`; there are no scripts, and a Content-Security-Policy forbids every network or
file fetch, so the page renders the same offline and cannot leak anything when opened.
"""

from __future__ import annotations

import html
import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from demandprep import __version__
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.export import report_data, report_plots
from demandprep.export.input_warnings import files_needing_attention
from demandprep.export.quick_logit import LogitEstimate
from demandprep.export.svg import legend

REPORT_NAME = "report.html"
CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
STYLE = """
:root { --ink: #1d2a2a; --muted: #5c6b73; --rule: #d5dbd8; --paper: #fbfaf6;
  --accent: #1f5f5b; --warm: #c8862a; --alert: #b5523b; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
  font: 15px/1.5 "Source Sans 3", "Segoe UI", "Helvetica Neue", Arial, sans-serif; }
main { max-width: 60rem; margin: 0 auto; padding: 1.5rem 1.25rem 4rem; }
header.masthead { border-bottom: 3px solid var(--accent); padding-bottom: 0.75rem; }
h1, h2, h3 { font-family: "Iowan Old Style", "Palatino Linotype", Palatino, Georgia, serif;
  font-weight: 600; line-height: 1.2; }
h1 { font-size: 1.9rem; margin: 0 0 0.25rem; color: var(--accent); }
h2 { font-size: 1.3rem; margin: 2.2rem 0 0.6rem; padding-bottom: 0.2rem;
  border-bottom: 1px solid var(--rule); }
h3 { font-size: 1.05rem; margin: 1.2rem 0 0.4rem; }
.sub { color: var(--muted); margin: 0; }
.headline { display: grid; grid-template-columns: repeat(auto-fit, minmax(10rem, 1fr));
  gap: 0.6rem; margin: 1rem 0; }
.figure { background: #fff; border: 1px solid var(--rule); border-left: 4px solid var(--accent);
  padding: 0.5rem 0.75rem; }
.figure .value { display: block; font-size: 1.35rem; font-weight: 600; }
.figure .what { display: block; color: var(--muted); font-size: 0.85rem; }
.scroll { overflow-x: auto; max-width: 100%; }
table { border-collapse: collapse; font-size: 0.85rem; margin: 0.5rem 0; background: #fff; }
td, th { border-bottom: 1px solid var(--rule); padding: 0.25rem 0.6rem; text-align: left;
  vertical-align: top; }
th { background: #eef1ef; font-weight: 600; }
svg.chart { display: block; width: 100%; max-width: 720px; height: auto; margin: 0.5rem 0;
  font: 12px "Source Sans 3", "Segoe UI", Arial, sans-serif; fill: var(--ink); }
svg.chart .tick, svg.chart .value { fill: var(--muted); font-size: 11px; }
svg.chart .alert { fill: var(--alert); font-weight: 600; }
.legend { margin: 0.25rem 0; font-size: 0.85rem; }
.legend .key { display: inline-block; margin-right: 1rem; white-space: nowrap; }
.swatch { display: inline-block; width: 0.8rem; height: 0.8rem; margin-right: 0.3rem;
  vertical-align: -0.1rem; }
.note, .axis-note { color: var(--muted); font-size: 0.9rem; }
section.warnings { border: 1px solid var(--warm); border-left: 4px solid var(--warm);
  background: #fff7e9; padding: 0.25rem 1rem 0.5rem; margin-top: 1rem; }
section.warnings h2 { border-bottom: none; margin-top: 0.5rem; }
.warning { color: #7a4a0c; }
section.cautions { border-left: 4px solid var(--muted); background: #f2f3f0;
  padding: 0.25rem 1rem 0.5rem; }
section.cautions h2 { border-bottom: none; margin-top: 0.5rem; }
"""


@dataclass(frozen=True)
class ReportInputs:
    """What the report shows besides the warehouse tables."""

    build_id: str
    built_at: str
    outputs: pd.DataFrame
    estimates: Sequence[LogitEstimate]
    drift: dict[str, Any] = field(default_factory=dict)


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
    markets_on = market_build_enabled(ctx.config) and report_data.table_exists(
        ctx.con, "share_table"
    )
    choices_on = ctx.config.choices.enabled and report_data.table_exists(ctx.con, "choices")
    choices = report_data.choice_summary(ctx.con) if choices_on else None
    sections = [
        _masthead(ctx, inputs, markets_on, choices),
        _warnings_box(ctx),
        _section("Since the last build", _drift_body(inputs.drift), "drift"),
        _cautions(),
    ]
    if markets_on:
        sections += [
            _section("Shares", _shares_body(ctx)),
            _section("Outside share", _outside_share_body(ctx)),
            _section("Prices", _prices_body(ctx)),
            _section("Zero shares", _zero_shares_body(ctx)),
            _section("Instruments", _instruments_body(ctx, inputs)),
            _section("Market-size sensitivity", _sensitivity_body(ctx, inputs)),
            _section("Quick logit", _quick_logit_body(inputs)),
        ]
    if choices is not None:
        sections.append(_section("Choice table", _choices_body(ctx, choices), "choices"))
    sections += [
        _section("Ledger", _ledger_body(ctx)),
        _section("Files", _table(inputs.outputs)),
        _section("Build", _build_table(ctx, inputs)),
    ]
    title = html.escape(f"{ctx.config.project.name}: demandprep build {inputs.build_id}")
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">\n'
        f"<title>{title}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<main>\n"
        + "\n".join(sections)
        + "\n</main>\n</body>\n</html>\n"
    )


def market_build_enabled(config: ProjectConfig) -> bool:
    """Whether this project builds market tables (choice-only projects do not)."""
    return config.market_build_enabled


def currency_name(config: ProjectConfig) -> str:
    """The configured currency, or a neutral word when none is set."""
    return getattr(config.project, "currency", "") or "currency units"


def unit_name(config: ProjectConfig) -> str:
    """The equivalent unit quantities are counted in, as configured."""
    unit = config.products.equivalent_unit
    return "pack" if unit.kind == "item" else f"{unit.grams:g} g"


def price_unit(config: ProjectConfig) -> str:
    """What a price is in: currency per equivalent unit."""
    return f"{currency_name(config)} per {unit_name(config)}"


def _masthead(
    ctx: BuildContext, inputs: ReportInputs, markets_on: bool, choices: dict | None
) -> str:
    project = ctx.config.project
    description = (
        f'<p class="sub">{html.escape(project.description)}</p>' if project.description else ""
    )
    built = _note(f"build {inputs.build_id}, built {inputs.built_at} UTC, demandprep {__version__}")
    figures = _headline(ctx, inputs, markets_on, choices)
    return (
        f'<header class="masthead">\n<h1>{html.escape(project.name)}</h1>\n'
        f"{description}{built}</header>\n"
        f'<section id="headline" class="headline">{figures}</section>'
    )


def _headline(
    ctx: BuildContext, inputs: ReportInputs, markets_on: bool, choices: dict | None
) -> str:
    lines = report_data.lines_accepted(ctx.con)
    figures = [
        (f"{lines['accepted']:,}", f"receipt lines accepted of {lines['read']:,} read"),
    ]
    if not markets_on:
        figures.append(("market build off", "no market tables, shares or quick logit"))
    else:
        counts = report_data.market_headline(ctx.con)
        figures += [
            (f"{counts['markets']:,}", "markets"),
            (f"{counts['products']:,}", "inside products"),
            (f"{counts['product_market_rows']:,}", "product-market rows per assumption"),
        ]
        for row in report_data.mean_outside_share(ctx.con).itertuples():
            figures.append(
                (f"{row.mean_outside_share:.3f}", f"mean outside share, {row.assumption}")
            )
        figures += _coefficient_figures(inputs.estimates)
    if choices is not None:
        figures.append((f"{choices['occasions']:,}", "choice occasions"))
    else:
        figures.append(("choices off", "no choice table"))
    figures.append((str(len(ctx.warnings)), "warnings"))
    figures.append(_drift_figure(inputs.drift))
    return "".join(
        f'<div class="figure"><span class="value">{html.escape(value)}</span>'
        f'<span class="what">{html.escape(what)}</span></div>'
        for value, what in figures
    )


def _drift_figure(drift: dict[str, Any]) -> tuple[str, str]:
    """How much moved since the last build, in a few words (the section below has it all)."""
    if not drift or drift.get("previous_build") is None:
        return ("first build", "no previous build to compare with")
    changed = sum(r["before"] != r["after"] for r in drift["rows"])
    inputs = sum(len(drift["inputs"][kind]) for kind in ("added", "gone", "changed"))
    config = ", config changed" if drift.get("config_changed") else ""
    return (f"{changed} outputs changed", f"since the last build: {inputs} input files{config}")


def _coefficient_figures(estimates: Sequence[LogitEstimate]) -> list[tuple[str, str]]:
    """OLS and IV price coefficients of the first assumption, the IV with its first-stage F."""
    if not estimates:
        return [("-", "quick logit: too few rows")]
    first = estimates[0].assumption
    shown = []
    for estimate in (e for e in estimates if e.assumption == first):
        what = f"{estimate.method.upper()} price coefficient ({first})"
        if estimate.method == "iv":
            what += (
                f"; first-stage F {_f(estimate.first_stage_f)} classic, "
                f"{_f(estimate.first_stage_f_robust)} robust"
            )
        shown.append((f"{estimate.price_coefficient:.4f}", what))
    return shown


def _drift_body(drift: dict[str, Any]) -> str:
    if not drift or drift.get("previous_build") is None:
        return _note("no previous build: this is the first build published under this root.")
    parts = [
        _note(f"compared with build {drift['previous_build']}: {drift.get('summary', '')}"),
        _inputs_table(drift["inputs"]),
        _table(_changed_rows(drift["rows"]))
        if _changed_rows(drift["rows"]).size
        else _note("rows per output: unchanged."),
    ]
    if "markets" in drift:
        parts.append(_keys_table(drift))
        for column in ("share", "price"):
            parts.append(f"<h3>Largest {column} changes ({drift['assumption']})</h3>")
            parts.append(_table(pd.DataFrame(drift[f"largest_{column}_changes"])))
    parts.append("<h3>Quarantine rates</h3>" + _table(_quarantine_frame(drift["quarantine"])))
    parts.append("<h3>Estimates then and now</h3>" + _table(_estimates_then_now(drift)))
    return "".join(parts)


def _inputs_table(inputs: dict[str, list[str]]) -> str:
    rows = [(kind, path) for kind in ("added", "gone", "changed") for path in inputs[kind]]
    if not rows:
        return _note("input files: none added, gone or changed.")
    return _table(pd.DataFrame(rows, columns=["input file", "path"]))


def _changed_rows(rows: list[dict[str, Any]]) -> pd.DataFrame:
    changed = [r for r in rows if r["before"] != r["after"]]
    return pd.DataFrame(
        [
            {
                "output": r["path"],
                "rows before": r["before"],
                "rows now": r["after"],
                "change": None if None in (r["before"], r["after"]) else r["after"] - r["before"],
            }
            for r in changed
        ]
    )


def _keys_table(drift: dict[str, Any]) -> str:
    rows = []
    for kind in ("markets", "products"):
        keys = drift[kind]
        rows.append(
            {
                "": kind,
                "before": keys["before"],
                "now": keys["after"],
                "added": keys["added_count"],
                "gone": keys["gone_count"],
                "names added": ", ".join(keys["added"]),
                "names gone": ", ".join(keys["gone"]),
            }
        )
    return _table(pd.DataFrame(rows))


def _quarantine_frame(rows: list[dict[str, Any]]) -> pd.DataFrame:
    return pd.DataFrame(
        [
            {
                "source": r["source"],
                "rate before": _percent(r["rate_before"]),
                "rate now": _percent(r["rate_after"]),
                "rows read before": r["rows_read_before"],
                "rows read now": r["rows_read_after"],
            }
            for r in rows
        ]
    )


def _estimates_then_now(drift: dict[str, Any]) -> pd.DataFrame:
    rows = [
        {
            "statistic": f"{e['assumption']} {e['method'].upper()} price coefficient",
            "before": _fixed(e["before"], 4),
            "now": _fixed(e["after"], 4),
        }
        for e in drift["quick_logit"]
    ]
    for name, label in (("partial_f", "classic"), ("partial_f_robust", "robust")):
        values = drift["first_stage"][name]
        rows.append(
            {
                "statistic": f"build first-stage F ({label})",
                "before": _f(values["before"]),
                "now": _f(values["after"]),
            }
        )
    return pd.DataFrame(rows)


def _cautions() -> str:
    items = [
        "Personal data: exports carry keyed-hash pseudonyms of loyalty cards, never the card "
        "ids; the warehouse still holds the raw receipt lines with card ids. Keep it under the "
        "data-use agreement and the data-protection law that applies.",
        "The estimates here are diagnostics of the data, not a demand model: they depend on "
        "the market-size assumption (compare the assumptions below) and on the quick "
        "specification named with them.",
        "Decisions on pricing or competition follow the analyst's own validated model and the "
        "rules that apply to them, not this report.",
    ]
    body = "<ul>" + "".join(f"<li>{html.escape(item)}</li>" for item in items) + "</ul>"
    return f'<section id="cautions" class="cautions">\n<h2>Cautions</h2>\n{body}\n</section>'


def _shares_body(ctx: BuildContext) -> str:
    histogram = report_data.share_histogram(ctx.con)
    names = sorted(set(histogram["assumption"])) if not histogram.empty else []
    return legend(names) + report_plots.share_distribution(histogram)


def _outside_share_body(ctx: BuildContext) -> str:
    bands = report_data.outside_share_bands(ctx.con)
    lines = report_data.outside_share_lines(ctx.con)
    names = sorted(set(bands["assumption"])) if not bands.empty else []
    note = _note("median and 10-90% band across markets per period; thin lines: each market")
    return legend(names) + report_plots.outside_share_over_time(bands, lines) + note


def _prices_body(ctx: BuildContext) -> str:
    # Prices do not depend on the market-size assumption, so the first one stands for all.
    first_assumption = next(iter(ctx.config.market_size))
    quantiles = report_data.price_quantiles(ctx.con, first_assumption)
    note = _note(
        f"prices in {price_unit(ctx.config)}; whiskers: lowest to highest market, box: "
        f"quartiles, white mark: median; the {report_data.MAX_PRODUCTS} best-selling products"
    )
    return note + report_plots.price_dispersion(quantiles, price_unit(ctx.config))


def _ledger_body(ctx: BuildContext) -> str:
    by_file = report_data.ledger_by_file(ctx.con)
    names, chart = report_plots.ledger_outcomes(by_file)
    shown, total = by_file["path"].nunique(), report_data.current_file_count(ctx.con)
    selection = (
        _note(f"showing the {shown} files with the most quarantined rows of {total} current files")
        if shown < total
        else ""
    )
    return (
        _table(report_data.ledger_totals(ctx.con))
        + _table(report_data.quarantine_reasons(ctx.con))
        + selection
        + legend(names)
        + chart
    )


def _zero_shares_body(ctx: BuildContext) -> str:
    policy = ctx.config.shares.zero_shares
    zeros = report_data.zero_sales_total(ctx.con)
    if zeros is None:
        counted = "no shelf-price file, so zero sales are not observed"
    elif policy == "drop":
        counted = f"{zeros:,} product-markets on the shelf without sales were dropped"
    else:
        counted = f"{zeros:,} product-markets on the shelf without sales were kept ({policy})"
    names, chart = report_plots.zero_shares(report_data.zero_share_counts(ctx.con))
    return _note(f"zero-share policy: {policy}; {counted}") + legend(names) + chart


def _instruments_body(ctx: BuildContext, inputs: ReportInputs) -> str:
    first_stage = ctx.facts.get("first_stage") or {}
    threshold = ctx.config.instruments.weak_instrument_f
    effects = ", ".join(first_stage.get("fixed_effects", [])) or "none"
    instruments = ", ".join(first_stage.get("instruments", [])) or "none"
    note = _note(
        f"partial F of the excluded instruments ({instruments}) in the regression of price on "
        "them, the numeric characteristics and the "
        f"fixed effects ({effects}): classic (homoskedastic) and heteroskedasticity-robust; "
        f"dashed line: F = {threshold:g} (Staiger & Stock 1997 rule of thumb)"
    )
    chart = report_plots.first_stage_strength(inputs.estimates, first_stage, threshold)
    return note + legend(["classic F", "robust F"]) + chart


def _sensitivity_body(ctx: BuildContext, inputs: ReportInputs) -> str:
    outside = report_data.mean_outside_share(ctx.con)
    return (
        _table(outside)
        + legend(["OLS", "IV"])
        + report_plots.market_size_sensitivity(outside, inputs.estimates)
    )


def _quick_logit_body(inputs: ReportInputs) -> str:
    return (
        _logit_note(inputs.estimates)
        + _estimates_table(inputs.estimates)
        + legend(["OLS", "IV"])
        + report_plots.elasticity_ranges(inputs.estimates)
    )


def _choices_body(ctx: BuildContext, summary: dict) -> str:
    facts = pd.DataFrame(
        {
            "item": [
                "occasions",
                "choosers",
                "rows (alternatives offered)",
                "alternatives per occasion (mean)",
                "holdout choosers",
                "holdout occasions",
            ],
            "value": [
                f"{summary['occasions']:,}",
                f"{summary['choosers']:,}",
                f"{summary['rows']:,}",
                _fixed(summary["alternatives_per_occasion"], 2),
                f"{summary['holdout_choosers']:,}",
                f"{summary['holdout_occasions']:,}",
            ],
        }
    )
    return (
        _table(facts)
        + "<h3>Alternatives per occasion</h3>"
        + report_plots.alternatives_chart(report_data.alternatives_per_occasion(ctx.con))
        + "<h3>Chosen shares</h3>"
        + report_plots.chosen_shares_chart(report_data.chosen_shares(ctx.con))
        + "<h3>Loyalty</h3>"
        + report_plots.loyalty_chart(report_data.loyalty_distribution(ctx.con))
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
                "prices in",
                "quantities in",
            ],
            "value": [
                inputs.build_id,
                inputs.built_at,
                __version__,
                ctx.config.project.name,
                ctx.config.config_hash()[:16],
                ", ".join(ctx.config.market_size),
                price_unit(ctx.config),
                f"equivalent units of {unit_name(ctx.config)}",
            ],
        }
    )
    return _table(rows)


def _warnings_box(ctx: BuildContext) -> str:
    """Every warning of the build, then the input files behind them."""
    body = _warnings(ctx.warnings) + _attention_table(ctx)
    return f'<section id="warnings" class="warnings">\n<h2>Warnings</h2>\n{body}\n</section>'


def _warnings(warnings: Sequence[str]) -> str:
    if not warnings:
        return _note("no warnings")
    items = "".join(f'<li class="warning">{html.escape(w)}</li>' for w in warnings)
    return f"<ul>{items}</ul>"


def _attention_table(ctx: BuildContext) -> str:
    files = files_needing_attention(ctx.con, ctx.config)
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
                "first-stage F (classic)": _f(e.first_stage_f),
                "first-stage F (robust)": _f(e.first_stage_f_robust),
            }
            for e in estimates
        ]
    )
    return _table(rows) if estimates else _note("too few rows for a quick logit estimate")


def _logit_note(estimates: Sequence[LogitEstimate]) -> str:
    first = estimates[0] if estimates else None
    regressors = ", ".join(first.names) if first else "-"
    effects = ", ".join(first.fixed_effects) if first and first.fixed_effects else "none"
    return _note(
        "ln s_j - ln s_0 regressed by OLS and by two-stage least squares (fringe and zero "
        f"shares left out). Regressors: {regressors}. Fixed effects: {effects} "
        "(instruments.first_stage_fixed_effects). The IV's first-stage F is its own, on the "
        "same rows, regressors and effects: classic (homoskedastic) and heteroskedasticity-"
        "robust. Own-price elasticity of the logit: -alpha p (1 - s), alpha = -(price "
        "coefficient). A diagnostic, not the study's model."
    )


def _f(value: float | None) -> str:
    return "-" if value is None else f"{value:,.1f}"


def _fixed(value: float | None, decimals: int) -> str:
    return "-" if value is None else f"{value:.{decimals}f}"


def _percent(value: float | None) -> str:
    return "-" if value is None else f"{value:.3%}"


def _table(frame: pd.DataFrame) -> str:
    if frame.empty:
        return _note("none")
    table = frame.to_html(index=False, border=0, escape=True, na_rep="")
    return f'<div class="scroll">{table}</div>'


def _section(title: str, body: str, anchor: str = "") -> str:
    identifier = f' id="{anchor}"' if anchor else ""
    return f"<section{identifier}>\n<h2>{html.escape(title)}</h2>\n{body}\n</section>"


def _note(text: str) -> str:
    return f'<p class="note">{html.escape(text)}</p>'
