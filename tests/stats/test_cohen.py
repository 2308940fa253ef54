"""Cohen's kappa (unweighted, weighted), FCE 1969 standard errors, kappa_max, binary figures.

Published values are named beside each check (see /work/shared/REFERENCE-CHECKS.md, C1-C4).
statsmodels and scikit-learn appear only here, as independent cross-checks.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from reportgen.stats.cohen import (
    bias_index,
    cohen_kappa,
    cohen_kappa_features,
    cohen_kappa_from_sums,
    confusion_matrix,
    kappa_max,
    pabak,
    prevalence_index,
    weights_iv,
)
from reportgen.stats.weights import agreement_weights

COHEN_1960 = np.array([[88, 14, 18], [10, 40, 10], [2, 6, 12]])
PRINTOUT_TABLE = np.array([[0, 4, 1], [0, 8, 0], [0, 1, 5]])


def table_to_codes(table: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    k = table.shape[0]
    cells = np.repeat(np.arange(k * k), table.ravel())
    return cells // k, cells % k


# --------------------------------------------------------------------------- published checks


def test_c1_cohen_1960_table() -> None:
    # Cohen (1960), N = 200 table printed as proportions: p_o = .70, p_c = .41, kappa = .492
    # (quoted in the psych::cohen.kappa documentation; REFERENCE-CHECKS C1 [P]).
    e = cohen_kappa(COHEN_1960)
    assert round(e.extra["p_o"], 2) == 0.70
    assert round(e.extra["p_e"], 2) == 0.41
    assert round(e.estimate, 3) == 0.492
    assert e.items == 200 and e.agreeing == 140
    # FCE (1969) SEs and Cohen's kappa_max as printed by statsmodels and R vcd
    # (REFERENCE-CHECKS C1 [L], 7 significant digits).
    assert e.se == pytest.approx(0.0510018, abs=5e-8)
    assert e.extra["se_null"] == pytest.approx(0.0519789, abs=5e-8)
    assert e.z == pytest.approx(9.45624, abs=5e-6)
    assert e.ci_low == pytest.approx(0.39156, abs=5e-6)
    assert e.ci_high == pytest.approx(0.59149, abs=5e-6)
    assert e.extra["kappa_max"] == pytest.approx(0.8305085, abs=5e-8)
    assert e.ci_method == "analytic (Fleiss-Cohen-Everitt 1969)"


def test_c2_fifty_proposals() -> None:
    # Wikipedia "Cohen's kappa" simple example, 50 proposals: p_o 0.7, p_e 0.5, kappa 0.4
    # (REFERENCE-CHECKS C2 [P-mem]); ASE 0.1269961 printed by R vcd [L].
    e = cohen_kappa([[20, 5], [10, 15]])
    assert e.extra["p_o"] == pytest.approx(0.7, abs=1e-15)
    assert e.extra["p_e"] == pytest.approx(0.5, abs=1e-15)
    assert e.estimate == pytest.approx(0.4, abs=1e-15)
    assert e.se == pytest.approx(0.1269961, abs=5e-8)
    assert e.extra["se_null"] == pytest.approx(0.138564, abs=5e-7)


@pytest.mark.parametrize(
    ("table", "p_o", "p_e", "kappa"),
    [
        # Feinstein & Cicchetti (1990) "high agreement but low kappa" tables, kappa to the two
        # decimals printed (attribution from memory, REFERENCE-CHECKS C2p [P-mem]).
        ([[40, 9], [6, 45]], 0.85, 0.5008, 0.70),  # prevalence (a)
        ([[80, 10], [5, 5]], 0.85, 0.78, 0.32),  # prevalence (b)
        ([[45, 15], [25, 15]], 0.60, 0.54, 0.13),  # bias (c)
        ([[25, 35], [5, 35]], 0.60, 0.46, 0.26),  # bias (d)
    ],
)
def test_c2p_same_agreement_different_kappa(
    table: list, p_o: float, p_e: float, kappa: float
) -> None:
    e = cohen_kappa(table)
    assert e.extra["p_o"] == pytest.approx(p_o, abs=1e-12)
    assert e.extra["p_e"] == pytest.approx(p_e, abs=1e-12)
    assert round(e.estimate, 2) == kappa


def test_c4_printed_unweighted() -> None:
    # Commercial printout quoted in statsmodels' test-suite (TestUnweightedCohens),
    # REFERENCE-CHECKS C4 [L], 4 decimals.
    e = cohen_kappa(PRINTOUT_TABLE)
    assert round(e.estimate, 4) == 0.4842
    assert round(e.se, 4) == 0.1380
    assert round(e.ci_low, 4) == 0.2137
    assert round(e.ci_high, 4) == 0.7547
    assert round(e.extra["se_null"], 4) == 0.1484
    assert round(e.z, 4) == 3.2626


def test_c4_printed_linear_weighted() -> None:
    # Same printout, linear weights with scores 0, 1, 2 (TestWeightedCohens), 4 decimals.
    e = cohen_kappa(PRINTOUT_TABLE, weights="linear")
    assert round(e.estimate, 4) == 0.4701
    assert round(e.se, 4) == 0.1457
    assert round(e.ci_low, 4) == 0.1845
    assert round(e.ci_high, 4) == 0.7558
    assert round(e.extra["se_null"], 4) == 0.1426
    assert round(e.z, 4) == 3.2971
    assert e.extra["weighted"] is True
    assert e.extra["kappa_max"] is None


def test_c4_quadratic_matches_libraries() -> None:
    # No printed value; statsmodels / vcd / sklearn agree on 0.4501608, ASE 0.1922327,
    # ASE0 0.1879195 (REFERENCE-CHECKS C4 [L]).
    e = cohen_kappa(PRINTOUT_TABLE, weights="quadratic")
    assert e.estimate == pytest.approx(0.4501608, abs=5e-8)
    assert e.se == pytest.approx(0.1922327, abs=5e-8)
    assert e.extra["se_null"] == pytest.approx(0.1879195, abs=5e-8)


# --------------------------------------------------------------------------- cross-checks


def _random_table(rng: np.random.Generator, k: int, n: int) -> np.ndarray:
    a = rng.integers(0, k, n)
    b = np.where(rng.random(n) < 0.6, a, rng.integers(0, k, n))
    return confusion_matrix(a, b, k)


@pytest.mark.parametrize("wt", [None, "linear", "quadratic"])
def test_cross_check_statsmodels_random_tables(wt: str | None) -> None:
    from statsmodels.stats.inter_rater import cohens_kappa as sm_kappa

    rng = np.random.default_rng(7)
    for _ in range(60):
        k = int(rng.integers(2, 6))
        t = _random_table(rng, k, int(rng.integers(10, 300)))
        if t.sum(axis=0).max() == t.sum() and t.sum(axis=1).max() == t.sum():
            continue
        ref = sm_kappa(t, wt=wt)
        e = cohen_kappa(t, weights=wt)
        assert e.estimate == pytest.approx(ref.kappa, abs=1e-12)
        assert e.se == pytest.approx(ref.std_kappa, abs=1e-12)
        assert e.extra["se_null"] == pytest.approx(ref.std_kappa0, abs=1e-12)
        assert e.z == pytest.approx(ref.z_value, abs=1e-9)
        assert e.p_value == pytest.approx(ref.pvalue_two_sided, abs=1e-12)
        if -1.0 < ref.kappa_low and ref.kappa_upp < 1.0:
            assert e.ci_low == pytest.approx(ref.kappa_low, abs=1e-12)
            assert e.ci_high == pytest.approx(ref.kappa_upp, abs=1e-12)
        if wt is None:
            assert e.extra["kappa_max"] == pytest.approx(ref.kappa_max, abs=1e-12)


@pytest.mark.parametrize("wt", [None, "linear", "quadratic"])
def test_cross_check_sklearn_on_codes(wt: str | None) -> None:
    from sklearn.metrics import cohen_kappa_score

    rng = np.random.default_rng(11)
    for _ in range(60):
        k = int(rng.integers(2, 6))
        n = int(rng.integers(10, 200))
        a = rng.integers(0, k, n)
        b = np.where(rng.random(n) < 0.5, a, rng.integers(0, k, n))
        if len(set(a) | set(b)) < 2:
            continue
        ref = cohen_kappa_score(a, b, labels=list(range(k)), weights=wt)
        e = cohen_kappa(confusion_matrix(a, b, k), weights=wt)
        assert e.estimate == pytest.approx(ref, abs=1e-12)


def test_custom_weight_matrix_matches_statsmodels() -> None:
    # statsmodels takes DISagreement weights for a 2-D matrix; ours are agreement weights.
    from statsmodels.stats.inter_rater import cohens_kappa as sm_kappa

    w = np.array(
        [[1.0, 0.8, 0.1, 0.0], [0.8, 1.0, 0.5, 0.2], [0.1, 0.5, 1.0, 0.9], [0.0, 0.2, 0.9, 1.0]]
    )
    rng = np.random.default_rng(5)
    for _ in range(20):
        t = _random_table(rng, 4, 120)
        ref = sm_kappa(t, weights=1.0 - w)
        e = cohen_kappa(t, weights=w)
        assert e.estimate == pytest.approx(ref.kappa, abs=1e-12)
        assert e.se == pytest.approx(ref.std_kappa, abs=1e-12)
        assert e.extra["se_null"] == pytest.approx(ref.std_kappa0, abs=1e-12)


def test_weights_come_from_declared_categories() -> None:
    # REFERENCE-CHECKS convention: weights are built over the declared list.  On a 4-step scale
    # where step 1 was never used, steps 0 and 2 are 2/3 apart, not 1/2 as they would be if
    # only the observed steps {0, 2, 3} were re-numbered 0, 1, 2.
    a = np.array([0, 0, 2, 2, 3, 3, 0, 2, 3, 3])
    b = np.array([0, 2, 2, 3, 3, 2, 0, 2, 3, 0])
    from sklearn.metrics import cohen_kappa_score

    declared = cohen_kappa(confusion_matrix(a, b, 4), weights="linear")
    ref4 = cohen_kappa_score(a, b, labels=[0, 1, 2, 3], weights="linear")
    assert declared.estimate == pytest.approx(ref4, abs=1e-12)
    renumber = np.array([0, -9, 1, 2])
    observed_only = cohen_kappa(confusion_matrix(renumber[a], renumber[b], 3), weights="linear")
    assert abs(declared.estimate - observed_only.estimate) > 1e-3
    # Unweighted kappa does not depend on unused categories.
    assert cohen_kappa(confusion_matrix(a, b, 4)).estimate == pytest.approx(
        cohen_kappa(confusion_matrix(renumber[a], renumber[b], 3)).estimate, abs=1e-15
    )


# --------------------------------------------------------------------------- weights validation


@pytest.mark.parametrize(
    ("weights", "message"),
    [
        (np.eye(2), "3×3"),
        (np.ones((3, 4)), "3×3"),
        (np.array([[1, 0.5, 0], [0.4, 1, 0.5], [0, 0.5, 1]]), "symmetric"),
        (np.array([[0.9, 0.5, 0], [0.5, 1, 0.5], [0, 0.5, 1]]), "diagonal"),
        (np.array([[1, 1.5, 0], [1.5, 1, 0.5], [0, 0.5, 1]]), "between 0 and 1"),
        (np.array([[1, -0.5, 0], [-0.5, 1, 0.5], [0, 0.5, 1]]), "between 0 and 1"),
        (np.array([[1, np.nan, 0], [np.nan, 1, 0.5], [0, 0.5, 1]]), "finite"),
    ],
)
def test_bad_weight_matrix_is_refused(weights: np.ndarray, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        cohen_kappa(np.ones((3, 3), dtype=int), weights=weights)


def test_weights_iv_accepts_kinds_and_matrices() -> None:
    assert np.array_equal(weights_iv(None, 3), np.eye(3))
    assert np.array_equal(weights_iv("linear", 3), agreement_weights(3, "linear"))
    with pytest.raises(ValueError):
        weights_iv("cubic", 3)


# --------------------------------------------------------------------------- degenerate data


def test_both_constant_in_same_category_is_undefined() -> None:
    e = cohen_kappa([[0, 0], [0, 12]])
    assert e.estimate is None and e.se is None and e.p_value is None
    assert e.items == 12 and e.agreeing == 12
    assert "chance agreement is 1" in e.warnings[0]
    assert e.as_record()["estimate"] is None


def test_empty_table_is_undefined() -> None:
    e = cohen_kappa(np.zeros((3, 3), dtype=int))
    assert e.estimate is None and e.items == 0
    assert "no item" in e.warnings[0]


def test_weighted_with_all_credit_is_undefined() -> None:
    e = cohen_kappa([[3, 2], [1, 4]], weights=np.ones((2, 2)))
    assert e.estimate is None
    assert "full credit" in e.warnings[0]


def test_perfect_agreement_is_one_without_a_fake_interval() -> None:
    e = cohen_kappa([[5, 0, 0], [0, 7, 0], [0, 0, 3]])
    assert e.estimate == 1.0
    assert e.se == 0.0
    assert e.ci_low is None and e.ci_high is None
    assert any("standard error is zero" in w for w in e.warnings)
    assert e.p_value is not None and e.p_value < 1e-4  # the null test still applies


def test_interval_is_cut_to_minus_one_one() -> None:
    e = cohen_kappa([[3, 0], [1, 2]])
    assert e.ci_high == 1.0
    assert any("cut to the range" in w for w in e.warnings)


def test_bad_tables_are_refused() -> None:
    with pytest.raises(ValueError):
        cohen_kappa(np.ones((2, 3), dtype=int))
    with pytest.raises(ValueError):
        cohen_kappa([[1, -1], [0, 2]])
    with pytest.raises(ValueError):
        cohen_kappa([[1.5, 0.0], [0.0, 2.0]])
    with pytest.raises(TypeError):
        cohen_kappa([["a", "b"], ["c", "d"]])
    with pytest.raises(ValueError):
        cohen_kappa([[1, 2], [3, 4]], confidence_level=1.5)


def test_confusion_matrix_skips_missing_and_checks_codes() -> None:
    a = np.array([0, 1, -1, 2, 2, 1], dtype=np.int8)
    b = np.array([0, 1, 1, -1, 2, 0], dtype=np.int8)
    t = confusion_matrix(a, b, 3)
    assert t.dtype == np.int64
    assert t.tolist() == [[1, 0, 0], [1, 1, 0], [0, 0, 1]]
    with pytest.raises(ValueError):
        confusion_matrix([0, 3], [0, 1], 3)
    with pytest.raises(ValueError):
        confusion_matrix([0, 1], [0, 1, 1], 3)
    with pytest.raises(TypeError):
        confusion_matrix([0.5, 1.0], [0, 1], 3)


# --------------------------------------------------------------------------- kappa_max


def test_kappa_max_bounds_kappa_and_reaches_one_with_equal_margins() -> None:
    # Cohen (1960): kappa_max = (p_oM - p_e)/(1 - p_e), p_oM = sum_i min(p_i., p_.i).
    assert kappa_max(COHEN_1960) == pytest.approx(0.8305085, abs=5e-8)
    assert kappa_max([[20, 5], [5, 20]]) == pytest.approx(1.0, abs=1e-15)
    rng = np.random.default_rng(3)
    for _ in range(50):
        t = _random_table(rng, 3, 60)
        km = kappa_max(t)
        e = cohen_kappa(t)
        if e.estimate is not None:
            assert e.estimate <= km + 1e-12
    assert kappa_max(np.zeros((2, 2), dtype=int)) is None
    assert kappa_max([[4, 0], [0, 0]]) is None


# --------------------------------------------------------------------------- binary figures


@pytest.mark.parametrize(
    ("table", "pabak_value", "pi", "bi"),
    [
        # Hand computation from the Feinstein & Cicchetti (1990) tables with the definitions of
        # Byrt, Bishop & Carlin (1993): PABAK = 2 p_o - 1, PI = |a - d| / n, BI = |b - c| / n.
        ([[40, 9], [6, 45]], 0.70, 5 / 100, 3 / 100),
        ([[80, 10], [5, 5]], 0.70, 75 / 100, 5 / 100),
        ([[45, 15], [25, 15]], 0.20, 30 / 100, 10 / 100),
        ([[25, 35], [5, 35]], 0.20, 10 / 100, 30 / 100),
    ],
)
def test_pabak_prevalence_bias(table: list, pabak_value: float, pi: float, bi: float) -> None:
    e = pabak(table)
    assert e.estimate == pytest.approx(pabak_value, abs=1e-12)
    assert prevalence_index(table) == pytest.approx(pi, abs=1e-15)
    assert bias_index(table) == pytest.approx(bi, abs=1e-15)
    # Byrt, Bishop & Carlin (1993) identity, from memory:
    # kappa = (PABAK - PI^2 + BI^2) / (1 - PI^2 + BI^2).
    kappa = cohen_kappa(table).estimate
    assert kappa == pytest.approx((pabak_value - pi**2 + bi**2) / (1 - pi**2 + bi**2), abs=1e-12)
    # PABAK's interval is the exact interval of p_o mapped by 2p - 1.
    from reportgen.stats.proportion import clopper_pearson_interval

    t = np.asarray(table)
    low, high = clopper_pearson_interval(int(np.trace(t)), int(t.sum()))
    assert e.ci_low == pytest.approx(2 * low - 1, abs=1e-15)
    assert e.ci_high == pytest.approx(2 * high - 1, abs=1e-15)


def test_binary_figures_need_two_by_two_and_items() -> None:
    with pytest.raises(ValueError, match="2×2"):
        pabak(np.ones((3, 3), dtype=int))
    with pytest.raises(ValueError, match="2×2"):
        prevalence_index(np.ones((3, 3), dtype=int))
    assert pabak(np.zeros((2, 2), dtype=int)).estimate is None
    assert prevalence_index(np.zeros((2, 2), dtype=int)) is None
    assert bias_index(np.zeros((2, 2), dtype=int)) is None


# --------------------------------------------------------------------------- bootstrap interface


def test_features_sum_to_the_table_and_give_the_point_estimate() -> None:
    a, b = table_to_codes(COHEN_1960)
    a = np.concatenate([a, [-1, 0]])
    b = np.concatenate([b, [1, -1]])
    f = cohen_kappa_features(a, b, 3)
    assert f.shape == (202, 9) and f.dtype == np.float64
    assert np.array_equal(f.sum(axis=0), COHEN_1960.ravel())
    assert not f[-2:].any()  # missing ratings give zero rows
    for wt in (None, "linear", "quadratic"):
        from_sums = cohen_kappa_from_sums(f.sum(axis=0), 3, wt)
        assert from_sums.shape == ()
        assert float(from_sums) == cohen_kappa(COHEN_1960, weights=wt).estimate


def test_from_sums_is_batched_and_nan_when_undefined() -> None:
    rng = np.random.default_rng(2)
    tables = np.stack([_random_table(rng, 3, 40) for _ in range(12)]).reshape(3, 4, 9)
    tables[0, 0] = [0, 0, 0, 0, 7, 0, 0, 0, 0]  # both constant in one category
    tables[0, 1] = 0  # empty
    out = cohen_kappa_from_sums(tables, 3, "linear")
    assert out.shape == (3, 4)
    assert np.isnan(out[0, 0]) and np.isnan(out[0, 1])
    for i in range(3):
        for j in range(4):
            if (i, j) in ((0, 0), (0, 1)):
                continue
            expected = cohen_kappa(tables[i, j].reshape(3, 3), weights="linear").estimate
            assert out[i, j] == pytest.approx(expected, abs=1e-14)
    with pytest.raises(ValueError):
        cohen_kappa_from_sums(np.ones(8), 3)


# --------------------------------------------------------------------------- properties

codes_pairs = st.integers(2, 5).flatmap(
    lambda k: st.tuples(
        st.just(k),
        st.lists(
            st.tuples(st.integers(-1, k - 1), st.integers(-1, k - 1)), min_size=2, max_size=60
        ),
    )
)


def _kappa_of(a: np.ndarray, b: np.ndarray, k: int, wt: str | None = None) -> float | None:
    return cohen_kappa(confusion_matrix(a, b, k), weights=wt).estimate


@settings(derandomize=True, max_examples=80, deadline=None)
@given(codes_pairs, st.randoms(use_true_random=False))
def test_property_item_order_does_not_matter(case: tuple, rnd) -> None:
    k, pairs = case
    a, b = np.array(pairs).T
    order = list(range(len(a)))
    rnd.shuffle(order)
    for wt in (None, "quadratic"):
        e1, e2 = _kappa_of(a, b, k, wt), _kappa_of(a[order], b[order], k, wt)
        assert (e1 is None) == (e2 is None)
        if e1 is not None:
            assert e1 == pytest.approx(e2, abs=1e-12)


@settings(derandomize=True, max_examples=80, deadline=None)
@given(codes_pairs, st.randoms(use_true_random=False))
def test_property_relabelling_categories_keeps_unweighted_kappa(case: tuple, rnd) -> None:
    k, pairs = case
    a, b = np.array(pairs).T
    perm = list(range(k))
    rnd.shuffle(perm)
    relabel = np.array(perm + [-1])  # index -1 maps missing to missing
    e1 = cohen_kappa(confusion_matrix(a, b, k))
    e2 = cohen_kappa(confusion_matrix(relabel[a], relabel[b], k))
    assert (e1.estimate is None) == (e2.estimate is None)
    if e1.estimate is not None:
        assert e1.estimate == pytest.approx(e2.estimate, abs=1e-12)
        assert e1.se == pytest.approx(e2.se, abs=1e-12)
        assert e1.extra["se_null"] == pytest.approx(e2.extra["se_null"], abs=1e-12)


@settings(derandomize=True, max_examples=80, deadline=None)
@given(codes_pairs)
def test_property_swapping_raters_keeps_kappa_and_ses(case: tuple) -> None:
    k, pairs = case
    a, b = np.array(pairs).T
    for wt in (None, "linear"):
        e1 = cohen_kappa(confusion_matrix(a, b, k), weights=wt)
        e2 = cohen_kappa(confusion_matrix(b, a, k), weights=wt)
        if e1.estimate is None:
            assert e2.estimate is None
            continue
        assert e1.estimate == pytest.approx(e2.estimate, abs=1e-12)
        assert e1.se == pytest.approx(e2.se, abs=1e-12)
        assert -1.0 - 1e-12 <= e1.estimate <= 1.0 + 1e-12


@settings(derandomize=True, max_examples=60, deadline=None)
@given(
    st.integers(2, 5).flatmap(
        lambda k: st.tuples(st.just(k), st.lists(st.integers(0, k - 1), min_size=2, max_size=50))
    )
)
def test_property_perfect_agreement_is_one_when_defined(case: tuple) -> None:
    k, values = case
    a = np.array(values)
    for wt in (None, "linear", "quadratic"):
        e = cohen_kappa(confusion_matrix(a, a, k), weights=wt)
        if len(set(values)) >= 2:
            assert e.estimate == 1.0
        else:
            assert e.estimate is None and "chance agreement is 1" in e.warnings[0]


def test_null_p_value_is_two_sided_normal() -> None:
    e = cohen_kappa(COHEN_1960)
    assert e.p_value == pytest.approx(math.erfc(abs(e.z) / math.sqrt(2)), rel=1e-15)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cohen_kappa([[1, 0], [0, 0]])  # no numpy warnings on degenerate input


def test_batched_kappa_matches_one_table_at_a_time() -> None:
    """The bootstrap's batched formula (matrix products over many replicate tables) gives the
    same kappa as each table on its own, unweighted and weighted (to 1e-12)."""
    rng = np.random.default_rng(10)
    sums = rng.integers(0, 12, size=(500, 16)).astype(float)
    sums[0] = 0.0  # an empty table: NaN in both
    for weights in (None, "linear", "quadratic"):
        batch = cohen_kappa_from_sums(sums, 4, weights=weights)
        one = np.array([cohen_kappa_from_sums(s, 4, weights=weights) for s in sums])
        np.testing.assert_allclose(batch, one, rtol=0, atol=1e-12)
        assert np.isnan(batch[0]) and np.isnan(one[0])


def test_stack_of_records_matches_one_table_at_a_time() -> None:
    """The rater-pair records are computed for the whole stack of tables at once; every figure
    (kappa, both SEs, interval, z, p, kappa_max, warnings) equals the one-table path to 1e-12,
    with an empty and a chance-agreement-1 table mixed in (those keep their own messages)."""
    from dataclasses import asdict

    from reportgen.stats.cohen import _cohen_estimate, _cohen_estimates, weights_iv

    rng = np.random.default_rng(12)
    tables = rng.integers(0, 9, size=(40, 4, 4)).astype(float)
    tables[3] = 0.0  # no item
    tables[7] = 0.0
    tables[7, 2, 2] = 5.0  # both ratings always category 2: chance agreement 1
    tables[9] = np.diag([4.0, 3.0, 0.0, 2.0])  # perfect agreement: no interval
    for kind in (None, "linear", "quadratic"):
        w = weights_iv(kind, 4)
        stack = _cohen_estimates(tables, w, 0.9)
        for t, got in zip(tables, stack, strict=True):
            want = asdict(_cohen_estimate(t, w, 0.9))
            have = asdict(got)
            assert have.keys() == want.keys()
            for key, value in want.items():
                if isinstance(value, float):
                    assert have[key] == pytest.approx(value, rel=1e-12, abs=1e-12), key
                elif key == "extra":
                    assert have[key].keys() == value.keys()
                    for name, x in value.items():
                        if isinstance(x, float):
                            assert have[key][name] == pytest.approx(x, rel=1e-12, abs=1e-12)
                        else:
                            assert have[key][name] == x, name
                else:
                    assert have[key] == value, key
    assert stack[3].estimate is None and stack[7].estimate is None
    assert stack[9].estimate == pytest.approx(1.0) and stack[9].ci_low is None
