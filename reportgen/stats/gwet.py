"""Gwet's AC1 / AC2 and the Brennan–Prediger coefficient, with missing ratings.

From an items × categories count table (``r_i`` ratings on item *i*, ``n_ik`` in category *k*,
``q`` declared categories, agreement weights ``w`` with ``w_kk = 1``):

- weighted observed agreement ``p_a = mean_{r_i >= 2} sum_k n_ik (sum_l w_kl n_il - 1) / (r_i (r_i - 1))``;
- ``pi_k = mean_{r_i >= 1} n_ik / r_i``;
- Gwet's AC1 / AC2 (Gwet 2008, British Journal of Mathematical and Statistical Psychology
  61:29-48; Gwet 2014, *Handbook of Inter-Rater Reliability*, 4th ed.):
  ``p_e = T_w / (q (q - 1)) * sum_k pi_k (1 - pi_k)``, ``T_w = sum_kl w_kl``; AC1 is the unweighted
  case (``T_w = q``), AC2 uses linear or quadratic weights for ordered scales;
- Brennan & Prediger (1981, Educational and Psychological Measurement 41:687-699):
  ``p_e = T_w / q^2`` (chance agreement with every category equally likely);
- coefficient ``(p_a - p_e) / (1 - p_e)``.

Standard errors follow Gwet's (2014) linearisation,
``v = sum_i (c*_i - c)^2 / (n (n - 1))`` over the ``n`` rated items, with
``c*_i = (n / n_2)(a_i - p_e [r_i >= 2]) / (1 - p_e) - 2 (1 - c)(p_e,i - p_e) / (1 - p_e)`` for AC1/AC2
(``p_e,i = T_w / (q (q - 1)) sum_k n_ik (1 - pi_k) / r_i``) and without the second term for
Brennan–Prediger, whose chance agreement is fixed.  We apply **no finite-population
correction** (the raters and items are treated as samples from large populations) and use a
normal interval; irrCAC uses the same variance with a t interval on n - 1 degrees of freedom.
No null test is given: Gwet's variance is a non-null one.

Validated against: Fleiss (1971) diagnoses data (AC1 0.4478845, SE 0.0556621; Brennan–Prediger
0.4444444, both as printed by irrCAC) and irrCAC ``gwet()`` / ``bp()`` with identity, linear and
quadratic weights on random studies with missing ratings (tests/stats/test_gwet.py).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from .results import Estimate
from .tables import (
    CountPatterns,
    _confidence_level_iv,
    _finite_or_none,
    _normal_critical,
    _ones,
    _weighted_var_of_mean,
    as_patterns,
)
from .weights import agreement_weights

__all__ = [
    "brennan_prediger",
    "brennan_prediger_features",
    "brennan_prediger_from_sums",
    "gwet_ac",
    "gwet_ac_features",
    "gwet_ac_from_sums",
]

_TINY = 1e-14
_METHOD = "analytic (Gwet)"


@lru_cache(maxsize=64)
def _named_weights(k: int, kind: str | None) -> np.ndarray:
    """Read-only identity (``kind`` None) or named agreement weights, built once per (k, kind)."""
    w = np.eye(k) if kind is None else agreement_weights(k, kind)  # type: ignore[arg-type]
    w.flags.writeable = False
    return w


@lru_cache(maxsize=64)
def _named_total(k: int, kind: str | None) -> float:
    return float(_named_weights(k, kind).sum())


def _weights_total(weights: np.ndarray | str | None, w: np.ndarray) -> float:
    """``w.sum()`` of validated weights, looked up once per (k, kind) for named weights."""
    if weights is None or isinstance(weights, str):
        return _named_total(w.shape[0], weights)
    return float(w.sum())


def _weights_iv(weights: np.ndarray | str | None, k: int) -> np.ndarray:
    if weights is None or isinstance(weights, str):
        return _named_weights(k, weights)
    w = np.asarray(weights, dtype=np.float64)
    if w.shape != (k, k):
        raise ValueError(f"weights must have shape ({k}, {k}), got {w.shape}")
    if np.abs(np.diag(w) - 1.0).max() > 1e-12 or w.min() < 0 or w.max() > 1:
        raise ValueError("agreement weights must lie in 0..1 with 1 on the diagonal")
    return w


def _agreement_features(counts: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``[r_i >= 2, a_i (weighted), r_i >= 1, n_i1 / r_i .. n_ik / r_i]``."""
    c = np.asarray(counts, dtype=np.float64)
    if c.ndim != 2 or c.shape[1] != w.shape[0]:
        raise ValueError(f"counts must be an items × {w.shape[0]} table, got shape {c.shape}")
    m = c.sum(axis=1)
    return _features_m(c, w, m, bool(c.shape[0]) and bool(m.min() >= 2))


def _features_m(c: np.ndarray, w: np.ndarray, m: np.ndarray, all_pairable: bool) -> np.ndarray:
    """:func:`_agreement_features` of a float table ``c`` with row sums ``m``; ``all_pairable``
    says that every row has two or more ratings (and at least one row exists)."""
    out = np.empty((c.shape[0], 3 + c.shape[1]), dtype=np.float64)
    if all_pairable:  # fast path: every item has two or more ratings
        out[:, 0:3:2] = 1.0
        cw = c if w is _named_weights(c.shape[1], None) else c @ w.T  # c @ I is exactly c
        out[:, 1] = ((c * (cw - 1.0)) @ _ones(c.shape[1])) / (m * (m - 1.0))
        np.divide(c, m[:, None], out=out[:, 3:])
        return out
    pairable = m >= 2
    rated = m >= 1
    pairs = np.where(pairable, m * (m - 1.0), 1.0)
    out[:, 0] = pairable
    out[:, 1] = np.where(pairable, (c * (c @ w.T - 1.0)).sum(axis=1) / pairs, 0.0)
    out[:, 2] = rated
    out[:, 3:] = np.where(rated[:, None], c / np.where(rated, m, 1.0)[:, None], 0.0)
    return out


def gwet_ac_features(counts: np.ndarray, *, weights: np.ndarray | str | None = None) -> np.ndarray:
    """Per-item additive features for AC1/AC2, shape ``(n_items, 3 + k)``.

    Columns ``[r_i >= 2, weighted a_i, r_i >= 1, n_i1 / r_i .. n_ik / r_i]``.

    Validated against: :func:`gwet_ac` point estimates (same path) and irrCAC.
    """
    c = np.asarray(counts)
    return _agreement_features(c, _weights_iv(weights, c.shape[-1]))


def gwet_ac_from_sums(sums: np.ndarray, *, weights: np.ndarray | str | None = None) -> np.ndarray:
    """AC1 (no weights) or AC2 from column sums of :func:`gwet_ac_features`; batched over ``...``.

    NaN where undefined (fewer than two categories, no item with two ratings, chance agreement 1).

    Validated against: irrCAC ``gwet()`` with identity, linear and quadratic weights.
    """
    s = np.asarray(sums, dtype=np.float64)
    k = s.shape[-1] - 3
    if k < 1:
        raise ValueError("AC sums must have 3 + k columns")
    return _ac_from_sums(s, _weights_iv(weights, k))


def _ac_from_sums(s: np.ndarray, w: np.ndarray, tw: float | None = None) -> np.ndarray:
    """AC from sums with validated weights ``w`` (``tw`` = their total, if already known)."""
    k = w.shape[0]
    if k < 2:
        return np.full(s.shape[:-1], np.nan)
    e, a, u, pi_sum = s[..., 0], s[..., 1], s[..., 2], s[..., 3:]
    if s.ndim == 1:  # one study: plain float arithmetic, same formula
        e1, a1, u1, *pi_list = s.tolist()
        if e1 <= 0 or u1 <= 0:
            return np.float64(np.nan)
        tw1 = float(w.sum()) if tw is None else tw
        pe1 = tw1 / (k * (k - 1)) * sum((x / u1) * (1.0 - x / u1) for x in pi_list)
        if 1.0 - pe1 <= _TINY:
            return np.float64(np.nan)
        return np.float64((a1 / e1 - pe1) / (1.0 - pe1))
    with np.errstate(divide="ignore", invalid="ignore"):
        pa = a / e
        pi = pi_sum / u[..., None]
        pe = w.sum() / (k * (k - 1)) * (pi * (1.0 - pi)).sum(axis=-1)
        ac = (pa - pe) / (1.0 - pe)
    return np.where((e > 0) & (u > 0) & (1.0 - pe > _TINY), ac, np.nan)


def brennan_prediger_features(
    counts: np.ndarray, *, weights: np.ndarray | str | None = None
) -> np.ndarray:
    """Per-item additive features for Brennan–Prediger, shape ``(n_items, 3)``.

    Validated against: :func:`brennan_prediger` point estimates (same path) and irrCAC ``bp()``.
    """
    c = np.asarray(counts)
    return _agreement_features(c, _weights_iv(weights, c.shape[-1]))[:, :3]


def brennan_prediger_from_sums(
    sums: np.ndarray, n_categories: int, *, weights: np.ndarray | str | None = None
) -> np.ndarray:
    """Brennan–Prediger coefficient from sums of :func:`brennan_prediger_features`; batched.

    Validated against: irrCAC ``bp()``; statsmodels ``fleiss_kappa(method="randolph")``.
    """
    k = int(n_categories)
    return _bp_from_sums(np.asarray(sums, dtype=np.float64), _weights_iv(weights, k))


def _bp_from_sums(s: np.ndarray, w: np.ndarray) -> np.ndarray:
    k = w.shape[0]
    pe = w.sum() / k**2
    e, a = s[..., 0], s[..., 1]
    if 1.0 - pe <= _TINY:
        return np.full(s.shape[:-1], np.nan)
    if s.ndim == 1:
        return np.float64((float(a) / float(e) - pe) / (1.0 - pe) if e > 0 else np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        bp = (a / e - pe) / (1.0 - pe)
    return np.where(e > 0, bp, np.nan)


def _common(
    counts: np.ndarray | CountPatterns, weights: np.ndarray | str | None
) -> tuple[
    np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, list[str], dict[str, int], bool
]:
    pat = as_patterns(counts)
    rows = pat.rows.astype(np.float64)
    mult = pat.multiplicity.astype(np.float64)
    k = rows.shape[1]
    w = _weights_iv(weights, k)
    if w.shape != (k, k):
        raise ValueError(f"counts must be an items × {w.shape[0]} table, got shape {rows.shape}")
    m = rows @ _ones(k)  # ratings per pattern (exact: whole numbers)
    all_pairable = bool(m.shape[0]) and bool(m.min() >= 2)
    feats = _features_m(rows, w, m, all_pairable)
    if all_pairable:
        n_unrated = n_single = 0
    else:
        n_unrated = int(mult[m == 0].sum())
        n_single = int(mult[m == 1].sum())
    notes: list[str] = []
    if n_unrated:
        notes.append(f"{n_unrated} item(s) have no rating and are left out.")
    if n_single:
        notes.append(
            f"{n_single} item(s) have a single rating: they count toward the category "
            "proportions but cannot show agreement (Gwet 2014)."
        )
    counts_info = {
        "items_pairable": -1,  # filled in from the sums by the caller
        "items_single_rating": n_single,
        "items_unrated": n_unrated,
        "ratings": int(mult @ m),
    }
    return rows, mult, w, feats, m, notes, counts_info, all_pairable


def _one_category(name: str, value: float, extra: dict[str, object]) -> str:
    extra["value_if_reported"] = _finite_or_none(value)
    return (
        f"{name} is not reported: every rating is in one category, so the study cannot show "
        "whether the raters tell the categories apart (the formula would give "
        f"{value:.3f} from identical answers alone)."
    )


def _finish(
    name: str,
    value: float,
    cstar: np.ndarray | None,
    mult: np.ndarray,
    n_rated: int,
    level: float,
    notes: list[str],
    why: str | None,
    extra: dict[str, object],
) -> Estimate:
    if why is not None or cstar is None:
        return Estimate(
            estimate=None,
            items=n_rated,
            confidence_level=level,
            warnings=(*notes, why or f"{name} is undefined."),
            extra=extra,
        )
    var = _weighted_var_of_mean(cstar, mult, value, n_rated)
    warnings = list(notes)
    se = math.sqrt(var) if math.isfinite(var) and var >= 0 else math.nan
    lo = hi = None
    if math.isfinite(se):
        zc = _normal_critical(level)
        lo, hi = value - zc * se, value + zc * se
        if lo < -1.0 or hi > 1.0:  # the coefficient lies in -1 .. 1; a normal interval may not
            warnings.append(f"The analytic interval of {name} was cut to the range -1 to 1.")
            lo, hi = max(lo, -1.0), min(hi, 1.0)
    else:
        warnings.append("No standard error: fewer than two rated items.")
    return Estimate(
        estimate=value,
        se=_finite_or_none(se),
        ci_low=lo,
        ci_high=hi,
        ci_method=_METHOD if lo is not None else None,
        confidence_level=level,
        items=n_rated,
        warnings=tuple(warnings),
        extra=extra,
    )


def gwet_ac(
    counts: np.ndarray | CountPatterns,
    *,
    weights: np.ndarray | str | None = None,
    confidence_level: float = 0.95,
) -> Estimate:
    """Gwet's AC1 (``weights=None``) or AC2 (``"linear"``, ``"quadratic"`` or a (k, k) matrix).

    ``counts`` is the items × declared-categories count table.  SE and normal interval from
    Gwet's linearised variance, no finite-population correction; ``p_value`` is None.

    Validated against: irrCAC ``gwet()`` on Fleiss (1971) data (AC1 0.447885, SE 0.055662) and on
    random studies with identity, linear and quadratic weights.
    """
    level = _confidence_level_iv(confidence_level)
    rows, mult, w, feats, m, notes, info, all_pairable = _common(counts, weights)
    k = rows.shape[1]
    name = "Gwet's AC1" if weights is None else "Gwet's AC2"
    sums = mult @ feats
    tw = _weights_total(weights, w)
    value = float(_ac_from_sums(sums, w, tw))
    s_list = sums.tolist()
    info["items_pairable"] = int(s_list[0])
    n2, n_rated = s_list[0], int(s_list[2])
    pi = [x / n_rated for x in s_list[3:]] if n_rated else [math.nan] * k
    pe = tw / (k * (k - 1)) * sum(p * (1 - p) for p in pi) if k > 1 else float("nan")
    pa = s_list[1] / n2 if n2 else float("nan")
    extra: dict[str, object] = {
        **info,
        "p_o": _finite_or_none(pa),
        "p_e": _finite_or_none(pe),
        "finite_population_correction": False,
    }
    why = None
    if k < 2:
        why = f"{name} is undefined: the scale has a single category."
    elif n2 == 0:
        why = f"{name} is undefined: no item has two or more ratings."
    elif not math.isfinite(value):
        why = f"{name} is undefined: chance agreement is 1."
    elif sum(p > 0 for p in pi) == 1:
        why = _one_category(name, value, extra)
    if why is not None:
        return _finish(name, value, None, mult, n_rated, level, notes, why, extra)
    if info["items_unrated"]:
        keep = m >= 1
        rows, m, feats, mult = rows[keep], m[keep], feats[keep], mult[keep]
    # Gwet's linearised values, written exactly as the published per-item formula so that
    # degenerate data (e.g. perfect agreement) give an exact zero variance, not rounding noise.
    pe_i = tw / (k * (k - 1)) * (rows @ np.array([1.0 - p for p in pi])) / m
    pe_e = pe if all_pairable else pe * feats[:, 0]  # x * 1.0 == x exactly
    cstar = (n_rated / n2) * (feats[:, 1] - pe_e) / (1.0 - pe) - 2.0 * (1.0 - value) * (
        pe_i - pe
    ) / (1.0 - pe)
    return _finish(name, value, cstar, mult, n_rated, level, notes, None, extra)


def brennan_prediger(
    counts: np.ndarray | CountPatterns,
    *,
    weights: np.ndarray | str | None = None,
    confidence_level: float = 0.95,
) -> Estimate:
    """Brennan–Prediger (1981) coefficient, optionally weighted; Gwet's (2014) variance.

    Validated against: irrCAC ``bp()`` on Fleiss (1971) data (0.444444) and random studies.
    """
    level = _confidence_level_iv(confidence_level)
    rows, mult, w, feats, m, notes, info, all_pairable = _common(counts, weights)
    k = rows.shape[1]
    sums = mult @ feats
    value = float(_bp_from_sums(sums[:3], w))
    s_list = sums.tolist()
    info["items_pairable"] = int(s_list[0])
    n2, n_rated = s_list[0], int(s_list[2])
    pe = _weights_total(weights, w) / k**2
    extra: dict[str, object] = {
        **info,
        "p_o": _finite_or_none(s_list[1] / n2) if n2 else None,
        "p_e": pe,
        "finite_population_correction": False,
    }
    why = None
    if 1.0 - pe <= _TINY:
        why = "The Brennan–Prediger coefficient is undefined: the scale has a single category."
    elif n2 == 0:
        why = "The Brennan–Prediger coefficient is undefined: no item has two or more ratings."
    elif sum(x > 0 for x in s_list[3:]) == 1:  # the category shares: one category used
        why = _one_category("The Brennan–Prediger coefficient", value, extra)
    if why is not None:
        return _finish("Brennan–Prediger", value, None, mult, n_rated, level, notes, why, extra)
    if info["items_unrated"]:
        keep = m >= 1
        feats, mult = feats[keep], mult[keep]
    pe_e = pe if all_pairable else pe * feats[:, 0]  # x * 1.0 == x exactly
    cstar = (n_rated / n2) * (feats[:, 1] - pe_e) / (1.0 - pe)
    return _finish("Brennan–Prediger", value, cstar, mult, n_rated, level, notes, None, extra)
