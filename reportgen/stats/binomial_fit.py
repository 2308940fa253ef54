"""Maximum-likelihood binomial regression on one covariate, probit or logit link (numpy only).

Model: P(success | x) = F(b0 + b1 * x), F the standard normal (probit) or logistic (logit)
distribution function; data grouped as (x_i, successes k_i, trials n_i).  Fitted by Newton's
method with Fisher scoring (iteratively reweighted least squares, McCullagh & Nelder 1989,
section 4.4); the covariance is the inverse expected information at the estimate, as in the
usual GLM output.

Quantiles of the curve, ``x_p`` where P = p (a50, a90 of MIL-HDBK-1823A, 2009), come with two
bounds: the delta method (Wald) and the likelihood ratio (profile likelihood, MIL-HDBK-1823A
(2009), section on hit/miss confidence bounds).  Validated against: statsmodels GLM (binomial
family, probit and logit links) and a profile likelihood computed with scipy (tests only).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from statistics import NormalDist
from typing import Literal

import numpy as np

Link = Literal["probit", "logit"]
_N = NormalDist()
_ERFC = np.frompyfunc(math.erfc, 1, 1)
#: |b1 * spread of x| above this counts as separation (the curve is a step)
SEPARATION_SLOPE = 60.0


def _cdf(eta: np.ndarray, link: Link) -> np.ndarray:
    if link == "logit":
        return 1.0 / (1.0 + np.exp(-eta))
    return 0.5 * _erfc(-eta / math.sqrt(2.0))


def _erfc(z: np.ndarray) -> np.ndarray:
    return _ERFC(np.asarray(z, dtype=float)).astype(float)


def _pdf(eta: np.ndarray, link: Link) -> np.ndarray:
    if link == "logit":
        p = 1.0 / (1.0 + np.exp(-eta))
        return p * (1.0 - p)
    return np.exp(-0.5 * eta * eta) / math.sqrt(2.0 * math.pi)


def link_value(p: float, link: Link) -> float:
    """g(p): the linear predictor at which the curve equals p."""
    if link == "logit":
        return math.log(p / (1.0 - p))
    return _N.inv_cdf(p)


@dataclass(frozen=True)
class BinomialFit:
    link: Link
    b0: float
    b1: float
    cov: tuple[tuple[float, float], tuple[float, float]]
    loglik: float
    deviance: float  # against the saturated grouped model
    pearson_chi2: float
    df: int  # groups - 2
    iterations: int
    x: tuple[float, ...]
    k: tuple[int, ...]
    n: tuple[int, ...]

    def predict(self, x: np.ndarray | float) -> np.ndarray:
        return _cdf(self.b0 + self.b1 * np.asarray(x, dtype=float), self.link)

    def band(self, x: np.ndarray, z: float) -> tuple[np.ndarray, np.ndarray]:
        """Pointwise Wald band: F(eta ± z·se(eta))."""
        x = np.asarray(x, dtype=float)
        c = np.array(self.cov)
        eta = self.b0 + self.b1 * x
        se = np.sqrt(np.maximum(c[0, 0] + 2 * x * c[0, 1] + x * x * c[1, 1], 0.0))
        return _cdf(eta - z * se, self.link), _cdf(eta + z * se, self.link)

    def quantile(self, p: float) -> float:
        """x_p: where the fitted curve equals p."""
        return (link_value(p, self.link) - self.b0) / self.b1

    def quantile_se(self, p: float) -> float:
        """Delta-method standard error of x_p (gradient of (g(p) - b0)/b1)."""
        xp = self.quantile(p)
        grad = np.array([-1.0 / self.b1, -xp / self.b1])
        return float(math.sqrt(max(grad @ np.array(self.cov) @ grad, 0.0)))


def _loglik(x: np.ndarray, k: np.ndarray, n: np.ndarray, eta: np.ndarray, link: Link) -> float:
    p = np.clip(_cdf(eta, link), 1e-300, 1 - 1e-16)
    q = np.clip(1.0 - _cdf(eta, link), 1e-300, 1.0)
    if link == "probit":  # accurate upper tail
        q = np.clip(_cdf(-eta, link), 1e-300, 1.0)
    return float(np.sum(k * np.log(p) + (n - k) * np.log(q)))


def _saturated(k: np.ndarray, n: np.ndarray) -> float:
    with np.errstate(divide="ignore", invalid="ignore"):
        p = k / n
        a = np.where(k > 0, k * np.log(np.where(k > 0, p, 1.0)), 0.0)
        b = np.where(n - k > 0, (n - k) * np.log(np.where(n - k > 0, 1 - p, 1.0)), 0.0)
    return float(np.sum(a + b))


def separated(x: np.ndarray, k: np.ndarray, n: np.ndarray) -> bool:
    """Complete or quasi-complete separation: failures and successes do not overlap in x."""
    x, k, n = (np.asarray(v, dtype=float) for v in (x, k, n))
    fails = x[(n - k) > 0]
    hits = x[k > 0]
    if fails.size == 0 or hits.size == 0:
        return True
    return bool(fails.max() <= hits.min() or hits.max() <= fails.min())


def fit_binomial(
    x: np.ndarray, k: np.ndarray, n: np.ndarray, link: Link = "probit", *, max_iter: int = 100
) -> BinomialFit:
    """Fit F(b0 + b1 x) by Fisher scoring.  Raises ValueError on no successes, no failures,
    separation or no convergence (the caller reports the reason)."""
    x = np.asarray(x, dtype=float)
    k = np.asarray(k, dtype=float)
    n = np.asarray(n, dtype=float)
    keep = n > 0
    x, k, n = x[keep], k[keep], n[keep]
    if k.sum() == 0:
        raise ValueError("no successes: the curve cannot be fitted")
    if k.sum() == n.sum():
        raise ValueError("no failures: the curve cannot be fitted")
    if np.unique(x).size < 2:
        raise ValueError("all values are the same: the slope cannot be fitted")
    if separated(x, k, n):
        raise ValueError(
            "the outcomes are separated by the value (every miss on one side of every hit): "
            "the maximum-likelihood slope is infinite"
        )
    X = np.column_stack([np.ones_like(x), x])
    # start: least squares of the link of the smoothed proportions
    p0 = (k + 0.5) / (n + 1.0)
    z0 = np.array([link_value(float(v), link) for v in p0])
    beta = np.linalg.lstsq(X, z0, rcond=None)[0]
    old = -math.inf
    it = 0
    for it in range(1, max_iter + 1):  # noqa: B007 - the count is kept in the fit
        eta = X @ beta
        mu = np.clip(_cdf(eta, link), 1e-12, 1 - 1e-12)
        d = np.maximum(_pdf(eta, link), 1e-300)
        w = n * d * d / (mu * (1 - mu))
        score = X.T @ (n * (k / n - mu) * d / (mu * (1 - mu)))
        info = X.T @ (X * w[:, None])
        step = np.linalg.solve(info, score)
        new_beta = beta + step
        ll = _loglik(x, k, n, X @ new_beta, link)
        halvings = 0
        while ll < old - 1e-12 and halvings < 30:
            step = step / 2
            new_beta = beta + step
            ll = _loglik(x, k, n, X @ new_beta, link)
            halvings += 1
        beta = new_beta
        if abs(ll - old) < 1e-13 * (1 + abs(ll)) and np.max(np.abs(step)) < 1e-10 * (
            1 + np.max(np.abs(beta))
        ):
            break
        old = ll
    else:
        raise ValueError("the fit did not converge")
    spread = float(x.max() - x.min())
    if abs(beta[1]) * spread > SEPARATION_SLOPE:
        raise ValueError("the fitted curve is nearly a step (near separation): no stable fit")
    eta = X @ beta
    mu = np.clip(_cdf(eta, link), 1e-300, 1 - 1e-16)
    d = _pdf(eta, link)
    w = n * d * d / (mu * (1 - mu))
    cov = np.linalg.inv(X.T @ (X * w[:, None]))
    ll = _loglik(x, k, n, eta, link)
    pearson = float(np.sum((k - n * mu) ** 2 / (n * mu * (1 - mu))))
    return BinomialFit(
        link=link,
        b0=float(beta[0]),
        b1=float(beta[1]),
        cov=((float(cov[0, 0]), float(cov[0, 1])), (float(cov[1, 0]), float(cov[1, 1]))),
        loglik=ll,
        deviance=2.0 * (_saturated(k, n) - ll),
        pearson_chi2=pearson,
        df=int(x.size - 2),
        iterations=it,
        x=tuple(float(v) for v in x),
        k=tuple(int(v) for v in k),
        n=tuple(int(v) for v in n),
    )


def profile_loglik(fit: BinomialFit, p: float, xp: float, start: float | None = None) -> float:
    """Largest log-likelihood among curves that pass through (xp, p): eta = g(p) + b1 (x - xp)."""
    x = np.array(fit.x)
    k = np.array(fit.k, dtype=float)
    n = np.array(fit.n, dtype=float)
    g = link_value(p, fit.link)
    u = x - xp
    b1 = fit.b1 if start is None else start
    best = -math.inf
    for _ in range(200):
        eta = g + b1 * u
        mu = np.clip(_cdf(eta, fit.link), 1e-12, 1 - 1e-12)
        d = np.maximum(_pdf(eta, fit.link), 1e-300)
        score = float(np.sum(u * n * (k / n - mu) * d / (mu * (1 - mu))))
        info = float(np.sum(u * u * n * d * d / (mu * (1 - mu))))
        if info <= 0:
            break
        step = score / info
        cur = _loglik(x, k, n, eta, fit.link)
        new = b1 + step
        ll = _loglik(x, k, n, g + new * u, fit.link)
        h = 0
        while ll < cur - 1e-12 and h < 40:
            step /= 2
            new = b1 + step
            ll = _loglik(x, k, n, g + new * u, fit.link)
            h += 1
        b1 = new
        best = ll
        if abs(step) < 1e-10 * (1 + abs(b1)):
            break
    return best


def likelihood_ratio_bounds(
    fit: BinomialFit, p: float, one_sided_level: float = 0.95, *, lower: bool = True
) -> tuple[float | None, float | None]:
    """Profile-likelihood limits of x_p at ``one_sided_level`` each side (MIL-HDBK-1823A, 2009).

    The set {x : 2 (l_max - l_profile(x)) <= chi2_1(2 level - 1)}; its ends are found by
    bracketing and the Illinois variant of regula falsi.  None where the set does not end within
    50 spreads of the data; ``lower=False`` skips the lower end (None).
    """
    crit = _N.inv_cdf(one_sided_level) ** 2  # chi-square(1) quantile at 2*level-1
    xp = fit.quantile(p)
    x = np.array(fit.x)
    spread = float(x.max() - x.min()) or 1.0

    def excess(v: float) -> float:
        return 2.0 * (fit.loglik - profile_loglik(fit, p, v)) - crit

    out: list[float | None] = []
    for sign in (-1.0, 1.0):
        if sign < 0 and not lower:
            out.append(None)
            continue
        a, fa = xp, -crit
        step, b, fb = spread / 20.0, None, 0.0
        while step < 50 * spread:
            cand = xp + sign * step
            fc = excess(cand)
            if fc > 0:
                b, fb = cand, fc
                break
            a, fa = cand, fc
            step *= 2
        if b is None:
            out.append(None)
            continue
        side = 0
        c = a
        for _ in range(100):
            c = (a * fb - b * fa) / (fb - fa)
            fc = excess(c)
            if abs(fc) < 1e-11 or abs(b - a) < 1e-12 * spread:
                break
            if fc > 0:
                b, fb = c, fc
                if side == 1:
                    fa /= 2
                side = 1
            else:
                a, fa = c, fc
                if side == -1:
                    fb /= 2
                side = -1
        out.append(float(c))
    return out[0], out[1]
