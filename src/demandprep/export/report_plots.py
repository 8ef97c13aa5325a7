"""The report's charts as inline SVG text, drawn with our own `svg` module from small summaries."""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd

from demandprep.export import svg
from demandprep.export.quick_logit import LogitEstimate
from demandprep.export.svg import Bar, Line, Segment, Span

METHODS = ("ols", "iv")


def share_distribution(histogram: pd.DataFrame) -> str:
    """Inside shares in tenth-of-a-decade bins of log10(share), one line per assumption."""
    bins = []
    if not histogram.empty:
        # every tenth of a decade from the lowest to the highest bin, empty ones included
        first, last = (
            round(float(v) * 10)
            for v in (histogram["log10_share"].min(), histogram["log10_share"].max())
        )
        bins = [step / 10 for step in range(first, last + 1)]
    lines = []
    for index, (assumption, rows) in enumerate(histogram.groupby("assumption", sort=True)):
        counts = {
            round(float(b) * 10) / 10: n
            for b, n in zip(rows["log10_share"], rows["products"], strict=True)
        }
        lines.append(Line(str(assumption), [float(counts.get(b, 0)) for b in bins], index))
    labels = [f"{b:.1f}" for b in bins]
    return svg.line_chart(labels, lines, "share distribution", "product-market rows") + _axis_note(
        "x: log10(share)"
    )


def outside_share_over_time(bands: pd.DataFrame, lines: pd.DataFrame) -> str:
    """Median and 10-90% band of market outside shares per assumption; thin lines per market."""
    periods = sorted(set(bands["period_start"])) if not bands.empty else []
    drawn = []
    for index, (assumption, rows) in enumerate(bands.groupby("assumption", sort=True)):
        by_period = rows.set_index("period_start")
        lower = [float(by_period["p10"].get(p, 0.0)) for p in periods]
        upper = [float(by_period["p90"].get(p, 0.0)) for p in periods]
        median = [float(by_period["p50"].get(p, 0.0)) for p in periods]
        drawn.append(Line(str(assumption), median, index, band=(lower, upper)))
        markets = lines[lines["assumption"] == assumption]
        for _, market in markets.groupby("geography", sort=True):
            values = dict(zip(market["period_start"], market["outside_share"], strict=True))
            drawn.append(Line("", [values.get(p) for p in periods], index, thin=True))
    labels = [_date(p) for p in periods]
    return svg.line_chart(
        labels, drawn, "outside share by market over time", "outside share", bounds=(0.0, 1.0)
    )


def price_dispersion(quantiles: pd.DataFrame, unit: str) -> str:
    """Each product's price across markets: range as whiskers, quartiles as a box."""
    spans = [
        Span(str(row.product), row.low, row.median, row.high, box=(row.q1, row.q3))
        for row in quantiles.itertuples()
    ]
    return svg.range_chart(spans, "price dispersion by product", f"price ({unit})")


def ledger_outcomes(by_file: pd.DataFrame) -> tuple[list[str], str]:
    """Per input file: quarantined rows stacked by reason, with the file's accepted rows named.

    Quarantined rows get the scale to themselves (beside accepted rows they would not show).
    Returns the legend's names (the reasons) and the chart."""
    files = list(dict.fromkeys(by_file["path"]))
    reasons = sorted(set(by_file.loc[by_file["outcome"] != "accepted", "outcome"]))
    bars = []
    for path in files:
        rows = by_file[by_file["path"] == path]
        counts = dict(zip(rows["outcome"], rows["rows"], strict=True))
        segments = tuple(
            Segment(float(counts[name]), index)
            for index, name in enumerate(reasons)
            if counts.get(name, 0)
        )
        quarantined = int(sum(counts.get(name, 0) for name in reasons))
        accepted = int(counts.get("accepted", 0))
        note = f"{quarantined:,} of {quarantined + accepted:,} rows"
        bars.append(Bar(path.rsplit("/", 1)[-1], segments, note=note))
    chart = svg.hbar_chart(bars, "ledger per file", "quarantined rows")
    return reasons, chart


def zero_shares(counts: pd.DataFrame) -> tuple[list[str], str]:
    """Zero-share product rows per period: on the shelf without sales, and kept per assumption."""
    periods = sorted(set(counts["period_start"])) if not counts.empty else []
    names = list(dict.fromkeys(counts["series"])) if not counts.empty else []
    series = []
    for name in names:
        rows = counts[counts["series"] == name]
        values = dict(zip(rows["period_start"], rows["rows"], strict=True))
        series.append([float(values.get(p, 0)) for p in periods])
    chart = svg.column_chart(
        [_date(p) for p in periods], series, "zero-share counts", "product-market rows"
    )
    return names, chart


def first_stage_strength(
    estimates: Sequence[LogitEstimate], build_first_stage: dict, threshold: float
) -> str:
    """First-stage F, classic and robust, of the build's check and of each quick IV, log scale."""
    bars: list[Bar] = []
    rows = [("build first stage", build_first_stage.get("partial_f"), 0)]
    rows.append(("build first stage, robust", build_first_stage.get("partial_f_robust"), 1))
    for estimate in estimates:
        if estimate.method == "iv":
            rows.append((f"quick IV {estimate.assumption}", estimate.first_stage_f, 0))
            rows.append(
                (f"quick IV {estimate.assumption}, robust", estimate.first_stage_f_robust, 1)
            )
    for label, value, series in rows:
        if value is not None and value > 0:
            bars.append(Bar(label, (Segment(float(value), series),), note=f"F = {value:,.1f}"))
    return svg.hbar_chart(
        bars,
        "first-stage strength",
        "partial F",
        log=True,
        reference=(threshold, f"F = {threshold:g}"),
    )


def market_size_sensitivity(outside: pd.DataFrame, estimates: Sequence[LogitEstimate]) -> str:
    """Per assumption: mean outside share (bars) and the price coefficient with its 95% range."""
    bars = [
        Bar(str(row.assumption), (Segment(float(row.mean_outside_share), 0),))
        for row in outside.itertuples()
    ]
    spans = [
        Span(
            f"{e.assumption} {e.method.upper()}",
            e.price_coefficient - 1.96 * e.price_std_error,
            e.price_coefficient,
            e.price_coefficient + 1.96 * e.price_std_error,
            series=METHODS.index(e.method),
        )
        for e in estimates
    ]
    return svg.hbar_chart(bars, "mean outside share", "mean outside share") + svg.range_chart(
        spans, "market-size sensitivity", "price coefficient (95% interval)", zero_line=True
    )


def elasticity_ranges(estimates: Sequence[LogitEstimate]) -> str:
    """Median own-price elasticity with its 10-90% range, per assumption and method."""
    spans = [
        Span(
            f"{e.assumption} {e.method.upper()}",
            e.elasticity_p10,
            e.elasticity_median,
            e.elasticity_p90,
            series=METHODS.index(e.method),
        )
        for e in estimates
    ]
    return svg.range_chart(
        spans, "own-price elasticities", "elasticity (median, 10th-90th percentile)", True
    )


def alternatives_chart(per_occasion: pd.DataFrame) -> str:
    """Occasions by the number of alternatives they offer."""
    return svg.column_chart(
        [str(v) for v in per_occasion["alternatives"]],
        [[float(v) for v in per_occasion["occasions"]]],
        "alternatives per occasion",
        "occasions",
    ) + _axis_note("x: alternatives in the occasion's rows")


def chosen_shares_chart(shares: pd.DataFrame) -> str:
    """Share of occasions choosing each alternative."""
    bars = [
        Bar(str(row.alternative), (Segment(float(row.share), 0),), note=f"{row.share:.1%}")
        for row in shares.itertuples()
    ]
    return svg.hbar_chart(bars, "chosen shares", "share of occasions")


def loyalty_chart(distribution: pd.DataFrame) -> str:
    """Rows per tenth of smoothed loyalty."""
    return svg.column_chart(
        [f"{low:.1f}" for low in distribution["low"]],
        [[float(v) for v in distribution["rows"]]],
        "loyalty distribution",
        "choice rows",
    ) + _axis_note("x: smoothed loyalty, lower edge of each tenth (burn-in left out)")


def _axis_note(text: str) -> str:
    return f'<p class="axis-note">{text}</p>'


def _date(value: object) -> str:
    return str(value)[:10]  # dates and timestamps alike: YYYY-MM-DD
