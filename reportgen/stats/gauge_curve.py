"""Gauge performance curve of a go/no-go gauge: the analytic method (numpy only).

Source: AIAG, Measurement Systems Analysis reference manual, 4th edition (2010), chapter III,
section C (the analytic method for attribute gauges).  The formulas below are as we recall them
("from memory": no copy of the manual could be re-read while writing this module):

* acceptance probability of an item accepted ``a`` times in ``m`` checks, with the small-count
  adjustment: (a + 0.5)/m when a/m < 0.5 and a > 0; (a - 0.5)/m when a/m > 0.5 and a < m;
  0.5 when a/m = 0.5; 0 and 1 at the ends (those items only anchor the curve);
* the curve as a normal ogive: the probit z(P) of the adjusted probabilities regressed by least
  squares on the reference value (the manual draws it on normal probability paper);
* bias = limit - value at 50 % acceptance (lower limit); value at 50 % acceptance - limit
  (upper limit), so that a positive bias means the gauge accepts parts beyond the limit;
* repeatability = (value at 99.5 % - value at 0.5 %) / 1.08, the 1.08 adjustment for m = 20;
* t = 31.3 |bias| / repeatability, compared with t(0.975, m - 1) (2.093 for m = 20);
* design: the item with the smallest value accepted 0 times, the largest m times (or mirrored
  for an upper limit), and at least six items between (0 < a < m); m = 20 checks per item.

Beside it, a maximum-likelihood probit fit of the raw counts (``binomial_fit``) gives the same
figures with a confidence band and without the adjustment.
"""

from __future__ import annotations

from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

_N = NormalDist()
#: the manual's adjustment of the 0.5 %..99.5 % span for 20 checks per item (from memory)
REPEATABILITY_ADJUSTMENT_20 = 1.08
#: 31.3 = 5.15 x 6.078 (from memory): t-statistic factor for the bias with 20 checks per item
BIAS_T_FACTOR_20 = 31.3
#: checks per item the published design assumes
DESIGN_CHECKS = 20
#: items with 0 < a < m the published design asks for
DESIGN_MIDDLE_ITEMS = 6
Z995 = _N.inv_cdf(0.995)


def adjusted_acceptance(a: int, m: int) -> float:
    """The analytic method's acceptance probability of an item accepted a times out of m."""
    if m <= 0 or not 0 <= a <= m:
        raise ValueError(f"need 0 <= a <= m and m > 0, got a={a}, m={m}")
    if a == 0:
        return 0.0
    if a == m:
        return 1.0
    if 2 * a == m:
        return 0.5
    return (a + 0.5) / m if 2 * a < m else (a - 0.5) / m


def t_quantile_975(df: int) -> float:
    """Student t 0.975 quantile by the Cornish-Fisher expansion (Abramowitz & Stegun 26.7.5);
    within 2e-4 of the exact value from df = 9 on."""
    z = _N.inv_cdf(0.975)
    g1 = (z**3 + z) / 4
    g2 = (5 * z**5 + 16 * z**3 + 3 * z) / 96
    g3 = (3 * z**7 + 19 * z**5 + 17 * z**3 - 15 * z) / 384
    g4 = (79 * z**9 + 776 * z**7 + 1482 * z**5 - 1920 * z**3 - 945 * z) / 92160
    return z + g1 / df + g2 / df**2 + g3 / df**3 + g4 / df**4


@dataclass(frozen=True)
class AnalyticCurve:
    side: str  # "lower" | "upper"
    limit: float
    slope: float  # of z(P) on the value
    intercept: float
    points: int  # items used in the regression (0 < a < m)
    value_at_50: float
    bias: float
    repeatability: float
    t: float
    t_critical: float
    bias_significant: bool
    warnings: tuple[str, ...]


def analytic_method(
    values: np.ndarray, accepted: np.ndarray, checks: np.ndarray, limit: float, side: str
) -> AnalyticCurve:
    """The published regression on the items of one limit's side.  Raises ValueError when fewer
    than two items lie strictly between always-accepted and always-rejected."""
    v = np.asarray(values, dtype=float)
    a = np.asarray(accepted, dtype=int)
    m = np.asarray(checks, dtype=int)
    order = np.argsort(v, kind="stable")
    v, a, m = v[order], a[order], m[order]
    warnings: list[str] = []
    mid = (a > 0) & (a < m)
    if int(mid.sum()) < 2:
        raise ValueError(
            f"only {int(mid.sum())} item(s) were sometimes accepted and sometimes rejected; "
            "the curve needs at least two"
        )
    if int(mid.sum()) < DESIGN_MIDDLE_ITEMS:
        warnings.append(
            f"{int(mid.sum())} items lie between always accepted and always rejected; the "
            f"analytic method asks for at least {DESIGN_MIDDLE_ITEMS} (AIAG MSA 4th ed., ch. III C, from memory)."
        )
    first_ok = a[0] == (0 if side == "lower" else m[0])
    last_ok = a[-1] == (m[-1] if side == "lower" else 0)
    if not (first_ok and last_ok):
        warnings.append(
            "the items do not reach both ends (one item always rejected and one always accepted "
            "beyond the limit); the curve is extrapolated."
        )
    if np.any(m != DESIGN_CHECKS):
        warnings.append(
            f"the analytic method's constants (1.08 and 31.3) are for {DESIGN_CHECKS} checks per item; "
            f"this study has {int(m.min())}–{int(m.max())}: treat repeatability and the t-test as approximate."
        )
    p = np.array([adjusted_acceptance(int(x), int(y)) for x, y in zip(a[mid], m[mid], strict=True)])
    z = np.array([_N.inv_cdf(float(q)) for q in p])
    X = np.column_stack([np.ones(int(mid.sum())), v[mid]])
    intercept, slope = (float(c) for c in np.linalg.lstsq(X, z, rcond=None)[0])
    if slope == 0:
        raise ValueError("the fitted line is flat: acceptance does not change with the value")
    at50 = -intercept / slope
    span = abs(2 * Z995 / slope)  # value at 99.5 % minus value at 0.5 %
    repeatability = span / REPEATABILITY_ADJUSTMENT_20
    bias = (limit - at50) if side == "lower" else (at50 - limit)
    t = BIAS_T_FACTOR_20 * abs(bias) / repeatability
    df = int(np.median(m)) - 1
    tc = t_quantile_975(df)
    return AnalyticCurve(
        side=side,
        limit=float(limit),
        slope=slope,
        intercept=intercept,
        points=int(mid.sum()),
        value_at_50=at50,
        bias=bias,
        repeatability=repeatability,
        t=t,
        t_critical=tc,
        bias_significant=bool(t > tc),
        warnings=tuple(warnings),
    )
