"""Seeded faults injected into a small share of receipt sale lines, one fault per line.

Kinds (names used in truth.json):
- bad_number: qty, line_value or discount_value is not a number ("1.5x", "12..40", ...)
- bad_timestamp: scanned_at is not a valid time ("2024-13-45 25:61:00", ...)
- missing_field: ticket_no or item_code is empty
- unknown_sku: item_code not in the catalogue
- extra_field: the line has one delimiter-separated field too many
- nonpositive_qty: a sale with qty 0 or negative
- negative_sale_value: a sale with a negative line_value
- duplicate_line: a clean line (same ticket_no and row_no) re-sent in the next day's file
bad_number, bad_timestamp and extra_field cannot exist in a typed Parquet drop and are skipped
there. No fault adds quotes or line breaks, so a CSV reader loses only the faulted line.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl

FAULT_KINDS = (
    "bad_number",
    "bad_timestamp",
    "missing_field",
    "unknown_sku",
    "extra_field",
    "nonpositive_qty",
    "negative_sale_value",
    "duplicate_line",
)
TEXT_ONLY_KINDS = ("bad_number", "bad_timestamp", "extra_field")
BAD_NUMBERS = ("1.5x", "12..40", "--2", "one", "N.A.")
NUMBER_COLUMNS = ("qty", "line_value", "discount_value")


@dataclass(frozen=True)
class FaultedDay:
    """A day's lines after faults, the clean lines to re-send tomorrow and the counts by kind."""

    frame: pl.DataFrame
    resend: pl.DataFrame
    counts: dict[str, int]


def enabled_kinds(receipt_format: str, has_next_day: bool) -> tuple[str, ...]:
    """Fault kinds possible for this format (no duplicates on the last day: no next file)."""
    kinds = [k for k in FAULT_KINDS if receipt_format != "parquet" or k not in TEXT_ONLY_KINDS]
    if not has_next_day:
        kinds.remove("duplicate_line")
    return tuple(kinds)


def inject_faults(
    frame: pl.DataFrame, rate: float, kinds: tuple[str, ...], rng: np.random.Generator
) -> FaultedDay:
    """Corrupt about rate x (sale lines) lines, each with one kind drawn uniformly from kinds."""
    sales = np.nonzero((frame["line_type"] == "sale").to_numpy())[0]
    n_faults = int(rng.binomial(len(sales), rate)) if kinds else 0
    rows = np.sort(rng.choice(sales, size=n_faults, replace=False))
    kind_of = rng.integers(0, len(kinds), size=n_faults)
    columns = {name: frame[name].clone() for name in frame.columns}
    counts = dict.fromkeys(kinds, 0)
    resend_rows = np.zeros(0, dtype=np.int64)
    for k, kind in enumerate(kinds):
        hit = rows[kind_of == k]
        counts[kind] = len(hit)
        if kind == "duplicate_line":
            resend_rows = hit  # copied before corruption below touches other rows only
        elif len(hit):
            _CORRUPT[kind](columns, hit, rng)
    resend = frame[resend_rows.tolist()] if len(resend_rows) else frame.clear()
    return FaultedDay(pl.DataFrame(columns), resend, counts)


def _set(columns: dict[str, pl.Series], name: str, rows: np.ndarray, values: list[str]) -> None:
    columns[name].scatter(rows.tolist(), values)


def _bad_number(columns, rows, rng) -> None:
    which = rng.integers(0, len(NUMBER_COLUMNS), size=len(rows))
    texts = rng.choice(BAD_NUMBERS, size=len(rows)).tolist()
    for c, name in enumerate(NUMBER_COLUMNS):
        picked = which == c
        if picked.any():
            _set(columns, name, rows[picked], [t for t, p in zip(texts, picked, strict=True) if p])


def _bad_timestamp(columns, rows, rng) -> None:
    stamps = columns["scanned_at"].gather(rows.tolist()).to_list()
    variants = rng.integers(0, 3, size=len(rows))
    bad = [_broken_stamp(stamp, int(v)) for stamp, v in zip(stamps, variants, strict=True)]
    _set(columns, "scanned_at", rows, bad)


def _broken_stamp(stamp: str, variant: int) -> str:
    day, clock = stamp.split(" ")
    year = day[:4]
    if variant == 0:
        return f"{year}-13-45 25:61:00"
    if variant == 1:
        return f"{day} 25:61:{clock[-2:]}"
    return f"{year}-02-30 {clock}"


def _missing_field(columns, rows, rng) -> None:
    ticket = rng.random(len(rows)) < 0.5
    for name, picked in (("ticket_no", ticket), ("item_code", ~ticket)):
        if picked.any():
            _set(columns, name, rows[picked], [""] * int(picked.sum()))


def _unknown_sku(columns, rows, rng) -> None:
    codes = [f"X{n:04d}" for n in rng.integers(0, 10_000, size=len(rows))]
    _set(columns, "item_code", rows, codes)


def _extra_field(columns, rows, rng) -> None:
    types = columns["line_type"].gather(rows.tolist()).to_list()
    extra = rng.integers(0, 9, size=len(rows))
    _set(columns, "line_type", rows, [f"{t},{n}" for t, n in zip(types, extra, strict=True)])


def _nonpositive_qty(columns, rows, rng) -> None:
    qty = columns["qty"].gather(rows.tolist()).to_list()
    zero = rng.random(len(rows)) < 0.5
    _set(columns, "qty", rows, ["0" if z else f"-{q}" for q, z in zip(qty, zero, strict=True)])


def _negative_sale_value(columns, rows, rng) -> None:
    values = columns["line_value"].gather(rows.tolist()).to_list()
    _set(columns, "line_value", rows, [f"-{v}" for v in values])


_CORRUPT = {
    "bad_number": _bad_number,
    "bad_timestamp": _bad_timestamp,
    "missing_field": _missing_field,
    "unknown_sku": _unknown_sku,
    "extra_field": _extra_field,
    "nonpositive_qty": _nonpositive_qty,
    "negative_sale_value": _negative_sale_value,
}
