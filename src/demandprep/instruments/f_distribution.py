"""The F distribution's upper tail, for the first stage's p-value, without importing scipy.

P(F > f) with (d1, d2) degrees of freedom is the regularized incomplete beta function
I_x(d2 / 2, d1 / 2) at x = d2 / (d2 + d1 f) (Abramowitz & Stegun 26.6.2), evaluated by its
continued fraction (DLMF 8.17.22) with the modified Lentz method, on the side of the mean
where it converges fast. scipy's start-up (about a third of a second) was paid by every
build for this one number; `tests/test_f_distribution.py` holds it to scipy.special.fdtrc.
"""

from __future__ import annotations

import math

PRECISION = 1e-16
TINY = 1e-300
MAX_TERMS = 1_000_000


def f_survival(df_num: float, df_den: float, f_value: float) -> float:
    """P(F > f_value) for an F distribution with `df_num` and `df_den` degrees of freedom."""
    if f_value <= 0:
        return 1.0
    if math.isinf(f_value):
        return 0.0
    total = df_den + df_num * f_value
    # x and 1 - x each from its own ratio, so neither is lost to cancellation
    return regularized_beta(df_den / total, df_num * f_value / total, df_den / 2, df_num / 2)


def regularized_beta(x: float, one_minus_x: float, a: float, b: float) -> float:
    """I_x(a, b), given x and 1 - x separately."""
    if x <= 0:
        return 0.0
    if one_minus_x <= 0:
        return 1.0
    if x > (a + 1) / (a + b + 2):
        # I_x(a, b) = 1 - I_{1-x}(b, a); the fraction converges fast below that point
        return 1.0 - regularized_beta(one_minus_x, x, b, a)
    log_front = (
        a * math.log(x)
        + b * math.log(one_minus_x)
        - (math.lgamma(a) + math.lgamma(b) - math.lgamma(a + b))
    )
    return math.exp(log_front) * _beta_fraction(x, a, b) / a


def _beta_fraction(x: float, a: float, b: float) -> float:
    # modified Lentz: the even and odd terms of DLMF 8.17.22, two per step
    c = 1.0
    d = _nonzero(1.0 - (a + b) * x / (a + 1.0))
    fraction = 1.0 / d
    d = 1.0 / d
    for m in range(1, MAX_TERMS):
        for term in (
            m * (b - m) * x / ((a + 2 * m - 1) * (a + 2 * m)),
            -(a + m) * (a + b + m) * x / ((a + 2 * m) * (a + 2 * m + 1)),
        ):
            d = 1.0 / _nonzero(1.0 + term * d)
            c = _nonzero(1.0 + term / c)
            fraction *= d * c
        if abs(d * c - 1.0) <= PRECISION:
            return fraction
    raise ArithmeticError(f"the incomplete beta fraction did not converge (a={a}, b={b}, x={x})")


def _nonzero(value: float) -> float:
    return value if abs(value) >= TINY else TINY
