"""Receipt lines of one day's visits, as numbers (formatting to text is writer.py's job).

Each visit has 1 + Binomial(max_noncoffee_lines - 1, noncoffee_line_prob) grocery lines, its
packaged-coffee line if it chose a product (1 pack, line_value = regular price, discount =
regular - shelf price), a loose-coffee line with probability bulk_rate where the store sells it
(independent of the packaged choice), all in random order. A voided re-scan (void_rate) repeats
one line of the visit as a sale right after it and cancels it with a void line (net zero); a
return (return_rate) is a first line returning one grocery item. Returns and voids carry negative
qty, line_value and discount_value, so net paid = line_value - discount_value on every line.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from demandprep.demo.arrays import cumsum_within_runs, rank_within_runs
from demandprep.demo.catalogue import Catalogue
from demandprep.demo.spec import WorldSpec
from demandprep.demo.visits import Visits

SALE, RETURN, VOID = 0, 1, 2
LINE_TYPES = ("sale", "return", "void")
PACK_COUNTS = np.array([1, 2, 3])
PACK_COUNT_PROBS = np.array([0.8, 0.15, 0.05])


@dataclass(frozen=True)
class DayPrices:
    """One week's prices seen by the day's visits: [store, product] and [store, bulk item]."""

    regular_cents: np.ndarray
    shelf_cents: np.ndarray
    bulk_available: np.ndarray
    bulk_cents: np.ndarray


@dataclass(frozen=True)
class Lines:
    """Receipt lines sorted by visit and row; quantities in thousandths (packs or grams)."""

    visit: np.ndarray
    row_no: np.ndarray
    second: np.ndarray
    item_row: np.ndarray
    qty_milli: np.ndarray
    value_cents: np.ndarray
    discount_cents: np.ndarray
    line_type: np.ndarray

    @property
    def count(self) -> int:
        """Number of lines."""
        return len(self.visit)


def build_lines(
    spec: WorldSpec,
    catalogue: Catalogue,
    visits: Visits,
    coffee_sku: np.ndarray,
    prices: DayPrices,
    rng: np.random.Generator,
) -> Lines:
    """All lines of the day's visits given each visit's coffee SKU row (-1: none)."""
    base = _base_lines(spec, catalogue, visits, coffee_sku, prices, rng)
    voids = _void_lines(spec, visits.count, base, rng)
    returns = _return_lines(spec, catalogue, visits.count, rng)
    parts = [base, voids, returns]
    cols = {k: np.concatenate([part[k] for part in parts]) for k in base}
    order = np.lexsort((cols["position"], cols["visit"]))
    cols = {k: v[order] for k, v in cols.items()}
    row_no = rank_within_runs(cols["visit"])
    gaps = 3 + rng.exponential(8.0, size=len(row_no)).astype(np.int64)
    second = visits.start_second[cols["visit"]] + cumsum_within_runs(cols["visit"], gaps)
    return Lines(
        visit=cols["visit"],
        row_no=row_no,
        second=second,
        item_row=cols["item_row"],
        qty_milli=cols["qty_milli"],
        value_cents=cols["value_cents"],
        discount_cents=cols["discount_cents"],
        line_type=cols["line_type"],
    )


def _base_lines(spec, catalogue, visits, coffee_sku, prices, rng) -> dict[str, np.ndarray]:
    n = visits.count
    n_grocery = 1 + rng.binomial(spec.max_noncoffee_lines - 1, spec.noncoffee_line_prob, size=n)
    grocery = _grocery_items(catalogue, np.repeat(np.arange(n), n_grocery), rng)
    coffee = _coffee_items(catalogue, visits, coffee_sku, prices)
    bulk = _bulk_items(spec, catalogue, visits, prices, rng)
    cols = {k: np.concatenate([grocery[k], coffee[k], bulk[k]]) for k in grocery}
    # random order of a visit's lines: positions 0..n_lines-1 after sorting by a random key
    order = np.lexsort((rng.random(len(cols["visit"])), cols["visit"]))
    cols = {k: v[order] for k, v in cols.items()}
    cols["position"] = (rank_within_runs(cols["visit"]) - 1).astype(float)
    cols["line_type"] = np.full(len(order), SALE)
    return cols


def _items(visit, item_row, qty_milli, value_cents, discount_cents) -> dict[str, np.ndarray]:
    return {
        "visit": np.asarray(visit, dtype=np.int64),
        "item_row": np.asarray(item_row, dtype=np.int64),
        "qty_milli": np.asarray(qty_milli, dtype=np.int64),
        "value_cents": np.asarray(value_cents, dtype=np.int64),
        "discount_cents": np.asarray(discount_cents, dtype=np.int64),
    }


def _grocery_items(catalogue: Catalogue, visit: np.ndarray, rng: np.random.Generator):
    pick = rng.choice(len(catalogue.grocery_rows), size=len(visit), p=catalogue.grocery_weights)
    rows = catalogue.grocery_rows[pick]
    price = catalogue.grocery_price_cents[pick]
    by_weight = catalogue.is_weight[rows]
    grams = rng.integers(150, 2501, size=len(visit))
    packs = rng.choice(PACK_COUNTS, size=len(visit), p=PACK_COUNT_PROBS)
    qty = np.where(by_weight, grams, 1000 * packs)
    value = np.where(by_weight, _per_kg_value(price, grams), price * packs)
    return _items(visit, rows, qty, value, np.zeros(len(visit)))


def _per_kg_value(price_per_kg_cents: np.ndarray, grams: np.ndarray) -> np.ndarray:
    return (price_per_kg_cents * grams + 500) // 1000  # rounded to the cent


def _coffee_items(catalogue, visits, coffee_sku, prices: DayPrices):
    buyers = np.nonzero(coffee_sku >= 0)[0]
    rows = coffee_sku[buyers]
    product = _product_of_row(catalogue, rows)
    store = visits.store[buyers]
    regular = prices.regular_cents[store, product]
    discount = regular - prices.shelf_cents[store, product]
    return _items(buyers, rows, np.full(len(buyers), 1000), regular, discount)


def _product_of_row(catalogue: Catalogue, rows: np.ndarray) -> np.ndarray:
    starts = catalogue.products.sku_start
    return np.searchsorted(starts, rows, side="right") - 1


def _bulk_items(spec, catalogue, visits, prices: DayPrices, rng):
    n_bulk = len(catalogue.bulk_rows)
    wants = rng.random(visits.count) < spec.params.bulk_rate
    which = rng.integers(0, n_bulk, size=visits.count)
    grams = rng.integers(100, 601, size=visits.count)
    buyers = np.nonzero(wants & prices.bulk_available[visits.store, which])[0]
    store, item = visits.store[buyers], which[buyers]
    value = _per_kg_value(prices.bulk_cents[store, item], grams[buyers])
    rows = catalogue.bulk_rows[item]
    return _items(buyers, rows, grams[buyers], value, np.zeros(len(buyers)))


def _void_lines(spec, n_visits, base, rng) -> dict[str, np.ndarray]:
    counts = np.bincount(base["visit"], minlength=n_visits)
    first = np.cumsum(counts) - counts
    voided = np.nonzero(rng.random(n_visits) < spec.void_rate)[0]
    picked = first[voided] + np.floor(rng.random(len(voided)) * counts[voided]).astype(np.int64)
    rescan = {k: v[picked] for k, v in base.items()}
    rescan["position"] = rescan["position"] + 0.3
    cancel = {k: v.copy() for k, v in rescan.items()}
    cancel["position"] = cancel["position"] + 0.3
    for key in ("qty_milli", "value_cents", "discount_cents"):
        cancel[key] = -cancel[key]
    cancel["line_type"] = np.full(len(picked), VOID)
    return {k: np.concatenate([rescan[k], cancel[k]]) for k in base}


def _return_lines(spec, catalogue, n_visits, rng) -> dict[str, np.ndarray]:
    visit = np.nonzero(rng.random(n_visits) < spec.return_rate)[0]
    items = _grocery_items(catalogue, visit, rng)
    for key in ("qty_milli", "value_cents", "discount_cents"):
        items[key] = -items[key]
    items["position"] = np.full(len(visit), -1.0)
    items["line_type"] = np.full(len(visit), RETURN)
    return items
