"""Speed of the statistics engine against the reference libraries, on the same seeded data.

Run on demand (not a test):

    .venv/bin/python benchmarks/run.py            # all sizes from issue 3
    .venv/bin/python benchmarks/run.py --quick    # the typical study and a 10,000-item campaign

Prints one table: for every size and measure, our time, our time over the floor (one
``np.bincount`` pass building the items × categories table), each reference library's time on
the same data, and the ratio reference / ours.  Reference libraries (statsmodels, krippendorff,
irrCAC, scikit-learn) are used only here and in the tests.  Times are the best of several runs
(wall clock, ``time.perf_counter``); the machine and its load matter, so compare ratios.
"""

from __future__ import annotations

import argparse
import gc
import math
import platform
import sys
import time
import tracemalloc
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from reportgen.stats.bootstrap import bootstrap, bootstrap_many  # noqa: E402
from reportgen.stats.fleiss import (  # noqa: E402
    fleiss_kappa,
    fleiss_kappa_by_category_from_sums,
    fleiss_kappa_features,
    fleiss_kappa_from_sums,
)
from reportgen.stats.gwet import (  # noqa: E402
    brennan_prediger,
    brennan_prediger_features,
    brennan_prediger_from_sums,
    gwet_ac,
    gwet_ac_features,
    gwet_ac_from_sums,
)
from reportgen.stats.krippendorff import (  # noqa: E402
    krippendorff_alpha,
    krippendorff_alpha_features,
    krippendorff_alpha_from_sums,
)
from reportgen.stats.tables import (  # noqa: E402
    CountPatterns,
    count_patterns,
    count_table,
)

try:  # helper A's modules, if present when the benchmark runs
    from reportgen.stats.pairwise import conger_kappa, pairwise_cohen
except ImportError:  # pragma: no cover - depends on the tree
    pairwise_cohen = conger_kappa = None  # type: ignore[assignment]
try:
    from reportgen.stats.kendall import kendall_w
except ImportError:  # pragma: no cover
    kendall_w = None  # type: ignore[assignment]


@dataclass(frozen=True)
class Size:
    name: str
    items: int
    raters: int
    trials: int
    categories: int
    missing: float


SIZES = [
    Size("typical 50×3×3", 50, 3, 3, 3, 0.0),
    Size("campaign 100k×20", 100_000, 20, 1, 5, 0.05),
    Size("large 1M×5", 1_000_000, 5, 1, 5, 0.05),
]
QUICK = [SIZES[0], Size("campaign 10k×20", 10_000, 20, 1, 5, 0.05)]


def make_codes(size: Size, seed: int = 20261201) -> np.ndarray:
    """Invented labelling data: each item has a true category (unequal prevalence); a rating is
    right with probability 0.8, otherwise any category; ``missing`` of the ratings are absent."""
    rng = np.random.default_rng(seed)
    k = size.categories
    prevalence = np.linspace(2.0, 1.0, k)
    prevalence /= prevalence.sum()
    truth = rng.choice(k, size=size.items, p=prevalence)
    shape = (size.items, size.raters, size.trials)
    right = rng.random(shape) < 0.8
    codes = np.where(right, truth[:, None, None], rng.integers(0, k, shape)).astype(np.int8)
    if size.missing:
        codes[rng.random(shape) < size.missing] = -1
    return codes


def best_time(fn: Callable[[], object], *, budget: float = 0.3, max_runs: int = 200) -> float:
    """Best wall time of repeated runs within a time budget (at least one run)."""
    best = math.inf
    spent = 0.0
    runs = 0
    gc.collect()
    gc.disable()
    try:
        while runs < max_runs and (runs < 2 or spent < budget):
            t0 = time.perf_counter()
            fn()
            dt = time.perf_counter() - t0
            best = min(best, dt)
            spent += dt
            runs += 1
            if dt > 2.0:
                break
    finally:
        gc.enable()
    return best


def fmt(t: float | None) -> str:
    if t is None or not math.isfinite(t):
        return "—"
    if t < 1e-3:
        return f"{t * 1e6:.0f} µs"
    if t < 1.0:
        return f"{t * 1e3:.1f} ms"
    return f"{t:.2f} s"


def ratio(ref: float, ours: float) -> str:
    r = ref / ours
    return f"{r:.1f}×" if r < 10 else f"{r:.0f}×"


Row = tuple[str, str, float | None, float | None, str, float | None, str]


def floor_time(codes2d: np.ndarray, k: int) -> float:
    n = codes2d.shape[0]
    offsets = np.arange(1, n * (k + 1), k + 1, dtype=np.intp)[:, None]
    return best_time(lambda: np.bincount((codes2d + offsets).ravel(), minlength=n * (k + 1)))


def run_size(size: Size, *, resamples: int, with_refs: bool) -> tuple[list[Row], float | None]:
    import pandas as pd

    codes = make_codes(size)
    k = size.categories
    n = size.items
    pooled = codes.reshape(n, -1)  # every rating of an item, for the count-table coefficients
    first_trial = codes[:, :, 0]  # rater-identified ratings, for pairwise / Conger / Kendall
    floor = floor_time(pooled, k)
    rows: list[Row] = []

    def table() -> CountPatterns:
        return count_patterns(pooled, k)

    ours: dict[str, Callable[[], object]] = {
        "Fleiss' kappa (+ per category)": lambda: fleiss_kappa(table()),
        "Krippendorff alpha nominal": lambda: krippendorff_alpha(table(), level="nominal"),
        "Krippendorff alpha ordinal": lambda: krippendorff_alpha(table(), level="ordinal"),
        "Krippendorff alpha interval": lambda: krippendorff_alpha(table(), level="interval"),
        "Gwet AC1": lambda: gwet_ac(table()),
        "Gwet AC2 (quadratic)": lambda: gwet_ac(table(), weights="quadratic"),
        "Brennan-Prediger": lambda: brennan_prediger(table()),
    }

    def all_count_table() -> None:
        pat = table()
        fleiss_kappa(pat)
        for level in ("nominal", "ordinal", "interval"):
            krippendorff_alpha(pat, level=level)  # type: ignore[arg-type]
        gwet_ac(pat)
        gwet_ac(pat, weights="quadratic")
        brennan_prediger(pat)

    df = pd.DataFrame(np.where(pooled < 0, np.nan, pooled.astype(float)))
    cats = [float(c) for c in range(k)]
    rel = np.where(pooled < 0, np.nan, pooled.astype(float)).T
    refs: dict[str, list[tuple[str, Callable[[], object]]]] = {}
    if with_refs:
        import krippendorff
        from irrCAC.raw import CAC
        from statsmodels.stats.inter_rater import aggregate_raters
        from statsmodels.stats.inter_rater import fleiss_kappa as sm_fleiss

        big = n >= 100_000
        refs["Fleiss' kappa (+ per category)"] = [
            ("irrCAC fleiss()", lambda: CAC(df, categories=cats).fleiss()),
        ]
        if not size.missing:  # statsmodels needs the same number of ratings on every item
            refs["Fleiss' kappa (+ per category)"].insert(
                0, ("statsmodels", lambda: sm_fleiss(aggregate_raters(pooled)[0]))
            )
        for level in ("nominal", "ordinal", "interval"):
            refs[f"Krippendorff alpha {level}"] = [
                (
                    "krippendorff.alpha",
                    lambda level=level: krippendorff.alpha(
                        rel, value_domain=list(range(k)), level_of_measurement=level
                    ),
                )
            ]
        refs["Krippendorff alpha nominal"].append(
            ("irrCAC krippendorff()", lambda: CAC(df, categories=cats).krippendorff())
        )
        refs["Gwet AC1"] = [("irrCAC gwet()", lambda: CAC(df, categories=cats).gwet())]
        refs["Gwet AC2 (quadratic)"] = [
            ("irrCAC gwet()", lambda: CAC(df, weights="quadratic", categories=cats).gwet())
        ]
        refs["Brennan-Prediger"] = [("irrCAC bp()", lambda: CAC(df, categories=cats).bp())]
        del big

    for name, fn in ours.items():
        t = best_time(fn)
        ref_list = refs.get(name, [])
        if not ref_list:
            rows.append((size.name, name, t, t / floor, "", None, ""))
        for ref_name, ref_fn in ref_list:
            rt = best_time(ref_fn, budget=0.3, max_runs=3 if n >= 100_000 else 50)
            rows.append((size.name, name, t, t / floor, ref_name, rt, ratio(rt, t)))
    t_all = best_time(all_count_table)
    rows.append(
        (size.name, "all count-table coefficients, one pass", t_all, t_all / floor, "", None, "")
    )

    # rater-identified measures (helper A), when present
    if pairwise_cohen is not None:
        t = best_time(lambda: pairwise_cohen(first_trial, k))
        ref_t = None
        if with_refs:
            from sklearn.metrics import cohen_kappa_score

            def sk_pairs() -> None:
                r = first_trial.shape[1]
                for g in range(r):
                    for h in range(g + 1, r):
                        both = (first_trial[:, g] >= 0) & (first_trial[:, h] >= 0)
                        cohen_kappa_score(
                            first_trial[both, g], first_trial[both, h], labels=list(range(k))
                        )

            ref_t = best_time(sk_pairs, max_runs=3)
        rows.append(
            (
                size.name,
                "pairwise Cohen's kappa (all pairs)",
                t,
                t / floor,
                "sklearn cohen_kappa_score loop" if ref_t else "",
                ref_t,
                ratio(ref_t, t) if ref_t else "",
            )
        )
    if conger_kappa is not None:
        t = best_time(lambda: conger_kappa(first_trial, k))
        ref_t = None
        if with_refs:
            from irrCAC.raw import CAC

            df1 = pd.DataFrame(np.where(first_trial < 0, np.nan, first_trial.astype(float)))
            ref_t = best_time(lambda: CAC(df1, categories=cats).conger(), max_runs=3)
        rows.append(
            (
                size.name,
                "Conger's kappa",
                t,
                t / floor,
                "irrCAC conger()" if ref_t else "",
                ref_t,
                ratio(ref_t, t) if ref_t else "",
            )
        )
    if kendall_w is not None:
        t = best_time(lambda: kendall_w(first_trial))
        rows.append((size.name, "Kendall's W", t, t / floor, "", None, ""))

    # bootstrap
    def fleiss_boot() -> object:
        pat = table()
        return bootstrap(
            fleiss_kappa_features(pat.rows),
            fleiss_kappa_from_sums,
            resamples=resamples,
            seed=1,
            multiplicity=pat.multiplicity,
        )

    def every_boot() -> object:
        pat = table()
        rows_ = pat.rows
        ff = fleiss_kappa_features(rows_)
        kf = krippendorff_alpha_features(rows_)
        feats = {
            "fleiss": ff,
            "ac1": gwet_ac_features(rows_),
            "ac2": gwet_ac_features(rows_, weights="quadratic"),
            "bp": brennan_prediger_features(rows_),
            "alpha_nominal": kf,
            "alpha_ordinal": kf,
            "alpha_interval": kf,
        }
        fns: dict[str, Callable[[np.ndarray], np.ndarray]] = {
            "fleiss": fleiss_kappa_from_sums,
            "ac1": gwet_ac_from_sums,
            "ac2": lambda s: gwet_ac_from_sums(s, weights="quadratic"),
            "bp": lambda s: brennan_prediger_from_sums(s, k),
            "alpha_nominal": lambda s: krippendorff_alpha_from_sums(s, level="nominal"),
            "alpha_ordinal": lambda s: krippendorff_alpha_from_sums(s, level="ordinal"),
            "alpha_interval": lambda s: krippendorff_alpha_from_sums(s, level="interval"),
        }
        for j in range(k):
            feats[f"fleiss_{j}"] = ff
            fns[f"fleiss_{j}"] = lambda s, j=j: fleiss_kappa_by_category_from_sums(s)[..., j]
        return bootstrap_many(
            feats, fns, resamples=resamples, seed=1, multiplicity=pat.multiplicity
        )

    t = best_time(fleiss_boot, budget=1.0, max_runs=5)
    ref_t, ref_label = None, ""
    if with_refs:
        rng = np.random.default_rng(0)
        if not size.missing:
            from statsmodels.stats.inter_rater import fleiss_kappa as sm_fleiss

            counts = count_table(pooled, k)
            loops = resamples if n <= 1000 else 10

            def ref_loop() -> None:
                for _ in range(loops):
                    sm_fleiss(counts[rng.integers(0, n, n)])

            ref_label = "statsmodels resample loop"
        else:
            from irrCAC.raw import CAC

            loops = 2

            def ref_loop() -> None:
                for _ in range(loops):
                    CAC(df.iloc[rng.integers(0, n, n)], categories=cats).fleiss()

            ref_label = "irrCAC fleiss() resample loop"
        ref_t = best_time(ref_loop, max_runs=2) * resamples / loops
        if loops != resamples:
            ref_label += f" (extrapolated from {loops})"
    rows.append(
        (
            size.name,
            f"Fleiss bootstrap ({resamples}, BCa)",
            t,
            t / floor,
            ref_label,
            ref_t,
            ratio(ref_t, t) if ref_t else "",
        )
    )
    t = best_time(every_boot, budget=1.0, max_runs=3)
    rows.append(
        (
            size.name,
            f"every count-table coefficient bootstrapped ({resamples})",
            t,
            t / floor,
            "",
            None,
            "",
        )
    )

    peak = None
    if n >= 100_000:
        gc.collect()
        tracemalloc.start()
        all_count_table()
        every_boot()
        _, peak_bytes = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        peak = peak_bytes / 2**20
    rows.insert(
        0,
        (
            size.name,
            "floor: one np.bincount pass (items × categories)",
            floor,
            1.0,
            f"patterns: {count_patterns(pooled, k).n_patterns}",
            None,
            "",
        ),
    )
    return rows, peak


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes only")
    parser.add_argument("--no-refs", action="store_true", help="time our engine only")
    parser.add_argument("--resamples", type=int, default=2000)
    args = parser.parse_args(argv)
    sizes = QUICK if args.quick else SIZES
    print(
        f"python {platform.python_version()}, numpy {np.__version__}, {platform.machine()}, "
        f"{platform.processor() or platform.system()}"
    )
    header = ("size", "measure", "ours", "ours/floor", "reference", "ref time", "ref/ours")
    table: list[tuple[str, ...]] = [header]
    peaks = []
    for size in sizes:
        rows, peak = run_size(size, resamples=args.resamples, with_refs=not args.no_refs)
        for r in rows:
            table.append(
                (
                    r[0],
                    r[1],
                    fmt(r[2]),
                    f"{r[3]:.1f}" if r[3] else "",
                    r[4],
                    fmt(r[5]) if r[5] else "",
                    r[6],
                )
            )
        if peak is not None:
            peaks.append(
                f"{size.name}: peak traced memory of all coefficients + every bootstrap"
                f" = {peak:.0f} MB (ratings array not included)"
            )
    widths = [max(len(row[i]) for row in table) for i in range(len(header))]
    for i, row in enumerate(table):
        print(" | ".join(cell.ljust(w) for cell, w in zip(row, widths, strict=True)))
        if i == 0:
            print("-+-".join("-" * w for w in widths))
    for p in peaks:
        print(p)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
