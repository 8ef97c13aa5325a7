"""Named random streams: every random draw of the demo world comes from a generator keyed by
(seed, stream, keys...), so a day's or a week's draws do not depend on how the work is chunked."""

from __future__ import annotations

from enum import IntEnum

import numpy as np


class Stream(IntEnum):
    """One independent random stream per purpose."""

    CATALOGUE = 1
    STORES = 2
    HOUSEHOLDS = 3
    COSTS = 4
    STORE_WEEK = 5
    DAY = 6
    FAULTS = 7
    ASSORTMENT = 8


def stream_rng(seed: int, stream: Stream, *keys: int) -> np.random.Generator:
    """A generator for one stream and key path, e.g. stream_rng(7, Stream.DAY, 41)."""
    return np.random.default_rng(np.random.SeedSequence([seed, int(stream), *keys]))
