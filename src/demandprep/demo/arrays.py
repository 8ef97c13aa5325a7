"""Small vectorised helpers over runs of equal values in sorted arrays."""

from __future__ import annotations

import numpy as np


def rank_within_runs(groups: np.ndarray) -> np.ndarray:
    """1-based position of each element inside its run of equal (sorted) group values."""
    if len(groups) == 0:
        return np.zeros(0, dtype=np.int64)
    index = np.arange(len(groups))
    starts = np.r_[True, groups[1:] != groups[:-1]]
    return index - np.maximum.accumulate(np.where(starts, index, 0)) + 1


def cumsum_within_runs(groups: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Running sum of non-negative values restarting at each run of equal group values."""
    total = np.cumsum(values)
    if len(groups) == 0:
        return total
    starts = np.r_[True, groups[1:] != groups[:-1]]
    before = np.where(starts, total - values, 0)
    return total - np.maximum.accumulate(before)
