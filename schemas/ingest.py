"""pandera models of the ingest's tables (polars backend), with the data dictionary's text.

`RawLines` guards each file's accepted receipt lines before its transaction commits; the
reference models guard each reference table after a file of it is loaded. Reference tables
carry every column the config maps, so their models are not strict.
"""

from __future__ import annotations

import datetime
from typing import Any

import pandera.polars as pa
import polars as pl
from pandera.api.polars.model_config import BaseConfig

from demandprep.ingest.reasons import REASONS

LINE_KINDS = ["sale", "return", "void"]
FILE_STATUSES = ["current", "superseded", "failed", "refused", "empty", "withdrawn"]


def described(description: str, unit: str = "", formula: str = "", **checks: Any) -> Any:
    """A pandera Field with its data-dictionary description, unit and formula."""
    return pa.Field(description=description, metadata={"unit": unit, "formula": formula}, **checks)


FILE_ID = "Id of the ingested file version (F + 7 digits, increasing in ingest order)."
LINE_NO = "Physical line number in the source file, header included (Parquet: row number from 1)."


class RawLines(pa.DataFrameModel):
    """Accepted receipt lines, one per scanned line, in our column names."""

    file_id: str = described(FILE_ID)
    line_no: int = described(LINE_NO, ge=1)
    receipt: str = described("Receipt (ticket) id as written in the source.")
    line: int = described("Line number within the receipt, when the source has one.", nullable=True)
    store: str = described("Store id; present in the stores table.")
    sold_at: datetime.datetime = described(
        "Time of the scan in the store's local time (converted from sources.receipts.timezone "
        "when set)."
    )
    sku: str = described("SKU id; present in the catalogue.")
    quantity: float = described(
        "Quantity, signed: packs, or kg for weight-sold items; negative on returns.", unit="pack|kg"
    )
    amount: float = described("Gross line value, signed, before discount.", unit="currency")
    discount: float = described("Discount on the line (0 when none).", unit="currency")
    card: str = described("Raw loyalty card id (never exported).", nullable=True)
    line_kind: str = described("sale, return or void.", isin=LINE_KINDS)

    class Config(BaseConfig):
        name = "raw_lines"
        strict = True

    @pa.dataframe_check
    def sales_have_positive_quantity_and_non_negative_amount(cls, data: pa.PolarsData) -> Any:
        sale = pl.col("line_kind") == "sale"
        return data.lazyframe.select(
            (~sale | ((pl.col("quantity") > 0) & (pl.col("amount") >= 0))).alias("sale_ok")
        )


class Quarantine(pa.DataFrameModel):
    """Every refused input line, with why it was refused and its original text."""

    file_id: str = described(FILE_ID)
    source: str = described("Config source the file belongs to (receipts, catalogue, ...).")
    path: str = described("Absolute path of the source file.")
    line_no: int = described(LINE_NO, nullable=True)
    reason: str = described(
        "Quarantine reason code; see the reasons list in the report.", isin=list(REASONS)
    )
    detail: str = described(
        "Which field broke the rule and how (e.g. 'quantity: not a number'); the value as "
        "written only for sources without card ids.",
        nullable=True,
    )
    original_text: str = described(
        "The line as written (CSV: fields re-joined with the delimiter; Parquet: the row as JSON).",
        nullable=True,
    )

    class Config(BaseConfig):
        name = "quarantine"
        strict = True


class Ledger(pa.DataFrameModel):
    """One row per ingested file version; rows_read = rows_accepted + rows_quarantined."""

    file_id: str = described(FILE_ID, unique=True)
    source: str = described("Config source the file belongs to.")
    path: str = described("Absolute path of the source file.")
    version: int = described("Version of this path: 1 for its first ingest, +1 per change.", ge=1)
    bytes: int = described("File size.", unit="bytes", ge=0)
    sha256: str = described("sha256 checksum of the file's bytes.", str_length=64)
    first_sold_at: datetime.datetime = described(
        "Earliest accepted sale time in the file (receipts only).", nullable=True
    )
    last_sold_at: datetime.datetime = described(
        "Latest accepted sale time in the file (receipts only).", nullable=True
    )
    rows_read: int = described("Records the reader met in the file.", ge=0)
    rows_accepted: int = described("Records accepted into the warehouse.", ge=0)
    rows_quarantined: int = described("Records sent to quarantine.", ge=0)
    status: str = described(
        "current (in the warehouse), superseded (replaced by a newer version), failed (could "
        "not be read), refused (past the source's reject limit), empty (no records) or "
        "withdrawn (its rows removed on purpose).",
        isin=FILE_STATUSES,
    )
    ingested_at: datetime.datetime = described("When this version was ingested (local time).")
    reason: str = described(
        "Why the file failed, was refused, is empty or was withdrawn (null otherwise).",
        nullable=True,
    )
    settings_fingerprint: str = described(
        "sha256 of the source's reading settings the file was read with (null before they were "
        "recorded).",
        nullable=True,
    )

    class Config(BaseConfig):
        name = "ledger"
        strict = True

    @pa.dataframe_check
    def rows_read_equal_accepted_plus_quarantined(cls, data: pa.PolarsData) -> Any:
        total = pl.col("rows_accepted") + pl.col("rows_quarantined")
        return data.lazyframe.select((pl.col("rows_read") == total).alias("balanced"))


class LedgerReasons(pa.DataFrameModel):
    """Rows quarantined per file version and reason."""

    file_id: str = described(FILE_ID)
    reason: str = described("Quarantine reason code.", isin=list(REASONS))
    rows: int = described("Rows of that file quarantined for that reason.", ge=1)

    class Config(BaseConfig):
        name = "ledger_reasons"
        strict = True


class Catalogue(pa.DataFrameModel):
    """One row per SKU, with every mapped catalogue column."""

    sku: str = described("SKU id.", unique=True)
    category: str = described("Category of the SKU (markets.categories selects the studied one).")

    class Config(BaseConfig):
        name = "catalogue"
        strict = False


class Stores(pa.DataFrameModel):
    """One row per store, with its geography levels and other mapped columns."""

    store: str = described("Store id.", unique=True)

    class Config(BaseConfig):
        name = "stores"
        strict = False


class Households(pa.DataFrameModel):
    """One row per loyalty card / household, with mapped demographics."""

    card: str = described("Raw loyalty card id (never exported).", unique=True)

    class Config(BaseConfig):
        name = "households"
        strict = False


class ShelfPrices(pa.DataFrameModel):
    """Shelf price of a SKU in a store from a date on (one row per store, date, sku)."""

    store: str = described("Store id.")
    date: datetime.date = described("Date (or period start) the price applies to.")
    sku: str = described("SKU id.")
    price: float = described("Shelf price.", unit="currency", gt=0)

    class Config(BaseConfig):
        name = "shelf_prices"
        strict = False
        unique = ["store", "date", "sku"]


class MarketSizeTable(pa.DataFrameModel):
    """The user's market sizes: one row per geography and period."""

    geography: str = described("Value of the geography column the size applies to.")
    period: datetime.date = described("Start of the period the size applies to.")
    size: float = described("Market size (potential units).", unit="equivalent units", gt=0)

    class Config(BaseConfig):
        name = "market_size_table"
        strict = False
        unique = ["geography", "period"]


class CostShifters(pa.DataFrameModel):
    """Cost shifter values per period (and firm or product when mapped)."""

    period: datetime.date = described("Start of the period the values apply to.")

    class Config(BaseConfig):
        name = "cost_shifters"
        strict = False


REFERENCE_MODELS: dict[str, type[pa.DataFrameModel]] = {
    "catalogue": Catalogue,
    "stores": Stores,
    "households": Households,
    "shelf_prices": ShelfPrices,
    "market_size_table": MarketSizeTable,
    "cost_shifters": CostShifters,
}
