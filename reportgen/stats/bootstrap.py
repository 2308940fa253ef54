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

Several families of coefficients (:func:`bootstrap_groups`): each keeps its own compression of
the items (count-table coefficients over the items × categories patterns; coefficients whose
features identify raters over distinct rating rows), and the item draws are made once, over the
cells of the finest common partition (items alike in every family), with each family's feature
rows laid out on those cells.  So every interval comes from the same resampled items, and a
family whose rows rarely repeat does not spoil the compression of the others.

Validated against: ``scipy.stats.bootstrap`` (BCa and percentile, resampling items) on small
cases within Monte Carlo error; analytic standard errors on large samples; identical replicate
values for one statistic computed from two differently compressed groups
(tests/stats/test_bootstrap.py).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

from .tables import _confidence_level_iv, _group_keys, patterns

__all__ = [
    "BootstrapResult",
    "FeatureGroup",
    "bootstrap",
    "bootstrap_groups",
    "bootstrap_many",
    "draw_pattern_counts",
    "refine",
]

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

    Studies of at most 2,048 items draw the items themselves (``n`` uniform integers per
    replicate, counted per pattern).  Other small problems use ``Generator.multinomial``
    (conditional binomials).  Large ones are
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
    _ITEM_DRAWS_MAX = 2048
    _AMBIGUOUS = 255

    def __init__(self, mult: np.ndarray) -> None:
        # Work internally with the patterns sorted by multiplicity, so that each table group is
        # a contiguous block of columns; ``draw`` returns columns in the caller's order.
        self.order = np.argsort(mult, kind="stable")
        self.sorted_already = bool(np.all(self.order == np.arange(mult.shape[0])))
        self.mult = mult
        self.n = int(mult.sum())
        self.p = mult.shape[0]
        # few items: draw them one by one (n uniform draws per replicate), which is exactly the
        # item bootstrap and faster than numpy's multinomial (a binomial per cell)
        self.by_item = self.n <= self._ITEM_DRAWS_MAX
        if self.by_item:
            # the pattern of each item (None when every pattern is a single item, in order)
            self.item_pattern = (
                None if self.p == self.n else np.repeat(np.arange(self.p, dtype=np.intp), mult)
            )
        self.small = self.p <= 64 or self.n < 400
        if self.small or self.by_item:
            return
        self.t = 1.0 - 2.0 / np.sqrt(self.n)
        size = 1 << self._BITS
        ms = mult[self.order]
        values, counts = np.unique(ms, return_counts=True)
        # One lookup table per multiplicity value up to _TABLE_MAX_MULT, stacked, so that all
        # those columns are drawn with one random block and one gather.
        tables: list[np.ndarray] = []
        self.cdfs: list[np.ndarray] = []
        edges = np.arange(size + 1, dtype=np.float64) / size
        for v in values[values <= self._TABLE_MAX_MULT].tolist():
            cdf = self._poisson_cdf(self.t * float(v))
            x_lo = np.searchsorted(cdf, edges[:-1], side="right")
            below_hi = np.searchsorted(cdf, edges[1:], side="left")
            # uint8 cells (the table stays in cache); _AMBIGUOUS marks a cell that straddles a
            # CDF step, resolved with a fresh uniform.  Counts stay below 255 for these means.
            table = np.minimum(x_lo, cdf.shape[0] - 1).astype(np.uint8)
            table[below_hi > x_lo] = self._AMBIGUOUS
            tables.append(table)
            self.cdfs.append(cdf)
        self.size = size
        self.table = np.concatenate(tables) if tables else np.zeros(0, dtype=np.uint8)
        # the CDFs side by side (padded with +inf) for resolving ambiguous cells in one pass
        width = max((c.shape[0] for c in self.cdfs), default=1)
        self.cdf_matrix = np.full((len(self.cdfs), width), np.inf)
        for g, c in enumerate(self.cdfs):
            self.cdf_matrix[g, : c.shape[0]] = c
        self.cdf_last = np.array([c.shape[0] - 1 for c in self.cdfs], dtype=np.int64)
        n_groups = len(tables)
        self.col_group = np.repeat(np.arange(n_groups, dtype=np.int32), counts[:n_groups])
        self.col_offset = self.col_group * np.int32(size)
        first_big = int(np.searchsorted(ms, self._TABLE_MAX_MULT, side="right"))
        self.big = slice(first_big, self.p)
        self.big_lam = self.t * ms[first_big:].astype(np.float64)
        self.item_pattern_sorted = np.repeat(np.arange(self.p, dtype=np.int64), ms)

    @staticmethod
    def _poisson_cdf(lam: float) -> np.ndarray:
        top = int(np.ceil(lam + 14.0 * np.sqrt(lam) + 20.0))
        k = np.arange(top + 1, dtype=np.float64)
        log_fact = np.concatenate([[0.0], np.cumsum(np.log(np.arange(1, top + 1)))])
        return np.cumsum(np.exp(k * np.log(lam) - lam - log_fact))

    def _poissonised(self, rng: np.random.Generator, r: int) -> np.ndarray:
        out = np.empty((r, self.p), dtype=np.float64)
        n_table = self.col_group.shape[0]
        if n_table:
            b = rng.integers(0, self.size, size=(r, n_table), dtype=np.uint16)
            idx = b + self.col_offset  # int32: the cell of each count in the stacked tables
            cells = self.table[idx]
            amb = cells == self._AMBIGUOUS
            x = out[:, :n_table]
            x[...] = cells
            if amb.any():
                rows_a, cols_a = np.nonzero(amb)
                u = (b[rows_a, cols_a] + rng.random(rows_a.shape[0])) / self.size
                groups = self.col_group[cols_a]
                # searchsorted(cdf, u, "right") = how many CDF values are <= u
                found = (self.cdf_matrix[groups] <= u[:, None]).sum(axis=1)
                x[rows_a, cols_a] = np.minimum(found, self.cdf_last[groups])
        if self.big_lam.shape[0]:
            out[:, self.big] = rng.poisson(self.big_lam, size=(r, self.big_lam.shape[0]))
        return out

    def draw(self, rng: np.random.Generator, r: int) -> np.ndarray:
        if self.p == 0 or r == 0:
            return np.zeros((r, self.p), dtype=np.float64)
        if self.by_item:
            items = rng.integers(0, self.n, size=(r, self.n))
            if self.item_pattern is not None:
                items = self.item_pattern[items]
            cells = items + (np.arange(r, dtype=np.intp) * self.p)[:, None]
            counts = np.bincount(cells.reshape(-1), minlength=r * self.p)
            return counts.reshape(r, self.p).astype(np.float64)
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
        np.add.at(w.reshape(-1), rows + self.item_pattern_sorted[draws], 1.0)
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
    f: np.ndarray | Sequence[np.ndarray],
    mult: np.ndarray,
    resamples: int,
    rng: np.random.Generator,
) -> np.ndarray | list[np.ndarray]:
    """``W @ F`` for all replicates, in chunks of replicates to bound memory.

    ``f`` may be a list of feature blocks (rows = the same patterns): each gets its own
    contiguous output, from the same draws ``W``.
    """
    blocks = [f] if isinstance(f, np.ndarray) else list(f)
    p = blocks[0].shape[0]
    outs = [np.empty((resamples, blk.shape[1]), dtype=np.float64) for blk in blocks]
    # Bound the replicate × pattern cells, and the single-item top-up draws of the Poissonised
    # sampler (about 2 sqrt(n) per replicate), per chunk.
    top_up = 2.0 * np.sqrt(float(mult.sum())) + 1.0
    step = int(min(resamples, _CHUNK_CELLS // max(1, p), (_CHUNK_CELLS // 4) / top_up))
    step = max(1, step)
    order = np.argsort(mult, kind="stable")
    if not np.array_equal(order, np.arange(p)):  # sums do not depend on the order of patterns
        blocks, mult = [blk[order] for blk in blocks], mult[order]
    sampler = _PatternSampler(mult)
    for start in range(0, resamples, step):
        stop = min(resamples, start + step)
        w = sampler.draw(rng, stop - start)
        for blk, out in zip(blocks, outs, strict=True):
            np.matmul(w, blk, out=out[start:stop])
    return outs[0] if isinstance(f, np.ndarray) else outs


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
            ci_low=None,
            ci_high=None,
            se=None,
            method=label,
            resamples=resamples,
            seed=seed,
            valid=valid,
            warnings=(*notes, why),
            confidence_level=level,
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
    r = reps[valid_mask] if valid < reps.shape[0] else reps
    centred = r - r.mean()
    se = float(np.sqrt((centred @ centred) / (valid - 1)))
    alpha = (1.0 - level) / 2.0
    probs = np.array([alpha, 1.0 - alpha])
    if r.min() == r.max():
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
            jw, jt = (jack_w, jack) if jv.all() else (jack_w[jv], jack[jv])
            mean = float(jw @ jt) / float(jw.sum())
            d = mean - jt
            d2 = d * d
            den = 6.0 * float(jw @ d2) ** 1.5
            a = float(jw @ (d2 * d)) / den if den > 0 else 0.0
            zq = [nd.inv_cdf(float(p)) for p in probs]
            shrink = [1.0 - a * (z0 + z) for z in zq]
            if all(x > 0 for x in shrink):
                probs = np.array(
                    [nd.cdf(z0 + (z0 + z) / sh) for z, sh in zip(zq, shrink, strict=True)]
                )
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
    # the two quantiles need four order statistics at most: a partial sort finds them
    kth = sorted({i for p in probs.tolist() for i in _quantile_positions(valid, float(p))})
    part = np.partition(r, kth)
    lo, hi = _sorted_quantile(part, float(probs[0])), _sorted_quantile(part, float(probs[1]))
    return BootstrapResult(
        estimate=theta_hat,
        ci_low=float(lo),
        ci_high=float(hi),
        se=se,
        method=label,
        resamples=resamples,
        seed=seed,
        valid=valid,
        warnings=tuple(notes),
        confidence_level=level,
    )


def _quantile_positions(size: int, p: float) -> tuple[int, int]:
    """The two order statistics (0-based) that the linear quantile ``p`` interpolates between."""
    lo = min(max(int(np.floor(p * (size - 1))), 0), size - 1)
    return lo, min(lo + 1, size - 1)


def _sorted_quantile(x: np.ndarray, p: float) -> float:
    """``np.quantile(x, p)`` (default linear method, same arithmetic) of an array whose entries
    at the two positions of :func:`_quantile_positions` are in sorted place (sorted, or
    partitioned there)."""
    h = p * (x.shape[0] - 1)
    lo, hi = _quantile_positions(x.shape[0], p)
    t = h - lo
    a, b = float(x[lo]), float(x[hi])
    diff = b - a
    return b - diff * (1.0 - t) if t >= 0.5 else a + diff * t


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
        {"_": features},
        {"_": from_sums},
        resamples=resamples,
        seed=seed,
        rng=rng,
        confidence_level=confidence_level,
        method=method,
        multiplicity=multiplicity,
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
    ``from_sums[name](sums of features[name])``.  Every feature matrix has one row per item (or
    per pattern, with ``multiplicity``); the same item draws are used for all of them, so the
    intervals are jointly consistent.  Several statistics of one feature matrix (such as the
    per-category kappas) pass the *same array object* under several keys: it is compressed and
    multiplied once.  Distinct matrices are compressed separately (see :func:`bootstrap_groups`),
    so a matrix whose rows rarely repeat does not spoil the compression of the others.

    Validated against: ``tests/stats/test_bootstrap.py`` (shared draws, reproducibility).
    """
    if set(features) != set(from_sums):
        raise ValueError("features and from_sums must have the same keys")
    names = list(features)
    if not names:
        _options_iv(resamples, method, confidence_level)
        return {}
    mats: dict[int, np.ndarray] = {}
    for name in names:
        mats.setdefault(id(features[name]), np.asarray(features[name], dtype=np.float64))
    n_rows = next(iter(mats.values())).shape[0] if mats else 0
    for name in names:
        mtx = mats[id(features[name])]
        if mtx.ndim != 2 or mtx.shape[0] != n_rows:
            raise ValueError(f"features[{name!r}] must be 2-D with {n_rows} rows")
    groups: dict[str, FeatureGroup] = {}
    stats: dict[str, tuple[str, Callable[[np.ndarray], np.ndarray]]] = {}
    if multiplicity is not None:
        # rows are patterns already: one group, the matrices side by side, no compression
        f, mult = _as_patterns(np.zeros((n_rows, 0)), multiplicity)
        del f
        keep = np.asarray(multiplicity) > 0
        order = list(mats)
        edges = np.cumsum([0, *(mats[i].shape[1] for i in order)])
        joint = np.concatenate([mats[i][keep] for i in order], axis=1)
        groups["_"] = FeatureGroup(joint, mult)
        for name in names:
            j = order.index(id(features[name]))
            sl = slice(int(edges[j]), int(edges[j + 1]))
            stats[name] = ("_", _sliced(from_sums[name], sl))
    else:
        for i, mtx in mats.items():
            groups[str(i)] = FeatureGroup.of_items(mtx)
        for name in names:
            stats[name] = (str(id(features[name])), from_sums[name])
    return bootstrap_groups(
        groups,
        stats,
        resamples=resamples,
        seed=seed,
        rng=rng,
        confidence_level=confidence_level,
        method=method,
    )


def _sliced(
    fn: Callable[[np.ndarray], np.ndarray], sl: slice
) -> Callable[[np.ndarray], np.ndarray]:
    return lambda s: fn(s[..., sl])


@dataclass(frozen=True)
class FeatureGroup:
    """Feature rows of one family of coefficients, one row per distinct pattern of items.

    ``features[p]`` is the feature row shared by the ``multiplicity[p]`` items of pattern ``p``;
    ``inverse[i]`` is the pattern of item ``i`` (needed only when several groups share one
    resample of items; ``None`` for a lone group).  Coefficients computed from the same
    compression (for example every count-table coefficient, from the items × categories
    patterns) belong in one group, side by side in ``features``.
    """

    features: np.ndarray
    multiplicity: np.ndarray
    inverse: np.ndarray | None = None

    @classmethod
    def of_items(cls, features: np.ndarray) -> FeatureGroup:
        """Compress per-item feature rows (identical rows become one pattern)."""
        f = np.asarray(features, dtype=np.float64)
        if f.ndim != 2:
            raise ValueError(f"features must be 2-D (items × features), got shape {f.shape}")
        u, mult, inv = patterns(f)
        return cls(u, mult, inv)


def _join(
    inverses: Sequence[np.ndarray], sizes: Sequence[int]
) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
    """The finest common partition of items given several pattern labellings.

    Returns ``(multiplicity per cell, first item of each cell, cell -> pattern map per group)``.
    """
    label = np.asarray(inverses[0], dtype=np.int64)
    size = int(sizes[0])
    seen = [id(inverses[0])]
    for inv, p in zip(inverses[1:], sizes[1:], strict=True):
        if id(inv) in seen:  # the same labelling again refines nothing
            continue
        seen.append(id(inv))
        key = label * int(p) + np.asarray(inv, dtype=np.int64)
        _, _, label = _group_keys(key, size * int(p))
        label = np.asarray(label, dtype=np.int64)
        size = int(label.max()) + 1 if label.size else 0
    n = label.shape[0]
    mult = np.bincount(label, minlength=size).astype(np.int64)
    first = np.empty(size, dtype=np.intp)
    first[label[::-1]] = np.arange(n - 1, -1, -1, dtype=np.intp)
    maps = [np.asarray(inv, dtype=np.intp)[first] for inv in inverses]
    return mult, first, maps


def refine(
    label: np.ndarray, size: int, inverse: np.ndarray, patterns_: int
) -> tuple[np.ndarray, int]:
    """Refine a partition of the items (``label`` in ``0 .. size-1``) by another labelling.

    Returns the labels of the common refinement and its number of cells; one pass over the
    items, so that groups can be added one at a time.
    """
    key = np.asarray(label, dtype=np.int64) * int(patterns_) + np.asarray(inverse, dtype=np.int64)
    _, _, new = _group_keys(key, int(size) * int(patterns_))
    new = np.asarray(new, dtype=np.int64)
    return new, int(new.max()) + 1 if new.size else 0


def bootstrap_groups(
    groups: Mapping[str, FeatureGroup],
    statistics: Mapping[str, tuple[str, Callable[[np.ndarray], np.ndarray]]],
    *,
    resamples: int = 2000,
    seed: int | None = None,
    rng: np.random.Generator | None = None,
    confidence_level: float = 0.95,
    method: str = "bca",
) -> dict[str, BootstrapResult]:
    """Bootstrap statistics of several feature groups on ONE shared resample of items.

    ``statistics[name] = (group, from_sums)``: the statistic is ``from_sums`` of the column sums
    of ``groups[group].features``.  Each group keeps its own compression of the items into
    patterns.  The item draws are made once, as multinomial counts over the cells of the finest
    common partition of all groups (items alike in every group), and every group's resampled
    sums are ``W @ F`` with its feature rows laid out on those cells, so all intervals come from
    the same resampled items.  With one group this is exactly the bootstrap over its patterns.
    The BCa acceleration of each statistic uses the leave-one-item-out values over its own
    group's patterns (exact).  Each ``from_sums`` is evaluated once per group on the whole batch
    of replicates (several names may share one function: it is evaluated once).

    Validated against: ``tests/stats/test_bootstrap.py`` (a lone group gives the same interval as
    :func:`bootstrap`; shared draws agree with per-item feature rows resampled jointly).
    """
    b, method_, level = _options_iv(resamples, method, confidence_level)
    for name, (g, _) in statistics.items():
        if g not in groups:
            raise ValueError(f"statistic {name!r} refers to an unknown feature group {g!r}")
    used = [g for g in groups if any(s[0] == g for s in statistics.values())]
    if not used:
        return {}
    mats: dict[str, np.ndarray] = {}
    mults: dict[str, np.ndarray] = {}
    for g in used:
        grp = groups[g]
        f = np.asarray(grp.features, dtype=np.float64)
        m = np.asarray(grp.multiplicity)
        if f.ndim != 2 or m.shape != (f.shape[0],):
            raise ValueError(f"group {g!r}: features must be 2-D with one multiplicity per row")
        if m.dtype.kind not in "iu" or (m.size and int(m.min()) < 0):
            raise ValueError(f"group {g!r}: multiplicity must be non-negative integers")
        mats[g], mults[g] = f, m.astype(np.int64)
    n_items = {int(mults[g].sum()) for g in used}
    if len(n_items) != 1:
        raise ValueError("every feature group must describe the same items")
    if len(used) == 1:
        g = used[0]
        keep = mults[g] > 0
        cell_mult = mults[g][keep]
        if not keep.all():
            mats[g], mults[g] = mats[g][keep], cell_mult
        blocks = [mats[g]]
    else:
        for g in used:
            if groups[g].inverse is None:
                raise ValueError(f"group {g!r} needs its inverse map to share draws with others")
            if groups[g].inverse.shape != (next(iter(n_items)),):  # type: ignore[union-attr]
                raise ValueError(f"group {g!r}: inverse must give one pattern per item")
        cell_mult, _, maps = _join(
            [groups[g].inverse for g in used],  # type: ignore[misc]
            [mats[g].shape[0] for g in used],
        )
        blocks = [mats[g][mp] for g, mp in zip(used, maps, strict=True)]
    generator = _rng_iv(seed, rng)
    reps = dict(zip(used, _replicate_sums(blocks, cell_mult, b, generator), strict=True))
    out: dict[str, BootstrapResult] = {}
    # the arrays each group's statistics are evaluated on, made once per group so that
    # statistics sharing work (several outputs of one computation) can recognise them
    inputs: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    cache: dict[tuple[str, int], tuple[float, np.ndarray, np.ndarray]] = {}
    for name, (g, fn) in statistics.items():
        if g not in inputs:
            f = mats[g]
            total = mults[g].astype(np.float64) @ f
            inputs[g] = (total, reps[g], total[None, :] - f)
        key = (g, id(fn))
        if key not in cache:
            total, reps_g, jack_sums = inputs[g]
            cache[key] = (
                float(np.asarray(fn(total))),
                np.asarray(fn(reps_g), dtype=np.float64).reshape(b),
                np.asarray(fn(jack_sums), dtype=np.float64).reshape(-1),
            )
        theta_hat, values, jack = cache[key]
        out[name] = _interval(
            theta_hat,
            values,
            jack,
            mults[g].astype(np.float64),
            resamples=b,
            seed=seed if rng is None else None,
            method=method_,
            level=level,
        )
    return out
