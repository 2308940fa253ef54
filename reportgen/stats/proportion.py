"""Binomial proportions with intervals, and the zero-failure sample size.

Two interval methods:

- ``"clopper-pearson"`` (default): the exact interval of Clopper & Pearson (1934), from beta
  quantiles; the lower bound is 0 when there are no successes and the upper bound 1 when every
  trial succeeded.  Guaranteed coverage of at least the nominal level.
- ``"wilson"``: the score interval of Wilson (1927), without continuity correction
  (method 3 of Newcombe 1998).

Validated against: Conover (1999) exact limits for 5/25 (0.068, 0.407); Newcombe (1998,
Statistics in Medicine 17:857-872) illustrative intervals (from memory); the closed forms of
Clopper & Pearson (1934) for 0/n and n/n; scipy.stats.binomtest (test-only cross-check).
"""

from __future__ import annotations

import math
import numbers
from statistics import NormalDist
from typing import Literal

from .results import Estimate

ProportionMethod = Literal["clopper-pearson", "wilson"]

_METHOD_LABELS: dict[str, str] = {
    "clopper-pearson": "exact (Clopper-Pearson 1934)",
    "wilson": "score (Wilson 1927)",
}


def _confidence_level_iv(confidence_level: float) -> float:
    level = float(confidence_level)
    if not (0.0 < level < 1.0) or math.isnan(level):
        raise ValueError(
            f"confidence_level must be strictly between 0 and 1, got {confidence_level!r}"
        )
    return level


def _count_iv(value: object, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"{name} must be an integer count, got {value!r}")
    if isinstance(value, numbers.Integral):
        as_int = int(value)
    elif math.isfinite(float(value)) and float(value).is_integer():
        as_int = int(value)
    else:
        raise ValueError(f"{name} must be a whole number, got {value!r}")
    if as_int < 0:
        raise ValueError(f"{name} must not be negative, got {as_int}")
    return as_int


def normal_quantile(confidence_level: float) -> float:
    """Two-sided standard-normal critical value z_{1-(1-level)/2} (e.g. 1.959964 for 0.95)."""
    level = _confidence_level_iv(confidence_level)
    return NormalDist().inv_cdf(0.5 + level / 2.0)


def clopper_pearson_interval(
    successes: int, n: int, confidence_level: float = 0.95
) -> tuple[float, float]:
    """Exact interval: beta quantiles B(a/2; x, n-x+1) and B(1-a/2; x+1, n-x) (Clopper & Pearson 1934).

    Validated against: Conover (1999) limits for 5/25; Newcombe (1998) Table II (from memory);
    the tail-area definition via scipy.stats.binom; scipy.stats.binomtest (test-only).
    """
    from scipy.special import betaincinv

    alpha = 1.0 - _confidence_level_iv(confidence_level)
    x = _count_iv(successes, "successes")
    n = _count_iv(n, "n")
    if n == 0:
        raise ValueError("an interval needs at least one trial")
    if x > n:
        raise ValueError(f"successes ({x}) must not exceed n ({n})")
    low = 0.0 if x == 0 else float(betaincinv(x, n - x + 1, alpha / 2.0))
    high = 1.0 if x == n else float(betaincinv(x + 1, n - x, 1.0 - alpha / 2.0))
    return low, high


def wilson_interval(successes: int, n: int, confidence_level: float = 0.95) -> tuple[float, float]:
    """Score interval (Wilson 1927): centre (x + z²/2)/(n + z²), half-width z√(x(n-x)/n + z²/4)/(n + z²).

    Validated against: Newcombe (1998) Table II, method 3 (from memory); inversion of the score
    test; scipy.stats.binomtest (test-only).
    """
    z = normal_quantile(confidence_level)
    x = _count_iv(successes, "successes")
    n = _count_iv(n, "n")
    if n == 0:
        raise ValueError("an interval needs at least one trial")
    if x > n:
        raise ValueError(f"successes ({x}) must not exceed n ({n})")
    z2 = z * z
    centre = (x + z2 / 2.0) / (n + z2)
    half = z * math.sqrt(x * (n - x) / n + z2 / 4.0) / (n + z2)
    # The closed form gives exactly 0 / 1 at x = 0 / x = n up to rounding; pin them.
    low = 0.0 if x == 0 else max(0.0, centre - half)
    high = 1.0 if x == n else min(1.0, centre + half)
    return low, high


def proportion(
    successes: int,
    n: int,
    *,
    confidence_level: float = 0.95,
    method: ProportionMethod = "clopper-pearson",
) -> Estimate:
    """Proportion ``successes / n`` with a two-sided interval.

    ``se`` is the binomial standard error √(p(1-p)/n) (for information; the interval does not use
    it).  ``items`` is ``n`` and ``agreeing`` is ``successes``.  With ``n == 0`` the estimate is
    ``None`` and a warning says why.

    Validated against: Conover (1999) exact limits for 5/25; Newcombe (1998) Table II
    illustrative intervals (from memory); Clopper & Pearson (1934) closed forms at 0/n and n/n.
    """
    level = _confidence_level_iv(confidence_level)
    if method not in _METHOD_LABELS:
        raise ValueError(f"unknown interval method {method!r}; use 'clopper-pearson' or 'wilson'")
    x = _count_iv(successes, "successes")
    m = _count_iv(n, "n")
    if x > m:
        raise ValueError(f"successes ({x}) must not exceed n ({m})")
    if m == 0:
        return Estimate(
            estimate=None,
            ci_method=_METHOD_LABELS[method],
            confidence_level=level,
            items=0,
            agreeing=0,
            warnings=("The proportion is undefined: there are no items to count.",),
        )
    p = x / m
    if method == "clopper-pearson":
        low, high = clopper_pearson_interval(x, m, level)
    else:
        low, high = wilson_interval(x, m, level)
    return Estimate(
        estimate=p,
        se=math.sqrt(p * (1.0 - p) / m),
        ci_low=low,
        ci_high=high,
        ci_method=_METHOD_LABELS[method],
        confidence_level=level,
        items=m,
        agreeing=x,
    )


def zero_failure_sample_size(reliability: float, confidence: float) -> int:
    """Smallest n such that n passes with no failure show ``reliability`` at ``confidence``.

    Zero failures in n trials has probability R^n when the true success rate is R; the smallest n
    with R^n ≤ 1 - C is n = ceil(ln(1 - C) / ln(R)) (the success-run relation; e.g. 59 for
    R = C = 0.95, 90 for R = 0.95 and C = 0.99, 299 for R = 0.99 and C = 0.95).
    It equals the n at which the exact (Clopper-Pearson) one-sided lower bound for n/n reaches R.

    Validated against: the minimality R^n ≤ 1 − C < R^(n−1) and the Clopper & Pearson (1934)
    one-sided bound (1 − C)^(1/n) for n/n (the 59 / 90 / 299 figures are common practice, no
    source).
    """
    r = float(reliability)
    c = float(confidence)
    if not (0.0 < r < 1.0):
        raise ValueError(f"reliability must be strictly between 0 and 1, got {reliability!r}")
    if not (0.0 < c < 1.0):
        raise ValueError(f"confidence must be strictly between 0 and 1, got {confidence!r}")
    target = math.log1p(-c)
    log_r = math.log(r)
    n = max(1, math.ceil(target / log_r))
    # Guard the ceiling against rounding in the division (e.g. an exact integer ratio).
    while n > 1 and (n - 1) * log_r <= target * (1.0 - 1e-12):
        n -= 1
    while n * log_r > target * (1.0 - 1e-12):
        n += 1
    return n
