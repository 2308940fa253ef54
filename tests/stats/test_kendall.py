"""Kendall's W (tie-corrected, chi-square test) and Kendall's tau-b (null test, delta-method ASE).

Published values are named beside each check; scipy appears only here, as an independent
cross-check.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from reportgen.stats.kendall import kendall_tau_b, kendall_w

# --------------------------------------------------------------------------- Kendall's W


def test_siegel_1956_three_raters_six_items_from_memory() -> None:
    # Siegel (1956) Nonparametric Statistics for the Behavioral Sciences, Kendall's W example:
    # three raters rank six applicants; R_j = 8, 14, 11, 11, 11, 8; s = 25.5; W = 0.16
    # (from memory).  Exact value 12 * 25.5 / (9 * 210) = 306 / 1890.
    ranks = (
        np.array(
            [
                [1, 6, 3, 2, 5, 4],
                [1, 5, 6, 4, 2, 3],
                [6, 3, 2, 5, 4, 1],
            ]
        ).T
        - 1
    )
    e = kendall_w(ranks)
    assert round(e.estimate, 2) == 0.16
    assert e.estimate == pytest.approx(306 / 1890, abs=1e-15)
    assert e.extra["chi_square"] == pytest.approx(3 * 5 * 306 / 1890, abs=1e-12)
    assert e.extra["df"] == 5
    assert e.extra["tie_correction"] == 0.0


def test_tied_example_by_hand() -> None:
    # Hand computation with the tie-corrected formula of Kendall (1948) as given by Siegel &
    # Castellan (1988) (from memory): W = 12 S / (m^2 (n^3 - n) - m sum_j T_j), T_j = sum (t^3 - t).
    # Raters' mid-ranks: (1.5, 1.5, 3, 4), (1, 2.5, 2.5, 4), (1, 2, 3.5, 3.5);
    # R = 3.5, 6, 9, 11.5 around 7.5 -> S = 36.5; sum T = 3 * 6 = 18;
    # W = 438 / (9 * 60 - 3 * 18) = 438 / 486 = 73 / 81; chi-square = 3 * 3 * W = 73 / 9.
    codes = np.array([[1, 1, 1], [1, 2, 2], [2, 2, 3], [3, 3, 3]]) - 1
    e = kendall_w(codes)
    assert e.estimate == pytest.approx(73 / 81, abs=1e-15)
    assert e.extra["tie_correction"] == 18.0
    assert e.extra["chi_square"] == pytest.approx(73 / 9, abs=1e-12)
    from scipy.stats import chi2

    assert e.p_value == pytest.approx(chi2.sf(73 / 9, 3), rel=1e-12)
    assert e.agreeing == 2
    assert any("fewer than 8 items" in w for w in e.warnings)


def test_cross_check_friedman_with_ties() -> None:
    # Kendall's chi-square m(n - 1)W equals Friedman's tie-corrected statistic (items as
    # treatments, raters as blocks); scipy.stats.friedmanchisquare (test-only).
    from scipy.stats import friedmanchisquare

    rng = np.random.default_rng(43)
    for _ in range(40):
        n = int(rng.integers(3, 60))
        m = int(rng.integers(2, 8))
        truth = rng.integers(0, 5, n)
        codes = np.clip(truth[:, None] + rng.integers(-1, 2, (n, m)), 0, 4)
        if any(len(set(codes[:, j])) < 2 for j in range(m)):
            continue
        e = kendall_w(codes)
        ref = friedmanchisquare(*codes)
        assert e.extra["chi_square"] == pytest.approx(ref.statistic, rel=1e-12)
        assert e.p_value == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)


def test_relation_to_mean_spearman_without_ties() -> None:
    # Kendall (1948): mean pairwise Spearman rho = (mW - 1)/(m - 1) for untied rankings.
    from scipy.stats import spearmanr

    rng = np.random.default_rng(47)
    for _ in range(10):
        n, m = 12, 4
        codes = np.column_stack([rng.permutation(n) for _ in range(m)])
        e = kendall_w(codes)
        rhos = [
            spearmanr(codes[:, g], codes[:, h]).statistic for g in range(m) for h in range(g + 1, m)
        ]
        assert e.extra["mean_spearman"] == pytest.approx(np.mean(rhos), abs=1e-12)


def test_missing_items_are_dropped_with_a_warning() -> None:
    codes = np.array([[0, 0, 1], [1, 1, 1], [2, -1, 2], [2, 2, 2], [0, 1, 0]])
    e = kendall_w(codes)
    full = kendall_w(codes[[0, 1, 3, 4]])
    assert e.estimate == full.estimate
    assert e.items == 4
    assert "leaves out 1 item" in e.warnings[0]


def test_degenerate_w() -> None:
    e = kendall_w(np.zeros((6, 3), dtype=int))
    assert e.estimate is None and "same category" in e.warnings[-1]
    assert kendall_w(np.array([[0], [1], [2]])).estimate is None
    assert kendall_w(np.array([[0, 1, 1]])).estimate is None
    one_flat = kendall_w(np.array([[0, 0], [1, 0], [2, 0], [1, 0]]))
    assert one_flat.estimate is not None
    assert any("add no ranking" in w for w in one_flat.warnings)
    with pytest.raises(ValueError):
        kendall_w(np.array([0, 1, 2]))
    with pytest.raises(TypeError):
        kendall_w(np.array([[0.5, 1.0], [1.0, 0.0]]))


@settings(derandomize=True, max_examples=60, deadline=None)
@given(
    st.tuples(st.integers(2, 6), st.integers(2, 20)).flatmap(
        lambda mn: st.lists(
            st.lists(st.integers(0, 4), min_size=mn[0], max_size=mn[0]),
            min_size=mn[1],
            max_size=mn[1],
        )
    ),
    st.randoms(use_true_random=False),
)
def test_property_w_invariances(rows: list, rnd) -> None:
    codes = np.array(rows)
    items = list(range(codes.shape[0]))
    raters = list(range(codes.shape[1]))
    rnd.shuffle(items)
    rnd.shuffle(raters)
    e1 = kendall_w(codes).estimate
    e2 = kendall_w(codes[items][:, raters]).estimate
    assert (e1 is None) == (e2 is None)
    if e1 is not None:
        assert e1 == pytest.approx(e2, abs=1e-12)
        assert -1e-12 <= e1 <= 1.0 + 1e-12


@settings(derandomize=True, max_examples=40, deadline=None)
@given(st.lists(st.integers(0, 4), min_size=2, max_size=30), st.integers(2, 6))
def test_property_w_perfect_agreement_is_one(values: list, m: int) -> None:
    codes = np.repeat(np.array(values)[:, None], m, axis=1)
    e = kendall_w(codes)
    if len(set(values)) >= 2:
        assert e.estimate == pytest.approx(1.0, abs=1e-12)
    else:
        assert e.estimate is None


# --------------------------------------------------------------------------- Kendall's tau-b


def test_tau_b_cross_check_scipy() -> None:
    # scipy.stats.kendalltau: tau-b and its asymptotic p-value, which uses the same null
    # variance of S with ties (Kendall 1948) (test-only).  scipy needs n >= 3 with ties.
    from scipy.stats import kendalltau

    rng = np.random.default_rng(53)
    for _ in range(200):
        n = int(rng.integers(3, 80))
        x = rng.integers(0, 5, n)
        y = (
            np.clip(x + rng.integers(-2, 3, n), 0, 4)
            if rng.random() < 0.7
            else rng.integers(0, 3, n)
        )
        e = kendall_tau_b(x, y)
        ref = kendalltau(x, y, method="asymptotic")
        if e.estimate is None:
            assert np.isnan(ref.statistic)
            continue
        assert e.estimate == pytest.approx(ref.statistic, abs=1e-12)
        assert e.p_value == pytest.approx(ref.pvalue, abs=1e-12)


def test_tau_b_ase_agrees_with_the_jackknife() -> None:
    # The delta-method ASE (Brown & Benedetti 1977; Agresti 2010, formula from memory) is an
    # asymptotic standard deviation; the leave-one-out jackknife converges to it.  Independent
    # check on n = 2000 observations: agreement within 1 %.
    rng = np.random.default_rng(59)
    n = 2000
    x = rng.integers(0, 5, n)
    y = np.clip(x + rng.integers(-2, 3, n), 0, 4)
    e = kendall_tau_b(x, y)
    cells, counts = np.unique(x * 5 + y, return_counts=True)
    loo = []
    for cell in cells:
        drop = np.flatnonzero(x * 5 + y == cell)[0]
        keep = np.ones(n, dtype=bool)
        keep[drop] = False
        loo.append(kendall_tau_b(x[keep], y[keep]).estimate)
    loo = np.array(loo)
    mean = (counts * loo).sum() / n
    jack = np.sqrt((n - 1) / n * (counts * (loo - mean) ** 2).sum())
    assert e.se == pytest.approx(jack, rel=0.01)
    assert e.ci_low == pytest.approx(e.estimate - 1.959963984540054 * e.se, abs=1e-12)


def test_tau_b_missing_and_degenerate() -> None:
    x = np.array([0, 1, 2, -1, 2, 1])
    y = np.array([0, 1, 2, 2, -1, 0])
    e = kendall_tau_b(x, y)
    ref = kendall_tau_b([0, 1, 2, 1], [0, 1, 2, 0])
    assert e.estimate == ref.estimate and e.items == 4 and e.agreeing == 3
    flat = kendall_tau_b([1, 1, 1, 1], [0, 1, 2, 0])
    assert flat.estimate is None and "same category" in flat.warnings[0]
    assert kendall_tau_b([1], [1]).estimate is None
    perfect = kendall_tau_b([0, 1, 2, 3, 0], [0, 1, 2, 3, 0])
    assert perfect.estimate == pytest.approx(1.0, abs=1e-15)
    assert perfect.ci_low is None and any("standard error is zero" in w for w in perfect.warnings)
    with pytest.raises(ValueError):
        kendall_tau_b([0, 1], [0, 1, 2])
    with pytest.raises(ValueError):
        kendall_tau_b([0, -2], [0, 1])


@settings(derandomize=True, max_examples=60, deadline=None)
@given(
    st.lists(st.tuples(st.integers(-1, 4), st.integers(-1, 4)), min_size=3, max_size=40),
    st.randoms(use_true_random=False),
)
def test_property_tau_b_order_and_symmetry(pairs: list, rnd) -> None:
    x, y = np.array(pairs).T
    order = list(range(len(x)))
    rnd.shuffle(order)
    e1 = kendall_tau_b(x, y)
    e2 = kendall_tau_b(x[order], y[order])
    e3 = kendall_tau_b(y, x)
    for other in (e2, e3):
        assert (e1.estimate is None) == (other.estimate is None)
        if e1.estimate is not None:
            assert e1.estimate == pytest.approx(other.estimate, abs=1e-12)
            assert e1.se == pytest.approx(other.se, abs=1e-12)
            assert e1.p_value == pytest.approx(other.p_value, abs=1e-12)
