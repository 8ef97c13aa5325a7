"""Store visits of one day: anonymous shoppers and loyalty households, with start times.

Store s on day d expects lambda_sd = visits_per_store_day * size_s * weekday_factor_d visits when
open. Anonymous visits ~ Poisson((1 - card_share) * lambda_sd). Household h of home store s
visits with probability min(1, card_share * lambda_sd * propensity_h / households_s), at most
once a day, so card visits make about card_share of all visits. Visits start within opening
hours (07:00-22:00, busier late afternoon); tickets are numbered per store and day by start time.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from demandprep.demo.arrays import rank_within_runs
from demandprep.demo.spec import WorldSpec
from demandprep.demo.stores import Households, Stores

# Monday..Sunday, mean 1
WEEKDAY_FACTORS = np.array([0.90, 0.85, 0.90, 0.95, 1.10, 1.30, 1.00])
WEEKDAY_FACTORS = WEEKDAY_FACTORS / WEEKDAY_FACTORS.mean()
OPENING_HOUR = 7
# relative traffic of each opening hour 07..21
HOUR_WEIGHTS = np.array([3, 5, 6, 6, 7, 8, 7, 6, 7, 9, 11, 11, 9, 6, 4], dtype=float)
HOUR_WEIGHTS = HOUR_WEIGHTS / HOUR_WEIGHTS.sum()


@dataclass(frozen=True)
class Visits:
    """One day's visits sorted by store and start time."""

    store: np.ndarray
    household: np.ndarray  # -1 for anonymous shoppers
    start_second: np.ndarray  # seconds after midnight, local time
    ticket_seq: np.ndarray  # 1.. within store and day

    @property
    def count(self) -> int:
        """Number of visits."""
        return len(self.store)


def draw_visits(
    spec: WorldSpec, stores: Stores, households: Households, day: int, rng: np.random.Generator
) -> Visits:
    """Draw the visits of day index `day` (0 = spec.start)."""
    is_open = stores.open_day <= day
    expected = spec.visits_per_store_day * stores.size * WEEKDAY_FACTORS[day % 7] * is_open
    anonymous = rng.poisson((1.0 - spec.card_share) * expected)
    home = households.home_store
    per_store = np.bincount(home, minlength=stores.count)
    rate = spec.card_share * expected[home] * households.propensity / per_store[home]
    card_holders = np.nonzero(rng.random(len(home)) < np.minimum(rate, 1.0))[0]
    store = np.concatenate([np.repeat(np.arange(stores.count), anonymous), home[card_holders]])
    household = np.concatenate([np.full(anonymous.sum(), -1), card_holders])
    hour = OPENING_HOUR + rng.choice(len(HOUR_WEIGHTS), size=len(store), p=HOUR_WEIGHTS)
    start = 3600 * hour + rng.integers(0, 3600, size=len(store))
    order = np.lexsort((household, start, store))
    store, household, start = store[order], household[order], start[order]
    return Visits(store, household, start, rank_within_runs(store))
