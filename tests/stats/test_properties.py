"""Property tests (hypothesis, derandomised) for the count-table coefficients and bootstrap.

Invariance under reordering items and rating slots, relabelling nominal categories; perfect
agreement gives 1; the bootstrap is reproducible under a seed.  These are properties of the
definitions (Fleiss 1971; Krippendorff 2011; Gwet 2008; Brennan & Prediger 1981).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from reportgen.stats.bootstrap import bootstrap
from reportgen.stats.fleiss import fleiss_kappa, fleiss_kappa_features, fleiss_kappa_from_sums
from reportgen.stats.gwet import brennan_prediger, gwet_ac
from reportgen.stats.krippendorff import krippendorff_alpha
from reportgen.stats.tables import count_table

SETTINGS = settings(derandomize=True, max_examples=60, deadline=None)


@st.composite
def studies(draw: st.DrawFn) -> tuple[np.ndarray, int]:
    """Coded ratings (items × slots) with missing values, and the number of categories."""
    k = draw(st.integers(2, 5))
    n = draw(st.integers(2, 25))
    s = draw(st.integers(2, 6))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, k, n)
    agree = draw(st.floats(0.0, 1.0))
    codes = np.where(rng.random((n, s)) < agree, truth[:, None], rng.integers(0, k, (n, s)))
    codes[rng.random((n, s)) < draw(st.floats(0.0, 0.4))] = -1
    return codes.astype(np.int8), k


def _all(counts: np.ndarray) -> dict[str, float | None]:
    f = fleiss_kappa(counts)
    out: dict[str, float | None] = {"fleiss": f.overall.estimate}
    out.update({f"fleiss_{j}": e.estimate for j, e in enumerate(f.by_category)})
    out["ac1"] = gwet_ac(counts).estimate
    out["ac2"] = gwet_ac(counts, weights="quadratic").estimate
    out["bp"] = brennan_prediger(counts).estimate
    for level in ("nominal", "ordinal", "interval"):
        out[level] = krippendorff_alpha(counts, level=level).estimate  # type: ignore[arg-type]
    return out


def _same(a: dict[str, float | None], b: dict[str, float | None]) -> None:
    assert a.keys() == b.keys()
    for key in a:
        if a[key] is None or b[key] is None:
            assert a[key] is None and b[key] is None, key
        else:
            assert a[key] == pytest.approx(b[key], abs=1e-12), key


@SETTINGS
@given(studies(), st.integers(0, 2**32 - 1))
def test_invariant_to_item_order_and_rating_slots(study: tuple[np.ndarray, int], seed: int) -> None:
    codes, k = study
    rng = np.random.default_rng(seed)
    base = _all(count_table(codes, k))
    items_reordered = codes[rng.permutation(codes.shape[0])]
    _same(base, _all(count_table(items_reordered, k)))
    slots_reordered = rng.permuted(codes, axis=1)  # each item's ratings shuffled independently
    _same(base, _all(count_table(slots_reordered, k)))


@SETTINGS
@given(studies(), st.integers(0, 2**32 - 1))
def test_nominal_coefficients_invariant_to_relabelling(
    study: tuple[np.ndarray, int], seed: int
) -> None:
    codes, k = study
    perm = np.random.default_rng(seed).permutation(k)
    relabelled = np.where(codes < 0, -1, perm[np.maximum(codes, 0)]).astype(np.int8)
    a, b = _all(count_table(codes, k)), _all(count_table(relabelled, k))
    for key in ("fleiss", "ac1", "bp", "nominal"):
        if a[key] is None:
            assert b[key] is None
        else:
            assert b[key] == pytest.approx(a[key], abs=1e-12)
    for j in range(k):  # per-category kappas move with their category
        x, y = a[f"fleiss_{j}"], b[f"fleiss_{perm[j]}"]
        assert (x is None and y is None) or y == pytest.approx(x, abs=1e-12)


@SETTINGS
@given(st.integers(2, 5), st.lists(st.integers(0, 4), min_size=2, max_size=30), st.integers(2, 6))
def test_perfect_agreement_gives_one(k: int, labels: list[int], m: int) -> None:
    truth = np.array(labels) % k
    if np.unique(truth).size < 2:
        truth[0] = (truth[1] + 1) % k  # at least two categories in use
    codes = np.repeat(truth[:, None], m, axis=1)
    for key, value in _all(count_table(codes, k)).items():
        if key.startswith("fleiss_") and not np.any(truth == int(key.split("_")[1])):
            assert value is None  # a category never used has no kappa
        else:
            assert value == pytest.approx(1.0, abs=1e-12), key


@SETTINGS
@given(studies())
def test_coefficients_never_exceed_one(study: tuple[np.ndarray, int]) -> None:
    codes, k = study
    for key, value in _all(count_table(codes, k)).items():
        assert value is None or value <= 1.0 + 1e-12, key


@SETTINGS
@given(studies(), st.integers(0, 2**31))
def test_bootstrap_reproducible_under_seed(study: tuple[np.ndarray, int], seed: int) -> None:
    codes, k = study
    f = fleiss_kappa_features(count_table(codes, k))
    a = bootstrap(f, fleiss_kappa_from_sums, resamples=200, seed=seed)
    b = bootstrap(f, fleiss_kappa_from_sums, resamples=200, seed=seed)
    assert a == b
