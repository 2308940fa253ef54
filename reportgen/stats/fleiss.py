"""Fleiss' kappa, overall and per category, with missing ratings.

Estimator (Fleiss 1971, Psychological Bulletin 76:378-382), generalised to a varying number of
ratings per item as in Gwet (2014, *Handbook of Inter-Rater Reliability*, 4th ed., chapter on
the generalised kappa statistic for multiple raters; also the irrCAC library by Gwet):

- an item *i* with ``r_i`` ratings and counts ``n_ik`` has observed agreement
  ``a_i = sum_k n_ik (n_ik - 1) / (r_i (r_i - 1))``; ``p_a`` is the mean of ``a_i`` over the items
  with at least two ratings (items with one rating cannot show agreement);
- the category proportions are ``pi_k = mean_i n_ik / r_i`` over the items with at least one
  rating (an item with a single rating still says which categories are used);
- ``p_e = sum_k pi_k^2`` and ``kappa = (p_a - p_e) / (1 - p_e)``.

With the same number of ratings on every item this is exactly Fleiss (1971).  The kappa of
category *j* is Fleiss' kappa of the collapsed table "j versus not j":
``kappa_j = 1 - mean_i[n_ij (r_i - n_ij) / (r_i (r_i - 1))] / (pi_j (1 - pi_j))``, so that
``kappa = sum_j pi_j q_j kappa_j / sum_j pi_j q_j``.

Standard errors:

- **test of kappa = 0** (z and two-sided p): the null variance of Fleiss, Nee & Landis (1979,
  Psychological Bulletin 86:974-977).  For a varying number of ratings we use the same
  delta-method derivation with each item weighted by ``1 / (r_i (r_i - 1))`` (our derivation; it
  reduces to the published formula when every item has ``m`` ratings, and a simulation test
  checks it).  A null variance is never used for an interval.
- **interval**: Gwet's (2014) linearised non-null variance
  ``v = sum_i (kappa*_i - kappa)^2 / (n (n - 1))`` with
  ``kappa*_i = (n / n_2)(a_i - p_e [r_i >= 2]) / (1 - p_e) - 2 (1 - kappa)(p_e,i - p_e) / (1 - p_e)``,
  ``p_e,i = sum_k n_ik pi_k / r_i``; normal interval, no finite-population correction.  (irrCAC
  uses the same variance with a t interval on n - 1 degrees of freedom and an optional
  finite-population factor.)

Validated against: Fleiss (1971) diagnoses data (kappa .430, kappa_j .245 .245 .520 .471 .566);
Fleiss, Nee & Landis (1979) null test (z 17.652 as printed by R irr); the worked example of the
Wikipedia article "Fleiss' kappa" (kappa 0.210); statsmodels ``fleiss_kappa`` and irrCAC
``fleiss()`` on random studies with missing ratings (tests/stats/test_fleiss.py).
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .results import Estimate
from .tables import (
    CountPatterns,
    _confidence_level_iv,
    _finite_or_none,
    _normal_critical,
    _ones,
    _two_sided_p,
    _weighted_var_of_mean,
    as_patterns,
)

__all__ = [
    "FleissResult",
    "fleiss_kappa",
    "fleiss_kappa_by_category_from_sums",
    "fleiss_kappa_features",
    "fleiss_kappa_from_sums",
    "fnl_null_variance",
]

_TINY = 1e-14
_METHOD = "analytic (Gwet)"


@dataclass(frozen=True)
class FleissResult:
    """Fleiss' kappa over all categories and for each category (in category order)."""

    overall: Estimate
    by_category: tuple[Estimate, ...]


def fleiss_kappa_features(counts: np.ndarray) -> np.ndarray:
    """Per-item additive features, shape ``(n_items, 3 + 2k)``.

    Columns: ``[r_i >= 2, a_i, r_i >= 1, n_i1 / r_i .. n_ik / r_i, d_i1 .. d_ik]`` with
    ``d_ij = n_ij (r_i - n_ij) / (r_i (r_i - 1))``; items with too few ratings have zeros where
    they cannot contribute.  Feed column sums to :func:`fleiss_kappa_from_sums` and
    :func:`fleiss_kappa_by_category_from_sums`.

    Validated against: the point estimates of :func:`fleiss_kappa` (same path) and statsmodels.
    """
    c = np.asarray(counts, dtype=np.float64)
    if c.ndim != 2:
        raise ValueError(f"counts must be an items × categories table, got shape {c.shape}")
    return _features(c, c.sum(axis=1))


def _features(c: np.ndarray, m: np.ndarray, inv_pairs: np.ndarray | None = None) -> np.ndarray:
    """:func:`fleiss_kappa_features` of a float table ``c`` with row sums ``m`` (and, when every
    row has two or more ratings, optionally ``1 / (m (m - 1))``)."""
    k = c.shape[1]
    out = np.empty((c.shape[0], 3 + 2 * k), dtype=np.float64)
    if c.shape[0] and m.min() >= 2:  # fast path: every item has two or more ratings
        if inv_pairs is None:
            inv_pairs = 1.0 / (m * (m - 1.0))
        out[:, 0:3:2] = 1.0
        np.divide(c, m[:, None], out=out[:, 3 : 3 + k])
        np.multiply(c * (m[:, None] - c), inv_pairs[:, None], out=out[:, 3 + k :])
        out[:, 1] = 1.0 - out[:, 3 + k :] @ _ones(k)  # a_i = 1 - sum_j d_ij
        return out
    pairable = m >= 2
    rated = m >= 1
    pairs = np.where(pairable, m * (m - 1.0), 1.0)
    out[:, 0] = pairable
    out[:, 1] = np.where(pairable, (c * (c - 1.0)).sum(axis=1) / pairs, 0.0)
    out[:, 2] = rated
    out[:, 3 : 3 + k] = np.where(rated[:, None], c / np.where(rated, m, 1.0)[:, None], 0.0)
    out[:, 3 + k :] = np.where(pairable[:, None], c * (m[:, None] - c) / pairs[:, None], 0.0)
    return out


def _split(sums: np.ndarray) -> tuple[np.ndarray, ...]:
    s = np.asarray(sums, dtype=np.float64)
    f = s.shape[-1]
    if f < 5 or (f - 3) % 2:
        raise ValueError(f"Fleiss sums must have 3 + 2k columns, got {f}")
    k = (f - 3) // 2
    return s[..., 0], s[..., 1], s[..., 2], s[..., 3 : 3 + k], s[..., 3 + k :]


def fleiss_kappa_from_sums(sums: np.ndarray) -> np.ndarray:
    """Fleiss' kappa from column sums of :func:`fleiss_kappa_features`; any leading batch shape.

    NaN where the coefficient is undefined (no item with two ratings, or chance agreement 1).

    Validated against: Fleiss (1971) data, Wikipedia "Fleiss' kappa" example, statsmodels, irrCAC.
    """
    e, a, u, pi_sum, _ = _split(sums)
    if pi_sum.ndim == 1:  # one study: plain float arithmetic, same formula
        e1, a1, u1 = float(e), float(a), float(u)
        if e1 <= 0 or u1 <= 0:
            return np.float64(np.nan)
        pe1 = sum((x / u1) * (x / u1) for x in pi_sum.tolist())
        if 1.0 - pe1 <= _TINY:
            return np.float64(np.nan)
        return np.float64((a1 / e1 - pe1) / (1.0 - pe1))
    with np.errstate(divide="ignore", invalid="ignore"):
        pa = a / e
        pi = pi_sum / u[..., None]
        pe = (pi * pi).sum(axis=-1)
        kappa = (pa - pe) / (1.0 - pe)
    return np.where((e > 0) & (u > 0) & (1.0 - pe > _TINY), kappa, np.nan)


def fleiss_kappa_by_category_from_sums(sums: np.ndarray) -> np.ndarray:
    """Per-category kappas, shape ``(..., k)``, from sums of :func:`fleiss_kappa_features`.

    Validated against: Fleiss (1971) kappa_j (.245 .245 .520 .471 .566); the kappa of each
    collapsed two-category table.
    """
    e, _, u, pi_sum, d = _split(sums)
    if pi_sum.ndim == 1:  # one study: plain float arithmetic, same formula
        e1, u1 = float(e), float(u)
        if e1 <= 0 or u1 <= 0:
            return np.full(pi_sum.shape, np.nan)
        out1 = []
        for x, dj in zip(pi_sum.tolist(), d.tolist(), strict=True):
            p1 = x / u1
            pq1 = p1 * (1.0 - p1)
            out1.append(1.0 - (dj / e1) / pq1 if pq1 > _TINY else math.nan)
        return np.array(out1)
    with np.errstate(divide="ignore", invalid="ignore"):
        pi = pi_sum / u[..., None]
        pq = pi * (1.0 - pi)
        kj = 1.0 - (d / e[..., None]) / pq
    return np.where((e[..., None] > 0) & (u[..., None] > 0) & (pq > _TINY), kj, np.nan)


def fnl_null_variance(
    p: np.ndarray,
    *,
    n_pairable: float,
    n_rated: float,
    sum_inv_pairs: float,
    sum_inv_r_pairable: float,
    n_single: float,
) -> np.ndarray:
    """Null variance of Fleiss' kappa (Fleiss, Nee & Landis 1979), for proportions ``p`` (..., k).

    With ``m`` ratings on each of ``N`` items this is
    ``2 [(sum pq)^2 - sum pq(q - p)] / (N m (m - 1) (sum pq)^2)``.  With a varying number of
    ratings the degenerate (pairwise) part is weighted by ``sum_i 1/(r_i(r_i-1)) / n_2^2`` and the
    linear part, which cancels when every rated item has two or more ratings, is kept (our
    delta-method derivation under independent ratings with fixed proportions).

    Validated against: FNL (1979) via R irr's printed z = 17.652 on Fleiss (1971) data; a
    simulation under independence with varying ratings per item (tests/stats/test_fleiss.py).
    """
    p = np.asarray(p, dtype=np.float64)
    q = 1.0 - p
    pq = (p * q).sum(axis=-1)
    v2 = pq**2 - (p * q * (q - p)).sum(axis=-1)
    zeta1 = (p**3).sum(axis=-1) - ((p**2).sum(axis=-1)) ** 2
    out = np.full(pq.shape, np.nan)
    if n_pairable <= 0 or n_rated <= 0:
        return out
    deg = 2.0 * v2 * (sum_inv_pairs / n_pairable**2)
    lin = (
        4.0
        * zeta1
        * ((1.0 / n_rated - 1.0 / n_pairable) ** 2 * sum_inv_r_pairable + n_single / n_rated**2)
    )
    return np.divide(deg + lin, pq**2, out=out, where=pq > 0)


def fleiss_kappa(
    counts: np.ndarray | CountPatterns,
    *,
    confidence_level: float = 0.95,
    labels: Sequence[str] | None = None,
) -> FleissResult:
    """Fleiss' kappa overall and per category from an items × categories count table.

    ``counts[i, j]`` is the number of ratings of item *i* in category *j* (``k`` = declared
    categories, unused ones included).  Items may have different numbers of ratings.  Returns a
    :class:`FleissResult`; ``overall.se`` and the interval are Gwet's non-null ones, ``z`` and
    ``p_value`` (two-sided) come from the Fleiss–Nee–Landis null variance (``extra["se_null"]``).
    ``labels`` (one per category, e.g. the category codes) name the categories in warnings;
    without them a category is named by its index.  A normal interval that overshoots the range
    of kappa is cut to -1 .. 1, with a warning.

    Validated against: Fleiss (1971) Table 1 data and R irr's printed z (17.652); Wikipedia
    "Fleiss' kappa" example (0.210); statsmodels and irrCAC on random studies.
    """
    level = _confidence_level_iv(confidence_level)
    pat = as_patterns(counts)
    rows = pat.rows.astype(np.float64)
    w = pat.multiplicity.astype(np.float64)
    k = rows.shape[1]
    if labels is None:
        names = tuple(str(j) for j in range(k))
    else:
        names = tuple(str(x) for x in labels)
        if len(names) != k:
            raise ValueError(f"labels must name each of the {k} categories, got {len(names)}")
    m = rows @ _ones(k)  # ratings per pattern (exact: whole numbers)
    everyone_pairable = bool(m.min() >= 2) and w.min() > 0
    inv_pairs = 1.0 / (m * (m - 1.0)) if everyone_pairable else None
    feats = _features(rows, m, inv_pairs)
    sums = w @ feats
    kappa = float(fleiss_kappa_from_sums(sums))
    kappa_j = fleiss_kappa_by_category_from_sums(sums).tolist()
    # Small vectors (one entry per category) are handled as Python floats: a numpy call on a
    # handful of numbers costs far more than the arithmetic.
    s_list = sums.tolist()

    n_pairable = int(s_list[0])
    n_rated = int(s_list[2])
    if everyone_pairable:
        n_unrated = n_single = 0
    else:
        n_unrated = int(w[m == 0].sum())
        n_single = int(w[m == 1].sum())
    n_ratings = int(w @ m)
    # An item's agreement a_i is exactly 1.0 when every rating is alike (and < 1 otherwise; 0
    # below two ratings), so this counts the items with two or more ratings all alike.
    all_alike = int(w @ (feats[:, 1] == 1.0))
    pi_arr = sums[3 : 3 + k] / n_rated if n_rated else np.full(k, np.nan)
    pi = pi_arr.tolist()
    pa = s_list[1] / n_pairable if n_pairable else math.nan
    pe = float(pi_arr @ pi_arr)

    notes: list[str] = []
    if n_unrated:
        notes.append(f"{n_unrated} item(s) have no rating and are left out.")
    if n_single:
        notes.append(
            f"{n_single} item(s) have a single rating: they count toward the category "
            "proportions but cannot show agreement (Gwet 2014)."
        )
    why = None
    if n_pairable == 0:
        why = "Fleiss' kappa is undefined: no item has two or more ratings."
    elif 1.0 - pe <= _TINY:
        why = (
            "Fleiss' kappa is undefined: every rating is in one category, so chance agreement is 1."
        )

    extra_common = {
        "items_pairable": n_pairable,
        "items_single_rating": n_single,
        "items_unrated": n_unrated,
        "ratings": n_ratings,
    }
    level_notes = tuple(notes)
    zc = _normal_critical(level)
    if why is not None:
        overall = Estimate(
            estimate=None,
            items=n_rated,
            agreeing=all_alike,
            confidence_level=level,
            warnings=(*notes, why),
            extra={**extra_common, "p_o": _finite_or_none(pa), "p_e": _finite_or_none(pe)},
        )
        return FleissResult(
            overall=overall,
            by_category=_categories(
                kappa_j,
                pi,
                None,
                None,
                n_pairable,
                n_rated,
                zc,
                level,
                level_notes,
                extra_common,
                names,
            ),
        )

    if inv_pairs is not None:
        sum_inv_pairs = float(w @ inv_pairs)
        sum_inv_r_pairable = float(w @ (1.0 / m))
    else:
        pair_ok = m >= 2
        sum_inv_pairs = float(w @ np.where(pair_ok, 1.0 / np.where(pair_ok, m * (m - 1), 1), 0.0))
        sum_inv_r_pairable = float(w @ np.where(pair_ok, 1.0 / np.maximum(m, 1), 0.0))
        keep = m >= 1  # items without ratings take no part in the variance
        feats, w = feats[keep], w[keep]
    null_args = (
        float(n_pairable),
        float(n_rated),
        sum_inv_pairs,
        sum_inv_r_pairable,
        float(n_single),
    )
    # Gwet's linearised variances over the rated items (patterns weighted), written exactly as
    # the published per-item formulas so that degenerate data (e.g. perfect agreement) give an
    # exact zero variance rather than rounding noise.
    e_i = feats[:, 0]
    pi_i = feats[:, 3 : 3 + k]
    d_i = feats[:, 3 + k :]
    ratio = n_rated / n_pairable
    pe_i = pi_i @ pi_arr
    # with every item pairable e_i is 1.0 everywhere, and x * 1.0 == x exactly
    pe_e = pe if everyone_pairable else pe * e_i
    kstar = ratio * (feats[:, 1] - pe_e) / (1.0 - pe) - 2.0 * (1.0 - kappa) * (pe_i - pe) / (
        1.0 - pe
    )
    # Per category, all at once: Fleiss' kappa of each collapsed "j versus not j" table, whose
    # item agreement is 1 - 2 d_ij and chance agreement p_j^2 + q_j^2.
    qi = 1.0 - pi_arr
    pe_j = pi_arr * pi_arr + qi * qi
    kj_arr = np.array(kappa_j)
    defined = [math.isfinite(x) for x in kappa_j]
    # undefined categories (NaN kappa, chance agreement 1) would warn; their values are unused
    quiet = all(defined) and n_rated >= 2
    with contextlib.nullcontext() if quiet else np.errstate(divide="ignore", invalid="ignore"):
        inv = 1.0 / (1.0 - pe_j)
        if everyone_pairable:
            a_ij = 1.0 - 2.0 * d_i
            pe_je = pe_j
        else:
            a_ij = e_i[:, None] - 2.0 * d_i
            pe_je = pe_j * e_i[:, None]
        pe_ij = qi + pi_i * (pi_arr - qi)
        kstar_j = ratio * (a_ij - pe_je) * inv - (2.0 * (1.0 - kj_arr) * (pe_ij - pe_j) * inv)
        if n_rated >= 2:
            var_j = ((w @ (kstar_j - kj_arr) ** 2) / (n_rated * (n_rated - 1.0))).tolist()
        else:
            var_j = [math.nan] * k
    var_all = [_weighted_var_of_mean(kstar, w, kappa, n_rated), *var_j]

    var0 = _fnl_null_variance_one(pi, *null_args)
    overall = _estimate(
        kappa,
        var_all[0],
        var0,
        zc,
        level,
        n_rated,
        all_alike,
        level_notes,
        {**extra_common, "p_o": float(pa), "p_e": pe, "proportions": pi},
        "Fleiss' kappa",
    )
    var_j = [v if ok else math.nan for v, ok in zip(var_all[1:], defined, strict=True)]
    var0_j = [_fnl_null_variance_one([p, 1.0 - p], *null_args) for p in pi]
    by_cat = _categories(
        kappa_j, pi, var_j, var0_j, n_pairable, n_rated, zc, level, level_notes, extra_common, names
    )
    return FleissResult(overall=overall, by_category=by_cat)


def _fnl_null_variance_one(
    p: list[float],
    n_pairable: float,
    n_rated: float,
    sum_inv_pairs: float,
    sum_inv_r_pairable: float,
    n_single: float,
) -> float:
    """:func:`fnl_null_variance` for one vector of proportions, in Python floats."""
    pq = sum(x * (1.0 - x) for x in p)
    v2 = pq * pq - sum(x * (1.0 - x) * ((1.0 - x) - x) for x in p)
    zeta1 = sum(x**3 for x in p) - sum(x * x for x in p) ** 2
    if n_pairable <= 0 or n_rated <= 0 or not pq > 0:
        return math.nan
    deg = 2.0 * v2 * (sum_inv_pairs / n_pairable**2)
    lin = (
        4.0
        * zeta1
        * ((1.0 / n_rated - 1.0 / n_pairable) ** 2 * sum_inv_r_pairable + n_single / n_rated**2)
    )
    return (deg + lin) / pq**2


def _categories(
    kappa_j: list[float],
    pi: list[float],
    var_j: list[float] | None,
    var0_j: list[float] | None,
    n_pairable: int,
    n_rated: int,
    zc: float,
    level: float,
    notes: tuple[str, ...],
    extra_common: dict[str, object],
    names: tuple[str, ...],
) -> tuple[Estimate, ...]:
    out = []
    for j in range(len(kappa_j)):
        cat = names[j]
        value = float(kappa_j[j])
        pj = float(pi[j]) if n_rated else float("nan")
        extra = {**extra_common, "category": j, "proportion": _finite_or_none(pj)}
        if not math.isfinite(value) or var_j is None or var0_j is None:
            if n_pairable == 0:
                why = f"Fleiss' kappa for category {cat} is undefined: no item has two or more ratings."
            elif pj <= 0.0:
                why = (
                    f"Fleiss' kappa for category {cat} is undefined: no rating is in this category."
                )
            elif pj >= 1.0:
                why = f"Fleiss' kappa for category {cat} is undefined: every rating is in this category."
            else:
                why = f"Fleiss' kappa for category {cat} is undefined."
            out.append(
                Estimate(
                    estimate=None,
                    items=n_rated,
                    confidence_level=level,
                    warnings=(*notes, why),
                    extra=extra,
                )
            )
            continue
        out.append(
            _estimate(
                value,
                float(var_j[j]),
                float(var0_j[j]),
                zc,
                level,
                n_rated,
                None,
                notes,
                extra,
                f"Fleiss' kappa for category {cat}",
            )
        )
    return tuple(out)


def _estimate(
    value: float,
    var: float,
    var0: float,
    zc: float,
    level: float,
    items: int,
    agreeing: int | None,
    notes: tuple[str, ...],
    extra: dict[str, object],
    label: str,
) -> Estimate:
    se0 = math.sqrt(var0) if math.isfinite(var0) and var0 > 0 else math.nan
    se = math.sqrt(var) if math.isfinite(var) and var >= 0 else math.nan
    lo = hi = None
    warnings = notes
    if se == se:
        lo, hi = value - zc * se, value + zc * se
        if lo < -1.0 or hi > 1.0:
            warnings = (*notes, f"The analytic interval of {label} was cut to the range -1 to 1.")
            lo, hi = max(lo, -1.0), min(hi, 1.0)
    else:
        warnings = (*notes, "No standard error: fewer than two rated items.")
    z = value / se0 if se0 > 0 else math.nan
    return Estimate(
        estimate=value,
        se=se if se == se else None,
        ci_low=lo,
        ci_high=hi,
        ci_method=_METHOD if lo is not None else None,
        confidence_level=level,
        z=z if z == z else None,
        p_value=_two_sided_p(z) if z == z else None,
        items=items,
        agreeing=agreeing,
        warnings=warnings,
        extra={**extra, "se_null": se0 if se0 == se0 else None, "p_value_sides": "two-sided"},
    )
