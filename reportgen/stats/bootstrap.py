"""Item bootstrap for coefficients that are functions of item-level additive sums.

Every coefficient of the engine is ``from_sums(features.sum(0))`` for per-item feature rows.
Resampling items with replacement (each item keeps all of its ratings) therefore only changes
how many times each *distinct* feature row is drawn.  We

1. compress identical feature rows into patterns with multiplicities ``m_p`` (exact);
2. draw, for every replicate, multinomial counts ``W[b, p]`` of the patterns with
   ``n = sum m_p`` draws and probabilities ``m_p / n`` — exactly the distribution of the item
   counts of an ordinary item bootstrap;
3. form all replicate sums at once, ``S = W @ F`` (in chunks to bound memory), and evaluate
   ``from_sums(S)`` once, batched.

Intervals: percentile, or BCa (Efron 1987, JASA 82:171-185; Efron & Tibshirani 1993, *An
Introduction to the Bootstrap*, ch. 14) with the bias correction
``z0 = Phi^-1((#{theta* < theta} + #{theta* = theta}/2) / B)`` (ties split half and half) and the
acceleration from the leave-one-item-out jackknife, computed exactly over patterns
(``total - F_p``, weighted by ``m_p``).  Replicates where the statistic is undefined (NaN) are
left out, counted in ``valid`` and reported in a warning.

Validated against: ``scipy.stats.bootstrap`` (BCa and percentile, resampling items) on small
cases within Monte Carlo error; analytic standard errors on large samples
(tests/stats/test_bootstrap.py).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

from .tables import _confidence_level_iv, patterns

__all__ = ["BootstrapResult", "bootstrap", "bootstrap_many", "draw_pattern_counts"]

_METHODS = {"bca": "bootstrap BCa", "percentile": "bootstrap percentile"}
_CHUNK_CELLS = 1 << 21  # replicate × pattern cells per chunk (about 16 MB as float64)


@dataclass(frozen=True)
class BootstrapResult:
    """A bootstrap interval with the replicate count and the seed it came from."""

    estimate: float | None
    ci_low: float | None
    ci_high: float | None
    se: float | None
    method: str  # "bootstrap BCa" | "bootstrap percentile"
    resamples: int
    seed: int | None
    valid: int  # replicates where the statistic was defined
    warnings: tuple[str, ...]
    confidence_level: float = 0.95


def draw_pattern_counts(
    rng: np.random.Generator, multiplicity: np.ndarray, resamples: int
) -> np.ndarray:
    """Multinomial counts ``(resamples, P)`` of ``n = sum(multiplicity)`` item draws over patterns
    (as float64, ready for the matrix product with the features).

    Equivalent in distribution to drawing ``n`` items with replacement and counting the pattern
    of each.  See :class:`_PatternSampler` for how it is done quickly and exactly.

    Validated against: multinomial means, variances and covariances, and exact binomial
    marginals (chi-square), in ``tests/stats/test_bootstrap.py``.
    """
    return _PatternSampler(np.asarray(multiplicity, dtype=np.int64)).draw(rng, resamples)


class _PatternSampler:
    """Exact multinomial counts over patterns, fast when there are thousands of patterns.

    Small problems use ``Generator.multinomial`` (conditional binomials).  Large ones are
    *Poissonised*: each pattern gets an independent Poisson(``t m_p``) count with
    ``t = 1 - 2 / sqrt(n)``; given their total ``N <= n`` these counts are Multinomial(N, m/n),
    so adding ``n - N`` further draws of single items (uniform over the ``n`` items) gives exactly
    Multinomial(n, m/n).  Replicates with ``N > n`` (about 2 %) are drawn again, which does not
    change the conditional law.  The Poisson counts come from inverting the CDF with a
    16384-entry lookup table per multiplicity value (one 14-bit random integer per count; the few
    table cells that straddle a CDF step are resolved exactly with a fresh uniform), or from
    ``Generator.poisson`` for the few very frequent patterns.
    """

    _BITS = 14
    _TABLE_MAX_MULT = 64

    def __init__(self, mult: np.ndarray) -> None:
        # Work internally with the patterns sorted by multiplicity, so that each table group is
        # a contiguous block of columns; ``draw`` returns columns in the caller's order.
        self.order = np.argsort(mult, kind="stable")
        self.sorted_already = bool(np.all(self.order == np.arange(mult.shape[0])))
        self.mult = mult
        self.n = int(mult.sum())
        self.p = mult.shape[0]
        self.small = self.p <= 64 or self.n < 400
        if self.small:
            return
        self.t = 1.0 - 2.0 / np.sqrt(self.n)
        size = 1 << self._BITS
        self.groups: list[tuple[slice, np.ndarray, np.ndarray, int]] = []
        ms = mult[self.order]
        values, starts, counts = np.unique(ms, return_index=True, return_counts=True)
        for v, a, c in zip(values, starts, counts, strict=True):
            if v > self._TABLE_MAX_MULT:
                break
            cols = slice(int(a), int(a + c))
            cdf = self._poisson_cdf(self.t * float(v))
            edges = np.arange(size + 1, dtype=np.float64) / size
            x_lo = np.searchsorted(cdf, edges[:-1], side="right")
            below_hi = np.searchsorted(cdf, edges[1:], side="left")
            table = np.minimum(x_lo, cdf.shape[0] - 1).astype(np.float64)
            table[below_hi > x_lo] = np.nan  # cell straddles a CDF step: resolve with a uniform
            self.groups.append((cols, table, cdf, size))
        first_big = int(np.searchsorted(ms, self._TABLE_MAX_MULT, side="right"))
        self.big = slice(first_big, self.p)
        self.big_lam = self.t * ms[first_big:].astype(np.float64)
        self.item_pattern = np.repeat(np.arange(self.p, dtype=np.int64), ms)

    @staticmethod
    def _poisson_cdf(lam: float) -> np.ndarray:
        top = int(np.ceil(lam + 14.0 * np.sqrt(lam) + 20.0))
        k = np.arange(top + 1, dtype=np.float64)
        log_fact = np.concatenate([[0.0], np.cumsum(np.log(np.arange(1, top + 1)))])
        return np.cumsum(np.exp(k * np.log(lam) - lam - log_fact))

    def _poissonised(self, rng: np.random.Generator, r: int) -> np.ndarray:
        out = np.empty((r, self.p), dtype=np.float64)
        for cols, table, cdf, size in self.groups:
            b = rng.integers(0, size, size=(r, cols.stop - cols.start), dtype=np.uint16)
            x = table[b]
            amb = np.isnan(x)
            if amb.any():
                u = (b[amb] + rng.random(int(amb.sum()))) / size
                x[amb] = np.minimum(np.searchsorted(cdf, u, side="right"), cdf.shape[0] - 1)
            out[:, cols] = x
        if self.big_lam.shape[0]:
            out[:, self.big] = rng.poisson(self.big_lam, size=(r, self.big_lam.shape[0]))
        return out

    def draw(self, rng: np.random.Generator, r: int) -> np.ndarray:
        if self.p == 0 or r == 0:
            return np.zeros((r, self.p), dtype=np.float64)
        if self.small:
            return rng.multinomial(self.n, self.mult / self.n, size=r).astype(np.float64)
        w = self._poissonised(rng, r)
        total = w.sum(axis=1)
        over = np.flatnonzero(total > self.n)
        while over.shape[0]:
            w[over] = self._poissonised(rng, over.shape[0])
            total[over] = w[over].sum(axis=1)
            over = over[total[over] > self.n]
        short = (self.n - total).astype(np.int64)
        draws = rng.integers(0, self.n, size=int(short.sum()))
        rows = np.repeat(np.arange(r, dtype=np.int64) * self.p, short)
        np.add.at(w.reshape(-1), rows + self.item_pattern[draws], 1.0)
        return w if self.sorted_already else self.unsort(w)

    def unsort(self, w: np.ndarray) -> np.ndarray:
        out = np.empty_like(w)
        out[:, self.order] = w
        return out


def _as_patterns(
    features: np.ndarray, multiplicity: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray]:
    f = np.asarray(features, dtype=np.float64)
    if f.ndim != 2:
        raise ValueError(f"features must be 2-D (items × features), got shape {f.shape}")
    if multiplicity is None:
        u, mult, _ = patterns(f)
        return u, mult
    mult = np.asarray(multiplicity)
    if mult.shape != (f.shape[0],):
        raise ValueError("multiplicity must give one count per feature row")
    if mult.dtype.kind not in "iu" or (mult.size and int(mult.min()) < 0):
        raise ValueError("multiplicity must be non-negative integers")
    keep = mult > 0
    return f[keep], mult[keep].astype(np.int64)


def _replicate_sums(
    f: np.ndarray, mult: np.ndarray, resamples: int, rng: np.random.Generator
) -> np.ndarray:
    """``W @ F`` for all replicates, in chunks of replicates to bound memory."""
    out = np.empty((resamples, f.shape[1]), dtype=np.float64)
    # Bound the replicate × pattern cells, and the single-item top-up draws of the Poissonised
    # sampler (about 2 sqrt(n) per replicate), per chunk.
    top_up = 2.0 * np.sqrt(float(mult.sum())) + 1.0
    step = int(min(resamples, _CHUNK_CELLS // max(1, f.shape[0]), (_CHUNK_CELLS // 4) / top_up))
    step = max(1, step)
    order = np.argsort(mult, kind="stable")
    f, mult = f[order], mult[order]  # sums do not depend on the order of the patterns
    sampler = _PatternSampler(mult)
    for start in range(0, resamples, step):
        stop = min(resamples, start + step)
        out[start:stop] = sampler.draw(rng, stop - start) @ f
    return out


def _rng_iv(seed: int | None, rng: np.random.Generator | None) -> np.random.Generator:
    if rng is not None and seed is not None:
        raise ValueError("give either seed or rng, not both")
    if rng is not None:
        if not isinstance(rng, np.random.Generator):
            raise TypeError("rng must be a numpy.random.Generator")
        return rng
    return np.random.default_rng(seed)


def _options_iv(resamples: int, method: str, confidence_level: float) -> tuple[int, str, float]:
    b = int(resamples)
    if b < 2 or b != resamples:
        raise ValueError(f"resamples must be a whole number of at least 2, got {resamples!r}")
    if method not in _METHODS:
        raise ValueError(f"method must be 'bca' or 'percentile', got {method!r}")
    return b, method, _confidence_level_iv(confidence_level)


def _interval(
    theta_hat: float,
    reps: np.ndarray,
    jack: np.ndarray,
    jack_w: np.ndarray,
    *,
    resamples: int,
    seed: int | None,
    method: str,
    level: float,
) -> BootstrapResult:
    label = _METHODS[method]
    valid_mask = np.isfinite(reps)
    valid = int(valid_mask.sum())
    notes: list[str] = []

    def empty(why: str) -> BootstrapResult:
        return BootstrapResult(
            estimate=theta_hat if np.isfinite(theta_hat) else None,
            ci_low=None, ci_high=None, se=None, method=label, resamples=resamples, seed=seed,
            valid=valid, warnings=(*notes, why), confidence_level=level,
        )

    if not np.isfinite(theta_hat):
        return empty("No bootstrap interval: the statistic is undefined for these data.")
    if valid < resamples:
        notes.append(
            f"{resamples - valid} of {resamples} bootstrap resamples gave an undefined value "
            "and were left out."
        )
    if valid < 2:
        return empty("No bootstrap interval: fewer than two resamples gave a defined value.")
    r = reps[valid_mask]
    se = float(np.std(r, ddof=1))
    alpha = (1.0 - level) / 2.0
    probs = np.array([alpha, 1.0 - alpha])
    if np.all(r == r[0]):
        notes.append("Every bootstrap resample gave the same value.")
    if method == "bca":
        nd = NormalDist()
        below = float(np.count_nonzero(r < theta_hat))
        ties = float(np.count_nonzero(r == theta_hat))
        prop = (below + 0.5 * ties) / valid
        jv = np.isfinite(jack)
        fallback = None
        if not 0.0 < prop < 1.0:
            fallback = "every resample lies on one side of the estimate"
        elif not jv.any():
            fallback = "no leave-one-item-out value is defined"
        else:
            z0 = nd.inv_cdf(prop)
            jw, jt = jack_w[jv], jack[jv]
            mean = float(jw @ jt) / float(jw.sum())
            d = mean - jt
            den = 6.0 * float(jw @ d**2) ** 1.5
            a = float(jw @ d**3) / den if den > 0 else 0.0
            zq = np.array([nd.inv_cdf(float(p)) for p in probs])
            shrink = 1.0 - a * (z0 + zq)
            if np.all(shrink > 0):
                adj = z0 + (z0 + zq) / shrink
                probs = np.array([nd.cdf(float(x)) for x in adj])
                if not jv.all():
                    notes.append(
                        "Some leave-one-item-out values were undefined; the acceleration uses "
                        "the rest."
                    )
            else:
                fallback = "the acceleration is too large for the BCa formula"
        if fallback is not None:
            notes.append(f"BCa correction not possible ({fallback}); percentile interval given.")
            label = _METHODS["percentile"]
    lo, hi = np.quantile(r, probs)
    return BootstrapResult(
        estimate=theta_hat, ci_low=float(lo), ci_high=float(hi), se=se, method=label,
        resamples=resamples, seed=seed, valid=valid, warnings=tuple(notes),
        confidence_level=level,
    )


def bootstrap(
    features: np.ndarray,
    from_sums: Callable[[np.ndarray], np.ndarray],
    *,
    resamples: int = 2000,
    seed: int | None = None,
    rng: np.random.Generator | None = None,
    confidence_level: float = 0.95,
    method: str = "bca",
    multiplicity: np.ndarray | None = None,
) -> BootstrapResult:
    """Item-bootstrap interval of ``from_sums(features.sum(0))``.

    ``features`` is ``(n_items, f)``, or ``(n_patterns, f)`` with ``multiplicity`` giving how
    many items share each row (then no compression is needed).  ``from_sums`` maps sums of shape
    ``(..., f)`` to values of shape ``(...)`` (NaN where undefined).  ``method`` is ``"bca"``
    (default) or ``"percentile"``.  The same ``seed`` gives the same interval.

    Validated against: scipy.stats.bootstrap on per-item resampling (tests/stats/test_bootstrap.py).
    """
    return bootstrap_many(
        {"_": features}, {"_": from_sums}, resamples=resamples, seed=seed, rng=rng,
        confidence_level=confidence_level, method=method, multiplicity=multiplicity,
    )["_"]


def bootstrap_many(
    features: Mapping[str, np.ndarray],
    from_sums: Mapping[str, Callable[[np.ndarray], np.ndarray]],
    *,
    resamples: int = 2000,
    seed: int | None = None,
    rng: np.random.Generator | None = None,
    confidence_level: float = 0.95,
    method: str = "bca",
    multiplicity: np.ndarray | None = None,
) -> dict[str, BootstrapResult]:
    """Bootstrap several coefficients on one shared resample of items.

    ``features`` and ``from_sums`` have the same keys; statistic ``name`` is
    ``from_sums[name](sums of features[name])`` (two statistics of one feature matrix, such as
    the per-category kappas, simply pass the same matrix under two keys).  Every feature matrix
    has one row per item (or per pattern, with ``multiplicity``); the same item draws are used
    for all of them, so the intervals are jointly consistent.

    Validated against: ``tests/stats/test_bootstrap.py`` (shared draws, reproducibility).
    """
    b, method_, level = _options_iv(resamples, method, confidence_level)
    if set(features) != set(from_sums):
        raise ValueError("features and from_sums must have the same keys")
    names = list(features)
    mats = [np.asarray(features[k], dtype=np.float64) for k in names]
    if not mats:
        return {}
    n_rows = mats[0].shape[0]
    for k, mtx in zip(names, mats, strict=True):
        if mtx.ndim != 2 or mtx.shape[0] != n_rows:
            raise ValueError(f"features[{k!r}] must be 2-D with {n_rows} rows")
    widths = [mtx.shape[1] for mtx in mats]
    edges = np.cumsum([0, *widths])
    joint = np.concatenate(mats, axis=1) if len(mats) > 1 else mats[0]
    f, mult = _as_patterns(joint, multiplicity)
    generator = _rng_iv(seed, rng)
    total = mult.astype(np.float64) @ f
    reps = _replicate_sums(f, mult, b, generator)
    jack_sums = total[None, :] - f
    out: dict[str, BootstrapResult] = {}
    for i, name in enumerate(names):
        sl = slice(int(edges[i]), int(edges[i + 1]))
        fn = from_sums[name]
        theta_hat = float(np.asarray(fn(total[sl])))
        values = np.asarray(fn(reps[:, sl]), dtype=np.float64).reshape(b)
        jack = np.asarray(fn(jack_sums[:, sl]), dtype=np.float64).reshape(-1)
        out[name] = _interval(
            theta_hat, values, jack, mult.astype(np.float64),
            resamples=b, seed=seed if rng is None else None, method=method_, level=level,
        )
    return out
