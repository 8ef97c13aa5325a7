"""The first-stage partial F test in numpy: price on excluded instruments and exogenous terms.

Definition (homoskedastic, the classic F of nested least-squares models):

    F = ((RSS_r - RSS_u) / q) / (RSS_u / (n - k_u))

RSS_u: residual sum of squares of price on [constant, exogenous, fixed effects, instruments];
RSS_r: the same without the instruments; q = rank(full) - rank(restricted), the number of
independent excluded instruments; k_u = rank of the full design, fixed effects included.
It equals linearmodels' IV2SLS first-stage ``f.stat`` with cov_type="unadjusted", debiased=True.

The heteroskedasticity-robust F is the Wald statistic of the instruments' coefficients with the
White (HC0) covariance scaled by n / (n - k), divided by q: b' V^-1 b / q, V = (Z'Z)^-1
(sum e_i^2 z_i z_i') (Z'Z)^-1 n / (n - k), Z the instruments with the exogenous terms and effects
partialled out (Frisch-Waugh-Lovell). It equals linearmodels' first-stage ``f.stat`` with
cov_type="robust", debiased=True.

Fixed effects: the one with most levels is absorbed exactly by demeaning within its groups
(its levels are added to the rank); any other enters as dummy columns. Ranks are numerical ranks
of the column-scaled designs, so collinear columns (e.g. characteristics constant within a
product under product fixed effects) are dropped instead of breaking the solve.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from demandprep.instruments.f_distribution import f_survival

VANISHED = 1e-10


@dataclass(frozen=True)
class PartialFTest:
    """Result of the first-stage partial F test."""

    partial_f: float | None
    df_num: int
    df_den: int
    p_value: float | None
    coefficients: list[float]
    partial_f_robust: float | None = None


def partial_f_test(
    endogenous: np.ndarray,
    instruments: np.ndarray,
    exogenous: np.ndarray,
    fixed_effects: list[np.ndarray] | None = None,
) -> PartialFTest:
    """Partial F of `instruments` (n x q) for `endogenous` (n), given `exogenous` (n x k) + a
    constant and the integer-coded `fixed_effects` (each of length n)."""
    y = np.asarray(endogenous, dtype=float)
    z = np.asarray(instruments, dtype=float).reshape(len(y), -1)
    x = np.column_stack([np.ones(len(y)), np.asarray(exogenous, dtype=float).reshape(len(y), -1)])
    absorbed, dummies = absorbed_and_dummies(fixed_effects or [], len(y))
    x = np.column_stack([x, dummies])
    absorbed_levels = 0
    if absorbed is not None:
        y, z, x = (demean_within(a, absorbed) for a in (y, z, x))
        absorbed_levels = absorbed.levels
    rss_r, rank_r, _ = _least_squares(x, y)
    rss_u, rank_u, beta = _least_squares(np.column_stack([x, z]), y)
    df_num = rank_u - rank_r
    df_den = len(y) - rank_u - absorbed_levels
    coefficients = [float(b) for b in beta[x.shape[1] :]]
    if df_num <= 0 or df_den <= 0 or rss_u <= 0:
        return PartialFTest(None, df_num, df_den, None, coefficients)
    f_value = ((rss_r - rss_u) / df_num) / (rss_u / df_den)
    p_value = f_survival(df_num, df_den, f_value)
    robust = _robust_f(_partialled(z, x), _partialled(y, x), df_num, len(y) / df_den)
    return PartialFTest(float(f_value), df_num, df_den, p_value, coefficients, robust)


def _partialled(z: np.ndarray, x: np.ndarray) -> np.ndarray:
    """The instruments' residuals after least squares on the exogenous design."""
    scale = np.linalg.norm(x, axis=0)
    scale[scale == 0] = 1.0
    gamma, *_ = np.linalg.lstsq(x / scale, z, rcond=None)
    return z - (x / scale) @ gamma


def _robust_f(z: np.ndarray, y: np.ndarray, df_num: int, debias: float) -> float | None:
    """Wald / q of the instruments with the n / (n - k) scaled White covariance; `z` and `y`
    have the exogenous design partialled out."""
    bread = np.linalg.pinv(z.T @ z)
    coefficients = bread @ (z.T @ y)
    residual = y - z @ coefficients
    meat = (z * (residual**2)[:, None]).T @ z
    covariance = debias * bread @ meat @ bread
    wald = coefficients @ np.linalg.pinv(covariance) @ coefficients
    return float(wald / df_num) if np.isfinite(wald) else None


def _least_squares(design: np.ndarray, y: np.ndarray) -> tuple[float, int, np.ndarray]:
    """Residual sum of squares, numerical rank and coefficients of y on design."""
    scale = np.linalg.norm(design, axis=0)
    scale[scale == 0] = 1.0
    # Scaling each column leaves the fitted values unchanged and makes the rank cut-off fair.
    scaled, _, rank, _ = np.linalg.lstsq(design / scale, y, rcond=None)
    residual = y - (design / scale) @ scaled
    return float(residual @ residual), int(rank), scaled / scale


@dataclass(frozen=True)
class Groups:
    """The levels of an integer-coded effect: each row's level as 0, 1, ... (in sorted code
    order) and the rows per level, found once (a sort of every row) for all its uses."""

    index: np.ndarray
    counts: np.ndarray

    @classmethod
    def of(cls, codes: np.ndarray) -> Groups:
        _, index = np.unique(codes, return_inverse=True)
        return cls(index.reshape(-1), np.bincount(index.reshape(-1)))

    @property
    def levels(self) -> int:
        return len(self.counts)


def absorbed_and_dummies(
    fixed_effects: list[np.ndarray], rows: int
) -> tuple[Groups | None, np.ndarray]:
    """The effect with most levels, to absorb by demeaning within it (None without effects),
    and the 0/1 columns of the others (rows x 0 when there are none)."""
    groups = sorted(map(Groups.of, fixed_effects), key=lambda g: g.levels, reverse=True)
    dummies = np.column_stack([np.empty((rows, 0)), *(dummy_columns(g) for g in groups[1:])])
    return (groups[0] if groups else None), dummies


def dummy_columns(groups: Groups) -> np.ndarray:
    """One 0/1 column per level of an effect."""
    out = np.zeros((len(groups.index), groups.levels))
    out[np.arange(len(groups.index)), groups.index] = 1.0
    return out


def demean_within(values: np.ndarray, groups: Groups) -> np.ndarray:
    """Subtract group means (the within transformation of a one-way fixed effect)."""
    index, counts = groups.index, groups.counts
    matrix = values.reshape(len(values), -1)
    demeaned = matrix.copy()
    for j in range(matrix.shape[1]):
        demeaned[:, j] -= (np.bincount(index, weights=matrix[:, j]) / counts)[index]
    # A column constant within groups leaves rounding noise, which scaling would blow up into a
    # spurious regressor: zero it so the rank drops it.
    before = np.linalg.norm(matrix, axis=0)
    after = np.linalg.norm(demeaned, axis=0)
    demeaned[:, after <= VANISHED * before] = 0.0
    return demeaned.reshape(values.shape)


def is_finite(value: float | None) -> bool:
    """Whether a statistic is a usable number."""
    return value is not None and math.isfinite(value)
