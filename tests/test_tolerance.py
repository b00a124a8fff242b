"""Statistical tolerance intervals against published tables, scipy and a seeded Monte Carlo.

Sources of the expected values (see tests/reference/check_values.md, "Tolerance intervals"):
ISO 16269-6:2014 Annex F (column m = 1), Meeker, Hahn & Escobar (2017) Tables J.5b and J.11,
Montgomery & Runger Table XII, NIST/SEMATECH e-Handbook 7.2.6.3.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from studykit.errors import StudyInputError
from studykit.stats.tolerance import (
    distribution_free_confidence,
    distribution_free_sample_size,
    normal_factor_one_sided,
    normal_factor_two_sided,
    normal_pass_probability,
    normal_sample_size,
    tolerance_interval,
    two_sided_confidence,
)

# ISO 16269-6:2014 Annex F, Tables F.1-F.9, column m = 1 (FOUND second-hand: transcribed in the
# test suite of the open-source `toleranceinterval` Python package). The standard prints the
# factors rounded UP in the fourth decimal.
ISO_F = {
    # (coverage, confidence): {n: k}
    (0.90, 0.90): {
        2: 15.5124,
        8: 2.7542,
        16: 2.2537,
        35: 1.9906,
        100: 1.8232,
        300: 1.7401,
        1000: 1.6947,
    },
    (0.95, 0.90): {
        3: 6.8233,
        9: 3.1323,
        15: 2.7196,
        30: 2.4166,
        90: 2.1862,
        150: 2.1276,
        400: 2.0569,
        1000: 2.0193,
    },
    (0.99, 0.90): {
        4: 6.3722,
        8: 4.2707,
        17: 3.4741,
        28: 3.2023,
        100: 2.8548,
        300: 2.7249,
        1000: 2.6538,
    },
    (0.90, 0.95): {
        2: 31.0923,
        8: 3.1561,
        16: 2.4486,
        35: 2.0943,
        150: 1.8260,
        500: 1.7374,
        1000: 1.7088,
    },
    (0.95, 0.95): {5: 5.0769, 10: 3.3935, 26: 2.6188, 90: 2.2519, 200: 2.1430, 1000: 2.0362},
    (0.99, 0.95): {3: 12.6472, 9: 4.6329, 17: 3.7606, 35: 3.2762, 100: 2.9356, 500: 2.7208},
    (0.90, 0.99): {4: 9.4162, 10: 3.6167, 22: 2.5979, 80: 2.0282, 200: 1.8657, 1000: 1.7359},
    (0.95, 0.99): {2: 182.7201, 9: 4.5810, 17: 3.3641, 40: 2.6836, 150: 2.2712, 500: 2.1175},
    (0.99, 0.99): {
        3: 28.5857,
        7: 7.1908,
        15: 4.6212,
        28: 3.8042,
        70: 3.2284,
        200: 2.9215,
        1000: 2.7184,
    },
}

ISO_CASES = [(p, c, n, k) for (p, c), row in ISO_F.items() for n, k in row.items()]


@pytest.mark.parametrize("p,c,n,k_iso", ISO_CASES)
def test_two_sided_exact_factor_matches_iso_16269_6_annex_f(p, c, n, k_iso):
    k = normal_factor_two_sided(n, p, c)
    # the standard rounds up in the fourth decimal: ceil(k * 1e4) / 1e4 must equal the table
    assert math.ceil(k * 1e4 - 1e-7) / 1e4 == pytest.approx(k_iso, abs=1e-9)


# Meeker, Hahn & Escobar (2017), Statistical Intervals, 2nd ed., Table J.5b (two-sided, exact),
# FOUND second-hand (same package test suite). Columns: coverage 0.90/0.95/0.99 x confidence
# 0.90/0.95/0.99; three decimals, rounded.
MHE_J5B = {
    # n: {(p, c): g}
    5: {(0.90, 0.90): 3.499, (0.90, 0.95): 4.291, (0.95, 0.95): 5.077, (0.99, 0.99): 10.220},
    10: {(0.90, 0.90): 2.546, (0.90, 0.95): 2.856, (0.95, 0.95): 3.393, (0.99, 0.95): 4.437},
    20: {(0.90, 0.95): 2.319, (0.95, 0.95): 2.760, (0.95, 0.99): 3.184, (0.99, 0.90): 3.372},
    30: {(0.95, 0.95): 2.555, (0.99, 0.95): 3.355, (0.90, 0.99): 2.394},
    60: {(0.95, 0.90): 2.250, (0.95, 0.95): 2.335, (0.99, 0.99): 3.297},
    480: {(0.90, 0.95): 1.739, (0.95, 0.99): 2.121, (0.99, 0.95): 2.724},
}


@pytest.mark.parametrize(
    "n,p,c,g", [(n, p, c, g) for n, row in MHE_J5B.items() for (p, c), g in row.items()]
)
def test_two_sided_exact_factor_matches_meeker_hahn_escobar_j5b(n, p, c, g):
    assert normal_factor_two_sided(n, p, c) == pytest.approx(g, abs=0.0005 + 1e-9)


def test_two_sided_factor_solves_its_own_confidence_equation():
    for n, p, c in [(4, 0.9, 0.9), (25, 0.99, 0.95), (300, 0.95, 0.99)]:
        k = normal_factor_two_sided(n, p, c)
        assert two_sided_confidence(k, n, p) == pytest.approx(c, abs=1e-9)
        assert two_sided_confidence(1.01 * k, n, p) > c > two_sided_confidence(0.99 * k, n, p)


def test_two_sided_confidence_against_scipy_dblquad_style_integral():
    # The same probability written independently: integrate over x-bar with scipy.integrate.quad
    # and solve r(x) with scipy.optimize.brentq (no shared code with the module).
    from scipy import integrate, optimize

    n, p, k = 12, 0.95, 3.0
    nu = n - 1

    def r_of(x):
        return optimize.brentq(
            lambda r: stats.norm.cdf(x + r) - stats.norm.cdf(x - r) - p, 0.0, x + 10.0
        )

    def integrand(x):
        return stats.chi2.sf(nu * r_of(x) ** 2 / k**2, nu) * stats.norm.pdf(x, 0, 1 / math.sqrt(n))

    ref = 2 * integrate.quad(integrand, 0, 10 / math.sqrt(n), epsabs=1e-12)[0]
    assert two_sided_confidence(k, n, p) == pytest.approx(ref, abs=1e-9)


def test_nist_7_2_6_3_worked_example_approximations():
    # NIST/SEMATECH e-Handbook 7.2.6.3: n = 43, p = 0.90, gamma = 0.99, mean 97.07, s 0.0268:
    # k1 = 1.8752 (the approximation formula with a, b) and k2 = 2.2173 (the chi-square
    # formula). FOUND second-hand (a worksheet reproducing the handbook example); the handbook
    # page itself from memory.
    assert normal_factor_one_sided(43, 0.90, 0.99, method="natrella") == pytest.approx(
        1.8752, abs=5e-5
    )
    assert normal_factor_two_sided(43, 0.90, 0.99, method="howe") == pytest.approx(2.2173, abs=5e-5)
    # the exact one-sided factor differs from the approximation in the third decimal
    assert normal_factor_one_sided(43, 0.90, 0.99) == pytest.approx(1.87395, abs=1e-4)
    # the handbook's limits: 97.07 + 1.8752 * 0.0268 = 97.1203 (upper one-sided)
    assert 97.07 + normal_factor_one_sided(
        43, 0.90, 0.99, method="natrella"
    ) * 0.0268 == pytest.approx(97.120255, abs=1e-5)


# Montgomery & Runger, Applied Statistics and Probability for Engineers, Table XII (one-sided
# tolerance factors), FOUND second-hand (transcribed in the same package's test suite).
MR_P = (0.90, 0.95, 0.99) * 3
MR_C = (0.90,) * 3 + (0.95,) * 3 + (0.99,) * 3
MR_XII = {
    2: (10.253, 13.090, 18.500, 20.581, 26.260, 37.094, 103.029, 131.426, 185.617),
    3: (4.258, 5.311, 7.340, 6.155, 7.656, 10.553, 13.995, 17.370, 23.896),
    10: (2.066, 2.568, 3.532, 2.355, 2.911, 3.981, 3.048, 3.738, 5.074),
    30: (1.657, 2.080, 2.884, 1.777, 2.220, 3.064, 2.030, 2.515, 3.447),
    100: (1.470, 1.861, 2.601, 1.527, 1.927, 2.684, 1.639, 2.056, 2.850),
}


@pytest.mark.parametrize("n", sorted(MR_XII))
def test_one_sided_factor_matches_montgomery_runger_table_xii(n):
    for p, c, k in zip(MR_P, MR_C, MR_XII[n], strict=True):
        assert normal_factor_one_sided(n, p, c) == pytest.approx(k, abs=0.0005 + 1e-9)


def test_one_sided_factor_is_the_noncentral_t_quantile():
    # scipy.stats.nct.ppf(c, n - 1, z_p sqrt(n)) / sqrt(n), the exact definition
    for n, p, c in [(5, 0.9, 0.95), (17, 0.99, 0.9), (250, 0.95, 0.99)]:
        ref = stats.nct.ppf(c, n - 1, stats.norm.ppf(p) * math.sqrt(n)) / math.sqrt(n)
        assert normal_factor_one_sided(n, p, c) == pytest.approx(ref, rel=1e-12)


def test_large_n_factors_follow_the_large_sample_forms():
    # For large n, s/sigma ~ 1 - z_c / sqrt(2 nu) at the (1 - c) quantile, so
    # k2 -> z_{(1+p)/2} / (1 - z_c / sqrt(2 nu)) and Howe's formula becomes exact
    # (Howe 1969; the convergence to the known-sigma z is slow, order 1/sqrt(n)).
    n = 200_000
    z_c = stats.norm.ppf(0.95)
    large = 1.959964 / (1 - z_c / math.sqrt(2 * (n - 1)))
    assert normal_factor_two_sided(n, 0.95, 0.95) == pytest.approx(large, abs=2e-4)
    assert normal_factor_two_sided(n, 0.95, 0.95) == pytest.approx(
        normal_factor_two_sided(n, 0.95, 0.95, method="howe"), abs=1e-4
    )
    # one-sided: k1 ~ z_p + z_c sqrt(1/n + z_p^2 / (2 nu))
    k1 = 1.644854 + z_c * math.sqrt(1 / n + 1.644854**2 / (2 * (n - 1)))
    assert normal_factor_one_sided(n, 0.95, 0.95) == pytest.approx(k1, abs=2e-4)


def test_approximations_are_close_but_not_equal_to_exact():
    exact = normal_factor_two_sided(10, 0.95, 0.95)
    howe = normal_factor_two_sided(10, 0.95, 0.95, method="howe")
    ww = normal_factor_two_sided(10, 0.95, 0.95, method="wald_wolfowitz")
    assert exact != howe and exact != ww
    assert abs(howe - exact) < 0.02 and abs(ww - exact) < 0.05


def test_monte_carlo_coverage_of_exact_two_sided_and_one_sided_intervals():
    # Seeded simulation: the share of samples whose interval covers at least p of N(0, 1)
    # must be c within the binomial noise of 20000 trials (4 standard errors).
    rng = np.random.default_rng(20240517)
    n, p, c, trials = 15, 0.90, 0.95, 20_000
    x = rng.normal(size=(trials, n))
    m, s = x.mean(axis=1), x.std(axis=1, ddof=1)
    k2 = normal_factor_two_sided(n, p, c)
    cover2 = stats.norm.cdf(m + k2 * s) - stats.norm.cdf(m - k2 * s)
    k1 = normal_factor_one_sided(n, p, c)
    cover1 = stats.norm.cdf(m + k1 * s)
    se = math.sqrt(c * (1 - c) / trials)
    assert np.mean(cover2 >= p) == pytest.approx(c, abs=4 * se)
    assert np.mean(cover1 >= p) == pytest.approx(c, abs=4 * se)
    # the Wald-Wolfowitz factor is slightly larger here; Howe's within the noise
    kh = normal_factor_two_sided(n, p, c, method="howe")
    cover_h = stats.norm.cdf(m + kh * s) - stats.norm.cdf(m - kh * s)
    assert np.mean(cover_h >= p) == pytest.approx(c, abs=4 * se)


# ---- distribution-free -------------------------------------------------------------------------


def test_distribution_free_sample_sizes_wilks():
    # 59 (one-sided 95/95) and 93 (two-sided 95/95): Wilks (1941), the classic sample sizes
    # (from memory). The others: the smallest n with 1 - p^n >= c (one-sided) or
    # 1 - p^n - n p^(n-1)(1 - p) >= c (two-sided), solved by hand (e.g. ln 0.01 / ln 0.9 = 43.7
    # -> 44).
    assert distribution_free_sample_size(0.95, 0.95, sides=1) == 59
    assert distribution_free_sample_size(0.95, 0.95, sides=2) == 93
    assert distribution_free_sample_size(0.90, 0.99, sides=1) == 44
    assert distribution_free_sample_size(0.99, 0.95, sides=1) == 299
    assert distribution_free_sample_size(0.99, 0.95, sides=2) == 473
    assert distribution_free_sample_size(0.90, 0.90, sides=1) == 22
    assert distribution_free_sample_size(0.90, 0.90, sides=2) == 38


def test_distribution_free_confidence_closed_forms():
    # one-sided extreme: 1 - p^n; two-sided extremes: 1 - p^n - n p^(n-1) (1 - p)
    # (Wilks 1941, written out by hand)
    for n, p in [(59, 0.95), (93, 0.95), (20, 0.8)]:
        assert distribution_free_confidence(n, p, sides=1) == pytest.approx(1 - p**n, rel=1e-12)
        assert distribution_free_confidence(n, p, sides=2) == pytest.approx(
            1 - p**n - n * p ** (n - 1) * (1 - p), rel=1e-12
        )
    # coverage between order statistics is Beta(n - r - s + 1, r + s):
    # scipy.stats.beta.sf(p, n - r - s + 1, r + s)
    assert distribution_free_confidence(50, 0.9, r=2, s=3) == pytest.approx(
        stats.beta.sf(0.9, 50 - 5 + 1, 5), rel=1e-10
    )


# Meeker, Hahn & Escobar (2017) Table J.11: rank l of the lower one-sided distribution-free
# tolerance limit x_(l) (FOUND second-hand, same package test suite). Columns (p, c).
MHE_J11 = {
    # n: {(p, c): l}
    20: {(0.75, 0.90): 3, (0.75, 0.95): 2, (0.75, 0.99): 1},
    50: {(0.75, 0.95): 8, (0.90, 0.90): 2, (0.90, 0.95): 2, (0.95, 0.90): 1},
    100: {(0.75, 0.90): 20, (0.90, 0.95): 5, (0.95, 0.95): 2, (0.95, 0.99): 1},
    300: {(0.90, 0.99): 19, (0.95, 0.95): 9, (0.99, 0.90): 1},
    1000: {(0.75, 0.95): 228, (0.90, 0.95): 85, (0.95, 0.99): 35, (0.99, 0.95): 5},
}


@pytest.mark.parametrize(
    "n,p,c,rank", [(n, p, c, r) for n, row in MHE_J11.items() for (p, c), r in row.items()]
)
def test_distribution_free_one_sided_rank_matches_meeker_j11(n, p, c, rank):
    x = np.arange(1.0, n + 1.0)  # value i at rank i
    ti = tolerance_interval(
        x, coverage=p, confidence=c, sides=1, bound="lower", model="distribution_free"
    )
    assert ti.order_statistics == (rank, None)
    assert ti.lower == rank
    assert ti.achieved_confidence >= c
    # the next rank inward would fall short
    assert distribution_free_confidence(n, p, s=rank + 1, sides=1) < c


def test_distribution_free_too_few_values_is_reported_not_raised():
    ti = tolerance_interval(
        np.arange(20.0), coverage=0.95, confidence=0.95, model="distribution_free", lsl=-1, usl=30
    )
    assert ti.lower is None and ti.upper is None and ti.meets is None
    assert "93 are needed" in ti.notes[0]


def test_distribution_free_monte_carlo():
    # seeded: with n = 93 the extremes cover >= 95 % of an exponential law in ~95.08 % of samples
    rng = np.random.default_rng(7)
    trials = 20_000
    x = rng.exponential(size=(trials, 93))
    cover = np.exp(-x.min(axis=1)) - np.exp(-x.max(axis=1))
    c = distribution_free_confidence(93, 0.95)
    se = math.sqrt(c * (1 - c) / trials)
    assert np.mean(cover >= 0.95) == pytest.approx(c, abs=4 * se)


# ---- fitted-model scale ------------------------------------------------------------------------


def test_lognormal_interval_is_the_back_transformed_normal_interval_of_the_logs():
    x = np.random.default_rng(3).lognormal(0.5, 0.3, size=30)
    ti = tolerance_interval(x, model="lognormal", coverage=0.9, confidence=0.95)
    ln = tolerance_interval(np.log(x), model="normal", coverage=0.9, confidence=0.95)
    assert ti.lower == pytest.approx(math.exp(ln.lower), rel=1e-12)
    assert ti.upper == pytest.approx(math.exp(ln.upper), rel=1e-12)
    assert ti.scale == "log"


def test_lognormal_interval_monte_carlo_coverage():
    # seeded: samples of a lognormal law; the back-transformed interval exp(m -/+ k s) of each
    # must cover >= p of the true lognormal law in a share c of the samples
    rng = np.random.default_rng(11)
    trials, n, p, c = 20_000, 12, 0.9, 0.9
    x = rng.lognormal(1.0, 0.4, size=(trials, n))
    k = tolerance_interval(x[0], model="lognormal", coverage=p, confidence=c).factor
    lx = np.log(x)
    m, s = lx.mean(axis=1), lx.std(axis=1, ddof=1)
    lo, hi = np.exp(m - k * s), np.exp(m + k * s)
    cov = stats.lognorm.cdf(hi, 0.4, scale=math.e) - stats.lognorm.cdf(lo, 0.4, scale=math.e)
    se = math.sqrt(c * (1 - c) / trials)
    assert np.mean(cov >= p) == pytest.approx(c, abs=4 * se)


def test_boxcox_interval_back_transforms_and_notes_the_estimated_lambda():
    from studykit.stats.transform import box_cox

    x = np.random.default_rng(5).gamma(4.0, 2.0, size=60)
    ti = tolerance_interval(x, model="boxcox", coverage=0.95, confidence=0.95)
    bc = box_cox(x)
    y = bc.transform(x)
    k = normal_factor_two_sided(60, 0.95, 0.95)
    assert ti.lower == pytest.approx(bc.inverse(y.mean() - k * y.std(ddof=1)), rel=1e-10)
    assert ti.upper == pytest.approx(bc.inverse(y.mean() + k * y.std(ddof=1)), rel=1e-10)
    assert ti.scale.startswith("boxcox(")
    assert "treated as known" in ti.notes[0]


def test_lognormal_needs_positive_values():
    with pytest.raises(StudyInputError, match="positive"):
        tolerance_interval([1.0, -2.0, 3.0, 4.0], model="lognormal")


@pytest.mark.parametrize("factor", [normal_factor_one_sided, normal_factor_two_sided])
def test_factors_refuse_degrees_of_freedom_not_positive(factor):
    # both factors check their arguments in one step; the one-sided one returned NaN for df 0
    with pytest.raises(StudyInputError, match="`df`"):
        factor(10, 0.95, 0.95, df=0)
    with pytest.raises(StudyInputError, match="`p`"):
        factor(10, 1.5, 0.95, df=0)  # the coverage is checked before the degrees of freedom


# ---- acceptance decision and sample size -------------------------------------------------------


def test_acceptance_decision_compares_the_interval_with_the_limits():
    x = np.random.default_rng(1).normal(10.0, 0.1, size=40)
    k = normal_factor_two_sided(40, 0.99, 0.95)
    m, s = x.mean(), x.std(ddof=1)
    ok = tolerance_interval(
        x, coverage=0.99, confidence=0.95, lsl=m - k * s - 1e-6, usl=m + k * s + 1e-6
    )
    assert ok.meets is True
    bad = tolerance_interval(
        x, coverage=0.99, confidence=0.95, lsl=m - k * s + 1e-6, usl=m + k * s + 1e-6
    )
    assert bad.meets is False
    one = tolerance_interval(x, coverage=0.99, confidence=0.95, sides=1, usl=m + 2.0 * s)
    assert one.bound == "upper" and one.lower is None and one.meets is False
    assert tolerance_interval(x).meets is None


def test_pass_probability_one_sided_is_noncentral_t_and_matches_simulation():
    n, p, c = 30, 0.99, 0.95
    k = normal_factor_one_sided(n, p, c)
    # exact: scipy.stats.nct.sf(k sqrt(n), n - 1, sqrt(n) * (USL - mu) / sigma)
    ref = stats.nct.sf(k * math.sqrt(n), n - 1, math.sqrt(n) * 4.0)
    got = normal_pass_probability(n, p, c, mean=0.0, sd=1.0, usl=4.0)
    assert got == pytest.approx(ref, rel=1e-12)
    rng = np.random.default_rng(99)
    x = rng.normal(size=(20_000, n))
    sim = np.mean(x.mean(axis=1) + k * x.std(axis=1, ddof=1) <= 4.0)
    assert sim == pytest.approx(got, abs=4 * math.sqrt(got * (1 - got) / 20_000))


def test_pass_probability_two_sided_matches_simulation():
    n, p, c = 25, 0.99, 0.95
    k = normal_factor_two_sided(n, p, c)
    got = normal_pass_probability(n, p, c, mean=0.3, sd=1.0, lsl=-4.5, usl=4.5)
    rng = np.random.default_rng(2024)
    x = rng.normal(0.3, 1.0, size=(20_000, n))
    m, s = x.mean(axis=1), x.std(axis=1, ddof=1)
    sim = np.mean((m - k * s >= -4.5) & (m + k * s <= 4.5))
    assert sim == pytest.approx(got, abs=4 * math.sqrt(got * (1 - got) / 20_000))


def test_normal_sample_size_is_the_smallest_n_reaching_the_power():
    n = normal_sample_size(0.99, 0.95, mean=0.0, sd=1.0, usl=4.0, power=0.8)
    assert normal_pass_probability(n, 0.99, 0.95, mean=0.0, sd=1.0, usl=4.0) >= 0.8
    assert normal_pass_probability(n - 1, 0.99, 0.95, mean=0.0, sd=1.0, usl=4.0) < 0.8
    # a process with fewer than p inside can never pass
    assert normal_sample_size(0.99, 0.95, mean=0.0, sd=1.0, usl=2.0) is None


def test_plan_in_the_result():
    x = np.random.default_rng(4).normal(0.0, 1.0, size=50)
    ti = tolerance_interval(x, coverage=0.95, confidence=0.95, lsl=-5, usl=5)
    assert ti.plan.distribution_free == 93
    assert ti.plan.normal is not None and ti.plan.normal >= 2
    d = ti.to_dict()
    assert d["plan"]["distribution_free"] == 93 and d["meets"] is True
    assert "95 %" in d["statement"]


@pytest.mark.parametrize(
    "kwargs,match",
    [
        ({"coverage": 1.2}, "coverage"),
        ({"confidence": 0}, "confidence"),
        ({"sides": 3}, "sides"),
        ({"model": "weibull"}, "model"),
        ({"sides": 1}, "bound"),
        ({"lsl": 5, "usl": 1}, "greater"),
        ({"method": "guess"}, "method"),
    ],
)
def test_bad_arguments_raise_clear_errors(kwargs, match):
    with pytest.raises(StudyInputError, match=match):
        tolerance_interval([1.0, 2.0, 3.0, 4.5], **kwargs)


def test_written_tolerance_check_values_agree_with_scipy():
    # tests/reference/compute_tolerance_check_values.py recomputes the COMPUTED values of
    # tests/reference/tolerance_check_values.md from scipy alone (never studykit)
    import subprocess
    import sys
    from pathlib import Path

    script = Path(__file__).parent / "reference" / "compute_tolerance_check_values.py"
    run = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "all agree" in run.stdout and "BAD" not in run.stdout


def test_exact_two_sided_factor_of_the_nist_example():
    # tests/reference/tolerance_check_values.md: independent quad/brentq implementation,
    # n 43, P .90, C .99 -> 2.222825 (Howe's approximation gives 2.2173 there)
    assert normal_factor_two_sided(43, 0.90, 0.99) == pytest.approx(2.222825, abs=5e-7)


def test_a_limit_that_is_not_a_number_is_refused_with_its_name():
    # input check (no published value): a text limit was a bare ValueError from float()
    from studykit.errors import SpecError

    x = np.arange(30.0)
    with pytest.raises(SpecError, match=r"`lsl` \('abc'\) must be a number\."):
        tolerance_interval(x, lsl="abc", usl=40.0)
    with pytest.raises(SpecError, match=r"`usl` \(inf\) must be a finite number\."):
        tolerance_interval(x, lsl=0.0, usl=math.inf)
