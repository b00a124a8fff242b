"""Gauge variance taken out of the capability: plain arithmetic, limiting cases of the MLS
interval against scipy's chi-square quantiles, and a seeded Monte Carlo of its coverage."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from studykit.errors import StudyInputError
from studykit.stats.measurement_error import (
    gauge_sigma_from_stored,
    mls_difference_interval,
    remove_gauge_variance,
)


def test_variance_removal_plain_arithmetic():
    # observed 0.5, gauge 0.3 -> process sqrt(0.25 - 0.09) = 0.4 (plain arithmetic);
    # limits 7 .. 13, mean 10.6: Pp 6/(6*0.5) = 2.0 observed, 6/(6*0.4) = 2.5 process;
    # Ppk (13 - 10.6)/(3*0.5) = 1.6 observed, 2.4/(3*0.4) = 2.0 process.
    # within 0.45: process sqrt(0.2025 - 0.09) = sqrt(0.1125); Cp = 6/(6 sqrt(0.1125)).
    r = remove_gauge_variance(
        gauge_sigma=0.3,
        gauge_df=40.0,
        mean=10.6,
        lsl=7.0,
        usl=13.0,
        within_sigma=0.45,
        within_df=80.0,
        overall_sigma=0.5,
        n=100,
    )
    o = r.overall
    assert_allclose(o.process_sigma, 0.4, rtol=1e-12)
    assert_allclose(o.process_variance, 0.16, rtol=1e-12)
    assert_allclose(o.gauge_share, 0.36, rtol=1e-12)
    assert_allclose([o.observed["pp"], o.observed["ppk"]], [2.0, 1.6], rtol=1e-12)
    assert_allclose([o.process["pp"], o.process["ppk"]], [2.5, 2.0], rtol=1e-12)
    w = r.within
    assert_allclose(w.process_sigma, math.sqrt(0.1125), rtol=1e-12)
    assert_allclose(w.process["cp"], 1 / math.sqrt(0.1125), rtol=1e-12)
    assert_allclose(w.observed["cpk"], 2.4 / 1.35, rtol=1e-12)
    assert o.observed_df == 99.0 and w.observed_df == 80.0
    # the sigma interval brackets the estimate, and the Pp interval follows from it
    assert o.sigma_lower < o.process_sigma < o.sigma_upper
    lo, hi = o.spread_interval["pp"]
    assert_allclose([lo, hi], [1 / o.sigma_upper, 1 / o.sigma_lower], rtol=1e-12)
    assert r.warnings == ()
    json.dumps(r.to_dict(), allow_nan=False)


def test_one_sided_spec_gives_only_the_location_index():
    r = remove_gauge_variance(
        gauge_sigma=0.3, gauge_df=40.0, mean=10.6, usl=13.0, overall_sigma=0.5, n=100
    )
    assert r.overall.process["pp"] is None
    assert_allclose(r.overall.process["ppk"], 2.0, rtol=1e-12)  # (13 - 10.6)/(3*0.4)
    assert r.overall.spread_interval == {}


def test_known_gauge_variance_reduces_to_chi_square_bounds():
    # df2 = inf: s2 is exact, so the bounds are the exact chi-square bounds of theta1 minus s2:
    # df1 s1 / scipy.stats.chi2.ppf(0.975 / 0.025, df1) - s2
    for df1, s1, s2, conf in [(99, 4.0, 1.0, 0.95), (12.5, 2.0, 0.7, 0.90), (3, 1.0, 0.2, 0.99)]:
        a = (1 - conf) / 2
        est, lo, hi = mls_difference_interval(s1, df1, s2, math.inf, confidence=conf)
        assert est == pytest.approx(s1 - s2)
        assert_allclose(lo, df1 * s1 / stats.chi2.ppf(1 - a, df1) - s2, rtol=1e-10)
        assert_allclose(hi, df1 * s1 / stats.chi2.ppf(a, df1) - s2, rtol=1e-10)


def test_zero_gauge_variance_is_the_chi_square_interval_of_the_observed_variance():
    r = remove_gauge_variance(
        gauge_sigma=0.0, gauge_df=10.0, mean=0.0, lsl=-3, usl=3, overall_sigma=1.0, n=21
    )
    o = r.overall
    # scipy.stats.chi2.ppf(0.975 / 0.025, 20): 20 / chi2 quantile
    assert_allclose(
        [o.variance_lower, o.variance_upper],
        [20 / stats.chi2.ppf(0.975, 20), 20 / stats.chi2.ppf(0.025, 20)],
        rtol=1e-10,
    )
    assert o.process_sigma == 1.0


def test_uses_scipy_f_quantiles():
    # the coefficients built from scipy.stats.f.ppf give the same bounds (formula in the
    # module's docstring; Ting et al. 1990, from memory)
    s1, d1, s2, d2, a = 2.0, 30.0, 0.6, 8.0, 0.025
    f = stats.f.ppf
    g1, h1 = 1 - 1 / f(1 - a, d1, 1e12), 1 / f(a, d1, 1e12) - 1
    g2, h2 = 1 - 1 / f(1 - a, d2, 1e12), 1 / f(a, d2, 1e12) - 1
    fh, fl = f(1 - a, d1, d2), f(a, d1, d2)
    g12 = ((fh - 1) ** 2 - g1**2 * fh**2 - h2**2) / fh
    h12 = ((1 - fl) ** 2 - h1**2 * fl**2 - g2**2) / fl
    lo = s1 - s2 - math.sqrt(g1**2 * s1**2 + h2**2 * s2**2 + g12 * s1 * s2)
    hi = s1 - s2 + math.sqrt(h1**2 * s1**2 + g2**2 * s2**2 + h12 * s1 * s2)
    _, lo2, hi2 = mls_difference_interval(s1, d1, s2, d2)
    assert_allclose([lo2, hi2], [lo, hi], rtol=1e-7)


def test_warnings_large_share_zero_bound_and_all_gauge():
    r = remove_gauge_variance(
        gauge_sigma=0.4, gauge_df=5.0, mean=0.0, lsl=-3, usl=3, overall_sigma=0.5, n=30
    )
    text = " ".join(r.warnings)
    assert "64 % of the observed variance" in text  # 0.16 / 0.25
    assert "cannot be told from zero" in text  # so few gauge df: lower bound <= 0
    assert r.overall.sigma_lower == 0.0
    assert r.overall.spread_interval["pp"][1] is None
    r2 = remove_gauge_variance(
        gauge_sigma=0.6, gauge_df=20.0, mean=0.0, lsl=-3, usl=3, overall_sigma=0.5, n=30
    )
    assert r2.overall.process_sigma is None and r2.overall.process["pp"] is None
    assert "accounts for all the spread" in " ".join(r2.warnings)
    r3 = remove_gauge_variance(
        gauge_sigma=0.1, gauge_df=None, mean=0.0, lsl=-3, usl=3, overall_sigma=0.5, n=30
    )
    assert r3.overall.variance_lower is None and "without an interval" in r3.warnings[0]


def test_bad_input():
    with pytest.raises(StudyInputError, match="specification limit"):
        remove_gauge_variance(gauge_sigma=0.1, gauge_df=5, mean=0, overall_sigma=1, n=5)
    with pytest.raises(StudyInputError, match="no observed sigma"):
        remove_gauge_variance(gauge_sigma=0.1, gauge_df=5, mean=0, lsl=-1, usl=1)
    with pytest.raises(StudyInputError, match="confidence"):
        mls_difference_interval(1, 5, 0.5, 5, confidence=1.2)


def test_gauge_sigma_from_stored_payload():
    payload = {
        "components": [
            {"name": "repeatability", "sigma": 0.1, "interval_df": 30},
            {"name": "gauge_rr", "sigma": 0.2, "interval_df": 12.5},
        ]
    }
    assert gauge_sigma_from_stored(payload) == (0.2, 12.5)
    assert gauge_sigma_from_stored(
        {"components": [{"name": "gauge_rr", "sigma": 0.2, "interval_df": None}]}
    ) == (0.2, None)
    assert gauge_sigma_from_stored({"status": "not_checked"}) is None


CASES = [  # (sigma_obs^2, sigma_gauge^2, df_obs, df_gauge): shares 0.1 to 0.8, df 5 to 100
    (1.0, 0.3, 99, 30),
    (1.0, 0.6, 49, 10),
    (1.0, 0.1, 20, 60),
    (1.0, 0.8, 100, 5),
    (1.0, 0.5, 30.5, 7.3),
]


@pytest.mark.slow
@pytest.mark.parametrize(("t1", "t2", "d1", "d2"), CASES)
def test_mls_coverage_monte_carlo(t1, t2, d1, d2):
    # seeded Monte Carlo: s_i = theta_i chi2(d_i) / d_i; the two-sided 95 % interval should
    # cover theta1 - theta2 about 95 % of the time, each side missing about 2.5 %. With 40000
    # draws the Monte Carlo standard error of a coverage near 0.95 is 0.0011; the MLS interval
    # is approximate (close to nominal in Burdick, Borror & Montgomery 2005; from memory), so
    # we accept 0.94-0.96 overall and 1.5-3.5 % per side.
    rng = np.random.default_rng(20261202)
    n = 40_000
    s1 = t1 * rng.chisquare(d1, n) / d1
    s2 = t2 * rng.chisquare(d2, n) / d2
    _, lo, hi = mls_difference_interval(s1, d1, s2, d2, confidence=0.95)
    theta = t1 - t2
    cover = np.mean((lo <= theta) & (theta <= hi))
    assert 0.94 <= cover <= 0.96
    assert 0.015 <= np.mean(lo > theta) <= 0.035
    assert 0.015 <= np.mean(hi < theta) <= 0.035
