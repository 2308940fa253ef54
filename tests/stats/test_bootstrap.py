"""Item bootstrap over feature patterns: reproducibility, sampling law, agreement with scipy.

Sources: Efron (1987, JASA 82:171-185) and Efron & Tibshirani (1993, An Introduction to the
Bootstrap, ch. 13-14) for the percentile and BCa intervals; scipy.stats.bootstrap as an
independent implementation (test-only).
"""

from __future__ import annotations

import numpy as np
import pytest

from reportgen.stats.bootstrap import bootstrap, bootstrap_many, draw_pattern_counts
from reportgen.stats.fleiss import fleiss_kappa, fleiss_kappa_features, fleiss_kappa_from_sums
from reportgen.stats.gwet import gwet_ac, gwet_ac_features, gwet_ac_from_sums
from reportgen.stats.tables import compress, count_table


def _study(seed: int, n: int = 60, raters: int = 4, k: int = 3, agree: float = 0.6):
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, k, n)
    codes = np.where(
        rng.random((n, raters)) < agree, truth[:, None], rng.integers(0, k, (n, raters))
    )
    codes[rng.random((n, raters)) < 0.1] = -1
    return count_table(codes, k)


def test_reproducible_under_seed_and_seed_matters() -> None:
    f = fleiss_kappa_features(_study(1))
    a = bootstrap(f, fleiss_kappa_from_sums, resamples=500, seed=7)
    b = bootstrap(f, fleiss_kappa_from_sums, resamples=500, seed=7)
    c = bootstrap(f, fleiss_kappa_from_sums, resamples=500, seed=8)
    assert a == b
    assert (a.ci_low, a.ci_high) != (c.ci_low, c.ci_high)
    assert a.seed == 7 and a.resamples == 500 and a.valid == 500
    assert a.method == "bootstrap BCa"
    d = bootstrap(f, fleiss_kappa_from_sums, resamples=500, rng=np.random.default_rng(7))
    assert (d.ci_low, d.ci_high) == (a.ci_low, a.ci_high) and d.seed is None


def test_estimate_is_the_point_estimate() -> None:
    c = _study(2)
    r = bootstrap(fleiss_kappa_features(c), fleiss_kappa_from_sums, resamples=200, seed=1)
    assert r.estimate == pytest.approx(fleiss_kappa(c).overall.estimate, abs=1e-14)
    assert r.ci_low < r.estimate < r.ci_high


@pytest.mark.parametrize(
    "mult",
    [
        [5, 1, 1, 3, 40],  # few patterns: conditional binomials only
        [1] * 150 + [2] * 60 + [3] * 30 + [7] * 10 + list(range(8, 60)) + [500, 900],  # mixed
    ],
)
def test_pattern_counts_follow_the_multinomial_law(mult: list[int]) -> None:
    m = np.array(mult)
    n = int(m.sum())
    reps = 20000
    w = draw_pattern_counts(np.random.default_rng(3), m, reps)
    assert w.shape == (reps, m.size)
    assert np.all(w.sum(1) == n)
    p = m / n
    # Means n p and variances n p (1 - p) of the multinomial, within 5 Monte Carlo SEs.
    sd = np.sqrt(n * p * (1 - p))
    assert np.all(np.abs(w.mean(0) - n * p) < 5 * sd / np.sqrt(reps) + 1e-12)
    np.testing.assert_allclose(w.var(0, ddof=1), sd**2, rtol=0.08)
    # Covariances -n p_i p_j: between the rare patterns taken together and the largest one, and
    # between two single patterns; tolerance 5 Monte Carlo SEs (about sd_i sd_j / sqrt(reps)).
    rare = m < 8
    tot = w[:, rare].sum(1)
    p_rare = p[rare].sum()
    cov = np.cov(tot, w[:, -1])[0, 1]
    tol = 5 * np.sqrt(n * p_rare * (1 - p_rare)) * sd[-1] / np.sqrt(reps)
    assert abs(cov - (-n * p_rare * p[-1])) < tol
    cov01 = np.cov(w[:, 0], w[:, -2])[0, 1]
    assert abs(cov01 - (-n * p[0] * p[-2])) < 5 * sd[0] * sd[-2] / np.sqrt(reps)


def test_same_law_with_patterns_and_multiplicities() -> None:
    c = _study(4, n=200)
    pat = compress(c)
    f_items = fleiss_kappa_features(c)
    f_pat = fleiss_kappa_features(pat.rows)
    a = bootstrap(f_items, fleiss_kappa_from_sums, resamples=4000, seed=1, method="percentile")
    b = bootstrap(
        f_pat,
        fleiss_kappa_from_sums,
        resamples=4000,
        seed=2,
        method="percentile",
        multiplicity=pat.multiplicity,
    )
    assert a.estimate == pytest.approx(b.estimate, abs=1e-14)
    assert a.se == pytest.approx(b.se, rel=0.08)


def test_matches_scipy_bootstrap_on_item_resampling() -> None:
    from scipy import stats

    c = _study(5, n=40)
    idx = np.arange(c.shape[0])

    def kappa_of(items: np.ndarray) -> float:
        return float(fleiss_kappa_from_sums(fleiss_kappa_features(c[items]).sum(0)))

    ours = bootstrap(fleiss_kappa_features(c), fleiss_kappa_from_sums, resamples=6000, seed=11)
    ref = stats.bootstrap(
        (idx,),
        kappa_of,
        vectorized=False,
        n_resamples=6000,
        method="BCa",
        random_state=np.random.default_rng(12),
    )
    se = ref.standard_error
    assert ours.se == pytest.approx(se, rel=0.08)
    assert ours.ci_low == pytest.approx(ref.confidence_interval.low, abs=0.2 * se)
    assert ours.ci_high == pytest.approx(ref.confidence_interval.high, abs=0.2 * se)
    pct = bootstrap(
        fleiss_kappa_features(c),
        fleiss_kappa_from_sums,
        resamples=6000,
        seed=11,
        method="percentile",
    )
    ref_p = stats.bootstrap(
        (idx,),
        kappa_of,
        vectorized=False,
        n_resamples=6000,
        method="percentile",
        random_state=np.random.default_rng(13),
    )
    assert pct.ci_low == pytest.approx(ref_p.confidence_interval.low, abs=0.2 * se)
    assert pct.ci_high == pytest.approx(ref_p.confidence_interval.high, abs=0.2 * se)


def test_bootstrap_se_close_to_analytic_se_on_a_large_sample() -> None:
    c = _study(6, n=3000, raters=5, k=4)
    pat = compress(c)
    r = bootstrap(
        gwet_ac_features(pat.rows),
        gwet_ac_from_sums,
        resamples=3000,
        seed=3,
        multiplicity=pat.multiplicity,
    )
    assert r.se == pytest.approx(gwet_ac(c).se, rel=0.07)
    rf = bootstrap(
        fleiss_kappa_features(pat.rows),
        fleiss_kappa_from_sums,
        resamples=3000,
        seed=3,
        multiplicity=pat.multiplicity,
    )
    assert rf.se == pytest.approx(fleiss_kappa(c).overall.se, rel=0.07)


def test_bca_close_to_percentile_for_a_symmetric_unbiased_statistic() -> None:
    rng = np.random.default_rng(9)
    x = rng.normal(size=4000)
    x = np.concatenate([x, -x])  # exactly symmetric sample
    f = np.stack([x, np.ones_like(x)], axis=1)

    def mean(s: np.ndarray) -> np.ndarray:
        return s[..., 0] / s[..., 1]

    bca = bootstrap(f, mean, resamples=4000, seed=1, method="bca")
    pct = bootstrap(f, mean, resamples=4000, seed=1, method="percentile")
    assert bca.ci_low == pytest.approx(pct.ci_low, abs=0.05 * pct.se)
    assert bca.ci_high == pytest.approx(pct.ci_high, abs=0.05 * pct.se)
    # and both near the normal interval mean ± 1.96 SE/sqrt(n)
    se = x.std(ddof=1) / np.sqrt(x.size)
    assert pct.ci_high == pytest.approx(1.959964 * se, abs=0.1 * se)


def test_bca_shifts_for_a_skewed_statistic() -> None:
    """For the variance of a skewed sample BCa moves the interval up relative to the percentile
    interval (Efron & Tibshirani 1993, ch. 14: the percentile interval is too far left)."""
    rng = np.random.default_rng(10)
    x = rng.exponential(size=80)
    f = np.stack([np.ones_like(x), x, x * x], axis=1)

    def var(s: np.ndarray) -> np.ndarray:
        n = s[..., 0]
        return (s[..., 2] - s[..., 1] ** 2 / n) / (n - 1)

    bca = bootstrap(f, var, resamples=4000, seed=2)
    pct = bootstrap(f, var, resamples=4000, seed=2, method="percentile")
    assert bca.ci_high > pct.ci_high and bca.ci_low > pct.ci_low


def test_undefined_replicates_are_counted_and_left_out() -> None:
    # The statistic is undefined when the resample contains no item of the rare kind.
    x = np.zeros(30)
    x[0] = 1.0
    f = np.stack([x, np.ones(30)], axis=1)

    def stat(s: np.ndarray) -> np.ndarray:
        return np.where(s[..., 0] > 0, s[..., 1] / np.maximum(s[..., 0], 1), np.nan)

    r = bootstrap(f, stat, resamples=2000, seed=4, method="percentile")
    assert r.valid < 2000
    # P(no draw of the rare item) = (29/30)^30 = 0.362; within 5 Monte Carlo SEs.
    assert (2000 - r.valid) / 2000 == pytest.approx((29 / 30) ** 30, abs=5 * 0.0108)
    assert any("undefined" in w and "left out" in w for w in r.warnings)


def test_degenerate_inputs() -> None:
    same = np.tile([[1.0, 1.0]], (10, 1))
    r = bootstrap(same, lambda s: s[..., 0] / s[..., 1], resamples=100, seed=1)
    assert r.ci_low == r.ci_high == pytest.approx(1.0)
    assert any("same value" in w for w in r.warnings)
    undefined = bootstrap(same, lambda s: s[..., 0] * np.nan, resamples=100, seed=1)
    assert undefined.estimate is None and undefined.ci_low is None
    assert undefined.warnings


def test_bootstrap_many_shares_the_item_draws() -> None:
    c = _study(7)
    f = fleiss_kappa_features(c)
    g = gwet_ac_features(c)
    out = bootstrap_many(
        {"a": f, "b": f, "ac1": g},
        {"a": fleiss_kappa_from_sums, "b": fleiss_kappa_from_sums, "ac1": gwet_ac_from_sums},
        resamples=300,
        seed=5,
    )
    assert out["a"] == out["b"]
    assert out["ac1"].estimate == pytest.approx(gwet_ac(c).estimate, abs=1e-14)
    again = bootstrap_many(
        {"a": f, "b": f, "ac1": g},
        {"a": fleiss_kappa_from_sums, "b": fleiss_kappa_from_sums, "ac1": gwet_ac_from_sums},
        resamples=300,
        seed=5,
    )
    assert again == out


def test_input_validation() -> None:
    f = np.ones((5, 2))
    with pytest.raises(ValueError, match="method"):
        bootstrap(f, lambda s: s[..., 0], method="basic")
    with pytest.raises(ValueError, match="either seed or rng"):
        bootstrap(f, lambda s: s[..., 0], seed=1, rng=np.random.default_rng(1))
    with pytest.raises(ValueError, match="resamples"):
        bootstrap(f, lambda s: s[..., 0], resamples=1)
    with pytest.raises(ValueError, match="2-D"):
        bootstrap(np.ones(5), lambda s: s[..., 0])
    with pytest.raises(ValueError, match="same keys"):
        bootstrap_many({"a": f}, {"b": lambda s: s[..., 0]})
    with pytest.raises(ValueError, match="multiplicity"):
        bootstrap(f, lambda s: s[..., 0], multiplicity=np.ones(3, dtype=int))


def test_poissonised_sampler_marginals_are_exactly_binomial() -> None:
    """The fast sampler's marginal count of one pattern is Binomial(n, m_p / n); chi-square
    goodness of fit over 40,000 replicates (scipy for the reference pmf)."""
    from scipy import stats

    mult = np.array([1] * 70 + [2] * 10 + [30] * 3 + [100, 250])
    n = int(mult.sum())
    w = draw_pattern_counts(np.random.default_rng(21), mult, 40000)
    assert np.all(w.sum(1) == n)
    for col in (0, 70, 80, mult.size - 2):
        x = w[:, col].astype(int)
        pmf = stats.binom.pmf(np.arange(x.max() + 1), n, mult[col] / n)
        expected = 40000 * pmf
        keep = expected >= 5
        observed = np.bincount(x, minlength=pmf.size)
        obs = np.append(observed[keep], observed[~keep].sum())
        exp = np.append(expected[keep], 40000 - expected[keep].sum())
        if exp[-1] < 5:  # merge a thin remainder into the last kept cell
            obs, exp = np.append(obs[:-2], obs[-2:].sum()), np.append(exp[:-2], exp[-2:].sum())
        chi2 = float(((obs - exp) ** 2 / exp).sum())
        assert stats.chi2.sf(chi2, obs.size - 1) > 1e-4


def test_bca_falls_back_to_percentile_when_every_resample_is_on_one_side() -> None:
    x = np.random.default_rng(3).normal(size=50)
    xbar = x.mean()
    f = np.stack([x, np.ones_like(x)], axis=1)

    def sq_dev(s: np.ndarray) -> np.ndarray:  # 0 at the estimate, positive in every resample
        return (s[..., 0] / s[..., 1] - xbar) ** 2

    r = bootstrap(f, sq_dev, resamples=500, seed=1)
    assert r.method == "bootstrap percentile"
    assert any("BCa correction not possible" in w for w in r.warnings)
    assert r.ci_low is not None and r.ci_low >= 0.0


# --------------------------------------------------------------------------- samplers, by path


def _chi2_binomial_ok(w: np.ndarray, col: int, n: int, p: float) -> bool:
    from scipy import stats

    reps = w.shape[0]
    x = w[:, col].astype(int)
    pmf = stats.binom.pmf(np.arange(x.max() + 1), n, p)
    expected = reps * pmf
    keep = expected >= 5
    observed = np.bincount(x, minlength=pmf.size)
    obs = np.append(observed[keep], observed[~keep].sum())
    exp = np.append(expected[keep], reps - expected[keep].sum())
    if exp[-1] < 5:
        obs, exp = np.append(obs[:-2], obs[-2:].sum()), np.append(exp[:-2], exp[-2:].sum())
    chi2 = float(((obs - exp) ** 2 / exp).sum())
    return bool(stats.chi2.sf(chi2, obs.size - 1) > 1e-4)


def test_poissonised_sampler_on_a_large_study_is_exactly_multinomial() -> None:
    """More than 2,048 items: the Poissonised sampler (stacked lookup tables for multiplicities
    up to 64, Generator.poisson above).  Marginals are Binomial(n, m_p / n) (chi-square) and the
    covariance of two patterns is -n p q (multinomial law)."""
    mult = np.array([1] * 900 + [2] * 300 + [7] * 40 + [64] * 10 + [65] * 4 + [400, 1500])
    n = int(mult.sum())
    assert n > 2048
    reps = 30000
    w = draw_pattern_counts(np.random.default_rng(5), mult, reps)
    assert np.all(w.sum(1) == n)
    for col in (0, 900, 1200, 1240, 1250, mult.size - 1):
        assert _chi2_binomial_ok(w, col, n, mult[col] / n), col
    # covariance of the two largest patterns: -n p q, within 4 standard errors
    p, q = mult[-2] / n, mult[-1] / n
    cov = np.cov(w[:, -2], w[:, -1])[0, 1]
    sd_a, sd_b = np.sqrt(n * p * (1 - p)), np.sqrt(n * q * (1 - q))
    assert abs(cov - (-n * p * q)) < 4 * sd_a * sd_b / np.sqrt(reps) * 1.5


def test_item_draw_sampler_on_a_small_study_is_exactly_multinomial() -> None:
    """At most 2,048 items: the items themselves are drawn (n uniform integers per replicate)."""
    mult = np.array([1, 1, 3, 5, 40])
    n = int(mult.sum())
    w = draw_pattern_counts(np.random.default_rng(8), mult, 40000)
    assert np.all(w.sum(1) == n)
    for col in range(mult.size):
        assert _chi2_binomial_ok(w, col, n, mult[col] / n), col
    # every pattern a single item: the identity fast path, same law
    w1 = draw_pattern_counts(np.random.default_rng(8), np.ones(30, dtype=np.int64), 40000)
    assert np.all(w1.sum(1) == 30)
    assert _chi2_binomial_ok(w1, 7, 30, 1 / 30)


def test_sorted_quantile_is_numpys_linear_quantile() -> None:
    from reportgen.stats.bootstrap import _quantile_positions, _sorted_quantile

    rng = np.random.default_rng(2)
    for size in (2, 3, 17, 2000):
        raw = rng.normal(size=size)
        x = np.sort(raw)
        for p in (0.0, 0.025, 0.3, 0.5, 0.975, 0.999, 1.0):
            assert _sorted_quantile(x, p) == pytest.approx(float(np.quantile(x, p)), abs=1e-15)
            # a partial sort at the two positions is enough (what _interval does)
            part = np.partition(raw, list(_quantile_positions(size, p)))
            assert _sorted_quantile(part, p) == pytest.approx(float(np.quantile(raw, p)), abs=1e-15)


# --------------------------------------------------------------------------- feature groups


def test_lone_group_is_the_plain_bootstrap() -> None:
    from reportgen.stats.bootstrap import FeatureGroup, bootstrap_groups

    c = _study(11, n=300)
    f = fleiss_kappa_features(c)
    plain = bootstrap(f, fleiss_kappa_from_sums, resamples=500, seed=4)
    grouped = bootstrap_groups(
        {"g": FeatureGroup.of_items(f)},
        {"k": ("g", fleiss_kappa_from_sums)},
        resamples=500,
        seed=4,
    )["k"]
    assert grouped == plain


def test_groups_share_the_same_item_draws() -> None:
    """One statistic computed from two differently compressed groups (count patterns vs one row
    per item) gets the same replicate values: every group sees the same resampled items."""
    from reportgen.stats.bootstrap import FeatureGroup, bootstrap_groups
    from reportgen.stats.tables import count_patterns

    rng = np.random.default_rng(12)
    codes = rng.integers(-1, 3, size=(700, 4))
    pat = count_patterns(codes, 3)
    assert pat.n_patterns < 700  # compressed
    per_pattern = FeatureGroup(fleiss_kappa_features(pat.rows), pat.multiplicity, pat.inverse)
    per_item_f = fleiss_kappa_features(count_table(codes, 3))
    per_item = FeatureGroup(per_item_f, np.ones(700, dtype=np.int64), np.arange(700))
    # a third group whose rows identify the items completely (like rater-identified features)
    ident = FeatureGroup(np.eye(700)[:, :3] + 0.0, np.ones(700, dtype=np.int64), np.arange(700))
    out = bootstrap_groups(
        {"pat": per_pattern, "items": per_item, "ident": ident},
        {
            "a": ("pat", fleiss_kappa_from_sums),
            "b": ("items", fleiss_kappa_from_sums),
            "c": ("ident", lambda s: s[..., 0]),
        },
        resamples=400,
        seed=3,
    )
    a, b = out["a"], out["b"]
    assert a.estimate == pytest.approx(b.estimate, abs=1e-13)
    assert a.ci_low == pytest.approx(b.ci_low, abs=1e-12)
    assert a.ci_high == pytest.approx(b.ci_high, abs=1e-12)
    assert a.se == pytest.approx(b.se, abs=1e-12)
    # and the same law as bootstrapping the group alone (another draw): SE within 15 %
    alone = bootstrap(per_item_f, fleiss_kappa_from_sums, resamples=400, seed=3)
    assert a.se == pytest.approx(alone.se, rel=0.15)


def test_groups_input_validation() -> None:
    from reportgen.stats.bootstrap import FeatureGroup, bootstrap_groups

    f = np.ones((4, 2))
    g1 = FeatureGroup(f, np.ones(4, dtype=np.int64), np.arange(4))
    g2 = FeatureGroup(f[:3], np.array([1, 1, 1]), np.arange(3))
    with pytest.raises(ValueError, match="unknown feature group"):
        bootstrap_groups({"a": g1}, {"x": ("b", lambda s: s[..., 0])})
    with pytest.raises(ValueError, match="same items"):
        bootstrap_groups(
            {"a": g1, "b": g2}, {"x": ("a", lambda s: s[..., 0]), "y": ("b", lambda s: s[..., 0])}
        )
    no_map = FeatureGroup(f, np.ones(4, dtype=np.int64))
    with pytest.raises(ValueError, match="inverse"):
        bootstrap_groups(
            {"a": g1, "b": no_map},
            {"x": ("a", lambda s: s[..., 0]), "y": ("b", lambda s: s[..., 0])},
        )


def test_bootstrap_many_compresses_a_shared_matrix_once() -> None:
    """The per-category kappas pass one matrix under several keys: one group, one compression;
    a second, distinct matrix whose rows never repeat does not spoil it."""
    from reportgen.stats import bootstrap as bmod

    c = _study(5, n=2000)
    f = fleiss_kappa_features(c)
    seen: list[int] = []
    real = bmod.FeatureGroup.of_items

    def spy(features: np.ndarray) -> bmod.FeatureGroup:
        grp = real(features)
        seen.append(grp.features.shape[0])
        return grp

    bmod.FeatureGroup.of_items = staticmethod(spy)  # type: ignore[assignment, method-assign]
    try:
        noisy = np.random.default_rng(0).random((2000, 2))
        out = bootstrap_many(
            {"a": f, "b": f, "c": f, "n": noisy},
            {
                "a": fleiss_kappa_from_sums,
                "b": fleiss_kappa_from_sums,
                "c": fleiss_kappa_from_sums,
                "n": lambda s: s[..., 0] / s[..., 1],
            },
            resamples=200,
            seed=1,
        )
    finally:
        bmod.FeatureGroup.of_items = real  # type: ignore[method-assign]
    assert len(seen) == 2  # one compression per distinct matrix
    assert min(seen) < 2000 and max(seen) == 2000
    assert out["a"] == out["b"] == out["c"]
