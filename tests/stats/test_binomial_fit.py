"""The binomial regression behind the gauge performance curve and the probability of detection.

Outside checks: statsmodels GLM (binomial family, logit and probit links) on the same data,
to 1e-6; the likelihood-ratio bound of MIL-HDBK-1823A (2009) against a profile likelihood
computed here with scipy.  Reference libraries are used in tests only.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import optimize, special, stats

from reportgen.stats.binomial_fit import fit_binomial, likelihood_ratio_bounds
from reportgen.stats.gauge_curve import adjusted_acceptance, analytic_method, t_quantile_975
from reportgen.stats.pod import detection
from reportgen.stats.zone import disagreement_zone

LINKS = {"logit": sm.families.links.Logit(), "probit": sm.families.links.Probit()}


def _data(seed: int, items: int = 20, trials: int = 20) -> tuple[np.ndarray, ...]:
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(1.0, 3.0, items))
    n = np.full(items, trials)
    k = rng.binomial(n, stats.norm.cdf((x - 2.0) / 0.3))
    return x, k, n


def _glm(x: np.ndarray, k: np.ndarray, n: np.ndarray, link: str):
    return sm.GLM(
        np.column_stack([k, n - k]), sm.add_constant(x), family=sm.families.Binomial(LINKS[link])
    ).fit(tol=1e-14, maxiter=200)


@pytest.mark.parametrize("link", ["logit", "probit"])
@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
def test_fit_matches_statsmodels_glm(link: str, seed: int) -> None:
    x, k, n = _data(seed)
    ours = fit_binomial(x, k, n, link)  # type: ignore[arg-type]
    ref = _glm(x, k, n, link)
    assert ours.b0 == pytest.approx(ref.params[0], abs=1e-6)
    assert ours.b1 == pytest.approx(ref.params[1], abs=1e-6)
    assert np.allclose(np.array(ours.cov), ref.cov_params(), atol=1e-6, rtol=1e-6)
    assert ours.deviance == pytest.approx(ref.deviance, abs=1e-6)
    assert ours.pearson_chi2 == pytest.approx(ref.pearson_chi2, abs=1e-6)
    # statsmodels' log-likelihood includes the binomial coefficients; ours leaves them out
    const = float(np.sum([math.log(math.comb(int(a), int(b))) for a, b in zip(n, k, strict=True)]))
    assert ours.loglik + const == pytest.approx(ref.llf, abs=1e-6)


@pytest.mark.parametrize("link", ["logit", "probit"])
def test_a50_a90_and_delta_bound_match_statsmodels(link: str) -> None:
    x, k, n = _data(11)
    ours = fit_binomial(x, k, n, link)  # type: ignore[arg-type]
    ref = _glm(x, k, n, link)
    b0, b1 = ref.params
    g90 = stats.norm.ppf(0.9) if link == "probit" else math.log(9.0)
    a50, a90 = -b0 / b1, (g90 - b0) / b1
    grad = np.array([-1 / b1, -a90 / b1])
    se90 = math.sqrt(grad @ ref.cov_params() @ grad)
    assert ours.quantile(0.5) == pytest.approx(a50, abs=1e-6)
    assert ours.quantile(0.9) == pytest.approx(a90, abs=1e-6)
    assert ours.quantile_se(0.9) == pytest.approx(se90, abs=1e-6)
    pod = detection(x, k, n, link=link)  # type: ignore[arg-type]
    assert pod["a90_95_delta"] == pytest.approx(a90 + stats.norm.ppf(0.95) * se90, abs=1e-6)
    # the band: F(eta -/+ z se(eta)) from statsmodels' covariance
    grid = np.array([1.5, 2.0, 2.5])
    lo, hi = ours.band(grid, 1.959963984540054)
    X = sm.add_constant(grid)
    se = np.sqrt(np.einsum("ij,jk,ik->i", X, ref.cov_params(), X))
    F = stats.norm.cdf if link == "probit" else special.expit
    eta = X @ ref.params
    assert np.allclose(lo, F(eta - 1.959963984540054 * se), atol=1e-6)
    assert np.allclose(hi, F(eta + 1.959963984540054 * se), atol=1e-6)


def _scipy_profile_bound(x, k, n, link: str, p: float, level: float) -> float:
    """Upper likelihood-ratio limit of x_p, from a profile likelihood computed with scipy."""
    F = stats.norm.cdf if link == "probit" else special.expit
    g = stats.norm.ppf(p) if link == "probit" else math.log(p / (1 - p))

    def ll(eta):
        q = np.clip(F(eta), 1e-300, 1 - 1e-16)
        return float(np.sum(k * np.log(q) + (n - k) * np.log1p(-q)))

    ref = _glm(x, k, n, link)
    lmax = ll(ref.params[0] + ref.params[1] * x)
    xp = (g - ref.params[0]) / ref.params[1]

    def prof(a):
        res = optimize.minimize_scalar(
            lambda b1: -ll(g + b1 * (x - a)),
            bounds=(1e-6, 50 * ref.params[1]),
            method="bounded",
            options={"xatol": 1e-12},
        )
        return -res.fun

    crit = stats.chi2.ppf(2 * level - 1, 1)
    return optimize.brentq(lambda a: 2 * (lmax - prof(a)) - crit, xp, xp + 5.0, xtol=1e-12)


@pytest.mark.parametrize("link", ["logit", "probit"])
@pytest.mark.parametrize("seed", [7, 8])
def test_likelihood_ratio_bound_matches_a_scipy_profile_likelihood(link: str, seed: int) -> None:
    x, k, n = _data(seed)
    fit = fit_binomial(x, k, n, link)  # type: ignore[arg-type]
    _, ours = likelihood_ratio_bounds(fit, 0.9, 0.95)
    assert ours == pytest.approx(_scipy_profile_bound(x, k, n, link, 0.9, 0.95), abs=1e-6)
    assert ours > fit.quantile(0.9)


def test_pod_refuses_without_misses_without_hits_and_on_separation() -> None:
    x = np.array([1.0, 2.0, 3.0, 4.0])
    n = np.full(4, 5)
    assert "no failures" in detection(x, n, n)["refused"]
    assert "no successes" in detection(x, np.zeros(4), n)["refused"]
    sep = detection(x, np.array([0, 0, 5, 5]), n)
    assert "separated" in sep["refused"] and "a90" not in sep
    assert (
        "above zero"
        in detection(np.array([0.0, 1, 2, 3]), np.array([0, 1, 3, 5]), n, log_size=True)["refused"]
    )


def test_log_size_axis_reports_sizes_back_on_the_value_scale() -> None:
    x, k, n = _data(3)
    lin = detection(np.log(np.exp(x)), k, n)
    log = detection(np.exp(x), k, n, log_size=True)
    assert log["a90"] == pytest.approx(math.exp(lin["a90"]), rel=1e-9)
    assert log["a90_95"] == pytest.approx(math.exp(lin["a90_95"]), rel=1e-9)


def test_small_count_adjustment() -> None:
    # AIAG MSA 4th ed. (2010), ch. III C (from memory): (a+0.5)/m below one half, (a-0.5)/m above
    assert adjusted_acceptance(0, 20) == 0.0
    assert adjusted_acceptance(20, 20) == 1.0
    assert adjusted_acceptance(10, 20) == 0.5
    assert adjusted_acceptance(3, 20) == pytest.approx(0.175)
    assert adjusted_acceptance(17, 20) == pytest.approx(0.825)
    with pytest.raises(ValueError):
        adjusted_acceptance(21, 20)


def test_t_quantile_matches_scipy() -> None:
    for df in (9, 19, 29, 99):
        assert t_quantile_975(df) == pytest.approx(stats.t.ppf(0.975, df), abs=2e-4)
    assert t_quantile_975(19) == pytest.approx(2.093, abs=5e-4)  # Student t table, 19 df


def test_analytic_method_mechanics_against_an_independent_computation() -> None:
    # an upper limit: acceptance falls with the value
    v = np.array([9.90, 9.94, 9.96, 9.97, 9.98, 9.99, 10.00, 10.01, 10.02, 10.06])
    a = np.array([20, 20, 18, 16, 13, 9, 6, 3, 1, 0])
    m = np.full(10, 20)
    res = analytic_method(v, a, m, 10.0, "upper")
    mid = (a > 0) & (a < 20)
    p = np.array([adjusted_acceptance(int(x), 20) for x in a[mid]])
    slope, intercept = np.polyfit(v[mid], stats.norm.ppf(p), 1)
    at50 = -intercept / slope
    span = (stats.norm.ppf(0.005) - stats.norm.ppf(0.995)) / slope
    assert res.points == 7
    assert res.value_at_50 == pytest.approx(at50, abs=1e-9)
    assert res.bias == pytest.approx(at50 - 10.0, abs=1e-9)
    assert res.repeatability == pytest.approx(span / 1.08, abs=1e-9)
    assert res.t == pytest.approx(31.3 * abs(at50 - 10.0) / (span / 1.08), abs=1e-9)
    assert res.warnings == ()
    # fewer than six items in between: the design warning
    few = analytic_method(v[[0, 1, 4, 5, 8, 9]], a[[0, 1, 4, 5, 8, 9]], m[:6], 10.0, "upper")
    assert any("at least 6" in w for w in few.warnings)


def test_disagreement_zone_by_hand() -> None:
    # values with accept counts out of 6: rejects lie above (upper limit)
    v = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0])
    acc = np.array([6, 6, 5, 6, 2, 0, 0])
    z = disagreement_zone(v, acc, np.full(7, 6), "upper")
    # last all-accept item not beyond a mixed one: 2.0; first all-reject past every accept: 6.0
    assert (z["accept_end"], z["reject_end"], z["width"]) == (2.0, 6.0, 4.0)
    assert [v[i] for i in z["inside"]] == [3.0, 4.0, 5.0]
    low = disagreement_zone(-v, acc, np.full(7, 6), "lower")  # mirrored: same zone
    assert (low["accept_end"], low["reject_end"], low["width"]) == (-2.0, -6.0, 4.0)
