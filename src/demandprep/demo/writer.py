"""Text and file output of the demo world, byte-identical for the same inputs.

Receipt lines are formatted as text columns (so faults can be injected as text), then written as
gzip CSV (mtime 0, no file name in the header, no quoting) or as typed Parquet.
"""

from __future__ import annotations

import gzip
import io
import json
from datetime import date
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl
import pyarrow.parquet as pq

from demandprep.demo.catalogue import Catalogue
from demandprep.demo.columns import SOURCE_COLUMNS
from demandprep.demo.receipts import LINE_TYPES, Lines
from demandprep.demo.stores import Households, Stores
from demandprep.demo.visits import Visits

RECEIPT_TYPES = {
    "row_no": pl.Int64,
    "qty": pl.Float64,
    "line_value": pl.Float64,
    "discount_value": pl.Float64,
}


def format_lines(
    lines: Lines,
    visits: Visits,
    day: date,
    stores: Stores,
    households: Households,
    catalogue: Catalogue,
) -> pl.DataFrame:
    """The day's lines as the text columns of a receipts file (SOURCE_COLUMNS['receipts'])."""
    store = visits.store[lines.visit]
    household = visits.household[lines.visit]
    no_card = len(households.cards)  # index of the empty card text appended below
    frame = pl.DataFrame(
        {
            "shop": _gather(stores.shop_ids, store),
            "ticket_seq": visits.ticket_seq[lines.visit],
            "row_no": lines.row_no,
            "second": lines.second,
            "item_code": _gather(catalogue.item_codes, lines.item_row),
            "by_weight": catalogue.is_weight[lines.item_row],
            "qty_milli": lines.qty_milli,
            "value_cents": lines.value_cents,
            "card": _gather((*households.cards, ""), np.where(household >= 0, household, no_card)),
            "discount_cents": lines.discount_cents,
            "line_type": _gather(LINE_TYPES, lines.line_type),
        }
    )
    stamp = day.strftime("%Y%m%d")
    qty = pl.when(pl.col("by_weight")).then(_fixed("qty_milli", 1000, 3))
    return frame.select(
        ticket_no=pl.concat_str(
            [
                pl.col("shop"),
                pl.lit(f"-{stamp}-"),
                pl.col("ticket_seq").cast(pl.String).str.zfill(6),
            ]
        ),
        row_no=pl.col("row_no").cast(pl.String),
        shop_id=pl.col("shop"),
        scanned_at=pl.concat_str([pl.lit(day.isoformat() + " "), _clock("second")]),
        item_code=pl.col("item_code"),
        qty=qty.otherwise((pl.col("qty_milli") // 1000).cast(pl.String)),
        line_value=_fixed("value_cents", 100, 2),
        loyalty_card=pl.col("card"),
        discount_value=_fixed("discount_cents", 100, 2),
        line_type=pl.col("line_type"),
    )


def _gather(values: tuple[str, ...], index: np.ndarray) -> pl.Series:
    return _text_series(values).gather(pl.Series(index))


@lru_cache(maxsize=16)
def _text_series(values: tuple[str, ...]) -> pl.Series:
    # the same few lookup tuples (shop ids, item codes, cards) are used every day
    return pl.Series(values, dtype=pl.String)


def _fixed(column: str, scale: int, digits: int) -> pl.Expr:
    # signed fixed-point text from an integer count of 1/scale units, e.g. -1234 -> "-12.34"
    col = pl.col(column)
    magnitude = col.abs()
    sign = pl.when(col < 0).then(pl.lit("-")).otherwise(pl.lit(""))
    fraction = (magnitude % scale).cast(pl.String).str.zfill(digits)
    return pl.concat_str([sign, (magnitude // scale).cast(pl.String), pl.lit("."), fraction])


def _clock(column: str) -> pl.Expr:
    col = pl.col(column)
    parts = [col // 3600, (col // 60) % 60, col % 60]
    texts = [part.cast(pl.String).str.zfill(2) for part in parts]
    return pl.concat_str(texts, separator=":")


def write_receipts(frame: pl.DataFrame, path: Path, receipt_format: str) -> None:
    """Write one daily receipts file (text columns) as gzip CSV or typed Parquet."""
    path.parent.mkdir(parents=True, exist_ok=True)
    if receipt_format == "parquet":
        pq.write_table(_typed_receipts(frame).to_arrow(), path, compression="zstd")
        return
    buffer = io.BytesIO()
    frame.write_csv(buffer, quote_style="never")
    path.write_bytes(gzip.compress(buffer.getvalue(), compresslevel=6, mtime=0))


def _typed_receipts(frame: pl.DataFrame) -> pl.DataFrame:
    # parquet drops are typed; empty text becomes null (missing fields stay missing)
    exprs = []
    for name in SOURCE_COLUMNS["receipts"]:
        col = pl.when(pl.col(name) != "").then(pl.col(name))
        if name in RECEIPT_TYPES:
            col = col.cast(RECEIPT_TYPES[name])
        elif name == "scanned_at":
            col = col.str.strptime(pl.Datetime("us"), "%Y-%m-%d %H:%M:%S")
        exprs.append(col.alias(name))
    return frame.select(exprs)


def receipts_path(out_dir: Path, day: date, receipt_format: str) -> Path:
    """receipts/<YYYY>/receipts_<YYYY-MM-DD>.csv.gz (or .parquet)."""
    suffix = "parquet" if receipt_format == "parquet" else "csv.gz"
    return out_dir / "receipts" / f"{day.year:04d}" / f"receipts_{day.isoformat()}.{suffix}"


def write_table(frame: pl.DataFrame, path: Path, float_precision: int | None = None) -> None:
    """Write a reference table as plain CSV (dates as YYYY-MM-DD, nulls as empty fields)."""
    buffer = io.BytesIO()
    frame.write_csv(buffer, float_precision=float_precision)
    path.write_bytes(buffer.getvalue())


def write_json(data: dict[str, Any], path: Path) -> None:
    """Write JSON with sorted keys and a final newline."""
    path.write_text(json.dumps(data, indent=2, sort_keys=True) + "\n", encoding="utf-8")
