"""Weekly shelf prices of every coffee product in every store, and the shocks behind them.

For product j (firm f), store s, week t (all money in euros, per pack):

    green_coffee_index_ft = 1 + c_t + e_ft          c, e: AR(1), shared by all stores
    cost_jt   = base_cost_j * green_coffee_index_ft  base_cost_j = (1 - margin) * target_j
    regular   = cost_jt + markup_j + rho * xi_jst + nu_jst   (rounded to cents)
    shelf     = regular                              (no promotion)
              = regular * (1 - depth)                (promotion, rounded to cents)

xi_jst ~ N(0, xi_sd^2) is the demand shock (independent across stores, weeks and products);
nu_jst ~ N(0, nu_sd^2) is store price noise; rho = 0 when the world is not endogenous.
Promotions are drawn independently of xi. A product is on the shelf when the store lists it
(drawn once per store), is open that week and has no stock-out that week.
Loose coffee has a per-kg price: base_kg * index of the chain + nu, and no promotions.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta

import numpy as np
import polars as pl

from demandprep.demo.catalogue import Catalogue
from demandprep.demo.names import CHAIN
from demandprep.demo.seeds import Stream, stream_rng
from demandprep.demo.spec import WorldSpec
from demandprep.demo.stores import Stores

UNITS_PER_PERSON_WEEK = 0.1  # potential 100 g units of coffee per catchment person per week


@dataclass(frozen=True)
class PriceBook:
    """Arrays [week, store, product] (bulk: [week, store, bulk item]); cost_index [week, firm]."""

    cost_index: np.ndarray
    xi: np.ndarray
    regular_cents: np.ndarray
    shelf_cents: np.ndarray
    on_promo: np.ndarray
    available: np.ndarray
    bulk_available: np.ndarray
    bulk_cents: np.ndarray


def store_open_in_week(spec: WorldSpec, stores: Stores) -> np.ndarray:
    """[week, store] True when the store has at least one open day in the week."""
    last_day = 7 * np.arange(spec.weeks) + 6
    return stores.open_day[None, :] <= last_day[:, None]


def build_price_book(spec: WorldSpec, catalogue: Catalogue, stores: Stores) -> PriceBook:
    """Draw cost index, demand shocks, availability, promotions and prices for every week."""
    p = spec.params
    prods = catalogue.products
    firm_of = np.array([catalogue.firms.index(f) for f in prods.firm])
    index = cost_index(spec, len(catalogue.firms))
    target = prods.target_cents / 100.0
    base_cost, markup = target * (1 - p.margin_share), target * p.margin_share
    rho = p.rho if spec.endogenous else 0.0
    listed, bulk_listed = _assortment(spec, stores.count, prods.count, len(catalogue.bulk_rows))
    is_open = store_open_in_week(spec, stores)
    chain = catalogue.firms.index(CHAIN)
    shape = (spec.weeks, stores.count, prods.count)
    xi = np.zeros(shape)
    regular = np.zeros(shape, dtype=np.int64)
    shelf = np.zeros(shape, dtype=np.int64)
    promo = np.zeros(shape, dtype=bool)
    available = np.zeros(shape, dtype=bool)
    bulk_shape = (spec.weeks, stores.count, len(catalogue.bulk_rows))
    bulk_cents = np.zeros(bulk_shape, dtype=np.int64)
    for w in range(spec.weeks):
        rng = stream_rng(spec.seed, Stream.STORE_WEEK, w)
        xi[w] = rng.normal(0.0, spec.xi_sd, size=shape[1:])
        nu = rng.normal(0.0, p.nu_sd, size=shape[1:])
        in_stock = rng.random(shape[1:]) >= p.stockout_prob
        promo[w] = rng.random(shape[1:]) < p.promo_rate
        depth = rng.choice(np.array(p.promo_depths), size=shape[1:])
        bulk_nu = rng.normal(0.0, p.nu_sd, size=bulk_shape[1:])
        cost = base_cost * index[w, firm_of]
        euros = np.maximum(cost + markup + rho * xi[w] + nu, 0.3 * target)
        regular[w] = np.round(100 * euros).astype(np.int64)
        promo_cents = np.round(regular[w] * (1 - depth)).astype(np.int64)
        shelf[w] = np.where(promo[w], promo_cents, regular[w])
        available[w] = listed & in_stock & is_open[w][:, None]
        bulk_euros = catalogue.bulk_price_cents / 100.0 * index[w, chain] + bulk_nu
        bulk_cents[w] = np.round(100 * bulk_euros).astype(np.int64)
    bulk_available = bulk_listed[None, :, :] & is_open[:, :, None]
    promo &= available
    return PriceBook(index, xi, regular, shelf, promo, available, bulk_available, bulk_cents)


def cost_index(spec: WorldSpec, n_firms: int) -> np.ndarray:
    """[week, firm] green-coffee cost index: 1 + common AR(1) + firm AR(1), rounded to 4 places."""
    p = spec.params
    rng = stream_rng(spec.seed, Stream.COSTS)
    common = _ar1(rng, spec.weeks, 1, p.cost_ar, p.cost_common_sd)
    own = _ar1(rng, spec.weeks, n_firms, p.cost_ar, p.cost_firm_sd)
    return np.round(1.0 + common + own, 4)


def _ar1(rng: np.random.Generator, n: int, k: int, phi: float, sd: float) -> np.ndarray:
    # stationary AR(1): start from the stationary law so early weeks are not special
    out = np.empty((n, k))
    out[0] = rng.normal(0.0, sd, size=k)
    shocks = rng.normal(0.0, sd * np.sqrt(1 - phi**2), size=(n, k))
    for t in range(1, n):
        out[t] = phi * out[t - 1] + shocks[t]
    return out


def _assortment(spec: WorldSpec, n_stores: int, n_products: int, n_bulk: int):
    rng = stream_rng(spec.seed, Stream.ASSORTMENT)
    listed = rng.random((n_stores, n_products)) < spec.params.listing_prob
    bulk_listed = rng.random((n_stores, 1)) < spec.params.bulk_listing_prob
    return listed, np.repeat(bulk_listed, n_bulk, axis=1)


def week_starts(spec: WorldSpec) -> list:
    """Monday of every simulated week."""
    return [spec.start + timedelta(days=7 * w) for w in range(spec.weeks)]


def shelf_prices_table(spec: WorldSpec, book: PriceBook, catalogue: Catalogue, stores: Stores):
    """shelf_prices.csv rows: every coffee SKU on the shelf in a store-week, with its price."""
    prods = catalogue.products
    w, s, j = np.nonzero(book.available)
    reps = prods.sku_count[j]
    sku_offset = np.arange(reps.sum()) - np.repeat(np.cumsum(reps) - reps, reps)
    rows = np.repeat(prods.sku_start[j], reps) + sku_offset
    packs = _price_frame(
        spec,
        stores,
        catalogue,
        np.repeat(w, reps),
        np.repeat(s, reps),
        rows,
        np.repeat(book.shelf_cents[w, s, j], reps),
        np.repeat(book.on_promo[w, s, j], reps),
    )
    bw, bs, b = np.nonzero(book.bulk_available)
    bulk = _price_frame(
        spec,
        stores,
        catalogue,
        bw,
        bs,
        catalogue.bulk_rows[b],
        book.bulk_cents[bw, bs, b],
        np.zeros(len(b), dtype=bool),
    )
    return pl.concat([packs, bulk]).sort("week_start", "shop_id", "item_code")


def _price_frame(spec, stores, catalogue, w, s, rows, cents, promo) -> pl.DataFrame:
    starts = week_starts(spec)
    return pl.DataFrame(
        {
            "shop_id": [stores.shop_ids[i] for i in s],
            "week_start": [starts[i] for i in w],
            "item_code": [catalogue.item_codes[i] for i in rows],
            "shelf_price": np.asarray(cents) / 100.0,
            "on_promo": np.asarray(promo).astype(np.int64),
        }
    )


def cost_shifters_table(spec: WorldSpec, book: PriceBook, catalogue: Catalogue) -> pl.DataFrame:
    """cost_shifters.csv rows: the weekly green-coffee index of every firm."""
    starts = week_starts(spec)
    firms = catalogue.firms
    return pl.DataFrame(
        {
            "week_start": [starts[w] for w in range(spec.weeks) for _ in firms],
            "firm": [f for _ in range(spec.weeks) for f in firms],
            "green_coffee_index": book.cost_index.reshape(-1),
        }
    )


def market_sizes_table(spec: WorldSpec, stores: Stores) -> pl.DataFrame:
    """market_sizes.csv rows: potential 100 g units per open store-week, from catchment people."""
    starts = week_starts(spec)
    w, s = np.nonzero(store_open_in_week(spec, stores))
    first_open = np.maximum(stores.open_day[s] - 7 * w, 0)
    open_days = 7 - first_open
    season = 1.0 + 0.1 * np.sin(2 * np.pi * w / 52.0)
    units = np.round(stores.catchment[s] * UNITS_PER_PERSON_WEEK * season * open_days / 7)
    return pl.DataFrame(
        {
            "area": [stores.shop_ids[i] for i in s],
            "period_start": [starts[i] for i in w],
            "potential_units": units.astype(np.int64),
        }
    )


def truth_shocks_table(spec: WorldSpec, book: PriceBook, catalogue: Catalogue, stores: Stores):
    """truth_shocks.csv rows: xi of every product on the shelf in a store-week."""
    starts = week_starts(spec)
    prods = catalogue.products
    w, s, j = np.nonzero(book.available)
    return pl.DataFrame(
        {
            "shop_id": [stores.shop_ids[i] for i in s],
            "week_start": [starts[i] for i in w],
            "roaster": [prods.roaster[i] for i in j],
            "format": [prods.format[i] for i in j],
            "pack_grams": prods.pack_grams[j],
            "xi": np.round(book.xi[w, s, j], 6),
        }
    )
