"""Hit/miss probability of detection (numpy only).

Source: MIL-HDBK-1823A (2009), "Nondestructive evaluation system reliability assessment",
hit/miss analysis: a generalised linear model of detection on flaw size (or log size) with a
logit or probit link; a50 and a90 are the sizes found with 50 % and 90 % probability, and
a90/95 is the one-sided 95 % upper confidence bound on a90.  We give the bound by the
likelihood ratio (profile likelihood), which the handbook prefers for hit/miss data, and the
delta-method (Wald) bound beside it.
"""

from __future__ import annotations

import math
from statistics import NormalDist
from typing import Any

import numpy as np

from .binomial_fit import Link, fit_binomial, likelihood_ratio_bounds

_N = NormalDist()


def detection(
    sizes: np.ndarray,
    hits: np.ndarray,
    trials: np.ndarray,
    *,
    link: Link = "logit",
    log_size: bool = False,
    confidence_level: float = 0.95,
    curve_points: int = 61,
) -> dict[str, Any]:
    """POD fit and figures as JSON-ready data; ``refused`` holds the reason when none can be given.

    ``sizes`` are the measured sizes per item (> 0 when ``log_size``), ``hits`` the detections
    and ``trials`` the looks at that item.
    """
    s = np.asarray(sizes, dtype=float)
    k = np.asarray(hits, dtype=int)
    n = np.asarray(trials, dtype=int)
    out: dict[str, Any] = {
        "link": link,
        "size_axis": "log" if log_size else "linear",
        "items": int((n > 0).sum()),
        "looks": int(n.sum()),
        "hits": int(k.sum()),
        "confidence_level": confidence_level,
        "bound_method": "likelihood ratio (profile likelihood), one-sided",
        "refused": None,
    }
    if log_size and np.any(s[n > 0] <= 0):
        out["refused"] = "a log size axis needs every size above zero"
        return out
    x = np.log(s) if log_size else s
    try:
        fit = fit_binomial(x, k, n, link)
    except ValueError as exc:
        out["refused"] = str(exc)
        return out
    if fit.b1 <= 0:
        out["refused"] = "detection falls as size grows: the fitted slope is not positive"
        return out

    def back(v: float | None) -> float | None:
        if v is None:
            return None
        return float(math.exp(v)) if log_size else float(v)

    one_sided = confidence_level  # a90/95: one-sided bound at the study's confidence level
    z1 = _N.inv_cdf(one_sided)
    a50, a90 = fit.quantile(0.5), fit.quantile(0.9)
    _, lr_hi = likelihood_ratio_bounds(fit, 0.9, one_sided, lower=False)
    wald_hi = a90 + z1 * fit.quantile_se(0.9)
    grid = np.linspace(float(x.min()), float(x.max()), curve_points)
    lo, hi = fit.band(grid, z1)
    out.update(
        {
            "intercept": fit.b0,
            "slope": fit.b1,
            "covariance": [list(r) for r in fit.cov],
            "a50": back(a50),
            "a90": back(a90),
            "a90_95": back(lr_hi),
            "a90_95_delta": back(wald_hi),
            "deviance": fit.deviance,
            "pearson_chi2": fit.pearson_chi2,
            "df": fit.df,
            "curve": [
                {"size": back(float(g)), "pod": float(p), "lower": float(a), "upper": float(b)}
                for g, p, a, b in zip(grid, fit.predict(grid), lo, hi, strict=True)
            ],
        }
    )
    if lr_hi is None:
        out["a90_95"] = None
        out["refused"] = "the likelihood-ratio bound on a90 does not close within the data's reach"
    return out
