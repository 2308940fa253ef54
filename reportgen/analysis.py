"""Study + ratings → every figure of the study, as JSON-ready results ("reportgen-results/1").

This layer maps a loaded study onto the numeric core (``reportgen.stats``): it decides which
ratings are compared with which (the *layouts*: repeatability, accuracy, reproducibility, panel
accuracy), counts agreement, and collects the coefficients, their intervals and every warning.
It computes no coefficient itself: kappas, alphas and the bootstrap come from ``reportgen.stats``.

Everything is computed before anything is written.  Nothing is rounded.  Measures that do not
apply to a study are absent; undefined figures are ``None`` with a warning in words.  The
counting conventions are stated in ``results["conventions"]`` and in the README.
"""

from __future__ import annotations

import gc
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np

from .model import Ratings, Study
from .stats.results import Estimate
from .stats.tables import CountPatterns

SCHEMA = "reportgen-results/1"
#: at most this many ids in results["hard_items"]
HARD_ITEMS_LIMIT = 25

Progress = Callable[[str], None]

CONVENTIONS: dict[str, str] = {
    "rating_slots": (
        "Each item has raters × trials rating slots. A missing rating is left out of every count; "
        "it is never treated as a category."
    ),
    "repeatability.agreement": (
        "Per rater: items on which all of that rater's trials give the same category, out of the "
        "items the rater rated at least twice. Needs two or more trials."
    ),
    "repeatability.fleiss_kappa": "Per rater: Fleiss' kappa with the rater's trials as the rating slots of each item.",
    "repeatability.mixed_calls": "Per rater: items the rater called differently in different trials.",
    "accuracy.agreement": (
        "Per rater: items with a reference on which every rating of that rater (all trials) matches the "
        "reference, out of the items with a reference that the rater rated at least once."
    ),
    "accuracy.effectiveness": (
        "Per rater: ratings that match the reference, out of all the rater's ratings of items with a "
        "reference (every trial counts as one rating). The interval treats ratings as independent, "
        "which is optimistic when an item is rated in several trials."
    ),
    "accuracy.cohen_kappa": (
        "Per rater: Cohen's kappa of the rater's ratings (all trials pooled, each rating paired with the "
        "item's reference) against the reference. weighted_kappa (ordinal scales) uses the study's "
        "weights built from the declared category order. Interval: Fleiss-Cohen-Everitt (1969) analytic "
        "with one trial; item bootstrap with two or more trials (an item's ratings are not independent)."
    ),
    "accuracy.miss_rate": (
        "When a defect category is declared: ratings of defect-reference items that are not the defect "
        "category, out of all ratings of defect-reference items."
    ),
    "accuracy.false_alarm_rate": (
        "When a defect category is declared: ratings of items whose reference is not the defect category "
        "that are the defect category, out of all ratings of those items."
    ),
    "accuracy.kendall_tau_b": "Ordinal scales: Kendall's tau-b of the rater's ratings (all trials) against the reference.",
    "accuracy.exact_agreement": (
        "Ordinal scales, per rater and for the panel: ratings equal to the reference "
        "(exact_agreement) or at most one category away from it (within_one_agreement), out of the "
        "ratings of items with a reference; the same counts as ordinal.accuracy.<rater>.exact and "
        ".within_one_step, with the study's proportion interval."
    ),
    "accuracy.confusion": "Counts of ratings: rows are the rater's category, columns the reference category.",
    "reproducibility.agreement": (
        "Items on which every rating of every rater (all trials) is the same category, out of the items "
        "with at least two ratings."
    ),
    "reproducibility.pooled": (
        "fleiss_kappa, krippendorff_alpha, gwet_ac1/ac2, brennan_prediger and kendall_w treat the "
        "raters × trials ratings of an item as its rating slots (so a rater's own repeat ratings count "
        "too); by_trial gives the same figures from one trial at a time."
    ),
    "reproducibility.fixed_raters": (
        "conger_kappa, light_kappa and pairwise_cohen_kappa keep raters apart: each item × trial is a "
        "unit rated once by each rater, so raters are compared only within the same trial. Bootstrap "
        "intervals resample items with all their trials; analytic intervals treat the units as independent."
    ),
    "reproducibility.krippendorff_alpha": (
        "At the study's scale: nominal for binary and nominal scales, ordinal for ordinal scales. "
        "krippendorff_alpha_interval is given only when every category has a numeric value."
    ),
    "reproducibility.brennan_prediger": "Unweighted (identity weights) on every scale.",
    "reproducibility.gwet_ac2": "Ordinal scales: Gwet's AC2 with the study's weights.",
    "panel_accuracy.agreement": (
        "Items with a reference on which every rating of every rater matches the reference, out of the "
        "items with a reference and at least one rating."
    ),
    "panel_accuracy.rates": "effectiveness, miss_rate and false_alarm_rate pooled over all raters' ratings.",
    "intervals": (
        "Proportions: the study's interval method (Clopper-Pearson or Wilson). Coefficients: item bootstrap "
        "(BCa) with one shared resample of items for every bootstrapped coefficient when the study asks for "
        "resamples, otherwise the published non-null (analytic) interval. The per-trial figures "
        "(reproducibility.by_trial) keep analytic intervals; Conger's and Light's kappa have none there. "
        "results['bootstrap']['measures'] lists the bootstrapped measures. p-values always come from the "
        "published null tests."
    ),
    "weights": (
        "Linear and quadratic weights are built from the positions of the declared categories "
        "(steps), not from their values."
    ),
    "ordinal.offset": (
        "Signed offset = rating position minus reference position. Positive: the rater rates towards the "
        "later (worse) categories, i.e. stricter than the reference; negative: more lenient."
    ),
    "ordinal.steps_apart": (
        "Reproducibility and repeatability: unordered pairs of ratings of the same item, by how many "
        "categories separate them. Accuracy: ratings by signed offset from the reference."
    ),
    "items.agreement": (
        "Per item: the share of agreeing pairs among all pairs of its ratings (all raters and trials); "
        "null with fewer than two ratings."
    ),
    "hard_items": (
        f"Up to {HARD_ITEMS_LIMIT} item ids with the least agreement: items whose ratings disagree or miss "
        "the reference, sorted by item agreement, then by the share of ratings matching the reference."
    ),
    "caveats.items_needed": (
        "Approximation: the interval half-width is scaled by sqrt(items now / items needed), assuming the "
        "agreement and the design stay as they are."
    ),
}


# --------------------------------------------------------------------------------------------
# collected output
# --------------------------------------------------------------------------------------------


@dataclass
class _Boot:
    group: str
    block: str
    from_sums: Callable[[np.ndarray], np.ndarray]
    record: dict[str, Any]
    #: what to say when the study is too large to bootstrap this measure
    too_large: str


@dataclass
class _Group:
    """Bootstrap features of one compression of the items into patterns.

    ``blocks`` maps a block name to ``(width, builder)``; a builder makes the block's
    (patterns × width) feature rows only when the group is bootstrapped.  ``priority`` orders
    the groups when the study is too large to bootstrap all of them: 0 the pooled count
    patterns (always), 1 a rater's kappa with trials (its analytic interval is too narrow),
    2 a rater's repeatability, 3 the rating rows (Conger, Light).
    """

    multiplicity: np.ndarray
    inverse: np.ndarray
    priority: int
    blocks: dict[str, tuple[int, Callable[[], np.ndarray]]] = field(default_factory=dict)
    rows: np.ndarray | None = None  # the distinct rows themselves, where a builder needs them


#: a bootstrap request: (group, block, from_sums)
BootSpec = tuple[str, str, Callable[[np.ndarray], np.ndarray]]

TOO_LARGE_NO_INTERVAL = (
    "No interval: this coefficient has no published analytic interval, and an item bootstrap "
    "of it would be too large for this study (items × raters × resamples)."
)
TOO_LARGE_ANALYTIC = "The study is too large for an item bootstrap of this coefficient: its analytic interval is kept."
TOO_LARGE_COHEN = (
    "The study is too large for an item bootstrap of this kappa: its analytic interval "
    "treats the rater's repeated ratings of an item as independent and is too narrow."
)


@dataclass
class _Collector:
    warnings: list[dict[str, str]] = field(default_factory=list)
    notes: list[dict[str, str]] = field(default_factory=list)
    boot: dict[str, _Boot] = field(default_factory=dict)
    groups: dict[str, _Group] = field(default_factory=dict)

    def warn(self, measure: str, message: str) -> None:
        entry = {"measure": measure, "message": message}
        if entry not in self.warnings:
            self.warnings.append(entry)

    def note(self, measure: str, message: str) -> None:
        self.notes.append({"measure": measure, "message": message})

    def record(
        self,
        path: str,
        est: Estimate,
        boot: BootSpec | None = None,
        *,
        too_large: str = TOO_LARGE_ANALYTIC,
    ) -> dict[str, Any]:
        rec = est.as_record()
        for w in est.warnings:
            self.warn(path, w)
        if boot is not None and est.estimate is not None:
            group, block, fn = boot
            self.boot[path] = _Boot(group, block, fn, rec, too_large)
        return rec


def _guard(fn: Callable[[], Estimate]) -> Estimate:
    """Call the core; a ValueError about the data becomes an undefined figure with a warning."""
    try:
        return fn()
    except (ValueError, ZeroDivisionError, FloatingPointError) as exc:
        msg = f"could not be computed for these data: {exc}"
        return Estimate(estimate=None, warnings=(msg,))


# --------------------------------------------------------------------------------------------
# the data, checked and reshaped once
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Data:
    study: Study
    ratings: Ratings
    codes: np.ndarray  # int8 (n, r, t), -1 missing
    n: int
    r: int
    t: int
    k: int
    cats: tuple[str, ...]
    raters: tuple[str, ...]
    ref: np.ndarray | None  # int64 (n,), -1 = no reference
    level: float
    weights: np.ndarray | None  # (k, k) agreement weights, ordinal scales only
    defect: int | None
    values: np.ndarray | None  # numeric category values, when every category has one
    slots: np.ndarray  # (n, r*t)
    pat: CountPatterns  # distinct rows of the items × categories table, with multiplicities
    counts: np.ndarray  # (n, k) ratings per category per item

    @property
    def want_boot(self) -> bool:
        """Whether bootstrap features are needed: resamples asked for and two or more items."""
        return self.study.bootstrap_resamples > 0 and self.n >= 2

    @property
    def ordinal(self) -> bool:
        return self.study.scale == "ordinal"

    @cached_property
    def units(self) -> np.ndarray:
        """(n*t, r): one row per item × trial (item-major), one column per rater."""
        return self.codes.transpose(0, 2, 1).reshape(self.n * self.t, self.r)


def _prepare(study: Study, ratings: Ratings) -> _Data:
    from .stats.tables import count_patterns
    from .stats.weights import agreement_weights

    codes = np.asarray(ratings.codes)
    if codes.ndim != 3:
        raise ValueError(
            f"ratings.codes must have shape (items, raters, trials), got {codes.shape}"
        )
    n, r, t = (int(x) for x in codes.shape)
    cats = tuple(ratings.categories)
    if cats != tuple(study.category_codes):
        raise ValueError(
            f"the ratings' categories {list(cats)} do not match the study's {list(study.category_codes)}"
        )
    if len(ratings.raters) != r or len(ratings.items) != n:
        raise ValueError("ratings.items / ratings.raters do not match the shape of ratings.codes")
    k = len(cats)
    if codes.size and (codes.min() < -1 or codes.max() >= k):
        raise ValueError(f"ratings.codes holds values outside -1 .. {k - 1}")
    ref = None
    if ratings.reference is not None:
        ref = np.asarray(ratings.reference, dtype=np.int64).reshape(-1)
        if ref.shape != (n,):
            raise ValueError(f"ratings.reference must have shape ({n},), got {ref.shape}")
        if ref.size and (ref.min() < -1 or ref.max() >= k):
            raise ValueError(f"ratings.reference holds values outside -1 .. {k - 1}")
    weights = None
    if study.scale == "ordinal":
        if isinstance(study.weights, str):
            weights = agreement_weights(k, study.weights) if k > 1 else np.eye(k)
        else:
            weights = np.asarray(study.weights, dtype=np.float64)
            if weights.shape != (k, k):
                raise ValueError(f"the weights matrix must be {k} × {k}, got {weights.shape}")
    defect = None
    if study.defect_category is not None:
        if study.defect_category not in cats:
            raise ValueError(
                f"defect category {study.defect_category!r} is not a declared category"
            )
        defect = cats.index(study.defect_category)
    values = None
    if k > 1 and all(c.value is not None for c in study.categories):
        values = np.array([float(c.value) for c in study.categories])  # type: ignore[arg-type]
        if np.ptp(values) == 0:
            values = None
    slots = codes.reshape(n, r * t)
    pat = count_patterns(slots, k)  # once, for every count-table coefficient
    counts = pat.rows[pat.inverse]
    return _Data(
        study=study,
        ratings=ratings,
        codes=codes,
        n=n,
        r=r,
        t=t,
        k=k,
        cats=cats,
        raters=tuple(ratings.raters),
        ref=ref,
        level=float(study.confidence),
        weights=weights,
        defect=defect,
        values=values,
        slots=slots,
        pat=pat,
        counts=np.asarray(counts, dtype=np.int64),
    )


# --------------------------------------------------------------------------------------------
# calls into the numeric core (one place, so the contract with reportgen.stats is visible)
# --------------------------------------------------------------------------------------------


def _proportion(d: _Data, x: int, n: int) -> Estimate:
    from .stats.proportion import proportion

    return proportion(int(x), int(n), confidence_level=d.level, method=d.study.proportion_interval)


class _Pick:
    """Column ``j`` of a vector-valued ``from_sums``; columns of one :class:`_Shared` are computed once."""

    def __init__(self, shared: _Shared, j: int) -> None:
        self.shared, self.j = shared, j

    def __call__(self, s: np.ndarray) -> np.ndarray:
        return self.shared(s)[..., self.j]


class _Shared:
    """Remembers the results for the last few input arrays (compared by identity, kept alive):
    the bootstrap evaluates each statistic on the full sums, the replicates and the jackknife."""

    _KEEP = 4

    def __init__(self, fn: Callable[[np.ndarray], np.ndarray]) -> None:
        self.fn = fn
        self.seen: list[tuple[np.ndarray, np.ndarray]] = []

    def __call__(self, s: np.ndarray) -> np.ndarray:
        for arg, value in self.seen:
            if arg is s:
                return value
        value = np.asarray(self.fn(s))
        self.seen = [*self.seen[-(self._KEEP - 1) :], (s, value)]
        return value


def _count_group(col: _Collector, name: str, pat: CountPatterns, priority: int) -> str:
    """Register the bootstrap group of a count table's patterns (once)."""
    if name not in col.groups:
        col.groups[name] = _Group(pat.multiplicity, pat.inverse, priority)
    return name


def _fleiss(
    pat: CountPatterns,
    level: float,
    labels: tuple[str, ...],
    col: _Collector,
    group: str | None,
) -> tuple[Any, BootSpec | None, list[BootSpec] | None]:
    """Fleiss' kappa (overall and by category), with its bootstrap requests when ``group``."""
    from .stats import fleiss

    res = fleiss.fleiss_kappa(pat, confidence_level=level, labels=labels)
    if group is None:
        return res, None, None
    k = pat.rows.shape[1]
    col.groups[group].blocks.setdefault(
        "fleiss", (3 + 2 * k, lambda: fleiss.fleiss_kappa_features(pat.rows))
    )
    by_cat = _Shared(fleiss.fleiss_kappa_by_category_from_sums)
    return (
        res,
        (group, "fleiss", fleiss.fleiss_kappa_from_sums),
        [(group, "fleiss", _Pick(by_cat, j)) for j in range(k)],
    )


def _krippendorff(
    pat: CountPatterns,
    level: str,
    values: np.ndarray | None,
    conf: float,
    col: _Collector,
    group: str | None,
) -> tuple[Estimate, BootSpec | None]:
    from .stats import krippendorff as kr

    est = kr.krippendorff_alpha(pat, level=level, values=values, confidence_level=conf)  # type: ignore[arg-type]
    if group is None:
        return est, None
    k = pat.rows.shape[1]
    col.groups[group].blocks.setdefault(
        "krippendorff", (k * k, lambda: kr.krippendorff_alpha_features(pat.rows))
    )

    def fn(s: np.ndarray) -> np.ndarray:
        return kr.krippendorff_alpha_from_sums(s, level=level, values=values)  # type: ignore[arg-type]

    return est, (group, "krippendorff", fn)


def _gwet(
    pat: CountPatterns,
    weights: np.ndarray | None,
    conf: float,
    col: _Collector,
    group: str | None,
) -> tuple[Estimate, BootSpec | None]:
    from .stats import gwet

    est = gwet.gwet_ac(pat, weights=weights, confidence_level=conf)
    if group is None:
        return est, None
    k = pat.rows.shape[1]
    block = "ac1" if weights is None else "ac2"
    col.groups[group].blocks.setdefault(
        block, (3 + k, lambda: gwet.gwet_ac_features(pat.rows, weights=weights))
    )

    def fn(s: np.ndarray) -> np.ndarray:
        return gwet.gwet_ac_from_sums(s, weights=weights)

    return est, (group, block, fn)


def _brennan_prediger(
    pat: CountPatterns, conf: float, col: _Collector, group: str | None
) -> tuple[Estimate, BootSpec | None]:
    from .stats import gwet

    est = gwet.brennan_prediger(pat, confidence_level=conf)
    if group is None:
        return est, None
    k = pat.rows.shape[1]
    col.groups[group].blocks.setdefault("bp", (3, lambda: gwet.brennan_prediger_features(pat.rows)))

    def fn(s: np.ndarray) -> np.ndarray:
        return gwet.brennan_prediger_from_sums(s, k)

    return est, (group, "bp", fn)


#: largest feature matrix (in float64 cells) built for the bootstrap of one group (~160 MB)
FEATURE_CELLS_LIMIT = 20_000_000


#: largest resamples × patterns × features product bootstrapped (about this many multiply-adds,
#: ~1 s).  The count-table coefficients always fit (they are compressed to a few thousand
#: patterns); coefficients whose features identify raters (Cohen per rater with several trials,
#: Conger, Light) compress only over identical rating rows, which are rare in large studies.
BOOT_WORK_LIMIT = 1_000_000_000

#: largest resamples × cells of multinomial counts drawn (cells: items alike in every
#: bootstrapped family; about 15 ns each, so ~0.75 s)
BOOT_DRAW_LIMIT = 50_000_000


def _item_sums(unit_features: np.ndarray, n: int, t: int) -> np.ndarray:
    """Per-unit (item × trial, item-major) feature rows summed to per-item rows."""
    f = unit_features.shape[1]
    if t == 1:
        return unit_features
    return unit_features.reshape(n, t, f).sum(axis=1)


def _rows_group(d: _Data, col: _Collector) -> str:
    """The group of distinct rating rows (raters × trials codes of an item), for Conger/Light."""
    name = "rows"
    if name not in col.groups:
        from .stats.tables import patterns

        key = d.slots.astype(np.int16) + 1  # 0 = missing, so the exact integer key applies
        u, mult, inv = patterns(key)
        col.groups[name] = _Group(mult, inv, 3, rows=(u - 1).astype(np.int8))
    return name


def _rows_may_fit(d: _Data, width: int) -> bool:
    """Whether a rating-rows block of ``width`` features could fit the bootstrap work limit.

    The distinct rating rows are at least as many as the distinct count rows (these are a
    function of those), so when even that many are too many the rows are not compressed."""
    cells = max(d.pat.n_patterns, 1)
    return d.study.bootstrap_resamples * cells * width <= BOOT_WORK_LIMIT


def _rows_units(d: _Data, col: _Collector) -> tuple[np.ndarray, int]:
    """(patterns × trials, raters) units of the distinct rating rows, and the pattern count."""
    rows = col.groups["rows"].rows
    assert rows is not None
    p = rows.shape[0]
    return rows.reshape(p, d.r, d.t).transpose(0, 2, 1).reshape(p * d.t, d.r), p


def _conger(
    d: _Data, units: np.ndarray, col: _Collector, want: bool
) -> tuple[Estimate, BootSpec | None]:
    from .stats import pairwise

    k = d.k
    est = pairwise.conger_kappa(units, k, confidence_level=d.level, rater_labels=d.raters)
    if not want or not _rows_may_fit(d, 2 + d.r * k):
        return est, None
    group = _rows_group(d, col)

    def build() -> np.ndarray:
        u, p = _rows_units(d, col)
        return _item_sums(pairwise.conger_kappa_features(u, k), p, d.t)

    col.groups[group].blocks.setdefault("conger", (2 + d.r * k, build))

    def fn(s: np.ndarray) -> np.ndarray:
        return pairwise.conger_kappa_from_sums(s, k)

    return est, (group, "conger", fn)


def _light(
    d: _Data, units: np.ndarray, tables: np.ndarray | None, col: _Collector, want: bool
) -> tuple[Estimate, BootSpec | None]:
    from .stats import pairwise

    k = d.k
    est = pairwise.light_kappa(
        units, k, confidence_level=d.level, rater_labels=d.raters, pair_tables=tables
    )
    width = d.r * (d.r - 1) // 2 * k * k
    if not want or not _rows_may_fit(d, width):
        return est, None
    group = _rows_group(d, col)

    def build() -> np.ndarray:
        u, p = _rows_units(d, col)
        return _item_sums(pairwise.light_kappa_features(u, k), p, d.t)

    col.groups[group].blocks.setdefault("light", (width, build))

    def fn(s: np.ndarray) -> np.ndarray:
        return pairwise.light_kappa_from_sums(s, k)

    return est, (group, "light", fn)


def _cohen_group(d: _Data, col: _Collector, j: int) -> str:
    """Group of one rater's distinct (trials codes, reference) rows, for the clustered kappa."""
    from .stats import cohen
    from .stats.tables import patterns

    assert d.ref is not None
    name = f"cohen.{j}"
    if name in col.groups:
        return name
    key = np.empty((d.n, d.t + 1), dtype=np.int16)
    key[:, : d.t] = d.codes[:, j, :]
    key[:, d.t] = d.ref
    u, mult, inv = patterns(key + 1)  # 0 = missing / no reference
    u = u.astype(np.int64) - 1
    # before the repeatability groups: without the bootstrap this kappa's interval is too narrow
    grp = _Group(mult, inv, 1)

    def build() -> np.ndarray:
        sub, ref = u[:, : d.t], u[:, d.t]
        rated = (sub >= 0) & (ref >= 0)[:, None]
        a = np.where(rated, sub, -1).reshape(-1)
        b = np.where(rated, ref[:, None], -1).reshape(-1)
        return _item_sums(cohen.cohen_kappa_features(a, b, d.k), u.shape[0], d.t)

    grp.blocks["cohen"] = (d.k * d.k, build)
    col.groups[name] = grp
    return name


def _cohen(
    a: np.ndarray,
    b: np.ndarray,
    k: int,
    weights: np.ndarray | None,
    conf: float,
    group: str | None,
) -> tuple[Estimate, BootSpec | None, np.ndarray]:
    """Cohen's kappa of paired flat arrays, with its bootstrap request when ``group``."""
    from .stats import cohen

    table = cohen.confusion_matrix(a, b, k)
    est = cohen.cohen_kappa(table, weights=weights, confidence_level=conf)
    if group is None:
        return est, None, table

    def fn(s: np.ndarray) -> np.ndarray:
        return cohen.cohen_kappa_from_sums(s, k, weights=weights)

    return est, (group, "cohen", fn), table


# --------------------------------------------------------------------------------------------
# small counting helpers (ours: counts, not coefficients)
# --------------------------------------------------------------------------------------------


def _all_agree(counts: np.ndarray | CountPatterns) -> tuple[int, int]:
    """(items with ≥ 2 ratings, of which all ratings agree), from a table or its patterns."""
    if isinstance(counts, CountPatterns):
        rows, w = counts.rows, counts.multiplicity
    else:
        rows, w = counts, None
    m = rows.sum(axis=1)
    eligible = m >= 2
    agree = eligible & (rows.max(axis=1, initial=0) == m)
    if w is None:
        return int(eligible.sum()), int(agree.sum())
    return int(w @ eligible), int(w @ agree)


def _offset_table(counts: np.ndarray, k: int) -> dict[str, int]:
    return {str(o): int(c) for o, c in zip(range(-(k - 1), k), counts, strict=True)}


def _path(*parts: object) -> str:
    return ".".join(str(p) for p in parts)


# --------------------------------------------------------------------------------------------
# layouts
# --------------------------------------------------------------------------------------------


def _repeatability(d: _Data, col: _Collector) -> dict[str, Any]:
    from .stats.tables import count_patterns

    out: dict[str, Any] = {}
    for j, rid in enumerate(d.raters):
        pat = count_patterns(d.codes[:, j, :], d.k)
        eligible, agree = _all_agree(pat)
        base = _path("repeatability", rid)
        entry: dict[str, Any] = {
            "agreement": col.record(_path(base, "agreement"), _proportion(d, agree, eligible)),
        }
        if eligible == 0:
            col.warn(
                base,
                f"Rater {rid} rated no item in two or more trials: repeatability cannot be judged.",
            )
        group = _count_group(col, f"repeat.{j}", pat, 2) if d.want_boot else None
        res, boot, _ = _guarded_fleiss(pat, d, col, _path(base, "fleiss_kappa"), group)
        entry["fleiss_kappa"] = col.record(
            _path(base, "fleiss_kappa"), res.overall if res else _undefined_fleiss(), boot
        )
        entry["mixed_calls"] = eligible - agree
        entry["items"] = eligible
        out[rid] = entry
    return out


def _undefined_fleiss() -> Estimate:
    return Estimate(estimate=None)


def _guarded_fleiss(
    pat: CountPatterns, d: _Data, col: _Collector, path: str, group: str | None
) -> tuple[Any, BootSpec | None, list[BootSpec] | None]:
    try:
        return _fleiss(pat, d.level, d.cats, col, group)
    except (ValueError, ZeroDivisionError, FloatingPointError) as exc:
        col.warn(path, f"Fleiss' kappa could not be computed for these data: {exc}")
        return None, None, None


def _rater_vs_reference(d: _Data, j: int) -> dict[str, Any]:
    """Masks and flat (item-major) rating/reference pairs of one rater."""
    assert d.ref is not None
    sub = d.codes[:, j, :].astype(np.int64)  # (n, t)
    has_ref = (d.ref >= 0)[:, None]
    rated = (sub >= 0) & has_ref
    match = rated & (sub == d.ref[:, None])
    a = np.where(rated, sub, -1).reshape(-1)
    b = np.where(rated, d.ref[:, None], -1).reshape(-1)
    return {"sub": sub, "rated": rated, "match": match, "a": a, "b": b}


def _defect_rates(
    d: _Data, col: _Collector, base: str, sub: np.ndarray, rated: np.ndarray, ref: np.ndarray
) -> tuple[dict[str, Any], dict[str, int]]:
    assert d.defect is not None
    ref_defect = rated & (ref[:, None] == d.defect)
    ref_ok = rated & (ref[:, None] != d.defect) & (ref[:, None] >= 0)
    misses = int((ref_defect & (sub != d.defect)).sum())
    false_alarms = int((ref_ok & (sub == d.defect)).sum())
    n_def, n_ok = int(ref_defect.sum()), int(ref_ok.sum())
    recs: dict[str, Any] = {
        "miss_rate": col.record(_path(base, "miss_rate"), _proportion(d, misses, n_def)),
        "false_alarm_rate": col.record(
            _path(base, "false_alarm_rate"), _proportion(d, false_alarms, n_ok)
        ),
    }
    if n_def == 0:
        col.warn(
            _path(base, "miss_rate"),
            "No rating of an item whose reference is the defect category: the miss rate cannot be estimated.",
        )
    if n_ok == 0:
        col.warn(
            _path(base, "false_alarm_rate"),
            "No rating of an item whose reference is a conforming category: the false alarm rate cannot be estimated.",
        )
    counts = {
        "defect_reference_ratings": n_def,
        "misses": misses,
        "conforming_reference_ratings": n_ok,
        "false_alarms": false_alarms,
    }
    return recs, counts


def _accuracy(d: _Data, col: _Collector, caveats: dict[str, Any]) -> dict[str, Any]:
    from .stats.kendall import kendall_tau_b

    assert d.ref is not None
    out: dict[str, Any] = {}
    for j, rid in enumerate(d.raters):
        base = _path("accuracy", rid)
        p = _rater_vs_reference(d, j)
        rated, match = p["rated"], p["match"]
        n_rated = rated.sum(axis=1)
        items_rated = n_rated > 0
        items_agree = items_rated & (match.sum(axis=1) == n_rated)
        entry: dict[str, Any] = {
            "agreement": col.record(
                _path(base, "agreement"),
                _proportion(d, int(items_agree.sum()), int(items_rated.sum())),
            ),
            "effectiveness": col.record(
                _path(base, "effectiveness"), _proportion(d, int(match.sum()), int(rated.sum()))
            ),
        }
        # one trial: FCE (1969) analytic interval; several trials: the ratings of an item are not
        # independent, so the interval comes from the item bootstrap (when the study asks for it)
        group = _cohen_group(d, col, j) if d.t >= 2 and d.want_boot else None
        est, boot, table = _cohen_guarded(
            d, col, _path(base, "cohen_kappa"), p["a"], p["b"], None, group
        )
        entry["cohen_kappa"] = col.record(
            _path(base, "cohen_kappa"), est, boot, too_large=TOO_LARGE_COHEN
        )
        if d.ordinal:
            west, wboot, _ = _cohen_guarded(
                d, col, _path(base, "weighted_kappa"), p["a"], p["b"], d.weights, group
            )
            entry["weighted_kappa"] = col.record(
                _path(base, "weighted_kappa"), west, wboot, too_large=TOO_LARGE_COHEN
            )
        counts = {"ratings": int(rated.sum()), "matching": int(match.sum())}
        if d.defect is not None:
            recs, dcounts = _defect_rates(d, col, base, p["sub"], rated, d.ref)
            entry.update(recs)
            counts.update(dcounts)
        if d.ordinal:
            tau = _guard(
                lambda p=p: kendall_tau_b(p["a"], p["b"], confidence_level=d.level),
            )
            entry["kendall_tau_b"] = col.record(_path(base, "kendall_tau_b"), tau)
        if table is not None:
            entry["confusion"] = {
                "rows": "rater",
                "columns": "reference",
                "categories": list(d.cats),
                "counts": np.asarray(table, dtype=np.int64).tolist(),
            }
            _cohen_caveats(d, caveats, rid, est, table)
        entry["counts"] = counts
        out[rid] = entry
    return out


def _cohen_guarded(
    d: _Data,
    col: _Collector,
    path: str,
    a: np.ndarray,
    b: np.ndarray,
    weights: np.ndarray | None,
    group: str | None,
) -> tuple[Estimate, BootSpec | None, np.ndarray | None]:
    try:
        est, boot, table = _cohen(a, b, d.k, weights, d.level, group)
    except (ValueError, ZeroDivisionError, FloatingPointError) as exc:
        return (
            Estimate(estimate=None, warnings=(f"could not be computed for these data: {exc}",)),
            None,
            None,
        )
    return est, boot, table


def _cohen_caveats(
    d: _Data, caveats: dict[str, Any], rid: str, est: Estimate, table: np.ndarray
) -> None:
    from .stats import cohen

    acc = caveats.setdefault("accuracy", {})
    entry: dict[str, Any] = {
        "observed_agreement": _num(est.extra.get("p_o")),
        "chance_agreement": _num(est.extra.get("p_e")),
        "kappa_max": _num(_try(lambda: cohen.kappa_max(table))),
    }
    if d.study.scale == "binary" and d.k == 2:
        entry["prevalence_index"] = _num(_try(lambda: cohen.prevalence_index(table)))
        entry["bias_index"] = _num(_try(lambda: cohen.bias_index(table)))
        entry["pabak"] = _num(_try(lambda: cohen.pabak(table)))
    acc[rid] = entry


def _try(fn: Callable[[], Any]) -> Any:
    try:
        return fn()
    except (ValueError, ZeroDivisionError, FloatingPointError):
        return None


def _num(x: Any) -> float | None:
    """A plain float from a core figure (Estimate, numpy scalar, float), or None."""
    if isinstance(x, Estimate):
        x = x.estimate
    if x is None:
        return None
    v = float(x)
    return v if math.isfinite(v) else None


def _reproducibility(d: _Data, col: _Collector, caveats: dict[str, Any]) -> dict[str, Any]:
    from .stats.pairwise import pair_tables
    from .stats.tables import count_patterns

    out: dict[str, Any] = {}
    eligible, agree = _all_agree(d.pat)
    out["agreement"] = col.record("reproducibility.agreement", _proportion(d, agree, eligible))
    # the rater-pair tables (item × trial units) serve Light's kappa and the pairwise matrix
    tables = _try(lambda: pair_tables(d.units, d.k))
    out.update(
        _multi_rater(d, col, "reproducibility", d.pat, d.slots, d.units, tables, by_category=True)
    )
    fl = out.get("_fleiss")
    out.pop("_fleiss", None)
    if fl is not None:
        caveats["reproducibility"] = {
            "observed_agreement": _num(fl.overall.extra.get("p_o")),
            "chance_agreement": _num(fl.overall.extra.get("p_e")),
        }
    # pairwise Cohen's kappa between raters, trial-matched (item × trial units)
    out["pairwise_cohen_kappa"] = _pairwise(
        d, col, d.units, tables, "reproducibility.pairwise_cohen_kappa", caveats
    )
    if d.t >= 2:
        by_trial: dict[str, Any] = {}
        for tt in range(d.t):
            codes_t = d.codes[:, :, tt]
            pat = count_patterns(codes_t, d.k)
            base = _path("reproducibility", "by_trial", tt + 1)
            e2, a2 = _all_agree(pat)
            entry: dict[str, Any] = {
                "agreement": col.record(_path(base, "agreement"), _proportion(d, a2, e2))
            }
            entry.update(
                _multi_rater(
                    d, col, base, pat, codes_t, codes_t, None, by_category=False, bootstrap=False
                )
            )
            entry.pop("_fleiss", None)
            by_trial[str(tt + 1)] = entry
        out["by_trial"] = by_trial
    return out


def _multi_rater(
    d: _Data,
    col: _Collector,
    base: str,
    pat: CountPatterns,
    slots: np.ndarray,
    units: np.ndarray,
    tables: np.ndarray | None,
    *,
    by_category: bool,
    bootstrap: bool = True,
) -> dict[str, Any]:
    """The multi-rater coefficients of one layout (pooled slots, or a single trial).

    ``pat`` holds the count patterns shared by every count-table coefficient; ``tables`` the
    rater-pair tables of ``units`` when already built.  ``bootstrap=False`` keeps the analytic
    intervals (the per-trial figures: they are read as a check on drift between trials, the
    pooled figures carry the bootstrap).
    """
    from .stats.kendall import kendall_w

    out: dict[str, Any] = {}
    want = bootstrap and d.want_boot
    group = _count_group(col, "pooled", pat, 0) if want else None
    res, boot, by_cat = _guarded_fleiss(pat, d, col, _path(base, "fleiss_kappa"), group)
    out["fleiss_kappa"] = col.record(
        _path(base, "fleiss_kappa"), res.overall if res else _undefined_fleiss(), boot
    )
    out["_fleiss"] = res
    if by_category and res is not None:
        out["fleiss_kappa_by_category"] = {
            code: col.record(
                _path(base, "fleiss_kappa_by_category", code), est, by_cat[j] if by_cat else None
            )
            for j, (code, est) in enumerate(zip(d.cats, res.by_category, strict=True))
        }
    level = "ordinal" if d.ordinal else "nominal"
    calls: list[tuple[str, Callable[[], tuple[Estimate, BootSpec | None]]]] = [
        ("krippendorff_alpha", lambda: _krippendorff(pat, level, None, d.level, col, group)),
    ]
    if d.values is not None:
        calls.append(
            (
                "krippendorff_alpha_interval",
                lambda: _krippendorff(pat, "interval", d.values, d.level, col, group),
            )
        )
    calls.append(("gwet_ac1", lambda: _gwet(pat, None, d.level, col, group)))
    if d.ordinal:
        calls.append(("gwet_ac2", lambda: _gwet(pat, d.weights, d.level, col, group)))
    calls += [
        ("brennan_prediger", lambda: _brennan_prediger(pat, d.level, col, group)),
        ("conger_kappa", lambda: _conger(d, units, col, want)),
        ("light_kappa", lambda: _light(d, units, tables, col, want)),
    ]
    for name, call in calls:
        path = _path(base, name)
        try:
            est, fboot = call()
        except (ValueError, ZeroDivisionError, FloatingPointError) as exc:
            est, fboot = (
                Estimate(estimate=None, warnings=(f"could not be computed for these data: {exc}",)),
                None,
            )
        too_large = TOO_LARGE_NO_INTERVAL if est.ci_low is None else TOO_LARGE_ANALYTIC
        out[name] = col.record(path, est, fboot, too_large=too_large)
        if want and fboot is None and est.estimate is not None:
            col.warn(path, too_large)  # bootstrap ruled out before any work was done
    if d.ordinal:
        path = _path(base, "kendall_w")
        out["kendall_w"] = col.record(
            path, _guard(lambda: kendall_w(slots, confidence_level=d.level))
        )
    return out


def _pairwise(
    d: _Data,
    col: _Collector,
    units: np.ndarray,
    tables: np.ndarray | None,
    base: str,
    caveats: dict[str, Any],
) -> dict[str, Any]:
    """Cohen's kappa of every pair of raters; the pairs' chance figures go to the caveats."""
    from .stats.pairwise import pairwise_cohen

    try:
        mat = pairwise_cohen(units, d.k, confidence_level=d.level, pair_tables=tables)
    except (ValueError, ZeroDivisionError, FloatingPointError) as exc:
        col.warn(base, f"Pairwise Cohen's kappa could not be computed for these data: {exc}")
        return {}
    out: dict[str, Any] = {}
    pairs: list[dict[str, Any]] = []
    for a, ra in enumerate(d.raters):
        row: dict[str, Any] = {}
        for b, rb in enumerate(d.raters):
            if a == b:
                continue
            est = mat[a][b] if mat[a][b] is not None else mat[b][a]
            if est is None:
                row[rb] = None
                continue
            # the matrix is symmetric: warn once per pair
            row[rb] = est.as_record() if a > b else col.record(_path(base, ra, rb), est)
            if a < b:
                pairs.append(
                    {
                        "raters": [ra, rb],
                        "observed_agreement": _num(est.extra.get("p_o")),
                        "chance_agreement": _num(est.extra.get("p_e")),
                        "kappa_max": _num(est.extra.get("kappa_max")),
                    }
                )
        out[ra] = row
    caveats["pairs"] = pairs
    return out


def _panel_accuracy(d: _Data, col: _Collector) -> dict[str, Any]:
    assert d.ref is not None
    sub = d.slots.astype(np.int64)  # (n, r*t)
    has_ref = (d.ref >= 0)[:, None]
    rated = (sub >= 0) & has_ref
    match = rated & (sub == d.ref[:, None])
    n_rated = rated.sum(axis=1)
    items_rated = n_rated > 0
    items_agree = items_rated & (match.sum(axis=1) == n_rated)
    base = "panel_accuracy"
    out: dict[str, Any] = {
        "agreement": col.record(
            _path(base, "agreement"), _proportion(d, int(items_agree.sum()), int(items_rated.sum()))
        ),
        "effectiveness": col.record(
            _path(base, "effectiveness"), _proportion(d, int(match.sum()), int(rated.sum()))
        ),
    }
    counts = {"ratings": int(rated.sum()), "matching": int(match.sum())}
    if d.defect is not None:
        recs, dcounts = _defect_rates(d, col, base, sub, rated, d.ref)
        out.update(recs)
        counts.update(dcounts)
    out["counts"] = counts
    return out


def _ordinal(d: _Data, col: _Collector, results: dict[str, Any] | None = None) -> dict[str, Any]:
    """Ordered-scale figures.  With ``results``, the exact and within-one-step agreement with
    the reference are also recorded as ``accuracy.<rater>.exact_agreement`` /
    ``within_one_agreement`` and ``panel_accuracy.exact_agreement`` / ``within_one_agreement``
    (the same figures, named so that criteria can refer to them)."""
    from .stats.ordinal import mean_signed_offset, pair_distance_counts, signed_offset_counts
    from .stats.tables import count_table

    k = d.k
    out: dict[str, Any] = {}
    shares: dict[str, tuple[Estimate, Estimate]] = {}

    def pairs_block(counts: np.ndarray) -> dict[str, Any]:
        dist = pair_distance_counts(counts)
        total = int(dist.sum())
        return {
            "pairs": total,
            "exact_share": (int(dist[0]) / total) if total else None,
            "within_one_step_share": (int(dist[: min(2, k)].sum()) / total) if total else None,
            "steps_apart": {str(s): int(c) for s, c in enumerate(dist)},
        }

    if d.r >= 2 or d.t >= 2:
        out["reproducibility"] = pairs_block(d.counts)
    if d.t >= 2:
        out["repeatability"] = {
            rid: pairs_block(np.asarray(count_table(d.codes[:, j, :], k), dtype=np.int64))
            for j, rid in enumerate(d.raters)
        }
    if d.ref is not None:

        def vs_ref(sub: np.ndarray, base: str) -> dict[str, Any]:
            assert d.ref is not None
            rated = (sub >= 0) & (d.ref >= 0)[:, None]
            off = np.where(rated, sub - d.ref[:, None], 0)
            n_rated = int(rated.sum())
            table = signed_offset_counts(
                np.where(rated, sub, -1), np.where(rated, d.ref[:, None], -1), k
            )
            exact = int(table[k - 1])
            within = int(table[max(0, k - 2) : k + 1].sum())
            mean = mean_signed_offset(off.sum(axis=1), rated.sum(axis=1), confidence_level=d.level)
            exact_est = _proportion(d, exact, n_rated)
            within_est = _proportion(d, within, n_rated)
            shares[base] = (exact_est, within_est)
            return {
                "exact": col.record(_path(base, "exact"), exact_est),
                "within_one_step": col.record(_path(base, "within_one_step"), within_est),
                "mean_offset": col.record(_path(base, "mean_offset"), mean),
                "offsets": _offset_table(table, k),
            }

        out["accuracy"] = {
            rid: vs_ref(d.codes[:, j, :].astype(np.int64), _path("ordinal", "accuracy", rid))
            for j, rid in enumerate(d.raters)
        }
        out["panel_accuracy"] = vs_ref(d.slots.astype(np.int64), "ordinal.panel_accuracy")
        if results is not None:
            targets = [
                (
                    results.get("accuracy", {}).get(rid),
                    _path("ordinal", "accuracy", rid),
                    _path("accuracy", rid),
                )
                for rid in d.raters
            ]
            targets.append(
                (results.get("panel_accuracy"), "ordinal.panel_accuracy", "panel_accuracy")
            )
            for entry, src, dst in targets:
                if entry is None or src not in shares:
                    continue
                exact_est, within_est = shares[src]
                entry["exact_agreement"] = col.record(_path(dst, "exact_agreement"), exact_est)
                entry["within_one_agreement"] = col.record(
                    _path(dst, "within_one_agreement"), within_est
                )
    return out


def _items(d: _Data) -> tuple[list[dict[str, Any]], list[str]]:
    c = d.counts
    m = c.sum(axis=1)
    pairs_agree = (c * (c - 1)).sum(axis=1)
    pairs_all = m * (m - 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(pairs_all > 0, pairs_agree / np.maximum(pairs_all, 1), np.nan)
    all_agree = (m >= 2) & (c.max(axis=1, initial=0) == m)
    if d.ref is not None:
        has_ref = d.ref >= 0
        matching = np.where(has_ref, c[np.arange(d.n), np.maximum(d.ref, 0)], 0)
        matches = has_ref & (m > 0) & (matching == m)
        ref_codes: list[str | None] = [d.cats[x] if x >= 0 else None for x in d.ref.tolist()]
    else:
        has_ref = np.zeros(d.n, dtype=bool)
        matching = np.zeros(d.n, dtype=np.int64)
        matches = has_ref
        ref_codes = [None] * d.n
    judged = has_ref & (m > 0)
    # Built for speed at 100,000 items: every per-item value is computed with numpy, turned
    # into plain Python objects once (.tolist()), and the dicts are made in one comprehension.
    # The counts dict of an item is a copy of its count pattern's dict (a few thousand patterns).
    pattern_counts = [dict(zip(d.cats, row, strict=True)) for row in d.pat.rows.tolist()]
    counts_of = [pattern_counts[p] for p in d.pat.inverse.tolist()]
    agreement = [None if x != x else x for x in share.tolist()]
    several = (m >= 2).tolist()
    all_agree_l = [a if s_ else None for a, s_ in zip(all_agree.tolist(), several, strict=True)]
    judged_l = judged.tolist()
    matching_l = [g if j else None for g, j in zip(matching.tolist(), judged_l, strict=True)]
    matches_l = [x if j else None for x, j in zip(matches.tolist(), judged_l, strict=True)]
    items: list[dict[str, Any]] = [
        {
            "id": iid,
            "reference": rc,
            "ratings": mi,
            "counts": cnt.copy(),
            "agreement": sh,
            "all_agree": aa,
            "matching_reference": mg,
            "matches_reference": mt,
        }
        for iid, rc, mi, cnt, sh, aa, mg, mt in zip(
            d.ratings.items,
            ref_codes,
            m.tolist(),
            counts_of,
            agreement,
            all_agree_l,
            matching_l,
            matches_l,
            strict=True,
        )
    ]
    # hard items: disagreeing or missing the reference, least agreement first
    ref_share = np.where(judged, matching / np.maximum(m, 1), 1.0)
    agree_key = np.where(np.isnan(share), 1.0, share)
    candidates = np.flatnonzero((agree_key < 1.0) | (judged & ~matches))
    order = candidates[np.lexsort((candidates, ref_share[candidates], agree_key[candidates]))]
    hard = [d.ratings.items[i] for i in order[:HARD_ITEMS_LIMIT].tolist()]
    return items, hard


def _missing_summary(d: _Data) -> dict[str, Any]:
    present = d.codes >= 0
    expected = d.n * d.r * d.t
    n_present = int(present.sum())
    out: dict[str, Any] = {
        "expected_ratings": expected,
        "ratings": n_present,
        "missing": expected - n_present,
        "missing_share": (expected - n_present) / expected if expected else None,
        "items_with_missing": int((~present).reshape(d.n, -1).any(axis=1).sum()) if d.n else 0,
        "by_rater": {rid: int((~present[:, j, :]).sum()) for j, rid in enumerate(d.raters)},
        "by_trial": {str(tt + 1): int((~present[:, :, tt]).sum()) for tt in range(d.t)},
    }
    if d.ref is not None:
        out["items_without_reference"] = int((d.ref < 0).sum())
    return out


def _main_coefficient(results: dict[str, Any]) -> tuple[str, dict[str, Any]] | None:
    rep = results.get("reproducibility")
    if rep and rep.get("fleiss_kappa", {}).get("estimate") is not None:
        return "reproducibility.fleiss_kappa", rep["fleiss_kappa"]
    for rid, entry in (results.get("repeatability") or {}).items():
        if entry["fleiss_kappa"].get("estimate") is not None:
            return f"repeatability.{rid}.fleiss_kappa", entry["fleiss_kappa"]
    for rid, entry in (results.get("accuracy") or {}).items():
        if entry["cohen_kappa"].get("estimate") is not None:
            return f"accuracy.{rid}.cohen_kappa", entry["cohen_kappa"]
    return None


def _caveats(
    d: _Data, results: dict[str, Any], caveats: dict[str, Any], col: _Collector
) -> dict[str, Any]:
    from .stats.caveats import half_width, items_needed

    total = d.counts.sum(axis=0)
    n_ratings = int(total.sum())
    caveats["categories"] = d.k
    caveats["categories_used"] = int((total > 0).sum())
    caveats["category_shares"] = {
        code: (int(x) / n_ratings if n_ratings else None)
        for code, x in zip(d.cats, total.tolist(), strict=True)
    }
    if n_ratings and caveats["categories_used"] == 1:
        col.warn(
            "design",
            "Every rating is in one category: agreement coefficients that correct for chance are undefined.",
        )
    if d.ref is not None:
        ref_ok = d.ref[d.ref >= 0]
        caveats["reference_shares"] = {
            code: (int((ref_ok == j).sum()) / ref_ok.size if ref_ok.size else None)
            for j, code in enumerate(d.cats)
        }
    main = _main_coefficient(results)
    target = float(d.study.target_half_width)
    if main is not None:
        path, rec = main
        hw = half_width(rec.get("ci_low"), rec.get("ci_high"))
        caveats["precision"] = {
            "measure": path,
            "estimate": rec.get("estimate"),
            "ci_low": rec.get("ci_low"),
            "ci_high": rec.get("ci_high"),
            "ci_method": rec.get("ci_method"),
            "half_width": hw,
            "target_half_width": target,
            "items": d.n,
            "items_needed": items_needed(hw, d.n, target),
            "approximation": CONVENTIONS["caveats.items_needed"],
        }
    caveats["missing"] = _missing_summary(d)
    return caveats


# --------------------------------------------------------------------------------------------
# bootstrap and JSON
# --------------------------------------------------------------------------------------------


def _choose_groups(d: _Data, col: _Collector, resamples: int) -> list[str]:
    """The bootstrap groups that fit the work limit, most important first.

    Every group shares one resample of items, drawn over the finest common partition of the
    groups taken (items alike in all of them); the work is resamples × cells × features.
    """
    from .stats.bootstrap import refine

    wanted = {b.group for b in col.boot.values()}
    taken: list[str] = []
    width = 0
    label: np.ndarray | None = None  # the finest common partition of the groups taken
    cells = 0
    for name in sorted(wanted, key=lambda g: (col.groups[g].priority, g)):
        grp = col.groups[name]
        w = sum(
            bw
            for bname, (bw, _) in grp.blocks.items()
            if any(b.group == name and b.block == bname for b in col.boot.values())
        )
        p = grp.multiplicity.shape[0]
        if label is None:
            new_label, new_cells = np.asarray(grp.inverse, dtype=np.int64), p
        else:
            new_label, new_cells = refine(label, cells, grp.inverse, p)
        work = new_cells * (width + w)
        always = grp.priority == 0 and p * w <= FEATURE_CELLS_LIMIT
        fits = (
            resamples * work <= BOOT_WORK_LIMIT
            and resamples * new_cells <= BOOT_DRAW_LIMIT
            and work <= FEATURE_CELLS_LIMIT
        )
        if always or fits:
            taken.append(name)
            width += w
            label, cells = new_label, new_cells
    return taken


def _run_bootstrap(d: _Data, col: _Collector) -> dict[str, Any]:
    resamples = int(d.study.bootstrap_resamples)
    seed = d.study.bootstrap_seed
    info: dict[str, Any] = {
        "resamples": resamples,
        "seed": seed,
        "ci_method": None,
        "confidence_level": d.level,
        "measures": [],
    }
    if resamples <= 0 or not col.boot:
        info["ci_method"] = "analytic"
        return info
    if d.n < 2:
        col.warn("bootstrap", "A single item cannot be resampled: intervals are analytic.")
        info["ci_method"] = "analytic"
        return info
    from .stats.bootstrap import FeatureGroup, bootstrap_groups

    taken = _choose_groups(d, col, resamples)
    # one feature group per block: blocks of one compression share its inverse map (so the
    # draws are joined over them at no cost) and each block's replicate sums stay contiguous
    groups: dict[str, FeatureGroup] = {}
    stats: dict[str, tuple[str, Callable[[np.ndarray], np.ndarray]]] = {}
    for path, b in col.boot.items():
        if b.group not in taken:
            col.warn(path, b.too_large)
            continue
        key = f"{b.group}/{b.block}"
        if key not in groups:
            grp = col.groups[b.group]
            groups[key] = FeatureGroup(grp.blocks[b.block][1](), grp.multiplicity, grp.inverse)
        stats[path] = (key, b.from_sums)
    res = bootstrap_groups(
        groups, stats, resamples=resamples, seed=seed, confidence_level=d.level, method="bca"
    )
    methods: set[str] = set()
    used_paths: list[str] = []
    for p in col.boot:
        if p not in res:
            continue
        br = res[p]
        for w in br.warnings:
            col.warn(p, w)
        if br.ci_low is None or br.ci_high is None:
            col.warn(
                p,
                "The bootstrap interval is undefined for these data; the analytic interval is kept.",
            )
            continue
        rec = col.boot[p].record
        # the analytic interval is replaced: a note that it was cut to the range no longer applies
        col.warnings = [
            w
            for w in col.warnings
            if not (
                w["measure"] == p
                and w["message"].startswith("The analytic interval of")
                and "was cut to the range" in w["message"]
            )
        ]
        rec["se"] = br.se
        rec["ci_low"] = br.ci_low
        rec["ci_high"] = br.ci_high
        rec["ci_method"] = br.method
        methods.add(br.method)
        used_paths.append(p)
    info["ci_method"] = (
        sorted(methods)[0] if len(methods) == 1 else ", ".join(sorted(methods)) or "analytic"
    )
    info["measures"] = used_paths
    return info


_PLAIN = (type(None), str, bool, int)


def _jsonable(x: Any, col: _Collector, path: tuple[Any, ...] = ()) -> Any:
    """Plain JSON data: numpy scalars and arrays to Python, non-finite floats to None (with a warning).

    ``path`` is a chain of ``(parent, key)`` pairs, spelt out only when a warning needs it.
    """
    t = type(x)
    if t in _PLAIN:
        return x
    if t is float:
        if math.isfinite(x):
            return x
        col.warn(_spell(path), "A figure was not a finite number and is shown as undefined.")
        return None
    if t is dict:
        out = {}
        for key, v in x.items():
            key = key if type(key) is str else str(key)
            tv = type(v)
            out[key] = (
                v
                if tv in _PLAIN or (tv is float and math.isfinite(v))
                else _jsonable(v, col, (path, key))
            )
        return out
    if t is list or t is tuple:
        return [
            v
            if type(v) in _PLAIN or (type(v) is float and math.isfinite(v))
            else _jsonable(v, col, path)
            for v in x
        ]
    if isinstance(x, np.ndarray):
        return _jsonable(x.tolist(), col, path)
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return _jsonable(float(x), col, path)
    if isinstance(x, str):
        return str(x)
    raise TypeError(f"results hold a value JSON cannot carry at {_spell(path)}: {type(x).__name__}")


def _spell(path: tuple[Any, ...]) -> str:
    """'a.b.c' from the chain ``(((), 'a'), 'b'), 'c')``."""
    keys: list[str] = []
    while path:
        path, key = path
        keys.append(key)
    return ".".join(reversed(keys))


# --------------------------------------------------------------------------------------------
# entry point
# --------------------------------------------------------------------------------------------


def analyse(study: Study, ratings: Ratings, *, progress: Progress | None = None) -> dict[str, Any]:
    """Every figure of a study as plain JSON-ready data (schema ``reportgen-results/1``).

    ``progress`` (optional) is called with a short text before each long step.
    """
    # The results hold one record per item (100,000 in a labelling campaign); the cyclic
    # garbage collector would walk every one of them again and again while they are built, for
    # nothing (they form no cycles), so it is paused for the duration.
    paused = gc.isenabled()
    gc.disable()
    try:
        results = _analyse(study, ratings, progress)
        if study.measured is not None:  # measured reference values: measured.py
            from .measured import measured_results

            results["measured"] = measured_results(study, ratings)
            _fold_per_trial_warnings(results)
        return results
    finally:
        if paused:
            gc.enable()


def _fold_per_trial_warnings(results: dict[str, Any]) -> None:
    """Many trials per item are normal with measured references (20 checks per part): the
    per-trial figures' warnings are folded into one line instead of one per trial."""
    warnings = results.get("warnings")
    if not isinstance(warnings, list):
        return
    per_trial = [
        w
        for w in warnings
        if isinstance(w, dict) and str(w.get("measure", "")).startswith("reproducibility.by_trial.")
    ]
    if not per_trial:
        return
    trials = sorted({str(w["measure"]).split(".")[2] for w in per_trial}, key=int)
    kept = [w for w in warnings if w not in per_trial]
    kept.append(
        {
            "measure": "reproducibility.by_trial",
            "message": f"{len(per_trial)} warnings on the figures of single trials "
            f"({len(trials)} of the {results['design']['trials']} trials; for example: "
            f"{per_trial[0]['message']}) are folded into this line: with many trials per item, "
            "judge by the figures over all trials.",
        }
    )
    results["warnings"] = kept


def _analyse(study: Study, ratings: Ratings, progress: Progress | None) -> dict[str, Any]:

    def say(msg: str) -> None:
        if progress is not None:
            progress(msg)

    d = _prepare(study, ratings)
    col = _Collector()
    n_present = int((d.codes >= 0).sum())
    results: dict[str, Any] = {
        "schema": SCHEMA,
        "study": {
            "id": study.id,
            "revision": study.revision,
            "title": study.title,
            "scale": study.scale,
        },
        "design": {
            "items": d.n,
            "raters": d.r,
            "trials": d.t,
            "categories": [
                {"code": c.code, "label": c.label, "value": c.value} for c in study.categories
            ],
            "scale": study.scale,
            "ratings": n_present,
            "missing": d.n * d.r * d.t - n_present,
            "rater_ids": list(d.raters),
            "reference": d.ref is not None,
            "defect_category": study.defect_category,
            "confidence_level": d.level,
            "proportion_interval": study.proportion_interval,
        },
        "conventions": dict(CONVENTIONS),
    }
    caveats: dict[str, Any] = {}

    if d.n == 1:
        col.warn(
            "design",
            "The study has a single item: agreement between raters cannot be separated from chance.",
        )
    if n_present == 0:
        col.warn("design", "The study holds no ratings.")

    say("repeatability")
    if d.t >= 2:
        results["repeatability"] = _repeatability(d, col)
    else:
        col.warn(
            "repeatability",
            "Each rater rated each item once (one trial): repeatability cannot be judged.",
        )

    if d.ref is not None:
        say("accuracy")
        results["accuracy"] = _accuracy(d, col, caveats)
    else:
        col.note("accuracy", "No reference was given: accuracy and panel accuracy do not apply.")

    if d.r >= 2:
        say("reproducibility")
        results["reproducibility"] = _reproducibility(d, col, caveats)
    else:
        col.warn(
            "reproducibility", "The study has one rater: agreement between raters cannot be judged."
        )

    if d.ref is not None:
        results["panel_accuracy"] = _panel_accuracy(d, col)
        from .repeated import apply as _item_unit_rates

        _item_unit_rates(d.codes, d.ref, d.defect, d.raters, d.level, results)

    if d.ordinal:
        say("ordered-scale agreement")
        results["ordinal"] = _ordinal(d, col, results)

    if col.boot and study.bootstrap_resamples > 0:
        say(f"bootstrap intervals ({study.bootstrap_resamples} resamples of items)")
    results["bootstrap"] = _run_bootstrap(d, col)

    say("items and caveats")
    items, hard = _items(d)
    results["caveats"] = _caveats(d, results, caveats, col)
    results["hard_items"] = hard
    results["notes"] = col.notes
    out = _jsonable(results, col)
    # the per-item records are built from .tolist() values (plain ints, floats, bools, None);
    # they are kept out of the generic walk, which would cost seconds at 100,000 items
    out["items"] = items
    out["warnings"] = list(col.warnings)
    return out
