"""Sample-size advice for a planned study (``reportgen plan --advise``).

How wide will the intervals be, and how many items would a target half-width need?  We answer by
simulation with reportgen's own statistics engine (``reportgen.stats``): many studies of the
planned design are drawn, each is analysed with the same coefficient functions and interval
methods the report uses, and the mean half-width of each interval is recorded.

The model of a rating (simple on purpose, and stated in the advice):

* an item's true category is drawn from the category shares of the item set (the item list's
  references when given, else equal shares);
* a rating is the true category with probability ``a`` (the **assumed agreement**) and otherwise
  a category drawn at random from the same shares.  Then a rater agrees with the reference with
  Cohen's kappa ``a`` (the rating marginals equal the reference shares), two ratings of one item
  (two raters, or one rater in two trials) agree with kappa ``a²``, and every rater is alike.
  Mistakes are unordered: on an ordinal scale a wrong call is not more likely to be a neighbour.

Measures simulated (those that apply to the study): Fleiss' kappa among all ratings
(reproducibility, the pooled convention of the results), Fleiss' kappa of one rater's trials
(repeatability), Cohen's kappa of one rater against the reference (accuracy; one trial, with the
Fleiss-Cohen-Everitt 1969 analytic interval), effectiveness and, with a defect category, the
miss rate of one rater (proportion intervals of the study's method, all trials pooled).

The item count needed for a target half-width comes from the fit ``h(n) = c / sqrt(n)`` over the
simulated counts, checked by one more simulation at the count found.

Validated against: the precision-based sample size of Cantor (1996, Psychological Methods
1:150-153), n = z² Q / d² with Q = n · Var(kappa) from the large-sample variance of Fleiss,
Cohen & Everitt (1969) (tests/test_plan.py); the zero-failure sample sizes n = ln(1−C)/ln(R)
(59, 90 and 299).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from .model import Study

#: item counts simulated when none are given
DEFAULT_ITEM_COUNTS = (20, 30, 40, 50, 60, 80, 100, 150, 200)
DEFAULT_RUNS = 200
#: (reliability, confidence) pairs always listed for studies with a defect category
ZERO_FAILURE_PAIRS = ((0.95, 0.95), (0.95, 0.99), (0.99, 0.95))
COMMON = "common practice, no source"
#: item-set rules of thumb (common practice, no source)
MIN_ITEMS = 30
BORDERLINE_RANGE = (0.20, 0.40)
MIN_CATEGORY_SHARE = 0.10
MIN_CATEGORY_ITEMS = 5
DEFECT_SHARE_RANGE = (0.25, 0.75)


@dataclass(frozen=True)
class HalfWidthRow:
    items: int
    half_width: float | None  # mean over the runs with an interval
    sim_error: float | None  # standard error of that mean
    estimate: float | None  # mean estimate
    runs: int  # runs with an interval


@dataclass(frozen=True)
class MeasureAdvice:
    measure: str  # results path, e.g. "reproducibility.fleiss_kappa"
    title: str
    rows: tuple[HalfWidthRow, ...]
    items_needed: int | None  # for the target half-width
    check_half_width: float | None  # simulated at items_needed
    check_sim_error: float | None


@dataclass(frozen=True)
class ZeroFailure:
    reliability: float
    confidence: float
    ratings: int  # defect-reference ratings with no miss needed
    reason: str


@dataclass(frozen=True)
class ItemSetCheck:
    topic: str
    finding: str
    ok: bool
    basis: str


@dataclass(frozen=True)
class Advice:
    study_id: str
    scale: str
    raters: int
    trials: int
    categories: tuple[str, ...]
    shares: tuple[float, ...]
    shares_source: str
    agreement: float
    agreement_between_ratings: float
    target_half_width: float
    confidence: float
    runs: int
    seed: int
    measures: tuple[MeasureAdvice, ...]
    zero_failure: tuple[ZeroFailure, ...]
    item_checks: tuple[ItemSetCheck, ...]
    model: str = field(default="")

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


# --------------------------------------------------------------------------- simulation


def simulate_ratings(
    rng: np.random.Generator,
    *,
    n_items: int,
    shares: np.ndarray,
    raters: int,
    trials: int,
    agreement: float,
) -> tuple[np.ndarray, np.ndarray]:
    """One simulated study: ``codes[i, r, t]`` and the true categories ``truth[i]``."""
    k = len(shares)
    truth = rng.choice(k, size=n_items, p=shares)
    keep = rng.random((n_items, raters, trials)) < agreement
    random_calls = rng.choice(k, size=(n_items, raters, trials), p=shares)
    codes = np.where(keep, truth[:, None, None], random_calls)
    return codes.astype(np.int64), truth.astype(np.int64)


Interval = tuple[float | None, float | None, float | None]  # estimate, low, high
MeasureFn = Callable[[np.ndarray, np.ndarray], Interval]


def _counts(codes2d: np.ndarray, k: int) -> np.ndarray:
    """Items × categories counts from items × slots codes."""
    return np.stack([(codes2d == c).sum(axis=1) for c in range(k)], axis=1)


def _measures(
    study: Study, *, has_reference: bool, defect: int | None, k: int, confidence: float
) -> list[tuple[str, str, MeasureFn]]:
    from .stats.cohen import cohen_kappa
    from .stats.fleiss import fleiss_kappa
    from .stats.proportion import proportion

    method = study.proportion_interval
    out: list[tuple[str, str, MeasureFn]] = []

    def fleiss_all(codes: np.ndarray, truth: np.ndarray) -> Interval:
        e = fleiss_kappa(
            _counts(codes.reshape(codes.shape[0], -1), k), confidence_level=confidence
        ).overall
        return e.estimate, e.ci_low, e.ci_high

    def fleiss_rater(codes: np.ndarray, truth: np.ndarray) -> Interval:
        e = fleiss_kappa(_counts(codes[:, 0, :], k), confidence_level=confidence).overall
        return e.estimate, e.ci_low, e.ci_high

    def cohen_ref(codes: np.ndarray, truth: np.ndarray) -> Interval:
        table = np.zeros((k, k), dtype=np.int64)
        np.add.at(table, (codes[:, 0, 0], truth), 1)
        e = cohen_kappa(table, confidence_level=confidence)
        return e.estimate, e.ci_low, e.ci_high

    def effectiveness(codes: np.ndarray, truth: np.ndarray) -> Interval:
        calls = codes[:, 0, :]
        hits = int((calls == truth[:, None]).sum())
        e = proportion(hits, calls.size, confidence_level=confidence, method=method)
        return e.estimate, e.ci_low, e.ci_high

    def miss_rate(codes: np.ndarray, truth: np.ndarray) -> Interval:
        calls = codes[truth == defect, 0, :]
        misses = int((calls != defect).sum())
        e = proportion(misses, calls.size, confidence_level=confidence, method=method)
        return e.estimate, e.ci_low, e.ci_high

    if len(study.raters) >= 2:
        out.append(
            (
                "reproducibility.fleiss_kappa",
                "Fleiss' kappa among all ratings (reproducibility)",
                fleiss_all,
            )
        )
    if study.trials >= 2:
        out.append(
            (
                "repeatability.fleiss_kappa",
                "Fleiss' kappa of one rater's trials (repeatability)",
                fleiss_rater,
            )
        )
    if has_reference:
        out.append(
            (
                "accuracy.cohen_kappa",
                "Cohen's kappa of one rater against the reference (one trial)",
                cohen_ref,
            )
        )
        out.append(
            (
                "accuracy.effectiveness",
                "Effectiveness of one rater (ratings matching the reference)",
                effectiveness,
            )
        )
        if defect is not None:
            out.append(("accuracy.miss_rate", "Miss rate of one rater", miss_rate))
    return out


def _simulate_measure(
    fn: MeasureFn,
    *,
    n_items: int,
    runs: int,
    rng: np.random.Generator,
    shares: np.ndarray,
    raters: int,
    trials: int,
    agreement: float,
) -> HalfWidthRow:
    import warnings

    halves: list[float] = []
    ests: list[float] = []
    for _ in range(runs):
        codes, truth = simulate_ratings(
            rng, n_items=n_items, shares=shares, raters=raters, trials=trials, agreement=agreement
        )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            est, lo, hi = fn(codes, truth)
        if est is not None and math.isfinite(est):
            ests.append(float(est))
        if lo is not None and hi is not None and math.isfinite(lo) and math.isfinite(hi):
            halves.append((hi - lo) / 2.0)
    if not halves:
        return HalfWidthRow(n_items, None, None, float(np.mean(ests)) if ests else None, 0)
    h = np.asarray(halves)
    se = float(h.std(ddof=1) / math.sqrt(len(h))) if len(h) > 1 else None
    return HalfWidthRow(
        n_items, float(h.mean()), se, float(np.mean(ests)) if ests else None, len(h)
    )


def _fit_needed(rows: Sequence[HalfWidthRow], target: float) -> int | None:
    """Items for ``target`` from the least-squares fit h = c / sqrt(n) (rows with n >= 30 preferred)."""
    usable = [r for r in rows if r.half_width is not None and r.half_width > 0]
    big = [r for r in usable if r.items >= 30]
    use = big if len(big) >= 2 else usable
    if not use:
        return None
    x = np.array([1.0 / math.sqrt(r.items) for r in use])
    y = np.array([r.half_width for r in use], dtype=float)
    c = float((x * y).sum() / (x * x).sum())
    if c <= 0:
        return None
    return max(2, math.ceil((c / target) ** 2))


# --------------------------------------------------------------------------- advice


def _shares(study: Study, items: Sequence[Any] | None) -> tuple[np.ndarray, str]:
    k = len(study.categories)
    if items:
        counts = np.array(
            [sum(1 for it in items if it.reference == c) for c in study.category_codes], dtype=float
        )
        if counts.sum() > 0 and (counts > 0).sum() >= 2:
            return counts / counts.sum(), "item list"
    return np.full(k, 1.0 / k), "equal shares (no item list)"


def item_set_checks(study: Study, items: Sequence[Any]) -> list[ItemSetCheck]:
    """The item set against rules of thumb (each marked with its basis)."""
    n = len(items)
    out = [
        ItemSetCheck(
            "items",
            f"{n} items"
            + ("" if n >= MIN_ITEMS else f"; fewer than {MIN_ITEMS}, intervals will be wide"),
            n >= MIN_ITEMS,
            COMMON,
        )
    ]
    flags = [getattr(it, "borderline", None) for it in items]
    if all(f is not None for f in flags):
        share = sum(1 for f in flags if f) / n
        lo, hi = BORDERLINE_RANGE
        ok = lo <= share <= hi
        finding = f"{100 * share:.0f} % borderline items (aim for {100 * lo:.0f}-{100 * hi:.0f} %)"
        if share < lo:
            finding += "; with too few items near a category limit the study shows little about the hard calls"
        elif share > hi:
            finding += (
                "; with this many borderline items agreement will look worse than at the station"
            )
        out.append(ItemSetCheck("borderline", finding, ok, COMMON))
    else:
        out.append(
            ItemSetCheck(
                "borderline",
                "the item list has no borderline column: mark the items that sit close to a category limit",
                False,
                COMMON,
            )
        )
    if not any(getattr(it, "reference", None) is not None for it in items):
        return out  # no references given: category shares cannot be checked
    for c in study.categories:
        cnt = sum(1 for it in items if it.reference == c.code)
        share = cnt / n
        ok = share >= MIN_CATEGORY_SHARE and cnt >= MIN_CATEGORY_ITEMS
        out.append(
            ItemSetCheck(
                f"category {c.code}",
                f"{cnt} items ({100 * share:.0f} %) with reference {c.code} ({c.label})"
                + (
                    ""
                    if ok
                    else f"; aim for at least {MIN_CATEGORY_ITEMS} items and {100 * MIN_CATEGORY_SHARE:.0f} % per category"
                ),
                ok,
                COMMON,
            )
        )
    if study.defect_category is not None:
        cnt = sum(1 for it in items if it.reference == study.defect_category)
        share = cnt / n
        lo, hi = DEFECT_SHARE_RANGE
        ok = lo <= share <= hi
        out.append(
            ItemSetCheck(
                "defect share",
                f"{100 * share:.0f} % of the items are defect items (aim for {100 * lo:.0f}-{100 * hi:.0f} %)"
                + (
                    ""
                    if ok
                    else "; kappa drops when one category dominates even if the raters are as good "
                    "(Feinstein & Cicchetti 1990, J Clin Epidemiol 43:543-549)"
                ),
                ok,
                COMMON + "; prevalence effect on kappa: Feinstein & Cicchetti (1990)",
            )
        )
    return out


def zero_failure_sizes(study: Study) -> list[ZeroFailure]:
    """Zero-failure sample sizes n = ln(1−C)/ln(R) for the study's miss-rate criteria."""
    from .stats.proportion import zero_failure_sample_size

    out: list[ZeroFailure] = []
    if study.defect_category is None:
        return out
    crit = study.criteria if isinstance(study.criteria, dict) else {}
    rules = crit.get("rules") if isinstance(crit.get("rules"), list) else []
    conf = float(study.confidence)
    for rule in rules:
        if not isinstance(rule, dict):
            continue
        measure = str(rule.get("measure", ""))
        level = rule.get("pass")
        if (
            measure.endswith("miss_rate")
            and isinstance(level, (int, float))
            and 0 < float(level) < 1
        ):
            r = 1.0 - float(level)
            out.append(
                ZeroFailure(
                    r,
                    conf,
                    zero_failure_sample_size(r, conf),
                    f"criterion {measure}: miss rate at most {level} shown at {100 * conf:g} % confidence "
                    "with no miss at all",
                )
            )
    for r, c in ZERO_FAILURE_PAIRS:
        out.append(
            ZeroFailure(
                r,
                c,
                zero_failure_sample_size(r, c),
                f"reference figure: R = {100 * r:g} %, C = {100 * c:g} %",
            )
        )
    return out


def advise(
    study: Study,
    *,
    items: Sequence[Any] | None = None,
    agreement: float = 0.8,
    target: float | None = None,
    item_counts: Sequence[int] = DEFAULT_ITEM_COUNTS,
    runs: int = DEFAULT_RUNS,
    seed: int = 2026,
    progress: Callable[[str], None] | None = None,
) -> Advice:
    """Expected interval half-widths by item count, items needed, item-set and zero-failure checks."""
    if not 0.0 < agreement < 1.0:
        raise ValueError(f"agreement must be strictly between 0 and 1, got {agreement!r}")
    target_hw = float(study.target_half_width if target is None else target)
    if not target_hw > 0:
        raise ValueError(f"target half-width must be positive, got {target!r}")
    if runs < 2:
        raise ValueError("runs must be at least 2")
    counts = sorted({int(n) for n in item_counts if int(n) >= 2})
    shares, shares_source = _shares(study, items)
    k = len(shares)
    defect = (
        study.category_codes.index(study.defect_category)
        if study.defect_category is not None
        else None
    )
    has_reference = (
        any(getattr(it, "reference", None) is not None for it in items or ())
        or study.reference_path is not None
        or study.defect_category is not None
    )
    conf = float(study.confidence)
    rng = np.random.default_rng(seed)
    raters, trials = len(study.raters), study.trials
    sim = dict(shares=shares, raters=raters, trials=trials, agreement=agreement)

    measures: list[MeasureAdvice] = []
    for name, title, fn in _measures(
        study, has_reference=has_reference, defect=defect, k=k, confidence=conf
    ):
        rows = []
        for n in counts:
            if progress:
                progress(f"{name}: {n} items")
            rows.append(_simulate_measure(fn, n_items=n, runs=runs, rng=rng, **sim))
        needed = _fit_needed(rows, target_hw)
        check_h = check_se = None
        for attempt in range(4):  # check the fit by simulation; rescale while it falls short
            if needed is None or needed > 20000:
                break
            chk = _simulate_measure(fn, n_items=needed, runs=runs, rng=rng, **sim)
            check_h, check_se = chk.half_width, chk.sim_error
            if check_h is None or check_h <= target_hw + 2.0 * (check_se or 0.0) or attempt == 3:
                break
            needed = math.ceil(needed * (check_h / target_hw) ** 2)
        measures.append(MeasureAdvice(name, title, tuple(rows), needed, check_h, check_se))

    model = (
        f"A rating is the true category with probability {agreement:g}, else a category drawn at random "
        f"from the category shares; a rater then agrees with the reference at Cohen's kappa {agreement:g}, "
        f"and two ratings of one item agree at kappa {agreement * agreement:.3g}. Every rater is alike; "
        "mistakes are unordered."
    )
    return Advice(
        study_id=study.id,
        scale=study.scale,
        raters=raters,
        trials=trials,
        categories=study.category_codes,
        shares=tuple(float(s) for s in shares),
        shares_source=shares_source,
        agreement=agreement,
        agreement_between_ratings=agreement * agreement,
        target_half_width=target_hw,
        confidence=conf,
        runs=runs,
        seed=seed,
        measures=tuple(measures),
        zero_failure=tuple(zero_failure_sizes(study)),
        item_checks=tuple(item_set_checks(study, items) if items else ()),
        model=model,
    )


def format_advice(adv: Advice) -> str:
    """The advice as plain text for the terminal and plan.txt."""
    pct = f"{100 * adv.confidence:g} %"
    lines = [
        f"Sample-size advice for {adv.study_id} ({adv.scale} scale, {adv.raters} rater(s), {adv.trials} trial(s))",
        f"Assumed agreement: {adv.agreement:g} (kappa of a rater against the reference); "
        f"between two ratings about {adv.agreement_between_ratings:.2f}",
        "Category shares ("
        + adv.shares_source
        + "): "
        + ", ".join(
            f"{c} {100 * s:.0f} %" for c, s in zip(adv.categories, adv.shares, strict=True)
        ),
        f"Target half-width of the {pct} interval: {adv.target_half_width:g}; "
        f"{adv.runs} simulated studies per item count (seed {adv.seed})",
        "",
    ]
    for m in adv.measures:
        lines.append(m.title + f"  [{m.measure}]")
        lines.append("  Items   expected half-width   (simulation error)   mean estimate")
        for r in m.rows:
            hw = "—" if r.half_width is None else f"{r.half_width:.3f}"
            se = "—" if r.sim_error is None else f"±{r.sim_error:.3f}"
            est = "—" if r.estimate is None else f"{r.estimate:.3f}"
            lines.append(f"  {r.items:5d}   {hw:>19}   {se:>18}   {est:>13}")
        if m.items_needed is None:
            lines.append("  Items needed for the target: could not be found")
        else:
            chk = (
                ""
                if m.check_half_width is None
                else f" (simulated there: {m.check_half_width:.3f} ±{(m.check_sim_error or 0):.3f})"
            )
            lines.append(
                f"  Items needed for a half-width of {adv.target_half_width:g}: {m.items_needed}{chk}"
            )
        lines.append("")
    if adv.item_checks:
        lines.append("The item set:")
        for c in adv.item_checks:
            lines.append(f"  [{'ok' if c.ok else 'look'}] {c.finding} ({c.basis})")
        lines.append("")
    if adv.zero_failure:
        lines.append(
            "Zero-failure sizes: defect-reference ratings with no miss needed, n = ln(1−C)/ln(R):"
        )
        for z in adv.zero_failure:
            lines.append(
                f"  R = {100 * z.reliability:g} %, C = {100 * z.confidence:g} %: {z.ratings}   ({z.reason})"
            )
        lines.append(
            "  Repeated trials of one item are not independent; count items, not ratings, to be safe."
        )
        lines.append("")
    lines.append("Model: " + adv.model)
    return "\n".join(lines) + "\n"
