"""Kendall's rank statistics for ordinal ratings: coefficient of concordance W and tau-b.

Both are rank-based and not sums over items, so they have no ``_features`` / ``_from_sums``
pair and are not bootstrapped: the analysis reports their analytic tests (and, for tau-b, the
analytic interval) only.

- :func:`kendall_w` — Kendall & Babington Smith (1939) coefficient of concordance of m raters
  over n items, each rater's ratings turned into mid-ranks.  Tie correction per Kendall (1948),
  as also given by Siegel & Castellan (1988) (chapter on W; from memory): W = 12 S / (m²(n³ − n) − m Σ_j T_j), T_j = Σ (t³ − t) over
  rater j's tie groups.  Test: χ² = m(n − 1) W on n − 1 degrees of freedom (equal to
  Friedman's tie-corrected statistic).
- :func:`kendall_tau_b` — Kendall (1945) tau-b of two rating vectors.  Test of τ = 0 from the
  exact null variance of S under ties (Kendall 1948, *Rank Correlation Methods*, ch. 4);
  interval from the large-sample non-null (delta-method) standard error of Brown & Benedetti
  (1977), as given by Agresti (2010, *Analysis of Ordinal Categorical Data*)
  [formula from memory, checked against the jackknife in the tests].  Tau-b is computed from the
  contingency table of the two ratings (no O(n²) pair loop); W from per-rater category counts.

Validated against: scipy.stats.kendalltau (tau-b and its asymptotic p) and
scipy.stats.friedmanchisquare (test-only cross-checks); Kendall's relation between W and the
mean Spearman correlation; textbook W examples (see tests).
"""

from __future__ import annotations

import math

import numpy as np

from .proportion import _confidence_level_iv, normal_quantile
from .results import Estimate
from .tables import _ones

_SMALL = 1 << 14  # ratings up to which one bincount over every rater is used


def _int_codes(values: np.ndarray | list[int], name: str, *, widen: bool = True) -> np.ndarray:
    arr = np.asarray(values)
    if arr.size and (arr.dtype.kind not in "iu" or arr.dtype.kind == "b"):
        raise TypeError(f"{name} must hold integer category codes (-1 = missing), got {arr.dtype}")
    if widen or not arr.size:
        arr = arr.astype(np.int64, copy=False)
    if arr.size and arr.min() < -1:
        raise ValueError(f"{name} holds negative codes other than -1 (missing)")
    return arr


def _chi2_sf(x: float, df: int) -> float:
    from scipy.special import chdtrc

    return float(chdtrc(df, x))


# --------------------------------------------------------------------------- Kendall's W


def kendall_w(codes: np.ndarray | list[list[int]], *, confidence_level: float = 0.95) -> Estimate:
    """Kendall's coefficient of concordance W of ``codes`` (n_items × m_raters), tie-corrected.

    Each rater's ratings are ranked over the items (ties get mid-ranks).  Items with a missing
    rating (-1) are dropped with a warning.  ``p_value`` is the upper tail of χ² = m(n − 1)W on
    n − 1 df; there is no published interval, so ``ci_low``/``ci_high`` are ``None``
    (``confidence_level`` is kept for a uniform signature).  ``extra`` holds ``chi_square``,
    ``df``, ``raters``, ``tie_correction`` (Σ_j T_j) and ``mean_spearman``
    ((mW − 1)/(m − 1), Kendall's relation).  ``agreeing`` counts items all raters rated alike.

    Validated against: scipy.stats.friedmanchisquare (χ² equal to m(n − 1)W with ties);
    Kendall's W–Spearman relation; textbook examples (see tests).
    """
    level = _confidence_level_iv(confidence_level)
    c = _int_codes(codes, "codes", widen=False)  # small code dtypes kept; indices widened below
    if c.ndim != 2:
        raise ValueError(f"codes must be a 2-D array items × raters, got {c.ndim} dimension(s)")
    warnings: list[str] = []
    c = np.ascontiguousarray(c.T)  # raters × items: reductions over raters run on whole rows
    complete = (c >= 0).all(axis=0)
    dropped = int((~complete).sum())
    if dropped:
        warnings.append(
            f"Kendall's W leaves out {dropped} item(s) with a missing rating (it needs every "
            "rater's rating of every item)."
        )
        c = c[:, complete]
    m, n = c.shape
    same = np.ones(n, dtype=bool)
    for g in range(1, m):  # loop over raters, never over items (c may not be C-ordered here)
        same &= c[g] == c[0]
    agreeing = int(np.count_nonzero(same)) if m else 0

    def undefined(reason: str) -> Estimate:
        return Estimate(
            estimate=None,
            confidence_level=level,
            items=n,
            agreeing=agreeing,
            warnings=(*warnings, reason),
        )

    if m < 2:
        return undefined("Kendall's W is undefined: it needs at least two raters.")
    if n < 2:
        return undefined(
            "Kendall's W is undefined: it needs at least two items rated by every rater."
        )

    k = int(c.max()) + 1
    small = m * n <= _SMALL
    if small:  # every rater's counts in one bincount: rater g's codes in bins g·k .. g·k + k-1
        cell = c + (np.arange(m, dtype=np.intp) * k)[:, None]
        counts = np.bincount(cell.ravel(), minlength=m * k).reshape(m, k)  # (m, k)
    else:  # one pass per rater (never per item), without an index array of every rating
        counts = np.stack([np.bincount(c[g], minlength=k) for g in range(m)])
    below = np.cumsum(counts, axis=1) - counts
    midrank = below + (counts + 1) / 2.0  # (m, k): mid-rank of category c for rater j
    # R_i over raters; mid-ranks are halves of whole numbers, so these sums are exact
    if small:
        rank_sums = _ones(m) @ midrank.ravel().take(cell)
    else:
        rank_sums = np.zeros(n)
        for g in range(m):
            rank_sums += midrank[g].take(c[g])
    dev = rank_sums - m * (n + 1) / 2.0
    s = float(dev @ dev)
    ties = float((counts.astype(np.float64) ** 3 - counts).sum())
    denom = m * m * float(n**3 - n) - m * ties
    if denom <= 0.0:
        return undefined(
            "Kendall's W is undefined: every rater gave every item the same category, so there "
            "is no ranking to agree on."
        )
    w = 12.0 * s / denom
    df = n - 1
    chi2 = m * df * w
    p_value = _chi2_sf(chi2, df)
    if n <= 7:
        warnings.append(
            "The chi-square test of Kendall's W is approximate for fewer than 8 items "
            "(common practice, no source)."
        )
    flat_raters = int((counts.max(axis=1) == n).sum())
    if flat_raters:
        warnings.append(
            f"{flat_raters} rater(s) gave every item the same category and add no ranking "
            "information to Kendall's W."
        )
    return Estimate(
        estimate=w,
        confidence_level=level,
        p_value=p_value,
        items=n,
        agreeing=agreeing,
        warnings=tuple(warnings),
        extra={
            "chi_square": chi2,
            "df": df,
            "raters": m,
            "tie_correction": ties,
            "mean_spearman": (m * w - 1.0) / (m - 1.0),
            "test": "chi-square, n - 1 df (Kendall & Babington Smith 1939)",
        },
    )


# --------------------------------------------------------------------------- Kendall's tau-b


def _quadrant_sums(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per cell: counts of observations concordant (C) and discordant (D) with it."""
    # cum[i, j] = Σ_{i' < i, j' < j} t, padded so that every quadrant is a difference of it.
    cum = np.zeros((t.shape[0] + 1, t.shape[1] + 1))
    cum[1:, 1:] = t.cumsum(axis=0).cumsum(axis=1)
    total = cum[-1, -1]
    row_cum = cum[:, -1]  # Σ_{i' < i} all columns
    col_cum = cum[-1, :]  # Σ_{j' < j} all rows
    upper_left = cum[:-1, :-1]  # i' < i, j' < j
    above = row_cum[:-1, None]  # i' < i
    left = col_cum[None, :-1]  # j' < j
    upper_right = above - cum[:-1, 1:]  # i' < i, j' > j
    lower_left = left - cum[1:, :-1]  # i' > i, j' < j
    lower_right = (
        total - cum[1:, -1][:, None] - cum[-1, 1:][None, :] + cum[1:, 1:]
    )  # i' > i, j' > j
    return upper_left + lower_right, upper_right + lower_left


def kendall_tau_b(
    x: np.ndarray | list[int],
    y: np.ndarray | list[int],
    *,
    confidence_level: float = 0.95,
) -> Estimate:
    """Kendall's tau-b of two rating vectors over the positions where both are present.

    ``z`` and ``p_value`` (two-sided) test τ = 0 with the null variance of S under ties
    (Kendall 1948); the interval is τ ± z·ASE with the non-null delta-method ASE (Brown &
    Benedetti 1977; Agresti 2010), cut to [-1, 1].  ``items`` is the number of pairs used and
    ``agreeing`` the number with x == y.  ``extra``: ``s`` (concordant − discordant pairs),
    ``concordant``, ``discordant``, ``se_null`` (of tau-b under τ = 0).

    Validated against: scipy.stats.kendalltau (estimate and asymptotic p-value); the jackknife
    SE on large tables (ASE).
    """
    level = _confidence_level_iv(confidence_level)
    a = _int_codes(x, "x").ravel()
    b = _int_codes(y, "y").ravel()
    if a.shape != b.shape:
        raise ValueError(f"x and y must have the same length, got {a.size} and {b.size}")
    both = (a >= 0) & (b >= 0)
    a, b = a[both], b[both]
    n = int(a.size)
    agreeing = int((a == b).sum())
    method = "analytic (Brown-Benedetti 1977 delta method)"

    def undefined(reason: str) -> Estimate:
        return Estimate(
            estimate=None,
            ci_method=method,
            confidence_level=level,
            items=n,
            agreeing=agreeing,
            warnings=(reason,),
        )

    if n < 2:
        return undefined("Kendall's tau-b is undefined: it needs at least two rated pairs.")
    ky = int(b.max()) + 1
    t = np.bincount(a * ky + b, minlength=(int(a.max()) + 1) * ky).reshape(-1, ky)
    # Empty rows/columns change no pair count; drop them (categories nobody used).
    t = t[t.any(axis=1)][:, t.any(axis=0)].astype(np.float64)
    if t.shape[0] < 2 or t.shape[1] < 2:
        return undefined(
            "Kendall's tau-b is undefined: one of the two ratings puts every item in the same "
            "category, so there is no ordering to compare."
        )
    conc, disc = _quadrant_sums(t)
    p2 = float((t * conc).sum())  # 2 × concordant pairs
    q2 = float((t * disc).sum())  # 2 × discordant pairs
    rows = t.sum(axis=1)
    cols = t.sum(axis=0)
    nf = float(n)
    w_r = nf * nf - float(rows @ rows)
    w_c = nf * nf - float(cols @ cols)
    w = math.sqrt(w_r * w_c)
    tau = (p2 - q2) / w
    s = (p2 - q2) / 2.0

    # Null variance of S with ties in both rankings (Kendall 1948).
    def tie_sums(g: np.ndarray) -> tuple[float, float, float]:
        pairs = g * (g - 1.0)
        return float(pairs @ (2.0 * g + 5.0)), float(pairs.sum()), float(pairs @ (g - 2.0))

    tx1, tx2, tx3 = tie_sums(rows)
    ty1, ty2, ty3 = tie_sums(cols)
    var_s = (nf * (nf - 1) * (2 * nf + 5) - tx1 - ty1) / 18.0
    var_s += tx2 * ty2 / (2.0 * nf * (nf - 1))
    if n > 2:
        var_s += tx3 * ty3 / (9.0 * nf * (nf - 1) * (nf - 2))
    warnings: list[str] = []
    z: float | None = None
    p_value: float | None = None
    se_null: float | None = None
    if var_s > 0.0:
        z = s / math.sqrt(var_s)
        p_value = math.erfc(abs(z) / math.sqrt(2.0))
        se_null = math.sqrt(var_s) * 2.0 / w

    # Non-null ASE (delta method).
    d = conc - disc
    v = rows[:, None] * w_c + cols[None, :] * w_r
    inner = float((t * (2.0 * w * d + tau * v) ** 2).sum()) - nf**3 * tau * tau * (w_r + w_c) ** 2
    se = math.sqrt(max(inner, 0.0)) / (w * w)
    ci_low: float | None = None
    ci_high: float | None = None
    if se > 0.0:
        half = normal_quantile(level) * se
        ci_low, ci_high = tau - half, tau + half
        if ci_low < -1.0 or ci_high > 1.0:
            warnings.append(
                "The analytic interval of Kendall's tau-b was cut to the range -1 to 1."
            )
            ci_low, ci_high = max(ci_low, -1.0), min(ci_high, 1.0)
    else:
        warnings.append(
            "No analytic interval for Kendall's tau-b: its standard error is zero for these data "
            "(for example a perfect ordering); the large-sample interval does not apply."
        )
    return Estimate(
        estimate=tau,
        se=se,
        ci_low=ci_low,
        ci_high=ci_high,
        ci_method=method,
        confidence_level=level,
        z=z,
        p_value=p_value,
        items=n,
        agreeing=agreeing,
        warnings=tuple(warnings),
        extra={"s": s, "concordant": p2 / 2.0, "discordant": q2 / 2.0, "se_null": se_null},
    )
