"""Intervals for a rate counted over repeated ratings of the same items (the item as the unit).

With two or more trials, the ratings of one item are not independent: an item that is hard to
call is missed in several trials.  The rate p = X / M (X events in M ratings) keeps its value,
but its variance is the cluster-robust (ratio-estimator) variance over items

    V = n / (n - 1) * sum_i (x_i - p m_i)^2 / M^2          (n items with ratings, x_i of m_i)

and the design effect D = V / (p (1 - p) / M) (Kish 1965) shrinks the counts to the effective
sample size M / D before the Wilson (1927) score interval is formed: the design-effect adjusted
interval of Rao & Scott (1992) and Donner & Klar (2000, ch. 6).  D is taken as at least 1 (no
adjustment when the ratings vary less between items than independent ratings would, or when
no event or only events were seen, where D cannot be estimated).

Validated against: the independent Wilson interval when every item has one rating (D = 1 up to
the n/(n-1) factor, which is then not applied); a seeded coverage simulation (tests).
Every function works on the last axis, so many studies can be computed at once.
"""

from __future__ import annotations

from statistics import NormalDist

import numpy as np


def design_effect(events: np.ndarray, ratings: np.ndarray) -> np.ndarray:
    """Design effect of the rate sum(events) / sum(ratings) over items (last axis), at least 1."""
    x = np.asarray(events, dtype=float)
    m = np.asarray(ratings, dtype=float)
    big_m = m.sum(axis=-1)
    n = (m > 0).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = x.sum(axis=-1) / big_m
        resid = x - p[..., None] * m
        v_clu = n / (n - 1.0) * (resid**2).sum(axis=-1) / big_m**2
        v_bin = p * (1.0 - p) / big_m
        deff = np.where((v_bin > 0) & (n > 1), v_clu / v_bin, 1.0)
    return np.maximum(np.nan_to_num(deff, nan=1.0), 1.0)


def clustered_wilson(
    events: np.ndarray, ratings: np.ndarray, confidence_level: float = 0.95
) -> dict[str, np.ndarray]:
    """Design-effect adjusted Wilson interval of sum(events) / sum(ratings) (last axis = items).

    Returns arrays ``estimate``, ``ci_low``, ``ci_high``, ``se`` (cluster-robust),
    ``design_effect`` and ``effective_n``.
    """
    x = np.asarray(events, dtype=float)
    m = np.asarray(ratings, dtype=float)
    big_m = m.sum(axis=-1)
    if np.any(big_m <= 0):
        raise ValueError("an interval needs at least one rating")
    p = x.sum(axis=-1) / big_m
    deff = design_effect(x, m)
    n_eff = big_m / deff
    z = NormalDist().inv_cdf(0.5 + confidence_level / 2.0)
    z2 = z * z
    centre = (p + z2 / (2.0 * n_eff)) / (1.0 + z2 / n_eff)
    half = z * np.sqrt(p * (1.0 - p) / n_eff + z2 / (4.0 * n_eff**2)) / (1.0 + z2 / n_eff)
    low = np.where(p <= 0.0, 0.0, np.maximum(0.0, centre - half))
    high = np.where(p >= 1.0, 1.0, np.minimum(1.0, centre + half))
    se = np.sqrt(deff * p * (1.0 - p) / big_m)
    return {
        "estimate": p,
        "ci_low": low,
        "ci_high": high,
        "se": se,
        "design_effect": deff,
        "effective_n": n_eff,
    }


def independent_wilson(
    events: np.ndarray, ratings: np.ndarray, confidence_level: float = 0.95
) -> tuple[np.ndarray, np.ndarray]:
    """The Wilson interval that counts every rating as independent (for comparison only)."""
    x = np.asarray(events, dtype=float).sum(axis=-1)
    n = np.asarray(ratings, dtype=float).sum(axis=-1)
    z = NormalDist().inv_cdf(0.5 + confidence_level / 2.0)
    z2 = z * z
    p = x / n
    centre = (x + z2 / 2.0) / (n + z2)
    half = z * np.sqrt(x * (n - x) / n + z2 / 4.0) / (n + z2)
    return np.where(p <= 0, 0.0, centre - half), np.where(p >= 1, 1.0, centre + half)
