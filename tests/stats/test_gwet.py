"""Gwet's AC1/AC2 and Brennan–Prediger: published values, cross-checks, identities.

Sources: Gwet (2008, BJMSP 61:29-48) and Gwet (2014, Handbook of Inter-Rater Reliability, 4th
ed.) for the formulas; Brennan & Prediger (1981, EPM 41:687-699); values printed by irrCAC on
the Fleiss (1971) diagnoses data as quoted in /work/shared/REFERENCE-CHECKS.md (F2).
"""

from __future__ import annotations

import numpy as np
import pytest

from reportgen.stats.gwet import (
    brennan_prediger,
    brennan_prediger_features,
    brennan_prediger_from_sums,
    gwet_ac,
    gwet_ac_features,
    gwet_ac_from_sums,
)
from reportgen.stats.tables import count_table
from reportgen.stats.weights import agreement_weights
from stats.published import F2  # Fleiss (1971) diagnoses, 30 patients × 6 ratings


def _random_codes(seed: int, n: int = 50, raters: int = 4, k: int = 4, missing: float = 0.25):
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, k, n)
    codes = np.where(
        rng.random((n, raters)) < 0.55, truth[:, None], rng.integers(0, k, (n, raters))
    )
    codes[rng.random((n, raters)) < missing] = -1
    return codes


def test_f2_ac1_and_brennan_prediger() -> None:
    ac1 = gwet_ac(F2)
    # irrCAC gwet() on the Fleiss (1971) data: AC1 0.447885, SE 0.055662 [L]; recomputed
    # 0.4478845 and 0.0556621 (REFERENCE-CHECKS F2).
    assert ac1.estimate == pytest.approx(0.4478845, abs=5e-8)
    assert ac1.se == pytest.approx(0.0556621, abs=5e-8)
    assert ac1.ci_method == "analytic (Gwet)"
    assert ac1.p_value is None
    assert ac1.extra["finite_population_correction"] is False
    # Brennan–Prediger = Randolph's free-marginal kappa: 0.4444444 (statsmodels, irrCAC) [L].
    bp = brennan_prediger(F2)
    assert bp.estimate == pytest.approx(0.4444444, abs=5e-8)
    assert bp.extra["p_e"] == pytest.approx(0.2, abs=1e-15)


def test_brennan_prediger_matches_statsmodels_randolph() -> None:
    from statsmodels.stats.inter_rater import fleiss_kappa as sm_fleiss

    rng = np.random.default_rng(8)
    c = count_table(rng.integers(0, 3, (40, 5)), 3)
    assert brennan_prediger(c).estimate == pytest.approx(sm_fleiss(c, method="randolph"), abs=1e-12)


@pytest.mark.parametrize("weights", [None, "linear", "quadratic"])
@pytest.mark.parametrize("seed", range(4))
def test_irrcac_on_random_studies_with_missing_ratings(weights: str | None, seed: int) -> None:
    import pandas as pd
    from irrCAC.raw import CAC

    k = 4
    codes = _random_codes(seed, k=k)
    df = pd.DataFrame(np.where(codes < 0, np.nan, codes.astype(float)))
    cac = CAC(df, weights=weights or "identity", categories=[0.0, 1.0, 2.0, 3.0], digits=17)
    c = count_table(codes, k)
    g_ref, b_ref = cac.gwet()["est"], cac.bp()["est"]
    g, b = gwet_ac(c, weights=weights), brennan_prediger(c, weights=weights)
    assert g.estimate == pytest.approx(g_ref["coefficient_value"], abs=1e-12)
    assert g.se == pytest.approx(g_ref["se"], abs=1e-12)
    assert g.extra["p_e"] == pytest.approx(g_ref["pe"], abs=1e-12)
    assert b.estimate == pytest.approx(b_ref["coefficient_value"], abs=1e-12)
    assert b.se == pytest.approx(b_ref["se"], abs=1e-12)


def test_weights_are_built_from_declared_categories() -> None:
    """A category nobody used still changes AC2's chance agreement (T_w and q)."""
    codes = _random_codes(5, k=3, missing=0.0)
    c3 = count_table(codes, 3)
    c4 = np.hstack([c3, np.zeros((c3.shape[0], 1), dtype=np.int64)])
    assert gwet_ac(c3, weights="linear").estimate != pytest.approx(
        gwet_ac(c4, weights="linear").estimate, abs=1e-6
    )


def test_identity_matrix_gives_ac1_and_explicit_weights_accepted() -> None:
    c = count_table(_random_codes(2), 4)
    assert gwet_ac(c, weights=np.eye(4)).estimate == pytest.approx(gwet_ac(c).estimate, abs=1e-15)
    w = agreement_weights(4, "quadratic")
    assert gwet_ac(c, weights=w).estimate == pytest.approx(
        gwet_ac(c, weights="quadratic").estimate, abs=1e-15
    )
    with pytest.raises(ValueError, match="diagonal"):
        gwet_ac(c, weights=np.zeros((4, 4)))
    with pytest.raises(ValueError, match="shape"):
        gwet_ac(c, weights=np.eye(3))


def test_ac1_two_categories_by_hand() -> None:
    # 4 items × 2 raters, two categories: items (yes,yes), (yes,yes), (yes,no), (no,no).
    c = np.array([[2, 0], [2, 0], [1, 1], [0, 2]])
    # p_a = 3/4; pi_yes = (1 + 1 + 0.5 + 0)/4 = 0.625; p_e = 2 * 0.625 * 0.375 = 0.46875
    # (Gwet 2008, eq. for AC1 with q = 2: p_e = 2 pi (1 - pi)).
    expected = (0.75 - 0.46875) / (1 - 0.46875)
    assert gwet_ac(c).estimate == pytest.approx(expected, abs=1e-15)
    assert brennan_prediger(c).estimate == pytest.approx((0.75 - 0.5) / 0.5, abs=1e-15)


def test_from_sums_batched_and_same_path() -> None:
    c = count_table(_random_codes(7), 4)
    f = gwet_ac_features(c, weights="linear")
    assert gwet_ac(c, weights="linear").estimate == pytest.approx(
        float(gwet_ac_from_sums(f.sum(0), weights="linear")), abs=1e-14
    )
    batch = np.stack([f[:25].sum(0), f.sum(0)])
    assert gwet_ac_from_sums(batch, weights="linear").shape == (2,)
    fb = brennan_prediger_features(c)
    assert fb.shape == (c.shape[0], 3)
    assert brennan_prediger(c).estimate == pytest.approx(
        float(brennan_prediger_from_sums(fb.sum(0), 4)), abs=1e-14
    )
    assert brennan_prediger_from_sums(np.stack([fb.sum(0)] * 3), 4).shape == (3,)


def test_degenerate_cases_say_why() -> None:
    single = gwet_ac(np.array([[3], [2]]))
    assert single.estimate is None
    assert any("single category" in w for w in single.warnings)
    nopairs = gwet_ac(np.array([[1, 0], [0, 1]]))
    assert nopairs.estimate is None and any("two or more ratings" in w for w in nopairs.warnings)
    bp = brennan_prediger(np.array([[3], [2]]))
    assert bp.estimate is None and any("single category" in w for w in bp.warnings)


def test_all_ratings_in_one_category_is_not_reported_as_one() -> None:
    """AC1's chance agreement is 0 when one category takes every rating (Gwet 2008), so the
    formula gives 1.0; we report no value and say why (issue 3: never a misleading 1.0)."""
    c = np.array([[3, 0], [3, 0], [3, 0]])
    for est in (gwet_ac(c), gwet_ac(c, weights="linear"), brennan_prediger(c)):
        assert est.estimate is None
        assert any("every rating is in one category" in w for w in est.warnings)
        assert est.extra["value_if_reported"] == pytest.approx(1.0, abs=1e-15)
    assert float(gwet_ac_from_sums(gwet_ac_features(c).sum(0))) == pytest.approx(1.0, abs=1e-15)


def test_analytic_intervals_are_cut_to_minus_one_to_one() -> None:
    """AC1 and Brennan-Prediger lie in -1 .. 1; a normal interval around a high value on six
    items overshoots and is cut, with a warning (estimate and SE unchanged)."""
    counts = np.array([[3, 0], [3, 0], [0, 3], [0, 3], [2, 1], [3, 0]])
    for est in (gwet_ac(counts), brennan_prediger(counts)):
        assert est.estimate + 1.959963984540054 * est.se > 1.0
        assert est.ci_high == 1.0
        assert est.ci_low == pytest.approx(est.estimate - 1.959963984540054 * est.se, abs=1e-12)
        assert any("cut to the range -1 to 1" in w for w in est.warnings)
