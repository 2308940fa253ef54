"""Krippendorff's alpha (nominal, ordinal, interval) from the coincidence matrix.

Following Krippendorff (2011, "Computing Krippendorff's alpha-reliability", Annenberg School
for Communication, University of Pennsylvania; revised 2013) and Krippendorff (2004/2013,
*Content Analysis*, ch. 12):

- a unit (item) *u* with ``m_u >= 2`` values contributes ``(n_uc n_uk - [c = k] n_uc) / (m_u - 1)``
  to the coincidence ``o_ck``; units with fewer than two values are not pairable and contribute
  nothing;
- ``n_c = sum_k o_ck``, ``n = sum_c n_c`` (the number of pairable values);
- ``alpha = 1 - (n - 1) sum_ck o_ck delta2_ck / sum_ck n_c n_k delta2_ck``.

Difference functions ``delta2``: nominal ``[c != k]``; interval ``(v_c - v_k)^2`` for the
category values ``v`` (default 0, 1, ..); ordinal, from the category order and the marginal
frequencies, ``(sum_{g=c}^{k} n_g - (n_c + n_k)/2)^2``.  Because the ordinal metric depends on the
marginals, alpha is computed from the full coincidence matrix, which is item-additive, so every
level is a ``from_sums`` function of the per-item coincidence contributions.

No analytic standard error is given (Krippendorff recommends the bootstrap); use
:mod:`reportgen.stats.bootstrap` with :func:`krippendorff_alpha_features`.

Validated against: Krippendorff (2011) worked example (4 observers × 12 units with missing
values: nominal 0.743, interval 0.849) and the ``krippendorff`` package on random data at all
three levels (tests/stats/test_krippendorff.py).
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np

from .results import Estimate
from .tables import CountPatterns, _confidence_level_iv, _finite_or_none, _ones, as_patterns

__all__ = [
    "coincidence_matrix",
    "krippendorff_alpha",
    "krippendorff_alpha_features",
    "krippendorff_alpha_from_sums",
]

Level = Literal["nominal", "ordinal", "interval"]
_LEVELS = ("nominal", "ordinal", "interval")


def krippendorff_alpha_features(counts: np.ndarray) -> np.ndarray:
    """Per-unit coincidence contributions, shape ``(n_items, k * k)`` (row-major ``o_ck``).

    Validated against: the coincidence matrix of Krippendorff's (2011) example, recomputed.
    """
    c = np.asarray(counts, dtype=np.float64)
    if c.ndim != 2:
        raise ValueError(f"counts must be an items × categories table, got shape {c.shape}")
    n, k = c.shape
    m = c.sum(axis=1)
    scale = np.where(m >= 2, 1.0 / np.where(m >= 2, m - 1.0, 1.0), 0.0)
    o = c[:, :, None] * c[:, None, :]
    idx = np.arange(k)
    o[:, idx, idx] -= c
    o *= scale[:, None, None]
    return o.reshape(n, k * k)


def coincidence_matrix(counts: np.ndarray | CountPatterns) -> np.ndarray:
    """The (k, k) coincidence matrix ``o_ck`` of Krippendorff (2011), over pairable units.

    Validated against: marginals of Krippendorff's (2011) example counted by hand.
    """
    pat = as_patterns(counts)
    feats = krippendorff_alpha_features(pat.rows)
    k = pat.rows.shape[1]
    return (pat.multiplicity.astype(np.float64) @ feats).reshape(k, k)


def _delta2(n_c: np.ndarray, level: str, values: np.ndarray | None) -> np.ndarray:
    k = n_c.shape[-1]
    if level == "nominal":
        return np.broadcast_to(1.0 - np.eye(k), (*n_c.shape[:-1], k, k))
    if level == "interval":
        v = np.arange(k, dtype=np.float64) if values is None else values
        d = (v[:, None] - v[None, :]) ** 2
        return np.broadcast_to(d, (*n_c.shape[:-1], k, k))
    cum = np.cumsum(n_c, axis=-1)
    d = cum[..., None, :] - cum[..., :, None] + (n_c[..., :, None] - n_c[..., None, :]) / 2.0
    return d * d


def _level_iv(level: str, values: np.ndarray | None, k: int) -> np.ndarray | None:
    if level not in _LEVELS:
        raise ValueError(f"level must be one of {', '.join(_LEVELS)}, got {level!r}")
    if values is None:
        return None
    v = np.asarray(values, dtype=np.float64)
    if v.shape != (k,):
        raise ValueError(f"values must have shape ({k},), got {v.shape}")
    if not np.all(np.isfinite(v)):
        raise ValueError("category values must be finite numbers")
    return v


def krippendorff_alpha_from_sums(
    sums: np.ndarray, *, level: Level = "nominal", values: np.ndarray | None = None
) -> np.ndarray:
    """Alpha from summed coincidence contributions (..., k*k); NaN where undefined.

    Validated against: Krippendorff (2011) example; ``krippendorff.alpha`` at all three levels.
    """
    s = np.asarray(sums, dtype=np.float64)
    k = int(round(np.sqrt(s.shape[-1])))
    if k * k != s.shape[-1]:
        raise ValueError("Krippendorff sums must have k*k columns")
    return _alpha_parts(s, level, _level_iv(level, values, k))[0]


def _alpha_parts(
    s: np.ndarray, level: str, v: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """``(alpha, sum o delta2, sum n_c n_k delta2, n, n_c)`` from coincidence sums."""
    k = int(round(np.sqrt(s.shape[-1])))
    o = s.reshape(*s.shape[:-1], k, k)
    if s.ndim > 1 and s.shape[0] >= 64:
        # a batch (bootstrap replicates): the same sums written as 2-D matrix products, which
        # numpy does much faster than reductions over short trailing axes
        lead = s.shape[:-1]
        flat = s.reshape(-1, k * k)
        n_c = (flat @ np.kron(np.eye(k), np.ones((k, 1)))).reshape(lead + (k,))
        n = n_c @ _ones(k)
        if level == "ordinal":
            d2 = _delta2(n_c, level, v).reshape(-1, k * k)
            d_obs = ((flat * d2) @ _ones(k * k)).reshape(lead)
            outer = (n_c[..., :, None] * n_c[..., None, :]).reshape(-1, k * k)
            d_exp = ((outer * d2) @ _ones(k * k)).reshape(lead)
        else:  # one delta matrix for every replicate
            d2 = _delta2(np.zeros(k), level, v)
            d_obs = (flat @ d2.reshape(-1)).reshape(lead)
            d_exp = ((n_c @ d2) * n_c) @ _ones(k)
    else:
        n_c = o.sum(axis=-1)
        n = n_c.sum(axis=-1)
        d2 = _delta2(n_c, level, v)
        d_obs = (o * d2).sum(axis=(-2, -1))
        d_exp = (n_c[..., :, None] * n_c[..., None, :] * d2).sum(axis=(-2, -1))
    if s.ndim == 1:
        ok = n > 1 and d_exp > 0
        alpha = np.float64(1.0 - (n - 1.0) * d_obs / d_exp if ok else np.nan)
        return alpha, d_obs, d_exp, n, n_c
    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = 1.0 - (n - 1.0) * d_obs / d_exp
    return np.where((n > 1) & (d_exp > 0), alpha, np.nan), d_obs, d_exp, n, n_c


def _alpha_one(
    o: list[list[float]], level: str, v: np.ndarray | None
) -> tuple[float, float, float, float, list[float]]:
    """:func:`_alpha_parts` for one coincidence matrix, in Python floats (k is small)."""
    k = len(o)
    n_c = [sum(row) for row in o]
    n = sum(n_c)
    if level == "nominal":  # off-diagonal sums (no n^2 - sum n_c^2 cancellation)
        d_obs = sum(o[c][j] for c in range(k) for j in range(k) if c != j)
        d_exp = sum(n_c[c] * n_c[j] for c in range(k) for j in range(k) if c != j)
    else:
        if level == "interval":
            vals = list(range(k)) if v is None else v.tolist()
            d2 = [[(vals[c] - vals[j]) ** 2 for j in range(k)] for c in range(k)]
        else:  # ordinal: from the marginals, (sum_{g=c}^{j} n_g - (n_c + n_j) / 2)^2
            cum = [0.0] * k
            run = 0.0
            for c in range(k):
                run += n_c[c]
                cum[c] = run
            d2 = [
                [(cum[j] - cum[c] + (n_c[c] - n_c[j]) / 2.0) ** 2 for j in range(k)]
                for c in range(k)
            ]
        d_obs = sum(o[c][j] * d2[c][j] for c in range(k) for j in range(k))
        d_exp = sum(n_c[c] * n_c[j] * d2[c][j] for c in range(k) for j in range(k))
    ok = n > 1 and d_exp > 0
    alpha = 1.0 - (n - 1.0) * d_obs / d_exp if ok else math.nan
    return alpha, d_obs, d_exp, n, n_c


def krippendorff_alpha(
    counts: np.ndarray | CountPatterns,
    *,
    level: Level = "nominal",
    values: np.ndarray | None = None,
    confidence_level: float = 0.95,
) -> Estimate:
    """Krippendorff's alpha from an items × declared-categories count table.

    ``level`` is ``"nominal"``, ``"ordinal"`` (categories in their declared order) or
    ``"interval"`` (``values`` = numeric value of each category, default 0, 1, ...).
    The estimate carries no analytic SE; intervals come from the item bootstrap.

    Validated against: Krippendorff (2011) worked example; ``krippendorff.alpha`` on random data.
    """
    level_ = _confidence_level_iv(confidence_level)
    pat = as_patterns(counts)
    k = pat.rows.shape[1]
    v = _level_iv(level, values, k)
    rows = pat.rows.astype(np.float64)
    mult = pat.multiplicity.astype(np.float64)
    m = rows @ _ones(k)  # ratings per pattern (exact: whole numbers)
    # Column sums of krippendorff_alpha_features(rows) weighted by multiplicity, formed as one
    # small matrix product instead of an (items, k, k) array: sum_u s_u n_uc n_uk - diag(s_u n_uc)
    # with s_u = multiplicity / (m_u - 1) for pairable units.
    pairable = m >= 2
    if m.min() >= 2:
        scale = mult / (m - 1.0)
    else:
        scale = mult * np.where(pairable, 1.0 / np.where(pairable, m - 1.0, 1.0), 0.0)
    scaled = rows * scale[:, None]
    o = scaled.T @ rows
    o[np.diag_indices(k)] -= scale @ rows
    sums = o.reshape(k * k)
    alpha, d_obs, d_exp, n_values, n_c = _alpha_one(o.tolist(), level, v)
    units_dropped = mult @ np.stack([pairable, m == 1], axis=1)
    value = float(alpha)
    units, dropped = (int(x) for x in units_dropped.tolist())
    del sums, n_c
    n_values = float(n_values)
    notes: list[str] = []
    if dropped:
        notes.append(
            f"{dropped} item(s) have a single rating and are not pairable: Krippendorff's alpha "
            "leaves them out."
        )
    extra: dict[str, object] = {
        "level": level,
        "pairable_values": int(round(n_values)),
        "units_pairable": units,
        "coincidences": o.tolist(),
    }
    if not math.isfinite(value):
        if n_values <= 1:
            why = "Krippendorff's alpha is undefined: no item has two or more ratings."
        else:
            why = (
                "Krippendorff's alpha is undefined: every pairable rating is in one category "
                "(or has one value), so there is no expected disagreement."
            )
        return Estimate(
            estimate=None,
            items=units,
            confidence_level=level_,
            warnings=(*notes, why),
            extra=extra,
        )
    extra["d_observed"] = _finite_or_none(float(d_obs) / n_values)
    extra["d_expected"] = _finite_or_none(float(d_exp) / (n_values * (n_values - 1.0)))
    return Estimate(
        estimate=value, items=units, confidence_level=level_, warnings=tuple(notes), extra=extra
    )
