"""Stores of the invented chain and its loyalty households.

Store s has a size factor (mean 1) scaling its visits and catchment; a few stores open during
the simulated period and have no visits before their opening day. Each household has a home
store (drawn in proportion to store size) and a visit propensity (mean 1 within its store).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta

import numpy as np
import polars as pl

from demandprep.demo.names import CHAIN, REGIONS, TIMEZONE, TOWNS
from demandprep.demo.seeds import Stream, stream_rng
from demandprep.demo.spec import WorldSpec

HOUSEHOLD_SIZES = (1, 2, 3, 4, 5, 6)
HOUSEHOLD_SIZE_PROBS = (0.30, 0.33, 0.15, 0.13, 0.06, 0.03)
INCOME_BANDS = ("low", "lower_middle", "upper_middle", "high")
INCOME_BAND_PROBS = (0.25, 0.30, 0.28, 0.17)
PEOPLE_PER_DAILY_VISIT = 200  # catchment people per expected daily visit


@dataclass(frozen=True)
class Stores:
    """The stores table and the per-store arrays the simulation uses."""

    table: pl.DataFrame
    shop_ids: tuple[str, ...]
    size: np.ndarray
    open_day: np.ndarray  # first simulated day index with visits (<= 0: open from the start)
    catchment: np.ndarray

    @property
    def count(self) -> int:
        """Number of stores."""
        return len(self.shop_ids)


@dataclass(frozen=True)
class Households:
    """The households table and per-household arrays."""

    table: pl.DataFrame
    cards: tuple[str, ...]
    home_store: np.ndarray
    propensity: np.ndarray  # relative visit frequency, mean 1 within the home store


def shop_id(index: int, n_stores: int) -> str:
    """Shop id of store index (0-based): S01, S02, ... (wider when there are 100+ stores)."""
    width = max(2, len(str(n_stores)))
    return f"S{index + 1:0{width}d}"


def build_stores(spec: WorldSpec) -> Stores:
    """Build the stores of the world from the spec."""
    rng = stream_rng(spec.seed, Stream.STORES)
    n = spec.n_stores
    size = rng.lognormal(0.0, 0.35, size=n)
    size = size / size.mean()
    catchment = np.round(
        spec.visits_per_store_day * size * PEOPLE_PER_DAILY_VISIT * rng.lognormal(0.0, 0.1, n)
    ).astype(np.int64)
    catchment = np.maximum(catchment, 100)
    years_open = rng.integers(365, 20 * 365, size=n)
    open_day = -years_open
    n_late = int(n * spec.late_opening_share)
    if n_late:
        open_day[n - n_late :] = rng.integers(7, max(8, spec.days // 2), size=n_late)
    ids = tuple(shop_id(i, n) for i in range(n))
    table = pl.DataFrame(
        {
            "shop_id": ids,
            "shop_name": [_shop_name(i) for i in range(n)],
            "region": [REGIONS[i % spec.n_regions] for i in range(n)],
            "chain": [CHAIN] * n,
            "catchment_population": catchment,
            "opened_on": [spec.start + timedelta(days=int(d)) for d in open_day],
            "timezone": [TIMEZONE] * n,
        }
    )
    return Stores(table=table, shop_ids=ids, size=size, open_day=open_day, catchment=catchment)


def _shop_name(index: int) -> str:
    town = TOWNS[index % len(TOWNS)]
    suffix = f" {index // len(TOWNS) + 1}" if index >= len(TOWNS) else ""
    return f"{CHAIN} {town}{suffix}"


def build_households(spec: WorldSpec, stores: Stores) -> Households:
    """Build the loyalty households, each with a home store and demographics."""
    rng = stream_rng(spec.seed, Stream.HOUSEHOLDS)
    n = spec.households
    home = rng.choice(stores.count, size=n, p=stores.size / stores.size.sum())
    propensity = rng.gamma(2.0, 0.5, size=n)
    propensity = propensity / _group_mean(propensity, home, stores.count)[home]
    cards = _unique_card_numbers(rng, n)
    table = pl.DataFrame(
        {
            "loyalty_card": cards,
            "household_size": rng.choice(HOUSEHOLD_SIZES, size=n, p=HOUSEHOLD_SIZE_PROBS),
            "income_band": rng.choice(INCOME_BANDS, size=n, p=INCOME_BAND_PROBS),
            "home_shop": [stores.shop_ids[s] for s in home],
        }
    )
    return Households(table=table, cards=tuple(cards), home_store=home, propensity=propensity)


def _group_mean(values: np.ndarray, groups: np.ndarray, n_groups: int) -> np.ndarray:
    sums = np.bincount(groups, weights=values, minlength=n_groups)
    counts = np.bincount(groups, minlength=n_groups)
    return sums / np.maximum(counts, 1)


def _unique_card_numbers(rng: np.random.Generator, n: int) -> list[str]:
    # 16 digits with a leading 6 so no card number starts with 0 and all have the same width
    numbers: list[int] = []
    seen: set[int] = set()
    while len(numbers) < n:
        for value in rng.integers(0, 10**15, size=n - len(numbers)).tolist():
            if value not in seen:
                seen.add(value)
                numbers.append(value)
    return [f"6{value:015d}" for value in numbers]
