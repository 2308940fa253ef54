"""Proportions with Clopper-Pearson / Wilson intervals and the zero-failure sample size.

Sources named beside each check.  scipy appears only here, as an independent cross-check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from reportgen.stats.proportion import (
    clopper_pearson_interval,
    normal_quantile,
    proportion,
    wilson_interval,
    zero_failure_sample_size,
)

# --------------------------------------------------------------------------- published values

# Newcombe, R. G. (1998). Two-sided confidence intervals for the single proportion: comparison
# of seven methods. Statistics in Medicine 17:857-872, Table II (illustrative 95 % intervals;
# method 3 = score/Wilson without continuity correction, method 5 = exact Clopper-Pearson).
# Values from memory (not re-read in the paper); printed to 4 decimals.
NEWCOMBE_1998_TABLE_II = [
    # x, n, (CP low, CP high), (Wilson low, Wilson high)
    (81, 263, (0.2527, 0.3676), (0.2553, 0.3662)),
    (15, 148, (0.0578, 0.1617), (0.0624, 0.1605)),
    (0, 20, (0.0, 0.1684), (0.0, 0.1611)),
    (1, 29, (0.0009, 0.1776), (0.0061, 0.1718)),
]


@pytest.mark.parametrize(("x", "n", "cp", "wilson"), NEWCOMBE_1998_TABLE_II)
def test_newcombe_1998_table_ii_from_memory(
    x: int, n: int, cp: tuple[float, float], wilson: tuple[float, float]
) -> None:
    # Newcombe (1998) Table II, from memory, 4 decimals.
    e_cp = proportion(x, n, method="clopper-pearson")
    assert round(e_cp.ci_low, 4) == cp[0]
    assert round(e_cp.ci_high, 4) == cp[1]
    e_w = proportion(x, n, method="wilson")
    assert round(e_w.ci_low, 4) == wilson[0]
    assert round(e_w.ci_high, 4) == wilson[1]


def test_conover_1999_exact_limits_5_of_25() -> None:
    # Conover, W. J. (1999) Practical Nonparametric Statistics, 3rd ed., binomial confidence
    # limits table: 5 successes in 25 trials, 95 % exact limits 0.068 and 0.407 (3 decimals;
    # read in a public page quoting the table).
    e = proportion(5, 25)
    assert e.estimate == 0.2
    assert round(e.ci_low, 3) == 0.068
    assert round(e.ci_high, 3) == 0.407
    assert e.ci_method == "exact (Clopper-Pearson 1934)"


def test_clopper_pearson_closed_forms_at_the_edges() -> None:
    # Clopper & Pearson (1934): with x = 0 the upper limit solves (1 - p)^n = a/2, so
    # p_U = 1 - (a/2)^(1/n) and the lower limit is 0; symmetrically for x = n.
    for n in (1, 5, 20, 300):
        low, high = clopper_pearson_interval(0, n, 0.95)
        assert low == 0.0
        assert high == pytest.approx(1.0 - 0.025 ** (1.0 / n), rel=1e-12)
        low, high = clopper_pearson_interval(n, n, 0.95)
        assert high == 1.0
        assert low == pytest.approx(0.025 ** (1.0 / n), rel=1e-12)


def test_wilson_edges_are_pinned() -> None:
    # Wilson (1927): at x = 0 the score interval starts at 0; at x = n it ends at 1.
    assert wilson_interval(0, 20)[0] == 0.0
    assert wilson_interval(20, 20)[1] == 1.0
    # The other limit of 0/n is z²/(n + z²) (closed form of the score interval).
    z = normal_quantile(0.95)
    assert wilson_interval(0, 20)[1] == pytest.approx(z * z / (20 + z * z), rel=1e-12)


# --------------------------------------------------------------------------- defining properties


@pytest.mark.parametrize(("x", "n"), [(1, 10), (7, 13), (40, 50), (199, 200), (3, 1000)])
def test_clopper_pearson_tails_equal_half_alpha(x: int, n: int) -> None:
    # Definition (Clopper & Pearson 1934): P(X >= x | p_L) = a/2 and P(X <= x | p_U) = a/2.
    from scipy.stats import binom

    low, high = clopper_pearson_interval(x, n, 0.90)
    assert binom.sf(x - 1, n, low) == pytest.approx(0.05, rel=1e-9)
    assert binom.cdf(x, n, high) == pytest.approx(0.05, rel=1e-9)


@pytest.mark.parametrize(("x", "n"), [(1, 10), (7, 13), (40, 50), (199, 200)])
def test_wilson_limits_invert_the_score_test(x: int, n: int) -> None:
    # Wilson (1927): the limits are the p where |x/n - p| / sqrt(p(1-p)/n) equals z.
    z = normal_quantile(0.95)
    for p in wilson_interval(x, n, 0.95):
        assert abs(x / n - p) / math.sqrt(p * (1 - p) / n) == pytest.approx(z, rel=1e-10)


def test_cross_check_against_scipy_binomtest() -> None:
    # Independent implementation: scipy.stats.binomtest(...).proportion_ci (test-only).
    from scipy.stats import binomtest

    rng = np.random.default_rng(20261201)
    for _ in range(200):
        n = int(rng.integers(1, 400))
        x = int(rng.integers(0, n + 1))
        level = float(rng.choice([0.8, 0.9, 0.95, 0.99]))
        ref = binomtest(x, n).proportion_ci(confidence_level=level, method="exact")
        ours = proportion(x, n, confidence_level=level)
        assert ours.ci_low == pytest.approx(ref.low, abs=1e-12)
        assert ours.ci_high == pytest.approx(ref.high, abs=1e-12)
        ref = binomtest(x, n).proportion_ci(confidence_level=level, method="wilson")
        ours = proportion(x, n, confidence_level=level, method="wilson")
        assert ours.ci_low == pytest.approx(ref.low, abs=1e-12)
        assert ours.ci_high == pytest.approx(ref.high, abs=1e-12)


def test_estimate_fields_and_record() -> None:
    e = proportion(45, 50, method="wilson", confidence_level=0.9)
    assert e.estimate == 0.9
    assert e.items == 50 and e.agreeing == 45
    assert e.se == pytest.approx(math.sqrt(0.9 * 0.1 / 50), rel=1e-15)
    assert e.confidence_level == 0.9
    rec = e.as_record()
    assert rec["estimate"] == 0.9 and rec["items"] == 50 and rec["agreeing"] == 45
    assert rec["ci_method"] == "score (Wilson 1927)"
    assert rec["ci_low"] < 0.9 < rec["ci_high"]


def test_zero_items_gives_none_with_words() -> None:
    e = proportion(0, 0)
    assert e.estimate is None and e.ci_low is None and e.ci_high is None
    assert e.items == 0
    assert "no items" in e.warnings[0]
    assert e.as_record()["estimate"] is None


@pytest.mark.parametrize(
    ("args", "kwargs", "exc"),
    [
        ((6, 5), {}, ValueError),
        ((-1, 5), {}, ValueError),
        ((1.5, 5), {}, ValueError),
        ((True, 5), {}, TypeError),
        (("3", 5), {}, TypeError),
        ((1, 5), {"confidence_level": 1.0}, ValueError),
        ((1, 5), {"confidence_level": 0.0}, ValueError),
        ((1, 5), {"confidence_level": float("nan")}, ValueError),
        ((1, 5), {"method": "wald"}, ValueError),
    ],
)
def test_bad_input_is_refused(args: tuple, kwargs: dict, exc: type[Exception]) -> None:
    with pytest.raises(exc):
        proportion(*args, **kwargs)


# --------------------------------------------------------------------------- zero-failure plans


@pytest.mark.parametrize(
    ("reliability", "confidence", "expected"),
    [
        # Success-run relation n = ceil(ln(1 - C) / ln R): 59 for 95 %/95 %, 90 for R = 95 %
        # at C = 99 %, 299 for R = 99 % at C = 95 % (common practice, no source; each value
        # is re-derived by the minimality check below).
        (0.95, 0.95, 59),
        (0.95, 0.99, 90),
        (0.99, 0.95, 299),
        (0.90, 0.90, 22),
    ],
)
def test_zero_failure_sample_size(reliability: float, confidence: float, expected: int) -> None:
    n = zero_failure_sample_size(reliability, confidence)
    assert n == expected
    # Minimal: R^n <= 1 - C < R^(n-1).
    assert reliability**n <= 1 - confidence < reliability ** (n - 1)
    # Agrees with the exact one-sided lower bound for n/n (Clopper & Pearson 1934): (1 - C)^(1/n) >= R.
    assert (1 - confidence) ** (1 / n) >= reliability
    assert (1 - confidence) ** (1 / (n - 1)) < reliability


def test_zero_failure_sample_size_exact_ratio_is_not_rounded_up() -> None:
    # ln(0.25)/ln(0.5) = 2 exactly; floating-point division must not turn it into 3.
    assert zero_failure_sample_size(0.5, 0.75) == 2
    assert zero_failure_sample_size(0.1, 0.999) == 3


@pytest.mark.parametrize(("r", "c"), [(0.0, 0.9), (1.0, 0.9), (0.9, 0.0), (0.9, 1.0), (-1, 0.5)])
def test_zero_failure_sample_size_refuses_bad_input(r: float, c: float) -> None:
    with pytest.raises(ValueError):
        zero_failure_sample_size(r, c)
