"""The report's figures, drawn with matplotlib's object API (Agg canvas, no global pyplot state)."""

from __future__ import annotations

import io
from collections.abc import Sequence

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from demandprep.export.quick_logit import LogitEstimate

WIDTH, HEIGHT, DPI = 8.0, 4.0, 100
METHODS = ("ols", "iv")


def png_bytes(figure: Figure) -> bytes:
    """The figure as PNG bytes, with no time stamp or software tag in the file."""
    FigureCanvasAgg(figure)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=DPI, metadata={"Software": None})
    return buffer.getvalue()


def share_distribution(histogram: pd.DataFrame) -> Figure:
    """Histogram of inside shares on a log10 scale, one outline per assumption."""
    figure, axes = _figure("Share distribution (inside products)")
    for assumption, rows in histogram.groupby("assumption", sort=True):
        axes.step(rows["log10_share"], rows["products"], where="post", label=str(assumption))
    axes.set_xlabel("log10(share)")
    axes.set_ylabel("product-market rows")
    return _finish(figure, axes, histogram.empty)


def outside_share_over_time(bands: pd.DataFrame, lines: pd.DataFrame) -> Figure:
    """Outside share by market over time: median and 10-90% band per assumption, and markets."""
    figure, axes = _figure("Outside share by market over time")
    for index, (assumption, rows) in enumerate(bands.groupby("assumption", sort=True)):
        color = f"C{index}"
        axes.plot(rows["period_start"], rows["p50"], color=color, label=f"{assumption} median")
        axes.fill_between(rows["period_start"], rows["p10"], rows["p90"], color=color, alpha=0.2)
        for _, market in lines[lines["assumption"] == assumption].groupby("geography"):
            axes.plot(
                market["period_start"], market["outside_share"], color=color, lw=0.5, alpha=0.5
            )
    axes.set_ylabel("outside share")
    axes.set_ylim(0, 1)
    figure.autofmt_xdate()
    return _finish(figure, axes, bands.empty)


def price_dispersion(quantiles: pd.DataFrame) -> Figure:
    """Box plot of each product's price across markets (range, quartiles, median)."""
    figure, axes = _figure("Price dispersion by product", height=max(HEIGHT, 0.25 * len(quantiles)))
    stats = [
        {
            "label": row.product,
            "whislo": row.low,
            "q1": row.q1,
            "med": row.median,
            "q3": row.q3,
            "whishi": row.high,
            "fliers": [],
        }
        for row in quantiles.itertuples()
    ]
    if stats:
        axes.bxp(stats, orientation="horizontal", showfliers=False)
        axes.tick_params(axis="y", labelsize=7)
    axes.set_xlabel("price per equivalent unit")
    return _finish(figure, axes, not stats, legend=False)


def ledger_outcomes(by_file: pd.DataFrame) -> Figure:
    """Per input file: accepted rows, and quarantined rows stacked by reason (own scale)."""
    files = list(dict.fromkeys(by_file["path"]))
    figure = Figure(figsize=(WIDTH, max(HEIGHT, 0.6 + 0.22 * len(files))))
    accepted_axes, quarantined_axes = figure.subplots(1, 2, sharey=True)
    names = [path.rsplit("/", 1)[-1] for path in files]
    positions = np.arange(len(files))
    accepted = by_file[by_file["outcome"] == "accepted"]
    accepted_axes.barh(positions, _counts(accepted, files), color="0.7")
    accepted_axes.set_title("accepted rows", fontsize=10)
    left = np.zeros(len(files))
    reasons = by_file[by_file["outcome"] != "accepted"]
    for index, (reason, rows) in enumerate(reasons.groupby("outcome", sort=True)):
        counts = _counts(rows, files)
        quarantined_axes.barh(positions, counts, left=left, label=str(reason), color=f"C{index}")
        left += counts
    quarantined_axes.set_title("quarantined rows by reason", fontsize=10)
    accepted_axes.set_yticks(positions, names, fontsize=7)
    accepted_axes.invert_yaxis()
    figure.suptitle("Ledger: accepted vs quarantined rows per file")
    if reasons.empty:
        quarantined_axes.text(
            0.5, 0.5, "none", ha="center", va="center", transform=quarantined_axes.transAxes
        )
    else:
        quarantined_axes.legend(fontsize=7, loc="lower right")
    if by_file.empty:
        accepted_axes.text(
            0.5, 0.5, "no data", ha="center", va="center", transform=accepted_axes.transAxes
        )
    figure.tight_layout()
    return figure


def _counts(rows: pd.DataFrame, files: list[str]) -> np.ndarray:
    return rows.groupby("path")["rows"].sum().reindex(files, fill_value=0).to_numpy(float)


def zero_shares(counts: pd.DataFrame) -> Figure:
    """Zero-share product rows per period: before the policy and per assumption after it."""
    figure, axes = _figure("Zero-share product rows per period")
    for series, rows in counts.groupby("series", sort=False):
        axes.plot(rows["period_start"], rows["rows"], marker="o", label=str(series))
    axes.set_ylabel("product-market rows with zero share")
    axes.set_ylim(bottom=0)
    figure.autofmt_xdate()
    return _finish(figure, axes, counts.empty)


def first_stage_strength(
    estimates: Sequence[LogitEstimate], build_first_stage: dict, threshold: float
) -> Figure:
    """First-stage F of the price instruments: the build's own and the quick IV's per assumption."""
    figure, axes = _figure("First-stage strength of the price instruments")
    labels, values = [], []
    if build_first_stage.get("partial_f") is not None:
        count = len(build_first_stage.get("instruments", []))
        labels.append(f"build first stage\n({count} instruments)")
        values.append(build_first_stage["partial_f"])
    for estimate in estimates:
        if estimate.method == "iv" and estimate.first_stage_f is not None:
            labels.append(f"quick IV: {estimate.assumption}")
            values.append(estimate.first_stage_f)
    axes.bar(labels, values, color="C0")
    axes.axhline(
        threshold, color="C3", ls="--", label=f"weak-instrument threshold F = {threshold:g}"
    )
    axes.set_ylabel("partial F")
    axes.tick_params(axis="x", labelsize=8)
    return _finish(figure, axes, not values)


def market_size_sensitivity(outside: pd.DataFrame, estimates: Sequence[LogitEstimate]) -> Figure:
    """Per assumption: mean outside share, and the quick logit price coefficient by OLS and IV."""
    figure = Figure(figsize=(WIDTH, HEIGHT))
    left, right = figure.subplots(1, 2)
    assumptions = list(outside["assumption"])
    left.bar(assumptions, outside["mean_outside_share"], color="C0")
    left.set_title("mean outside share")
    left.set_ylim(0, 1)
    positions = np.arange(len(assumptions))
    for offset, method in zip((-0.2, 0.2), METHODS, strict=True):
        found = {e.assumption: e for e in estimates if e.method == method}
        coef = [found[a].price_coefficient if a in found else np.nan for a in assumptions]
        error = [1.96 * found[a].price_std_error if a in found else 0.0 for a in assumptions]
        right.bar(positions + offset, coef, width=0.4, yerr=error, label=method.upper())
    right.set_xticks(positions, assumptions)
    right.axhline(0, color="0.3", lw=0.8)
    right.set_title("price coefficient (95% CI)")
    right.legend(fontsize=8)
    figure.suptitle("Market-size sensitivity")
    figure.tight_layout()
    return figure


def elasticity_ranges(estimates: Sequence[LogitEstimate]) -> Figure:
    """Median own-price elasticity with its 10-90% range, per assumption and method."""
    figure, axes = _figure("Implied own-price elasticities  -alpha p (1 - s)")
    labels = [f"{e.assumption} {e.method.upper()}" for e in estimates]
    medians = np.array([e.elasticity_median for e in estimates])
    low = medians - np.array([e.elasticity_p10 for e in estimates])
    high = np.array([e.elasticity_p90 for e in estimates]) - medians
    if labels:
        axes.errorbar(medians, labels, xerr=[low, high], fmt="o", capsize=4)
    axes.axvline(0, color="0.3", lw=0.8)
    axes.set_xlabel("elasticity (median, 10th-90th percentile)")
    return _finish(figure, axes, not labels, legend=False)


def _figure(title: str, height: float = HEIGHT) -> tuple[Figure, Axes]:
    figure = Figure(figsize=(WIDTH, height))
    axes = figure.subplots()
    axes.set_title(title)
    return figure, axes


def _finish(figure: Figure, axes: Axes, empty: bool, legend: bool = True) -> Figure:
    if empty:
        axes.text(0.5, 0.5, "no data", ha="center", va="center", transform=axes.transAxes)
    elif legend and axes.get_legend_handles_labels()[0]:
        axes.legend(fontsize=8)
    figure.tight_layout()
    return figure
