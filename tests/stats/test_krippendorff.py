"""Krippendorff's alpha: published examples, cross-checks with the ``krippendorff`` package.

Sources: Krippendorff (2011, "Computing Krippendorff's alpha-reliability", Annenberg School for
Communication, University of Pennsylvania), the worked example with 4 observers × 12 units and
missing values; values as noted beside each check.
"""

from __future__ import annotations

import numpy as np
import pytest

from reportgen.stats.krippendorff import (
    coincidence_matrix,
    krippendorff_alpha,
    krippendorff_alpha_features,
    krippendorff_alpha_from_sums,
)
from reportgen.stats.tables import count_table

_ = np.nan
# Krippendorff (2011), reliability data: rows = observers A-D, columns = units 1-12, values 1-5.
K2011 = np.array(
    [
        [1, 2, 3, 3, 2, 1, 4, 1, 2, _, _, _],
        [1, 2, 3, 3, 2, 2, 4, 1, 2, 5, _, 3],
        [_, 3, 3, 3, 2, 3, 4, 2, 2, 5, 1, _],
        [1, 2, 3, 3, 2, 4, 4, 1, 2, 5, 1, _],
    ]
)

# Three coders × 15 units, values 1-4 (the krippendorff package's docstring example).
K3x15 = np.array(
    [
        [_, _, _, _, _, 3, 4, 1, 2, 1, 1, 3, 3, _, 3],
        [1, _, 2, 1, 3, 3, 4, 3, _, _, _, _, _, _, _],
        [_, _, 2, 1, 3, 4, 4, _, 2, 1, 1, 3, 3, _, 4],
    ]
)


def _counts(reliability: np.ndarray, k: int) -> np.ndarray:
    codes = np.where(np.isnan(reliability.T), -1, reliability.T - 1).astype(np.int8)
    return count_table(codes, k)


def test_krippendorff_2011_worked_example() -> None:
    c = _counts(K2011, 5)
    # Krippendorff (2011): nominal alpha = 0.743 and interval alpha = 0.849 (from memory of the
    # paper); 0.743 (nominal) and 0.815 (ordinal) are also printed in the krippendorff package's
    # documentation for these data [L].  Unit 12 has a single value and is not pairable.
    nominal = krippendorff_alpha(c, level="nominal")
    assert round(nominal.estimate, 3) == 0.743
    assert round(krippendorff_alpha(c, level="ordinal").estimate, 3) == 0.815
    assert round(krippendorff_alpha(c, level="interval").estimate, 3) == 0.849
    assert nominal.items == 11
    assert nominal.extra["pairable_values"] == 40
    assert any("not pairable" in w for w in nominal.warnings)


def test_krippendorff_2011_coincidences_recomputed() -> None:
    """Coincidence matrix of the 2011 example, recomputed by hand from the definition."""
    o = coincidence_matrix(_counts(K2011, 5))
    assert o.sum() == pytest.approx(40.0, abs=1e-12)
    np.testing.assert_allclose(o, o.T, atol=1e-15)
    # Marginal frequencies n_c of values 1..5 (counted from the pairable units).
    np.testing.assert_allclose(o.sum(1), [9, 13, 10, 5, 3], atol=1e-12)
    # Unit 6 holds values 1, 2, 3, 4 (m_u = 4): it adds 1/3 to each off-diagonal pair among them.
    assert o[0, 3] == pytest.approx(1 / 3, abs=1e-12)


def test_three_coders_fifteen_units() -> None:
    c = _counts(K3x15, 4)
    # krippendorff package docstring [L]: nominal 0.691358, interval 0.810845.
    assert round(krippendorff_alpha(c, level="nominal").estimate, 6) == 0.691358
    assert round(krippendorff_alpha(c, level="interval").estimate, 6) == 0.810845


@pytest.mark.parametrize("level", ["nominal", "ordinal", "interval"])
@pytest.mark.parametrize("seed", range(5))
def test_matches_krippendorff_package_on_random_data(level: str, seed: int) -> None:
    import krippendorff

    rng = np.random.default_rng(seed)
    n, raters, k = 40, 5, 5
    truth = rng.integers(0, k, n)
    codes = np.where(rng.random((n, raters)) < 0.5, truth[:, None], rng.integers(0, k, (n, raters)))
    codes[rng.random((n, raters)) < 0.3] = -1
    values = np.array([0.0, 1.0, 2.5, 4.0, 7.0])
    data = np.where(codes < 0, np.nan, values[np.maximum(codes, 0)]).T
    ref = krippendorff.alpha(data, value_domain=values, level_of_measurement=level)
    ours = krippendorff_alpha(count_table(codes, k), level=level, values=values)
    assert ours.estimate == pytest.approx(ref, abs=1e-12)


def test_ordinal_ignores_values_and_interval_is_affine_invariant() -> None:
    c = _counts(K2011, 5)
    v = np.array([1.0, 2.0, 3.0, 4.0, 5.0])
    a1 = krippendorff_alpha(c, level="interval", values=v).estimate
    a2 = krippendorff_alpha(c, level="interval", values=3 * v - 7).estimate
    assert a1 == pytest.approx(a2, abs=1e-13)
    assert krippendorff_alpha(c, level="ordinal", values=v**3).estimate == pytest.approx(
        krippendorff_alpha(c, level="ordinal").estimate, abs=1e-15
    )


def test_nominal_two_raters_no_missing_relates_to_scotts_pi() -> None:
    """With two coders and no missing values, alpha = 1 - (2N - 1)/(2N) (1 - pi) (Krippendorff
    2004, relation to Scott's pi; from memory)."""
    rng = np.random.default_rng(4)
    a = rng.integers(0, 3, 50)
    b = np.where(rng.random(50) < 0.6, a, rng.integers(0, 3, 50))
    p_o = np.mean(a == b)
    pbar = (np.bincount(a, minlength=3) + np.bincount(b, minlength=3)) / 100
    pi = (p_o - (pbar**2).sum()) / (1 - (pbar**2).sum())
    alpha = krippendorff_alpha(count_table(np.stack([a, b], 1), 3)).estimate
    assert alpha == pytest.approx(1 - (99 / 100) * (1 - pi), abs=1e-13)


def test_features_are_item_additive_and_batched() -> None:
    c = _counts(K2011, 5)
    f = krippendorff_alpha_features(c)
    assert f.shape == (12, 25)
    np.testing.assert_allclose(f.sum(0).reshape(5, 5), coincidence_matrix(c), atol=1e-13)
    for level in ("nominal", "ordinal", "interval"):
        single = float(krippendorff_alpha_from_sums(f.sum(0), level=level))
        assert single == pytest.approx(krippendorff_alpha(c, level=level).estimate, abs=1e-14)
        batch = krippendorff_alpha_from_sums(np.stack([f[:6].sum(0), f.sum(0)]), level=level)
        assert batch.shape == (2,) and batch[1] == pytest.approx(single, abs=1e-14)
        assert batch[0] == pytest.approx(krippendorff_alpha(c[:6], level=level).estimate, abs=1e-14)


def test_degenerate_and_bad_input() -> None:
    one = krippendorff_alpha(np.array([[2, 0], [3, 0]]))
    assert one.estimate is None
    assert any("no expected disagreement" in w for w in one.warnings)
    none = krippendorff_alpha(np.array([[1, 0], [0, 1]]))
    assert none.estimate is None and any("two or more ratings" in w for w in none.warnings)
    perfect = krippendorff_alpha(np.array([[2, 0, 0], [0, 3, 0], [0, 0, 2]]), level="ordinal")
    assert perfect.estimate == pytest.approx(1.0, abs=1e-15)
    with pytest.raises(ValueError, match="level"):
        krippendorff_alpha(np.array([[1, 1]]), level="ratio")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="shape"):
        krippendorff_alpha(np.array([[1, 1]]), level="interval", values=np.array([1.0]))


def test_batched_alpha_matches_one_at_a_time() -> None:
    """The bootstrap's batched formula (matrix products) equals the unbatched one per replicate."""
    from reportgen.stats.krippendorff import (
        krippendorff_alpha_features,
        krippendorff_alpha_from_sums,
    )

    rng = np.random.default_rng(3)
    counts = rng.integers(0, 4, size=(60, 4))
    f = krippendorff_alpha_features(counts)
    sums = rng.multinomial(60, np.full(60, 1 / 60), size=200).astype(float) @ f
    for level, values in (
        ("nominal", None),
        ("ordinal", None),
        ("interval", np.array([0, 1, 2.5, 7])),
    ):
        batch = krippendorff_alpha_from_sums(sums, level=level, values=values)
        one = np.array([krippendorff_alpha_from_sums(s, level=level, values=values) for s in sums])
        np.testing.assert_allclose(batch, one, rtol=0, atol=1e-12)
