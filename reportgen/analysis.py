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

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np

from .model import Ratings, Study
from .stats.results import Estimate

SCHEMA = "reportgen-results/1"
#: at most this many ids in results["hard_items"]
HARD_ITEMS_LIMIT = 25

Progress = Callable[[str], None]
Features = tuple[np.ndarray, Callable[[np.ndarray], np.ndarray]]
MaybeFeatures = Features | None

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
    features: np.ndarray
    from_sums: Callable[[np.ndarray], np.ndarray]
    record: dict[str, Any]


@dataclass
class _Collector:
    warnings: list[dict[str, str]] = field(default_factory=list)
    notes: list[dict[str, str]] = field(default_factory=list)
    boot: dict[str, _Boot] = field(default_factory=dict)

    def warn(self, measure: str, message: str) -> None:
        entry = {"measure": measure, "message": message}
        if entry not in self.warnings:
            self.warnings.append(entry)

    def note(self, measure: str, message: str) -> None:
        self.notes.append({"measure": measure, "message": message})

    def record(self, path: str, est: Estimate, boot: Features | None = None) -> dict[str, Any]:
        rec = est.as_record()
        for w in est.warnings:
            self.warn(path, w)
        if boot is not None and est.estimate is not None:
            self.boot[path] = _Boot(boot[0], boot[1], rec)
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
    from .stats.tables import count_table
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
    counts = count_table(slots, k)
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
        counts=np.asarray(counts, dtype=np.int64),
    )


# --------------------------------------------------------------------------------------------
# calls into the numeric core (one place, so the contract with reportgen.stats is visible)
# --------------------------------------------------------------------------------------------


def _proportion(d: _Data, x: int, n: int) -> Estimate:
    from .stats.proportion import proportion

    return proportion(int(x), int(n), confidence_level=d.level, method=d.study.proportion_interval)


def _fleiss(
    counts: np.ndarray, level: float, want: bool
) -> tuple[Any, MaybeFeatures, Callable[[int], Features] | None]:
    """Fleiss' kappa (overall and by category), with its bootstrap features when ``want``."""
    from .stats import fleiss

    res = fleiss.fleiss_kappa(counts, confidence_level=level)
    if not want or not _fits(*counts.shape):
        return res, None, None
    feats = fleiss.fleiss_kappa_features(counts)

    def overall(s: np.ndarray) -> np.ndarray:
        return fleiss.fleiss_kappa_from_sums(s)

    def by_cat(j: int) -> Features:
        return feats, lambda s: fleiss.fleiss_kappa_by_category_from_sums(s)[..., j]

    return res, (feats, overall), by_cat


def _krippendorff(
    counts: np.ndarray, level: str, values: np.ndarray | None, conf: float, want: bool
) -> tuple[Estimate, MaybeFeatures]:
    from .stats import krippendorff as kr

    est = kr.krippendorff_alpha(counts, level=level, values=values, confidence_level=conf)  # type: ignore[arg-type]
    if not want or not _fits(counts.shape[0], counts.shape[1] ** 2):
        return est, None
    feats = kr.krippendorff_alpha_features(counts)

    def fn(s: np.ndarray) -> np.ndarray:
        return kr.krippendorff_alpha_from_sums(s, level=level, values=values)  # type: ignore[arg-type]

    return est, (feats, fn)


def _gwet(
    counts: np.ndarray, weights: np.ndarray | None, conf: float, want: bool
) -> tuple[Estimate, MaybeFeatures]:
    from .stats import gwet

    est = gwet.gwet_ac(counts, weights=weights, confidence_level=conf)
    if not want or not _fits(counts.shape[0], counts.shape[1] + 3):
        return est, None
    feats = gwet.gwet_ac_features(counts, weights=weights)

    def fn(s: np.ndarray) -> np.ndarray:
        return gwet.gwet_ac_from_sums(s, weights=weights)

    return est, (feats, fn)


def _brennan_prediger(
    counts: np.ndarray, conf: float, want: bool
) -> tuple[Estimate, MaybeFeatures]:
    from .stats import gwet

    est = gwet.brennan_prediger(counts, confidence_level=conf)
    if not want:
        return est, None
    feats = gwet.brennan_prediger_features(counts)
    k = counts.shape[1]

    def fn(s: np.ndarray) -> np.ndarray:
        return gwet.brennan_prediger_from_sums(s, k)

    return est, (feats, fn)


#: largest feature matrix (in float64 cells) built for the bootstrap of one coefficient (~160 MB)
FEATURE_CELLS_LIMIT = 20_000_000


#: largest resamples × items × features product bootstrapped for a coefficient whose features
#: identify raters (Conger, Light, Cohen per rater): those rows rarely repeat, so the bootstrap
#: cannot compress items into patterns and costs about this many multiply-adds (~1 s)
BOOT_WORK_LIMIT = 1_000_000_000


def _fits(rows: int, columns: int) -> bool:
    """Whether a rows × columns float64 feature matrix stays within FEATURE_CELLS_LIMIT."""
    return rows * columns <= FEATURE_CELLS_LIMIT


def _affordable(d: _Data, columns: int) -> bool:
    """Whether an item bootstrap of a rater-identified coefficient with ``columns`` features is cheap enough."""
    return d.study.bootstrap_resamples * d.n * columns <= BOOT_WORK_LIMIT and _fits(
        d.n * d.t, columns
    )


def _item_sums(unit_features: np.ndarray, n: int, t: int) -> np.ndarray:
    """Per-unit (item × trial, item-major) feature rows summed to per-item rows."""
    f = unit_features.shape[1]
    if t == 1:
        return unit_features
    return unit_features.reshape(n, t, f).sum(axis=1)


def _conger(d: _Data, units: np.ndarray, t: int, want: bool) -> tuple[Estimate, MaybeFeatures]:
    from .stats import pairwise

    k, n = d.k, d.n
    est = pairwise.conger_kappa(units, k, confidence_level=d.level, rater_labels=d.raters)
    if not want or not _affordable(d, 2 + units.shape[1] * k):
        return est, None
    feats = _item_sums(pairwise.conger_kappa_features(units, k), n, t)

    def fn(s: np.ndarray) -> np.ndarray:
        return pairwise.conger_kappa_from_sums(s, k)

    return est, (feats, fn)


def _light(d: _Data, units: np.ndarray, t: int, want: bool) -> tuple[Estimate, MaybeFeatures]:
    from .stats import pairwise

    k, n = d.k, d.n
    est = pairwise.light_kappa(units, k, confidence_level=d.level, rater_labels=d.raters)
    r = units.shape[1]
    if not want or not _affordable(d, r * (r - 1) // 2 * k * k):
        return est, None
    feats = _item_sums(pairwise.light_kappa_features(units, k), n, t)

    def fn(s: np.ndarray) -> np.ndarray:
        return pairwise.light_kappa_from_sums(s, k)

    return est, (feats, fn)


def _cohen(
    a: np.ndarray,
    b: np.ndarray,
    k: int,
    n: int,
    t: int,
    weights: np.ndarray | None,
    conf: float,
    *,
    features: bool = True,
) -> tuple[Estimate, MaybeFeatures, np.ndarray]:
    """Cohen's kappa of paired flat arrays (item-major, t pairs per item) with per-item features."""
    from .stats import cohen

    table = cohen.confusion_matrix(a, b, k)
    est = cohen.cohen_kappa(table, weights=weights, confidence_level=conf)
    if not features or not _fits(n * t, k * k):
        return est, None, table
    feats = _item_sums(cohen.cohen_kappa_features(a, b, k), n, t)

    def fn(s: np.ndarray) -> np.ndarray:
        return cohen.cohen_kappa_from_sums(s, k, weights=weights)

    return est, (feats, fn), table


# --------------------------------------------------------------------------------------------
# small counting helpers (ours: counts, not coefficients)
# --------------------------------------------------------------------------------------------


def _all_agree(counts: np.ndarray) -> tuple[int, int]:
    """(items with ≥ 2 ratings, of which all ratings agree)."""
    m = counts.sum(axis=1)
    eligible = m >= 2
    agree = eligible & (counts.max(axis=1, initial=0) == m)
    return int(eligible.sum()), int(agree.sum())


def _offset_table(counts: np.ndarray, k: int) -> dict[str, int]:
    return {str(o): int(c) for o, c in zip(range(-(k - 1), k), counts, strict=True)}


def _path(*parts: object) -> str:
    return ".".join(str(p) for p in parts)


# --------------------------------------------------------------------------------------------
# layouts
# --------------------------------------------------------------------------------------------


def _repeatability(d: _Data, col: _Collector) -> dict[str, Any]:
    from .stats.tables import count_table

    out: dict[str, Any] = {}
    for j, rid in enumerate(d.raters):
        c = np.asarray(count_table(d.codes[:, j, :], d.k), dtype=np.int64)
        eligible, agree = _all_agree(c)
        base = _path("repeatability", rid)
        entry: dict[str, Any] = {
            "agreement": col.record(_path(base, "agreement"), _proportion(d, agree, eligible)),
        }
        if eligible == 0:
            col.warn(
                base,
                f"Rater {rid} rated no item in two or more trials: repeatability cannot be judged.",
            )
        res, boot, _ = _guarded_fleiss(c, d, col, _path(base, "fleiss_kappa"), d.want_boot)
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
    counts: np.ndarray, d: _Data, col: _Collector, path: str, want: bool
) -> tuple[Any, Features | None, Callable[[int], Features] | None]:
    try:
        res, boot, by_cat = _fleiss(counts, d.level, want)
    except (ValueError, ZeroDivisionError, FloatingPointError) as exc:
        col.warn(path, f"Fleiss' kappa could not be computed for these data: {exc}")
        return None, None, None
    return res, boot, by_cat


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
        clustered = d.t >= 2 and d.want_boot and _affordable(d, d.k * d.k)
        if d.t >= 2 and d.want_boot and not clustered:
            col.warn(
                _path(base, "cohen_kappa"),
                "The study is too large for an item bootstrap of this kappa: its analytic interval "
                "treats the rater's repeated ratings of an item as independent and is too narrow.",
            )
        est, boot, table = _cohen_guarded(
            d, col, _path(base, "cohen_kappa"), p["a"], p["b"], None, clustered
        )
        entry["cohen_kappa"] = col.record(_path(base, "cohen_kappa"), est, boot)
        if d.ordinal:
            west, wboot, _ = _cohen_guarded(
                d, col, _path(base, "weighted_kappa"), p["a"], p["b"], d.weights, clustered
            )
            entry["weighted_kappa"] = col.record(_path(base, "weighted_kappa"), west, wboot)
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
    features: bool,
) -> tuple[Estimate, MaybeFeatures, np.ndarray | None]:
    try:
        est, boot, table = _cohen(a, b, d.k, d.n, d.t, weights, d.level, features=features)
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
    out: dict[str, Any] = {}
    eligible, agree = _all_agree(d.counts)
    out["agreement"] = col.record("reproducibility.agreement", _proportion(d, agree, eligible))
    out.update(
        _multi_rater(d, col, "reproducibility", d.counts, d.slots, d.units, d.t, by_category=True)
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
        d, col, d.units, "reproducibility.pairwise_cohen_kappa", caveats
    )
    if d.t >= 2:
        by_trial: dict[str, Any] = {}
        for tt in range(d.t):
            from .stats.tables import count_table

            codes_t = d.codes[:, :, tt]
            c = np.asarray(count_table(codes_t, d.k), dtype=np.int64)
            base = _path("reproducibility", "by_trial", tt + 1)
            e2, a2 = _all_agree(c)
            entry: dict[str, Any] = {
                "agreement": col.record(_path(base, "agreement"), _proportion(d, a2, e2))
            }
            entry.update(
                _multi_rater(
                    d, col, base, c, codes_t, codes_t, 1, by_category=False, bootstrap=False
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
    counts: np.ndarray,
    slots: np.ndarray,
    units: np.ndarray,
    t: int,
    *,
    by_category: bool,
    bootstrap: bool = True,
) -> dict[str, Any]:
    """The multi-rater coefficients of one layout (pooled slots, or a single trial).

    ``bootstrap=False`` keeps the analytic intervals (the per-trial figures: they are read as a
    check on drift between trials, the pooled figures carry the bootstrap).
    """
    from .stats.kendall import kendall_w

    out: dict[str, Any] = {}
    want = bootstrap and d.want_boot
    res, boot, by_cat = _guarded_fleiss(counts, d, col, _path(base, "fleiss_kappa"), want)
    out["fleiss_kappa"] = col.record(
        _path(base, "fleiss_kappa"), res.overall if res else _undefined_fleiss(), boot
    )
    out["_fleiss"] = res
    if by_category and res is not None:
        out["fleiss_kappa_by_category"] = {
            code: col.record(
                _path(base, "fleiss_kappa_by_category", code), est, by_cat(j) if by_cat else None
            )
            for j, (code, est) in enumerate(zip(d.cats, res.by_category, strict=True))
        }
    level = "ordinal" if d.ordinal else "nominal"
    for name, call in (
        ("krippendorff_alpha", lambda: _krippendorff(counts, level, None, d.level, want)),
        (
            "krippendorff_alpha_interval",
            (lambda: _krippendorff(counts, "interval", d.values, d.level, want))
            if d.values is not None
            else None,
        ),
        ("gwet_ac1", lambda: _gwet(counts, None, d.level, want)),
        ("gwet_ac2", (lambda: _gwet(counts, d.weights, d.level, want)) if d.ordinal else None),
        ("brennan_prediger", lambda: _brennan_prediger(counts, d.level, want)),
        ("conger_kappa", lambda: _conger(d, units, t, want)),
        ("light_kappa", lambda: _light(d, units, t, want)),
    ):
        if call is None:
            continue
        path = _path(base, name)
        try:
            est, fboot = call()
        except (ValueError, ZeroDivisionError, FloatingPointError) as exc:
            est, fboot = (
                Estimate(estimate=None, warnings=(f"could not be computed for these data: {exc}",)),
                None,
            )
        out[name] = col.record(path, est, fboot)
        if want and fboot is None and est.estimate is not None and est.ci_low is None:
            col.warn(
                path,
                "No interval: this coefficient has no published analytic interval, and an item bootstrap "
                "of it would be too large for this study (items × raters × resamples).",
            )
    if d.ordinal:
        path = _path(base, "kendall_w")
        out["kendall_w"] = col.record(
            path, _guard(lambda: kendall_w(slots, confidence_level=d.level))
        )
    return out


def _pairwise(
    d: _Data, col: _Collector, units: np.ndarray, base: str, caveats: dict[str, Any]
) -> dict[str, Any]:
    """Cohen's kappa of every pair of raters; the pairs' chance figures go to the caveats."""
    from .stats.pairwise import pairwise_cohen

    try:
        mat = pairwise_cohen(units, d.k, confidence_level=d.level)
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


def _ordinal(d: _Data, col: _Collector) -> dict[str, Any]:
    from .stats.ordinal import mean_signed_offset, pair_distance_counts, signed_offset_counts
    from .stats.tables import count_table

    k = d.k
    out: dict[str, Any] = {}

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
            return {
                "exact": col.record(_path(base, "exact"), _proportion(d, exact, n_rated)),
                "within_one_step": col.record(
                    _path(base, "within_one_step"), _proportion(d, within, n_rated)
                ),
                "mean_offset": col.record(_path(base, "mean_offset"), mean),
                "offsets": _offset_table(table, k),
            }

        out["accuracy"] = {
            rid: vs_ref(d.codes[:, j, :].astype(np.int64), _path("ordinal", "accuracy", rid))
            for j, rid in enumerate(d.raters)
        }
        out["panel_accuracy"] = vs_ref(d.slots.astype(np.int64), "ordinal.panel_accuracy")
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
    share_l = share.tolist()
    items: list[dict[str, Any]] = []
    for i, (iid, cnt, mi, sh, aa, rc, mt, mg, jd) in enumerate(
        zip(
            d.ratings.items,
            c.tolist(),
            m.tolist(),
            share_l,
            all_agree.tolist(),
            ref_codes,
            matches.tolist(),
            matching.tolist(),
            judged.tolist(),
            strict=True,
        )
    ):
        del i
        items.append(
            {
                "id": iid,
                "reference": rc,
                "ratings": mi,
                "counts": dict(zip(d.cats, cnt, strict=True)),
                "agreement": None if sh != sh else sh,
                "all_agree": aa if mi >= 2 else None,
                "matching_reference": mg if jd else None,
                "matches_reference": mt if jd else None,
            }
        )
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
    from .stats.bootstrap import bootstrap_many

    paths = list(col.boot)
    res = bootstrap_many(
        {p: col.boot[p].features for p in paths},
        {p: col.boot[p].from_sums for p in paths},
        resamples=resamples,
        seed=seed,
        confidence_level=d.level,
        method="bca",
    )
    methods: set[str] = set()
    used: list[str] = []
    for p in paths:
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
        rec["se"] = br.se
        rec["ci_low"] = br.ci_low
        rec["ci_high"] = br.ci_high
        rec["ci_method"] = br.method
        methods.add(br.method)
        used.append(p)
    info["ci_method"] = (
        sorted(methods)[0] if len(methods) == 1 else ", ".join(sorted(methods)) or "analytic"
    )
    info["measures"] = used
    return info


def _jsonable(x: Any, col: _Collector, path: tuple[str, ...] = ()) -> Any:
    """Plain JSON data: numpy scalars and arrays to Python, non-finite floats to None (with a warning)."""
    t = type(x)
    if x is None or t is str or t is bool or t is int:
        return x
    if t is float:
        if math.isfinite(x):
            return x
        col.warn(".".join(path), "A figure was not a finite number and is shown as undefined.")
        return None
    if t is dict:
        return {str(key): _jsonable(v, col, (*path, str(key))) for key, v in x.items()}
    if t is list or t is tuple:
        return [_jsonable(v, col, path) for v in x]
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
    raise TypeError(
        f"results hold a value JSON cannot carry at {'.'.join(path)}: {type(x).__name__}"
    )


# --------------------------------------------------------------------------------------------
# entry point
# --------------------------------------------------------------------------------------------


def analyse(study: Study, ratings: Ratings, *, progress: Progress | None = None) -> dict[str, Any]:
    """Every figure of a study as plain JSON-ready data (schema ``reportgen-results/1``).

    ``progress`` (optional) is called with a short text before each long step.
    """

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

    if d.ordinal:
        say("ordered-scale agreement")
        results["ordinal"] = _ordinal(d, col)

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
