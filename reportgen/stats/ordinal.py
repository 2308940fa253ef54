"""Ordered-scale counting: how many steps apart ratings are, and the mean signed offset.

These are counts and a mean, not agreement coefficients.  Categories are integer indices
``0 .. k-1`` in their declared order (first = best); ``-1`` is a missing rating.  The signed
offset of a rating is ``rating - reference``: positive means the rating lies towards the later
(worse) categories, i.e. the rater was stricter than the reference; negative means more lenient.
"""

from __future__ import annotations

import math

import numpy as np

from .results import Estimate


def signed_offset_counts(ratings: np.ndarray, reference: np.ndarray, k: int) -> np.ndarray:
    """Counts of ``rating - reference`` for offsets ``-(k-1) .. k-1`` (length ``2k - 1``).

    Only pairs where both are present (``>= 0``) are counted.  Index ``k - 1`` is offset 0.
    """
    a = np.asarray(ratings).ravel()
    b = np.asarray(reference).ravel()
    if a.shape != b.shape:
        raise ValueError(
            f"ratings and reference must have the same length, got {a.shape} and {b.shape}"
        )
    ok = (a >= 0) & (b >= 0)
    d = a[ok].astype(np.int64) - b[ok].astype(np.int64) + (k - 1)
    return np.bincount(d, minlength=2 * k - 1).astype(np.int64)


def pair_distance_counts(counts: np.ndarray) -> np.ndarray:
    """Number of unordered rating pairs within items that are ``d`` steps apart, ``d = 0 .. k-1``.

    ``counts`` is the items × categories table (ratings per category per item).  Pairs are
    formed only among the ratings of the same item.
    """
    c = np.asarray(counts, dtype=np.int64)
    if c.ndim != 2:
        raise ValueError("counts must be an items × categories table")
    k = c.shape[1]
    out = np.zeros(k, dtype=np.int64)
    out[0] = int((c * (c - 1)).sum() // 2)
    for d in range(1, k):
        out[d] = int((c[:, :-d] * c[:, d:]).sum())
    return out


def mean_signed_offset(
    offset_sums: np.ndarray,
    rating_counts: np.ndarray,
    *,
    confidence_level: float = 0.95,
) -> Estimate:
    """Mean of ``rating - reference`` over all ratings, with an item-clustered standard error.

    The ratings of one item (several trials) are not independent, so items are the clusters:
    with per-item offset sums ``s_i`` and rating counts ``n_i`` the mean is ``Σ s_i / Σ n_i``
    and its variance the usual ratio-estimator (cluster-robust) form
    ``N/(N-1) · Σ (s_i - mean · n_i)² / (Σ n_i)²`` over the ``N`` items with ratings
    (Cochran 1977, *Sampling Techniques*, 3rd ed., §6.4, ratio estimate variance).  The interval
    is normal.  ``items`` is the number of items with ratings; ``agreeing`` does not apply and
    is ``None``.
    """
    s = np.asarray(offset_sums, dtype=np.float64).ravel()
    n = np.asarray(rating_counts, dtype=np.float64).ravel()
    used = n > 0
    s, n = s[used], n[used]
    n_items = int(used.sum())
    total = float(n.sum())
    if total == 0:
        return Estimate(
            estimate=None,
            items=0,
            warnings=("The mean offset is undefined: no rating has a reference to compare with.",),
        )
    mean = float(s.sum()) / total
    if n_items < 2:
        return Estimate(
            estimate=mean,
            items=n_items,
            warnings=("The mean offset has no interval: it comes from a single item.",),
        )
    from statistics import NormalDist

    resid = s - mean * n
    var = n_items / (n_items - 1) * float((resid * resid).sum()) / (total * total)
    se = math.sqrt(var)
    z = NormalDist().inv_cdf(0.5 + confidence_level / 2.0)
    return Estimate(
        estimate=mean,
        se=se,
        ci_low=mean - z * se,
        ci_high=mean + z * se,
        ci_method="normal, items as clusters",
        confidence_level=confidence_level,
        items=n_items,
    )
