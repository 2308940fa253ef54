"""Time each measured-reference analysis on a 20-item x 20-trial x 3-rater study (issue 16).

    .venv/bin/python benchmarks/measured.py

Invented data (seed 16020): 20 items with measured values across a lower and an upper limit,
three raters whose acceptance falls off as a normal ogive around each limit.  Each analysis is
timed from the loaded counts (best of 7 runs) and must stay within 50 ms; the script prints one
line per analysis and exits 1 when one does not.
"""

from __future__ import annotations

import sys
import time
from statistics import NormalDist

import numpy as np

from reportgen.stats.binomial_fit import fit_binomial
from reportgen.stats.gauge_curve import analytic_method
from reportgen.stats.pod import detection
from reportgen.stats.zone import disagreement_zone

ITEMS, TRIALS, RATERS = 20, 20, 3
TARGET_MS = 50.0


def make_counts(seed: int = 16020) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    values = np.sort(
        np.concatenate([rng.uniform(9.970, 9.990, 10), rng.uniform(10.010, 10.030, 10)])
    )
    phi = NormalDist().cdf
    accepted = np.zeros((ITEMS, RATERS), dtype=int)
    for j, shift in enumerate((0.0, 0.002, -0.001)):
        p = np.array(
            [phi((v - 9.98 + shift) / 0.003) * phi((10.02 + shift - v) / 0.003) for v in values]
        )
        accepted[:, j] = rng.binomial(TRIALS, p)
    return values, accepted, np.full((ITEMS, RATERS), TRIALS)


def best_ms(fn, repeat: int = 7) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return 1000 * min(times)


def main() -> int:
    v, acc, n = make_counts()
    low = v < 10.0

    def gauge_curve() -> None:
        for j in range(RATERS):
            for side, sel, limit in (("lower", low, 9.98), ("upper", ~low, 10.02)):
                analytic_method(v[sel], acc[sel, j], n[sel, j], limit, side)
                f = fit_binomial(v[sel], acc[sel, j], n[sel, j], "probit")
                f.band(np.linspace(v[sel].min(), v[sel].max(), 61), 1.96)

    def pod() -> None:
        hits = n - acc
        sel = ~low
        detection(v[sel], hits[sel].sum(axis=1), n[sel].sum(axis=1))
        for j in range(RATERS):
            detection(v[sel], hits[sel, j], n[sel, j])

    def zone() -> None:
        for side, sel in (("lower", low), ("upper", ~low)):
            disagreement_zone(v[sel], acc[sel].sum(axis=1), n[sel].sum(axis=1), side)

    failed = False
    print(
        f"{ITEMS} items x {TRIALS} trials x {RATERS} raters; best of 7; target <= {TARGET_MS:g} ms"
    )  # noqa: T201
    for name, fn in (
        ("gauge performance curve", gauge_curve),
        ("probability of detection", pod),
        ("disagreement zone", zone),
    ):
        ms = best_ms(fn)
        ok = ms <= TARGET_MS
        failed |= not ok
        print(f"  {name:<26} {ms:8.2f} ms  {'ok' if ok else 'TOO SLOW'}")  # noqa: T201
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
