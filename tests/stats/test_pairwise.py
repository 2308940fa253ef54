"""Pairwise Cohen matrix, Light's kappa and Conger's kappa.

Published values are named beside each check; irrCAC, scikit-learn and pandas appear only here,
as independent cross-checks.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from reportgen.stats.cohen import cohen_kappa, confusion_matrix
from reportgen.stats.pairwise import (
    conger_kappa,
    conger_kappa_features,
    conger_kappa_from_sums,
    light_kappa,
    light_kappa_features,
    light_kappa_from_sums,
    pair_tables,
    pairwise_cohen,
)

# Fleiss (1971) psychiatric diagnoses, raw rater-coded version (REFERENCE-CHECKS F2):
# 30 patients x 6 rating slots, codes 1 Depression .. 5 Other (shifted to 0..4 below).
F2_RAW = """\
4,4,4,4,4,4
2,2,2,5,5,5
2,3,3,3,3,5
5,5,5,5,5,5
2,2,2,4,4,4
1,1,3,3,3,3
3,3,3,3,5,5
1,1,3,3,3,4
1,1,4,4,4,4
5,5,5,5,5,5
1,4,4,4,4,4
1,2,4,4,4,4
2,2,2,3,3,3
1,4,4,4,4,4
2,2,4,4,4,5
3,3,3,3,3,5
1,1,1,4,5,5
1,1,1,1,1,2
2,2,4,4,4,4
1,3,3,5,5,5
5,5,5,5,5,5
2,4,4,4,4,4
2,2,4,5,5,5
1,1,4,4,4,4
1,4,4,4,4,5
2,2,2,2,2,4
1,1,1,1,5,5
2,2,4,4,4,4
1,3,3,3,3,3
5,5,5,5,5,5
"""
F2 = np.array([[int(v) for v in line.split(",")] for line in F2_RAW.splitlines()]) - 1


def _irrcac_conger(codes: np.ndarray, k: int, weights: str = "identity") -> float:
    import pandas as pd
    from irrCAC.raw import CAC

    frame = pd.DataFrame(np.where(codes < 0, np.nan, codes).astype(float))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = CAC(frame, weights=weights, categories=list(range(k)), digits=15).conger()
    return float(res["est"]["coefficient_value"])


def _random_codes(rng: np.random.Generator, n: int, r: int, k: int, missing: float) -> np.ndarray:
    truth = rng.integers(0, k, n)
    codes = np.where(rng.random((n, r)) < 0.6, truth[:, None], rng.integers(0, k, (n, r)))
    codes[rng.random((n, r)) < missing] = -1
    return codes


# --------------------------------------------------------------------------- published checks


def test_f2_light_kappa() -> None:
    # Light (1971) kappa on the Fleiss (1971) diagnoses data treated as six rater columns:
    # R irr documentation prints 0.459 (REFERENCE-CHECKS F2 [L]); numpy 0.4594121.
    e = light_kappa(F2, 5)
    assert round(e.estimate, 3) == 0.459
    assert e.estimate == pytest.approx(0.4594121, abs=5e-8)
    assert e.items == 30 and e.agreeing == 5
    assert len(e.extra["pair_kappas"]) == 15
    assert e.se is None and e.ci_low is None  # interval comes from the item bootstrap


def test_f2_conger_kappa() -> None:
    # Conger (1980) kappa on the same data: irrCAC conger() 0.441809 (REFERENCE-CHECKS F2 [L]),
    # numpy 0.4418085; observed agreement 0.555556 equals Fleiss' P-bar (Fleiss 1971).
    e = conger_kappa(F2, 5)
    assert e.estimate == pytest.approx(0.4418085, abs=5e-8)
    assert e.extra["p_a"] == pytest.approx(0.5555556, abs=5e-8)
    assert e.items == 30 and e.agreeing == 5
    assert e.warnings == ()


def test_conger_with_two_raters_is_cohen() -> None:
    # Conger (1980): with two raters and no missing ratings the statistic is Cohen's kappa.
    rng = np.random.default_rng(4)
    for _ in range(20):
        codes = _random_codes(rng, 40, 2, 4, 0.0)
        ref = cohen_kappa(confusion_matrix(codes[:, 0], codes[:, 1], 4)).estimate
        assert conger_kappa(codes, 4).estimate == pytest.approx(ref, abs=1e-12)
        assert light_kappa(codes, 4).estimate == pytest.approx(ref, abs=1e-12)


# --------------------------------------------------------------------------- cross-checks


@pytest.mark.parametrize("weights", ["identity", "linear", "quadratic"])
def test_conger_cross_check_irrcac_with_missing(weights: str) -> None:
    # Gwet's generalisation for missing ratings, as implemented in irrCAC (test-only).
    rng = np.random.default_rng(17)
    for _ in range(12):
        k = int(rng.integers(2, 6))
        r = int(rng.integers(2, 6))
        codes = _random_codes(rng, int(rng.integers(15, 80)), r, k, 0.2)
        ours = conger_kappa(codes, k, weights=None if weights == "identity" else weights)
        assert ours.estimate == pytest.approx(_irrcac_conger(codes, k, weights), abs=1e-12)


def test_light_cross_check_mean_of_sklearn_pairs() -> None:
    from sklearn.metrics import cohen_kappa_score

    rng = np.random.default_rng(23)
    for _ in range(15):
        k = int(rng.integers(2, 5))
        r = int(rng.integers(2, 6))
        codes = _random_codes(rng, 60, r, k, 0.15)
        kappas = []
        for g in range(r):
            for h in range(g + 1, r):
                both = (codes[:, g] >= 0) & (codes[:, h] >= 0)
                kappas.append(
                    cohen_kappa_score(codes[both, g], codes[both, h], labels=list(range(k)))
                )
        assert light_kappa(codes, k).estimate == pytest.approx(np.mean(kappas), abs=1e-12)


def test_pairwise_matrix_matches_single_pairs() -> None:
    rng = np.random.default_rng(29)
    codes = _random_codes(rng, 50, 4, 3, 0.1)
    m = pairwise_cohen(codes, 3, weights="linear")
    assert len(m) == 4 and all(len(row) == 4 for row in m)
    for g in range(4):
        assert m[g][g] is None
        for h in range(4):
            if g == h:
                continue
            ref = cohen_kappa(confusion_matrix(codes[:, g], codes[:, h], 3), weights="linear")
            assert m[g][h].estimate == pytest.approx(ref.estimate, abs=1e-14)
            assert m[g][h].se == pytest.approx(ref.se, abs=1e-14)
            assert m[g][h].items == ref.items
            assert m[g][h] is m[h][g]


def test_pair_tables_order_and_missing() -> None:
    codes = np.array([[0, 1, -1], [1, 1, 0], [-1, 0, 0]])
    t = pair_tables(codes, 2)
    assert t.shape == (3, 2, 2)
    assert t[0].tolist() == [[0, 1], [0, 1]]  # raters 0-1: items 0 and 1
    assert t[1].tolist() == [[0, 0], [1, 0]]  # raters 0-2: item 1 only
    assert t[2].tolist() == [[1, 0], [1, 0]]  # raters 1-2: items 1 and 2


# --------------------------------------------------------------------------- degenerate data


def test_single_rater_is_undefined() -> None:
    codes = np.array([[0], [1], [1]])
    assert light_kappa(codes, 2).estimate is None
    e = conger_kappa(codes, 2)
    assert e.estimate is None and "two raters" in e.warnings[-1]
    assert pairwise_cohen(codes, 2) == [[None]]


def test_everyone_in_one_category_is_undefined_with_words() -> None:
    codes = np.zeros((10, 3), dtype=int)
    e = conger_kappa(codes, 3)
    assert e.estimate is None and "chance agreement is 1" in e.warnings[-1]
    e = light_kappa(codes, 3, rater_labels=["Ann", "Bo", "Cy"])
    assert e.estimate is None
    assert "3 of 3 rater pairs" in e.warnings[0] and "Ann and Bo" in e.warnings[0]


def test_light_is_undefined_when_one_pair_is() -> None:
    codes = np.array([[0, 0, 1], [0, 0, 0], [0, 0, 1], [0, 0, 0]])
    e = light_kappa(codes, 2)
    assert e.estimate is None
    assert "1 of 3 rater pairs (rater 1 and rater 2)" in e.warnings[0]
    assert e.extra["pair_kappas"][0] is None


def test_conger_leaves_out_idle_raters_and_single_ratings() -> None:
    rng = np.random.default_rng(31)
    codes = _random_codes(rng, 30, 3, 3, 0.0)
    with_idle = np.column_stack([codes, np.full(30, -1)])
    e = conger_kappa(with_idle, 3, rater_labels=["A", "B", "C", "D"])
    assert e.estimate == pytest.approx(conger_kappa(codes, 3).estimate, abs=1e-15)
    assert "raters with no rating: D" in e.warnings[0]
    # The bootstrap path leaves the idle rater out too.
    sums = conger_kappa_features(with_idle, 3).sum(axis=0)
    assert float(conger_kappa_from_sums(sums, 3)) == pytest.approx(e.estimate, abs=1e-15)
    lonely = codes.copy()
    lonely[0, 1:] = -1
    e = conger_kappa(lonely, 3)
    assert e.items == 29
    assert any("fewer than two ratings" in w for w in e.warnings)


def test_conger_without_any_shared_item_is_undefined() -> None:
    codes = np.array([[0, -1], [-1, 1], [1, -1]])
    e = conger_kappa(codes, 2)
    assert e.estimate is None and "no item has two or more ratings" in e.warnings[0]


def test_bad_codes_are_refused() -> None:
    with pytest.raises(ValueError):
        light_kappa(np.array([[0, 3]]), 3)
    with pytest.raises(ValueError):
        conger_kappa(np.array([0, 1, 2]), 3)
    with pytest.raises(TypeError):
        pairwise_cohen(np.array([[0.0, 1.0]]), 3)


# --------------------------------------------------------------------------- bootstrap interface


def test_light_features_sum_and_batch() -> None:
    rng = np.random.default_rng(37)
    codes = _random_codes(rng, 40, 3, 3, 0.1)
    f = light_kappa_features(codes, 3)
    assert f.shape == (40, 3 * 9)
    assert np.array_equal(f.sum(axis=0), pair_tables(codes, 3).ravel())
    assert float(light_kappa_from_sums(f.sum(axis=0), 3)) == pytest.approx(
        light_kappa(codes, 3).estimate, abs=1e-15
    )
    idx = rng.integers(0, 40, (5, 40))
    batch = np.stack([f[i].sum(axis=0) for i in idx]).reshape(5, 1, -1)
    out = light_kappa_from_sums(batch, 3, "quadratic")
    assert out.shape == (5, 1)
    for b, i in enumerate(idx):
        expected = light_kappa(codes[i], 3, weights="quadratic").estimate
        assert out[b, 0] == pytest.approx(expected, abs=1e-14)


def test_conger_features_sum_and_batch() -> None:
    rng = np.random.default_rng(41)
    codes = _random_codes(rng, 40, 4, 3, 0.2)
    for wt in (None, "linear"):
        f = conger_kappa_features(codes, 3, wt)
        assert f.shape == (40, 2 + 4 * 3)
        assert float(conger_kappa_from_sums(f.sum(axis=0), 3, wt)) == pytest.approx(
            conger_kappa(codes, 3, weights=wt).estimate, abs=1e-15
        )
        idx = rng.integers(0, 40, (6, 40))
        out = conger_kappa_from_sums(
            np.stack([f[i].sum(axis=0) for i in idx]).reshape(2, 3, -1), 3, wt
        )
        assert out.shape == (2, 3)
        for b, i in enumerate(idx):
            expected = conger_kappa(codes[i], 3, weights=wt).estimate
            assert out.reshape(-1)[b] == pytest.approx(expected, abs=1e-14)
    zero = np.zeros(2 + 4 * 3)
    assert np.isnan(conger_kappa_from_sums(zero, 3))
    with pytest.raises(ValueError):
        conger_kappa_from_sums(np.ones(7), 3)


# --------------------------------------------------------------------------- properties

rating_tables = st.tuples(st.integers(2, 4), st.integers(2, 5), st.integers(3, 25)).flatmap(
    lambda krn: st.tuples(
        st.just(krn[0]),
        st.lists(
            st.lists(st.integers(-1, krn[0] - 1), min_size=krn[1], max_size=krn[1]),
            min_size=krn[2],
            max_size=krn[2],
        ),
    )
)


def _same(e1: float | None, e2: float | None) -> None:
    assert (e1 is None) == (e2 is None)
    if e1 is not None:
        assert e1 == pytest.approx(e2, abs=1e-12)


@settings(derandomize=True, max_examples=60, deadline=None)
@given(rating_tables, st.randoms(use_true_random=False))
def test_property_item_and_rater_order_do_not_matter(case: tuple, rnd) -> None:
    k, rows = case
    codes = np.array(rows)
    items = list(range(codes.shape[0]))
    raters = list(range(codes.shape[1]))
    rnd.shuffle(items)
    rnd.shuffle(raters)
    shuffled = codes[items][:, raters]
    for wt in (None, "linear"):
        _same(
            light_kappa(codes, k, weights=wt).estimate,
            light_kappa(shuffled, k, weights=wt).estimate,
        )
        _same(
            conger_kappa(codes, k, weights=wt).estimate,
            conger_kappa(shuffled, k, weights=wt).estimate,
        )


@settings(derandomize=True, max_examples=60, deadline=None)
@given(rating_tables, st.randoms(use_true_random=False))
def test_property_relabelling_categories(case: tuple, rnd) -> None:
    k, rows = case
    codes = np.array(rows)
    perm = list(range(k))
    rnd.shuffle(perm)
    relabelled = np.array(perm + [-1])[codes]
    _same(light_kappa(codes, k).estimate, light_kappa(relabelled, k).estimate)
    _same(conger_kappa(codes, k).estimate, conger_kappa(relabelled, k).estimate)


@settings(derandomize=True, max_examples=60, deadline=None)
@given(st.integers(2, 4), st.integers(2, 5), st.lists(st.integers(0, 3), min_size=2, max_size=30))
def test_property_perfect_agreement_is_one(k: int, r: int, truth: list[int]) -> None:
    values = np.array(truth) % k
    codes = np.repeat(values[:, None], r, axis=1)
    for wt in (None, "quadratic"):
        light = light_kappa(codes, k, weights=wt).estimate
        conger = conger_kappa(codes, k, weights=wt).estimate
        if len(set(values.tolist())) >= 2:
            assert light == 1.0 and conger == 1.0
        else:
            assert light is None and conger is None


def test_block_path_for_large_studies_matches_features() -> None:
    # More items than one one-hot block (2^16): the block-wise sums must equal the feature sums.
    rng = np.random.default_rng(61)
    codes = _random_codes(rng, 70_000, 3, 4, 0.05).astype(np.int8)
    light = light_kappa(codes, 4)
    assert light.estimate == pytest.approx(
        float(light_kappa_from_sums(light_kappa_features(codes, 4).sum(axis=0), 4)), abs=1e-13
    )
    assert np.array_equal(pair_tables(codes, 4).ravel(), light_kappa_features(codes, 4).sum(axis=0))
    conger = conger_kappa(codes, 4, weights="linear")
    sums = conger_kappa_features(codes, 4, "linear").sum(axis=0)
    # features.sum(axis=0) adds 70,000 fractions row by row (relative error ~1e-13); the
    # block-wise pairwise sums of the point estimate are the more exact of the two.
    assert conger.estimate == pytest.approx(
        float(conger_kappa_from_sums(sums, 4, "linear")), abs=1e-12
    )


@pytest.mark.parametrize(("n", "r"), [(40, 3), (20_000, 3), (3_000, 300)])
def test_both_counting_paths_give_exact_counts(n: int, r: int) -> None:
    from reportgen.stats.pairwise import _counts

    rng = np.random.default_rng(n + r)
    codes = _random_codes(rng, n, r, 4, 0.1).astype(np.int16)
    items, raters = _counts(codes, 4)
    onehot = codes[:, :, None] == np.arange(4)
    assert np.array_equal(items, onehot.sum(axis=1).T)
    assert np.array_equal(raters, onehot.sum(axis=0))


# --------------------------------------------------------------------------- degenerate units


@pytest.mark.parametrize(
    "codes",
    [
        np.array([[0, -1, -1], [-1, 1, -1], [-1, -1, 0], [1, -1, -1]]),
        np.array([[0, -1, -1], [-1, 1, -1], [-1, -1, 0], [1, -1, -1]], dtype=np.int8),
        # large enough for the column-wise counting path, one rating per unit
        np.where(np.eye(3, dtype=bool)[np.arange(30000) % 3], np.arange(30000)[:, None] % 2, -1),
        np.full((5, 3), -1),
        np.zeros((0, 3), dtype=np.int64),
    ],
    ids=["small", "int8", "large", "all-missing", "no-units"],
)
def test_conger_without_any_unit_with_two_ratings(codes: np.ndarray) -> None:
    """No unit with two ratings: Conger's kappa is undefined, said in words, never an error."""
    est = conger_kappa(codes, 2)
    assert est.estimate is None
    assert est.items == 0
    assert est.warnings and all(w.strip() for w in est.warnings)
    assert any("undefined" in w for w in est.warnings)


def test_pair_tables_can_be_passed_in_once() -> None:
    rng = np.random.default_rng(4)
    codes = rng.integers(-1, 3, size=(80, 4))
    tables = pair_tables(codes, 3)
    a = light_kappa(codes, 3)
    b = light_kappa(codes, 3, pair_tables=tables)
    assert a == b
    pa = pairwise_cohen(codes, 3)
    pb = pairwise_cohen(codes, 3, pair_tables=tables)
    assert pa == pb
    with pytest.raises(ValueError, match="pair_tables"):
        light_kappa(codes, 3, pair_tables=tables[:2])


def test_batched_conger_and_light_match_one_at_a_time() -> None:
    """The bootstrap's batched formulas (matrix products) give the same values as the
    unbatched ones, replicate by replicate (to 1e-12)."""
    rng = np.random.default_rng(6)
    codes = rng.integers(-1, 4, size=(40, 3))
    fc = conger_kappa_features(codes, 4, weights="linear")
    fl = light_kappa_features(codes, 4)
    draws = rng.multinomial(40, np.full(40, 1 / 40), size=300).astype(float)
    sc, sl = draws @ fc, draws @ fl
    batch_c = conger_kappa_from_sums(sc, 4, weights="linear")
    one_c = np.array([conger_kappa_from_sums(s, 4, weights="linear") for s in sc])
    np.testing.assert_allclose(batch_c, one_c, rtol=0, atol=1e-12)
    batch_l = light_kappa_from_sums(sl, 4, weights="quadratic")
    one_l = np.array([light_kappa_from_sums(s, 4, weights="quadratic") for s in sl])
    np.testing.assert_allclose(batch_l, one_l, rtol=0, atol=1e-12)


@pytest.mark.parametrize("dtype", [np.int8, np.int16, np.int32, np.int64])
def test_code_range_is_checked_for_every_integer_width(dtype: type) -> None:
    """The one-reduction range check (codes seen as unsigned + 1) refuses codes below -1 and
    at or above k for every signed width, and keeps strided views working."""
    codes = np.array([[0, 1, -1], [2, 2, 1], [1, 0, 0]], dtype=dtype)
    base = conger_kappa(codes, 3).estimate
    assert conger_kappa(np.asfortranarray(codes), 3).estimate == base
    assert conger_kappa(codes[:, ::-1], 3).estimate is not None
    for bad in (-2, 3, int(np.iinfo(dtype).min), int(np.iinfo(dtype).max)):
        wrong = codes.copy()
        wrong[1, 2] = bad
        with pytest.raises(ValueError, match="outside -1 .. 2"):
            conger_kappa(wrong, 3)
