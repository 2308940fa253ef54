"""Fleiss' kappa: published worked examples, identities, cross-checks and degenerate data.

Sources: Fleiss (1971, Psychological Bulletin 76:378-382), diagnoses data; Fleiss, Nee & Landis
(1979, Psychological Bulletin 86:974-977) null variance; the worked example of the Wikipedia
article "Fleiss' kappa" (also in statsmodels' test-suite); printed values of R irr and irrCAC
as quoted in /work/shared/REFERENCE-CHECKS.md (F1, F2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from reportgen.stats.fleiss import (
    fleiss_kappa,
    fleiss_kappa_by_category_from_sums,
    fleiss_kappa_features,
    fleiss_kappa_from_sums,
)
from reportgen.stats.tables import count_table
from stats.published import F2  # Fleiss (1971) diagnoses, 30 patients × 6 ratings

# F1 — Wikipedia "Fleiss' kappa" worked example, 10 items × 14 raters, 5 categories.
F1 = np.array(
    [
        [0, 0, 0, 0, 14],
        [0, 2, 6, 4, 2],
        [0, 0, 3, 5, 6],
        [0, 3, 9, 2, 0],
        [2, 2, 8, 1, 1],
        [7, 7, 0, 0, 0],
        [3, 2, 6, 3, 0],
        [2, 5, 3, 2, 2],
        [6, 5, 2, 1, 0],
        [0, 2, 2, 3, 7],
    ]
)


def _random_counts(seed: int, n: int = 60, raters: int = 5, k: int = 4, missing: float = 0.25):
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, k, n)
    codes = np.where(rng.random((n, raters)) < 0.6, truth[:, None], rng.integers(0, k, (n, raters)))
    codes[rng.random((n, raters)) < missing] = -1
    return codes, count_table(codes, k)


# --- published values ------------------------------------------------------------------------


def test_f2_fleiss_1971_published_values() -> None:
    r = fleiss_kappa(F2)
    o = r.overall
    # Fleiss (1971): kappa .430, P-bar .556, P-bar_e .220 [P-mem]; R irr 0.4302445 [L].
    assert round(o.estimate, 3) == 0.430
    assert o.estimate == pytest.approx(0.4302445, abs=5e-8)
    assert round(o.extra["p_o"], 3) == 0.556
    assert round(o.extra["p_e"], 3) == 0.220
    # Fleiss (1971) category proportions .144 .144 .167 .306 .239 [P-mem].
    assert [round(p, 3) for p in o.extra["proportions"]] == [0.144, 0.144, 0.167, 0.306, 0.239]
    # Fleiss (1971) per-category kappas .245 .245 .520 .471 .566 [P-mem; R irr detail=TRUE, L].
    assert [round(e.estimate, 3) for e in r.by_category] == [0.245, 0.245, 0.520, 0.471, 0.566]


def test_f2_fleiss_nee_landis_null_test() -> None:
    r = fleiss_kappa(F2)
    # FNL (1979) null SE, recomputed 0.0243739; R irr prints z = 17.652 (17.65183) [L].
    assert r.overall.extra["se_null"] == pytest.approx(0.0243739, abs=5e-8)
    assert round(r.overall.z, 3) == 17.652
    assert r.overall.z == pytest.approx(17.65183, abs=5e-6)
    assert r.overall.p_value < 1e-60
    # Per category: SE0_j = sqrt(2 / (N m (m - 1))) = 0.0471405; z_j printed by R irr [L].
    for e, z in zip(r.by_category, [5.192, 5.192, 11.031, 9.994, 12.009], strict=True):
        assert e.extra["se_null"] == pytest.approx(math.sqrt(2 / (30 * 6 * 5)), rel=1e-12)
        assert round(e.z, 3) == z
    # The superseded Fleiss (1971) variance gives 0.0275031 on these data (REFERENCE-CHECKS 4.2):
    # the corrected FNL formula must be the one implemented.
    assert abs(r.overall.extra["se_null"] - 0.0275031) > 1e-3


def test_f2_gwet_non_null_se_and_interval() -> None:
    o = fleiss_kappa(F2).overall
    # Non-null SE from Gwet's linearisation: irrCAC prints 0.054199 [L]; recomputed 0.0541989.
    assert o.se == pytest.approx(0.0541989, abs=5e-8)
    assert o.ci_method == "analytic (Gwet)"
    z = 1.959963984540054
    assert o.ci_low == pytest.approx(o.estimate - z * o.se, rel=1e-12)
    assert o.ci_high == pytest.approx(o.estimate + z * o.se, rel=1e-12)
    # Never an interval from the null SE: the null SE is less than half the non-null one here.
    assert o.extra["se_null"] < 0.5 * o.se


def test_f1_wikipedia_worked_example() -> None:
    r = fleiss_kappa(F1)
    o = r.overall
    # Wikipedia "Fleiss' kappa": P-bar 0.378, P-bar_e 0.213, kappa 0.210 [P].
    assert round(o.estimate, 3) == 0.210
    assert round(o.extra["p_o"], 3) == 0.378
    assert round(o.extra["p_e"], 3) == 0.213
    # p_j 0.143 0.200 0.279 0.150 0.229 (from memory).
    assert [round(p, 3) for p in o.extra["proportions"]] == [0.143, 0.200, 0.279, 0.150, 0.229]
    # FNL (1979) applied to these data (REFERENCE-CHECKS F1, recomputed): SE0 0.0169651, z 12.374.
    assert o.extra["se_null"] == pytest.approx(0.0169651, abs=5e-8)
    assert round(o.z, 3) == 12.374
    kj = [round(e.estimate, 4) for e in r.by_category]
    assert kj == [0.2013, 0.0797, 0.1716, 0.0304, 0.5077]
    assert round(r.by_category[0].extra["se_null"], 5) == 0.03315


# --- identities ------------------------------------------------------------------------------


def test_two_raters_gives_scotts_pi_not_cohens_kappa() -> None:
    rng = np.random.default_rng(3)
    a = rng.integers(0, 3, 80)
    b = np.where(rng.random(80) < 0.7, a, rng.integers(0, 3, 80))
    kappa = fleiss_kappa(count_table(np.stack([a, b], 1), 3)).overall.estimate
    # Scott (1955): pi = (p_o - sum pbar_j^2) / (1 - sum pbar_j^2), pbar_j = pooled marginals.
    p_o = np.mean(a == b)
    pbar = (np.bincount(a, minlength=3) + np.bincount(b, minlength=3)) / 160
    scott = (p_o - (pbar**2).sum()) / (1 - (pbar**2).sum())
    pa, pb = np.bincount(a, minlength=3) / 80, np.bincount(b, minlength=3) / 80
    cohen = (p_o - pa @ pb) / (1 - pa @ pb)
    assert kappa == pytest.approx(scott, abs=1e-14)
    assert abs(kappa - cohen) > 1e-6


@pytest.mark.parametrize("seed", range(4))
def test_category_kappa_is_kappa_of_collapsed_table_and_overall_is_weighted_mean(seed: int) -> None:
    _, c = _random_counts(seed)
    r = fleiss_kappa(c)
    pi = np.array(r.overall.extra["proportions"])
    kj = np.array([e.estimate for e in r.by_category])
    for j in range(c.shape[1]):
        collapsed = np.stack([c[:, j], c.sum(1) - c[:, j]], axis=1)
        other = fleiss_kappa(collapsed)
        assert kj[j] == pytest.approx(other.overall.estimate, abs=1e-12)
        assert r.by_category[j].se == pytest.approx(other.overall.se, abs=1e-12)
    pq = pi * (1 - pi)
    assert r.overall.estimate == pytest.approx((pq @ kj) / pq.sum(), abs=1e-12)


def test_point_estimate_uses_features_and_from_sums() -> None:
    _, c = _random_counts(11)
    f = fleiss_kappa_features(c)
    assert f.shape == (c.shape[0], 3 + 2 * c.shape[1])
    assert fleiss_kappa(c).overall.estimate == pytest.approx(
        float(fleiss_kappa_from_sums(f.sum(0))), abs=1e-14
    )
    batch = np.stack([f[:20].sum(0), f[20:].sum(0), f.sum(0)]).reshape(3, 1, -1)
    out = fleiss_kappa_from_sums(batch)
    assert out.shape == (3, 1)
    assert out[0, 0] == pytest.approx(fleiss_kappa(c[:20]).overall.estimate, abs=1e-14)
    assert fleiss_kappa_by_category_from_sums(batch).shape == (3, 1, c.shape[1])


# --- cross-checks against reference libraries -------------------------------------------------


@pytest.mark.parametrize("seed", range(5))
def test_statsmodels_on_complete_random_studies(seed: int) -> None:
    from statsmodels.stats.inter_rater import fleiss_kappa as sm_fleiss

    _, c = _random_counts(seed, n=50, raters=6, missing=0.0)
    assert fleiss_kappa(c).overall.estimate == pytest.approx(sm_fleiss(c), abs=1e-12)


@pytest.mark.parametrize("seed", range(5))
def test_irrcac_on_random_studies_with_missing_ratings(seed: int) -> None:
    import pandas as pd
    from irrCAC.raw import CAC
    from scipy import stats

    codes, c = _random_counts(seed, n=45, raters=5, k=4, missing=0.3)
    df = pd.DataFrame(np.where(codes < 0, np.nan, codes.astype(float)))
    ref = CAC(df, categories=[0.0, 1.0, 2.0, 3.0], digits=17).fleiss()["est"]
    o = fleiss_kappa(c).overall
    assert o.estimate == pytest.approx(ref["coefficient_value"], abs=1e-12)
    assert o.extra["p_o"] == pytest.approx(ref["pa"], abs=1e-12)
    assert o.extra["p_e"] == pytest.approx(ref["pe"], abs=1e-12)
    assert o.se == pytest.approx(ref["se"], abs=1e-12)
    # Convention difference: irrCAC builds its interval with a t quantile on n - 1 degrees of
    # freedom (n = rated items); ours is the normal interval.
    n = int(df.dropna(how="all").shape[0])
    t = stats.t.ppf(0.975, n - 1)
    assert ref["confidence_interval"][0] == pytest.approx(o.estimate - t * o.se, abs=1e-12)
    assert o.ci_low == pytest.approx(o.estimate - 1.959963984540054 * o.se, abs=1e-12)


# --- the null variance with a varying number of ratings --------------------------------------


def test_null_se_with_varying_ratings_matches_simulation() -> None:
    """Our generalisation of the FNL (1979) null variance to varying ratings per item, checked
    by simulation under independence (ratings drawn from fixed proportions)."""
    rng = np.random.default_rng(2024)
    n, k, sims = 150, 3, 4000
    p = np.array([0.5, 0.3, 0.2])
    m = rng.choice([1, 2, 3, 5, 8], size=n, p=[0.1, 0.3, 0.3, 0.2, 0.1])
    m_max = m.max()
    slots = np.arange(m_max)[None, :] < m[:, None]
    draws = rng.choice(k, size=(sims, n, m_max), p=p)
    draws = np.where(slots[None], draws, -1)
    counts = np.stack([(draws == j).sum(-1) for j in range(k)], axis=-1)  # (sims, n, k)
    feats = np.stack([fleiss_kappa_features(counts[s]) for s in range(sims)])
    kappas = fleiss_kappa_from_sums(feats.sum(1))
    se_pred = np.mean(
        [fleiss_kappa(counts[s]).overall.extra["se_null"] for s in range(0, sims, 40)]
    )
    sd_sim = np.nanstd(kappas, ddof=1)
    # Monte Carlo error of an SD from 4000 draws is about 1.1 %; allow 6 %.
    assert se_pred == pytest.approx(sd_sim, rel=0.06)
    # The constant-m formula with the mean number of ratings would be visibly off here.
    mbar = m[m >= 2].mean()
    q = 1 - p
    pq = (p * q).sum()
    naive = math.sqrt(2 * (pq**2 - (p * q * (q - p)).sum()) / (n * mbar * (mbar - 1) * pq**2))
    assert abs(naive - sd_sim) / sd_sim > 0.1


# --- degenerate data --------------------------------------------------------------------------


def test_every_rating_in_one_category_is_undefined_with_words() -> None:
    r = fleiss_kappa(np.array([[3, 0, 0], [3, 0, 0], [3, 0, 0]]))
    assert r.overall.estimate is None
    assert any("chance agreement is 1" in w for w in r.overall.warnings)
    assert r.by_category[1].estimate is None
    assert any("no rating is in this category" in w for w in r.by_category[1].warnings)
    assert any("every rating is in this category" in w for w in r.by_category[0].warnings)
    assert r.overall.as_record()["estimate"] is None


def test_single_ratings_and_unrated_items_are_reported() -> None:
    c = np.array([[2, 1], [0, 3], [1, 0], [0, 0], [2, 2]])
    o = fleiss_kappa(c).overall
    assert o.items == 4
    assert o.extra["items_pairable"] == 3
    assert any("1 item(s) have no rating" in w for w in o.warnings)
    assert any("1 item(s) have a single rating" in w for w in o.warnings)
    assert o.estimate is not None


def test_no_item_with_two_ratings() -> None:
    o = fleiss_kappa(np.array([[1, 0], [0, 1]])).overall
    assert o.estimate is None
    assert any("no item has two or more ratings" in w for w in o.warnings)


def test_single_item_has_no_standard_error() -> None:
    o = fleiss_kappa(np.array([[2, 1, 1]])).overall
    assert o.estimate is not None and o.se is None and o.ci_low is None
    assert any("fewer than two rated items" in w for w in o.warnings)


def test_perfect_agreement_is_one() -> None:
    o = fleiss_kappa(np.array([[4, 0], [0, 4], [4, 0]])).overall
    assert o.estimate == pytest.approx(1.0, abs=1e-15)
    assert o.agreeing == 3


def test_bad_confidence_level() -> None:
    with pytest.raises(ValueError, match="confidence_level"):
        fleiss_kappa(F2, confidence_level=95)


# --------------------------------------------------------------------------- labels, range


def test_category_warnings_name_the_category_code() -> None:
    # category "C" (index 2) is never used: its kappa is undefined, and the warning names "C"
    counts = np.array([[3, 0, 0], [0, 3, 0], [2, 1, 0], [1, 2, 0]])
    named = fleiss_kappa(counts, labels=("A", "B", "C"))
    assert named.by_category[2].estimate is None
    assert any("category C" in w for w in named.by_category[2].warnings)
    assert not any("category 2" in w for w in named.by_category[2].warnings)
    plain = fleiss_kappa(counts)  # without labels: the index, as before
    assert any("category 2" in w for w in plain.by_category[2].warnings)
    # the numbers do not depend on the labels
    assert named.overall.estimate == plain.overall.estimate
    with pytest.raises(ValueError, match="labels"):
        fleiss_kappa(counts, labels=("A", "B"))


def test_analytic_interval_is_cut_to_the_range_of_kappa() -> None:
    """High agreement on few items: kappa + 1.96 SE passes 1.  Gwet's (2014) non-null variance
    (the method) gives an interval reaching past 1, which is cut to 1 with a warning; the
    estimate, SE and the null test are unchanged (hand check of the uncut bound below)."""
    counts = np.array([[3, 0], [3, 0], [0, 3], [0, 3], [2, 1], [3, 0]])
    res = fleiss_kappa(counts)
    ov = res.overall
    assert ov.estimate == pytest.approx(0.7662337662337664, abs=1e-12)
    assert ov.estimate + 1.959963984540054 * ov.se > 1.0  # the uncut normal interval
    assert ov.ci_high == 1.0
    assert ov.ci_low == pytest.approx(ov.estimate - 1.959963984540054 * ov.se, abs=1e-12)
    assert any("cut to the range -1 to 1" in w for w in ov.warnings)
    for est in res.by_category:
        assert -1.0 <= est.ci_low <= est.ci_high <= 1.0
