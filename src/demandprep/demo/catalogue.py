"""The demo catalogue: packaged coffee products and their blend SKUs, loose weight-sold coffee,
and generic grocery items so that receipts carry non-coffee lines.

A coffee product is roaster x format x pack grams; its SKUs are blend variants that share the
product's price and characteristics. The coffee part is fixed by design (not random), so item
codes and characteristics are the same for every seed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl

from demandprep.demo.columns import SOURCE_COLUMNS
from demandprep.demo.names import (
    BLENDS,
    GROCERY_ITEMS,
    GROCERY_VARIANTS,
    ROASTER_FIRMS,
    STORE_LABEL,
)
from demandprep.demo.seeds import Stream, stream_rng

FORMATS = ("beans", "ground", "capsules")

# roaster, format, pack grams, roast level (1-5), organic, target regular price (cents), variants
COFFEE_DESIGN: tuple[tuple[str, str, int, int, int, int, int], ...] = (
    ("Alder & Crane", "beans", 500, 3, 0, 749, 3),
    ("Alder & Crane", "ground", 250, 4, 0, 429, 2),
    ("Alder & Crane", "capsules", 55, 5, 0, 339, 2),
    ("Bluestone", "beans", 1000, 2, 0, 1249, 2),
    ("Bluestone", "ground", 500, 3, 0, 649, 3),
    ("Bluestone", "capsules", 104, 4, 0, 519, 2),
    ("Gullhaven", "ground", 250, 2, 1, 469, 2),
    ("Copperleaf", "beans", 250, 1, 1, 549, 2),
    ("Copperleaf", "ground", 250, 3, 1, 499, 2),
    ("Driftwood", "beans", 500, 4, 0, 799, 2),
    ("Driftwood", "ground", 250, 5, 0, 399, 3),
    ("Driftwood", "capsules", 55, 3, 0, 319, 2),
    ("Emberline", "beans", 250, 2, 1, 579, 2),
    ("Emberline", "capsules", 52, 2, 1, 369, 2),
    (STORE_LABEL, "beans", 500, 3, 0, 599, 2),
    (STORE_LABEL, "ground", 500, 3, 0, 499, 2),
    (STORE_LABEL, "capsules", 55, 4, 0, 269, 2),
)

# loose coffee sold by weight: blend, roast level, price per kg (cents)
BULK_DESIGN: tuple[tuple[str, int, int], ...] = (
    ("House Blend", 3, 1690),
    ("Dark Velvet", 5, 1790),
)

VARIANT_PRICE_FACTOR = {"": 1.0, "Value ": 0.75, "Organic ": 1.35}


@dataclass(frozen=True)
class CoffeeProducts:
    """Packaged coffee products (index j) with characteristics and their SKU ranges."""

    roaster: tuple[str, ...]
    firm: tuple[str, ...]
    format: tuple[str, ...]
    pack_grams: np.ndarray
    roast_level: np.ndarray
    organic: np.ndarray
    target_cents: np.ndarray
    nest: np.ndarray  # index into FORMATS
    sku_start: np.ndarray  # first catalogue row of the product's SKUs
    sku_count: np.ndarray

    @property
    def count(self) -> int:
        """Number of packaged coffee products."""
        return len(self.roaster)

    def key(self, j: int) -> str:
        """Product id as the pipeline builds it: roaster|format|pack_grams."""
        return f"{self.roaster[j]}|{self.format[j]}|{self.pack_grams[j]}"


@dataclass(frozen=True)
class Catalogue:
    """Every SKU (catalogue.csv rows) plus the arrays the simulation needs."""

    table: pl.DataFrame
    item_codes: tuple[str, ...]
    is_weight: np.ndarray  # sold by kg
    products: CoffeeProducts
    bulk_rows: np.ndarray  # catalogue rows of loose coffee
    bulk_price_cents: np.ndarray  # base price per kg
    grocery_rows: np.ndarray
    grocery_price_cents: np.ndarray  # price per pack or per kg, aligned with grocery_rows
    grocery_weights: np.ndarray  # purchase probabilities, aligned with grocery_rows

    @property
    def firms(self) -> tuple[str, ...]:
        """Coffee firms in a stable order (roaster firms, then the chain)."""
        return tuple(dict.fromkeys(ROASTER_FIRMS.values()))


def build_catalogue(seed: int) -> Catalogue:
    """Build the catalogue; only grocery popularity depends on the seed."""
    coffee_rows, products = _coffee_rows()
    bulk_rows = _bulk_rows()
    grocery_rows, grocery_prices = _grocery_rows()
    rows = coffee_rows + bulk_rows + grocery_rows
    table = pl.DataFrame(rows, schema=_catalogue_schema(), orient="row")
    n_coffee, n_bulk = len(coffee_rows), len(bulk_rows)
    rng = stream_rng(seed, Stream.CATALOGUE)
    weights = rng.lognormal(0.0, 0.8, size=len(grocery_rows))
    return Catalogue(
        table=table,
        item_codes=tuple(table["item_code"].to_list()),
        is_weight=(table["pack_unit"] == "kg").to_numpy(),
        products=products,
        bulk_rows=np.arange(n_coffee, n_coffee + n_bulk),
        bulk_price_cents=np.array([d[2] for d in BULK_DESIGN], dtype=np.int64),
        grocery_rows=np.arange(n_coffee + n_bulk, len(rows)),
        grocery_price_cents=np.array(grocery_prices, dtype=np.int64),
        grocery_weights=weights / weights.sum(),
    )


def _catalogue_schema() -> dict[str, type[pl.DataType]]:
    types = {"pack_size": pl.Int64, "pack_grams": pl.Int64, "roast_level": pl.Int64}
    types["organic"] = pl.Int64
    return {name: types.get(name, pl.String) for name in SOURCE_COLUMNS["catalogue"]}


def _coffee_rows() -> tuple[list[tuple], CoffeeProducts]:
    rows: list[tuple] = []
    starts, counts = [], []
    for j, (roaster, fmt, grams, roast, organic, _price, n_var) in enumerate(COFFEE_DESIGN):
        starts.append(len(rows))
        counts.append(n_var)
        for v in range(n_var):
            blend = BLENDS[(j + v) % len(BLENDS)]
            code = f"C{j + 1:02d}{v + 1:02d}"
            name = f"{roaster} {blend} {fmt} {grams} g"
            firm = ROASTER_FIRMS[roaster]
            rows.append(
                (code, name, "coffee", roaster, firm, fmt, grams, "g", grams, roast, organic)
            )
    design = COFFEE_DESIGN
    products = CoffeeProducts(
        roaster=tuple(d[0] for d in design),
        firm=tuple(ROASTER_FIRMS[d[0]] for d in design),
        format=tuple(d[1] for d in design),
        pack_grams=np.array([d[2] for d in design], dtype=np.int64),
        roast_level=np.array([d[3] for d in design], dtype=np.int64),
        organic=np.array([d[4] for d in design], dtype=np.int64),
        target_cents=np.array([d[5] for d in design], dtype=np.int64),
        nest=np.array([FORMATS.index(d[1]) for d in design], dtype=np.int64),
        sku_start=np.array(starts, dtype=np.int64),
        sku_count=np.array(counts, dtype=np.int64),
    )
    return rows, products


def _bulk_rows() -> list[tuple]:
    firm = ROASTER_FIRMS[STORE_LABEL]
    rows = []
    for b, (blend, roast, _price) in enumerate(BULK_DESIGN):
        name = f"{STORE_LABEL} loose {blend} beans per kg"
        rows.append(
            (
                f"CB{b + 1:02d}",
                name,
                "coffee_bulk",
                STORE_LABEL,
                firm,
                "beans",
                1,
                "kg",
                1000,
                roast,
                0,
            )
        )
    return rows


def _grocery_rows() -> tuple[list[tuple], list[int]]:
    rows: list[tuple] = []
    prices: list[int] = []
    for category, items in GROCERY_ITEMS.items():
        for stem, price, grams in items:
            for variant in GROCERY_VARIANTS:
                code = f"G{len(rows) + 1:04d}"
                size, unit = (1, "kg") if grams is None else (grams, "g")
                name = (
                    f"{variant}{stem}" if not variant else f"{variant}{stem[0].lower()}{stem[1:]}"
                )
                rows.append((code, name, category, None, None, None, size, unit, None, None, None))
                prices.append(round(price * VARIANT_PRICE_FACTOR[variant]))
    return rows, prices
