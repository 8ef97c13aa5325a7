"""A small SVG chart maker for the report: horizontal bars, columns, lines and ranges.

Charts are plain SVG text (no scripts, no fonts, no images), sized by a viewBox so they shrink
with the page; every number is written with fixed decimals so the same data gives the same
bytes. Colours come from the report's own palette, in order.
"""

from __future__ import annotations

import html
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

PALETTE = ("#1f5f5b", "#c8862a", "#7a3b69", "#3d5a80", "#8a9a3b", "#b5523b", "#5c6b73")
INK = "#1d2a2a"
GRID = "#e3e6e4"
ALERT = "#b5523b"
WIDTH = 720
CHAR_WIDTH = 6.4  # average advance of the 12 px label font, for label margins
ROW_HEIGHT = 22


def colour(index: int) -> str:
    """The palette colour of a series by its position."""
    return PALETTE[index % len(PALETTE)]


@dataclass(frozen=True)
class Segment:
    """One piece of a horizontal bar: a value and its series (legend) index."""

    value: float
    series: int


@dataclass(frozen=True)
class Bar:
    """One labelled horizontal bar made of stacked segments."""

    label: str
    segments: tuple[Segment, ...]
    note: str = ""


@dataclass(frozen=True)
class Span:
    """One labelled range: whiskers from low to high, an optional box, a middle mark."""

    label: str
    low: float
    middle: float
    high: float
    box: tuple[float, float] | None = None
    series: int = 0


@dataclass(frozen=True)
class Line:
    """One series of a line chart; `band` is an optional (lower, upper) list per point."""

    label: str
    values: Sequence[float | None]
    series: int = 0
    band: tuple[Sequence[float], Sequence[float]] | None = None
    thin: bool = False


@dataclass
class Canvas:
    """SVG elements on a width x height area with the plot inside the margins."""

    height: float
    left: float = 60
    right: float = 24
    top: float = 14
    bottom: float = 36
    width: float = WIDTH
    parts: list[str] = field(default_factory=list)

    @property
    def plot_width(self) -> float:
        return self.width - self.left - self.right

    @property
    def plot_height(self) -> float:
        return self.height - self.top - self.bottom

    def add(self, element: str) -> None:
        self.parts.append(element)

    def text(self, x: float, y: float, content: str, anchor: str = "start", cls: str = "") -> None:
        css = f' class="{cls}"' if cls else ""
        self.add(
            f'<text x="{_n(x)}" y="{_n(y)}" text-anchor="{anchor}"{css}>'
            f"{html.escape(content)}</text>"
        )

    def line(self, x1: float, y1: float, x2: float, y2: float, stroke: str, dash: bool = False):
        pattern = ' stroke-dasharray="5 4"' if dash else ""
        self.add(
            f'<line x1="{_n(x1)}" y1="{_n(y1)}" x2="{_n(x2)}" y2="{_n(y2)}" '
            f'stroke="{stroke}"{pattern}/>'
        )

    def rect(self, x: float, y: float, w: float, h: float, fill: str) -> None:
        self.add(
            f'<rect x="{_n(x)}" y="{_n(y)}" width="{_n(max(w, 0))}" height="{_n(max(h, 0))}" '
            f'fill="{fill}"/>'
        )

    def svg(self, label: str) -> str:
        title = html.escape(label)
        return (
            f'<svg class="chart" role="img" aria-label="{title}" '
            'xmlns="http://www.w3.org/2000/svg" '
            f'viewBox="0 0 {_n(self.width)} {_n(self.height)}" '
            f'width="{_n(self.width)}" height="{_n(self.height)}">'
            f"<title>{title}</title>" + "".join(self.parts) + "</svg>"
        )


@dataclass(frozen=True)
class Scale:
    """A linear or log10 map from data values to pixels."""

    low: float
    high: float
    start: float
    end: float
    log: bool = False

    def __call__(self, value: float) -> float:
        low, high, value = (
            (math.log10(self.low), math.log10(self.high), math.log10(max(value, self.low)))
            if self.log
            else (self.low, self.high, value)
        )
        share = 0.0 if high == low else (value - low) / (high - low)
        return self.start + share * (self.end - self.start)

    def ticks(self) -> list[float]:
        if self.log:
            first, last = math.floor(math.log10(self.low)), math.ceil(math.log10(self.high))
            return [10.0**power for power in range(first, last + 1)]
        return nice_ticks(self.low, self.high)


def legend(names: Sequence[str]) -> str:
    """An HTML legend placed above a chart (never over its bars)."""
    items = []
    for index, name in enumerate(names):
        fill = colour(index)
        items.append(
            f'<span class="key"><span class="swatch" style="background:{fill}"></span>'
            f"{html.escape(name)}</span>"
        )
    return f'<p class="legend">{"".join(items)}</p>' if items else ""


def hbar_chart(
    bars: Sequence[Bar],
    label: str,
    axis_label: str,
    log: bool = False,
    reference: tuple[float, str] | None = None,
) -> str:
    """Horizontal (stacked) bars, one row per label; an optional dashed reference line."""
    totals = [sum(s.value for s in bar.segments) for bar in bars]
    values = [v for v in totals if v > 0] + ([reference[0]] if reference else [])
    canvas = Canvas(
        height=40 + ROW_HEIGHT * max(len(bars), 1) + 30, left=_label_room(bars), right=120
    )
    if not values:
        return _empty(canvas, label)
    # Why half a decade: the lowest value (the reference line, say F = 10) never sits on the
    # axis's left edge, where it would be hard to see.
    low = 10.0 ** math.floor(math.log10(min(values)) - 0.5) if log else 0.0
    high = 10.0 ** math.ceil(math.log10(max(values))) if log else max(values) * 1.05
    scale = _scale(low, high, canvas, log)
    _x_axis(canvas, scale, axis_label, log)
    for row, (bar, total) in enumerate(zip(bars, totals, strict=True)):
        y = canvas.top + row * ROW_HEIGHT
        canvas.text(canvas.left - 6, y + 15, _short(bar.label, canvas.left), "end", "label")
        start = low if log else 0.0
        for segment in bar.segments:
            x0, x1 = scale(start), scale(start + segment.value)
            canvas.rect(x0, y + 4, x1 - x0, ROW_HEIGHT - 8, colour(segment.series))
            start += segment.value
        if bar.note or total:
            text = bar.note or _number(total)
            canvas.text(
                min(scale(max(total, low)) + 4, canvas.width - 4), y + 15, text, cls="value"
            )
    if reference:
        x = scale(reference[0])
        canvas.line(x, canvas.top - 4, x, canvas.top + canvas.plot_height, ALERT, dash=True)
        canvas.text(x + 4, canvas.top + canvas.plot_height - 4, reference[1], cls="alert")
    return canvas.svg(label)


def column_chart(
    categories: Sequence[str], series: Sequence[Sequence[float]], label: str, axis_label: str
) -> str:
    """Vertical grouped columns: one group per category, one column per series."""
    canvas = Canvas(height=260, bottom=54, right=44)
    values = [v for values in series for v in values]
    if not categories or not values:
        return _empty(canvas, label)
    top = max(values) * 1.05 if max(values) > 0 else 1.0
    scale = Scale(0.0, top, canvas.top + canvas.plot_height, canvas.top)
    _y_axis(canvas, scale, axis_label)
    group = canvas.plot_width / len(categories)
    width = group * 0.8 / max(len(series), 1)
    every = max(1, math.ceil(len(categories) * 60 / canvas.plot_width))
    for index, category in enumerate(categories):
        x = canvas.left + index * group + group * 0.1
        for number, values in enumerate(series):
            top = scale(values[index])
            canvas.rect(x + number * width, top, width - 1, scale(0.0) - top, colour(number))
        if index % every == 0:
            canvas.text(x + group * 0.4, canvas.height - 36, category, "middle", "label")
    return canvas.svg(label)


def line_chart(
    categories: Sequence[str],
    lines: Sequence[Line],
    label: str,
    axis_label: str,
    bounds: tuple[float, float] | None = None,
) -> str:
    """Lines over ordered categories (e.g. periods), with optional shaded bands."""
    canvas = Canvas(height=280, bottom=54, right=44)
    values = [v for line in lines for v in line.values if v is not None]
    for line in lines:
        if line.band:
            values += list(line.band[0]) + list(line.band[1])
    if not categories or not values:
        return _empty(canvas, label)
    low, high = bounds or (min(min(values), 0.0), max(values) * 1.05 or 1.0)
    scale = Scale(low, high, canvas.top + canvas.plot_height, canvas.top)
    _y_axis(canvas, scale, axis_label)
    step = canvas.plot_width / max(len(categories) - 1, 1)

    def x_of(index: int) -> float:
        return canvas.left + index * step

    for line in lines:
        if line.band:
            lower, upper = line.band
            points = [(x_of(i), scale(v)) for i, v in enumerate(upper)]
            points += [(x_of(i), scale(v)) for i, v in reversed(list(enumerate(lower)))]
            canvas.add(
                f'<polygon points="{_points(points)}" fill="{colour(line.series)}" '
                'fill-opacity="0.16"/>'
            )
    for line in lines:
        points = [(x_of(i), scale(v)) for i, v in enumerate(line.values) if v is not None]
        stroke = 'stroke-width="0.8" stroke-opacity="0.55"' if line.thin else 'stroke-width="2"'
        canvas.add(
            f'<polyline points="{_points(points)}" fill="none" stroke="{colour(line.series)}" '
            f"{stroke}/>"
        )
    every = max(1, math.ceil(len(categories) * 70 / canvas.plot_width))
    for index, category in enumerate(categories):
        if index % every == 0:
            canvas.text(x_of(index), canvas.height - 36, category, "middle", "label")
    return canvas.svg(label)


def range_chart(spans: Sequence[Span], label: str, axis_label: str, zero_line: bool = False) -> str:
    """One row per span: a whisker from low to high, a box when given, a mark at the middle."""
    canvas = Canvas(
        height=40 + ROW_HEIGHT * max(len(spans), 1) + 30, left=_label_room(spans), right=44
    )
    values = [v for s in spans for v in (s.low, s.middle, s.high) if math.isfinite(v)]
    if not values:
        return _empty(canvas, label)
    low, high = min(values + ([0.0] if zero_line else [])), max(values + [0.0] * zero_line)
    pad = (high - low) * 0.05 or 1.0
    scale = _scale(low - pad, high + pad, canvas, False)
    _x_axis(canvas, scale, axis_label, False)
    if zero_line:
        canvas.line(scale(0.0), canvas.top, scale(0.0), canvas.top + canvas.plot_height, INK)
    for row, span in enumerate(spans):
        y = canvas.top + row * ROW_HEIGHT + ROW_HEIGHT / 2
        tone = colour(span.series)
        canvas.text(canvas.left - 6, y + 4, _short(span.label, canvas.left), "end", "label")
        canvas.line(scale(span.low), y, scale(span.high), y, tone)
        if span.box:
            canvas.rect(
                scale(span.box[0]), y - 6, scale(span.box[1]) - scale(span.box[0]), 12, tone
            )
            canvas.line(scale(span.middle), y - 7, scale(span.middle), y + 7, "#ffffff")
        else:
            canvas.add(f'<circle cx="{_n(scale(span.middle))}" cy="{_n(y)}" r="4" fill="{tone}"/>')
    return canvas.svg(label)


def nice_ticks(low: float, high: float, count: int = 5) -> list[float]:
    """Round tick values covering [low, high] (steps of 1, 2 or 5 times a power of ten)."""
    if high <= low:
        return [low]
    raw = (high - low) / count
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    first = math.ceil(low / step) * step
    return [first + i * step for i in range(int((high - first) / step + 1e-9) + 1)]


def _scale(low: float, high: float, canvas: Canvas, log: bool) -> Scale:
    return Scale(low, high, canvas.left, canvas.left + canvas.plot_width, log)


def _x_axis(canvas: Canvas, scale: Scale, axis_label: str, log: bool) -> None:
    bottom = canvas.top + canvas.plot_height
    for tick in scale.ticks():
        x = scale(tick)
        canvas.line(x, canvas.top, x, bottom, GRID)
        canvas.text(x, bottom + 14, _number(tick), "middle", "tick")
    canvas.line(canvas.left, bottom, canvas.left + canvas.plot_width, bottom, INK)
    suffix = " (log scale)" if log else ""
    canvas.text(
        canvas.left + canvas.plot_width / 2, canvas.height - 4, axis_label + suffix, "middle"
    )


def _y_axis(canvas: Canvas, scale: Scale, axis_label: str) -> None:
    for tick in scale.ticks():
        y = scale(tick)
        canvas.line(canvas.left, y, canvas.left + canvas.plot_width, y, GRID)
        canvas.text(canvas.left - 6, y + 4, _number(tick), "end", "tick")
    canvas.line(canvas.left, canvas.top, canvas.left, canvas.top + canvas.plot_height, INK)
    canvas.add(
        f'<text transform="translate(14 {_n(canvas.top + canvas.plot_height / 2)}) rotate(-90)" '
        f'text-anchor="middle">{html.escape(axis_label)}</text>'
    )


def _empty(canvas: Canvas, label: str) -> str:
    canvas.height = 60
    canvas.text(canvas.width / 2, 34, "no data", "middle", "label")
    return canvas.svg(label)


def _label_room(rows: Sequence[Bar] | Sequence[Span]) -> float:
    longest = max((len(row.label) for row in rows), default=4)
    return min(40 + CHAR_WIDTH * longest, 260)


def _short(text: str, room: float) -> str:
    fits = int((room - 12) / CHAR_WIDTH)
    return text if len(text) <= fits else text[: max(fits - 1, 1)] + "…"


def _number(value: float) -> str:
    """A tick or value label: thousands separated, at most three significant decimals."""
    if value == 0:
        return "0"
    if abs(value) >= 1000 or float(value).is_integer():
        return f"{value:,.0f}"
    if abs(value) >= 1:
        return f"{value:.2f}".rstrip("0").rstrip(".")
    return f"{value:.3g}"


def _points(points: Sequence[tuple[float, float]]) -> str:
    return " ".join(f"{_n(x)},{_n(y)}" for x, y in points)


def _n(value: float) -> str:
    """A coordinate with one decimal: short, and the same text for the same value."""
    text = f"{value:.1f}"
    return text[:-2] if text.endswith(".0") else text
