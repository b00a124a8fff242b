"""Attribute capability against scipy and statsmodels reference implementations."""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats

from studykit.errors import StudyInputError
from studykit.stats.attribute import attribute_capability, defects_per_unit

# NIST/SEMATECH e-Handbook 6.3.3.2 p-chart example: 30 wafers of 50 chips, p-bar 0.2313
# (tests/reference/check_values.md), i.e. 347 defective chips of 1500.
NIST_P_TOTAL, NIST_P_N = 347, 1500


def test_nist_p_chart_rate():
    r = attribute_capability(NIST_P_TOTAL, NIST_P_N)
    assert_allclose(r.defective_rate, 0.2313, atol=5e-5)  # NIST 6.3.3.2: p-bar 0.2313
    # scipy.stats.binomtest(347, 1500).proportion_ci(method='exact')
    ci = stats.binomtest(NIST_P_TOTAL, NIST_P_N).proportion_ci(method="exact")
    assert_allclose([r.defective_rate_lower, r.defective_rate_upper], [ci.low, ci.high], rtol=1e-9)


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 3000), st.floats(0.0, 1.0), st.sampled_from([0.9, 0.95, 0.99]))
def test_clopper_pearson_matches_scipy_and_statsmodels(n, share, level):
    from statsmodels.stats.proportion import proportion_confint

    x = int(round(share * n))
    r = attribute_capability(x, n, level=level)
    # scipy.stats.binomtest(x, n).proportion_ci(confidence_level=level, method='exact')
    ci = stats.binomtest(x, n).proportion_ci(confidence_level=level, method="exact")
    assert_allclose(
        [r.defective_rate_lower, r.defective_rate_upper], [ci.low, ci.high], rtol=1e-8, atol=1e-12
    )
    # statsmodels proportion_confint(x, n, alpha=1-level, method='beta')
    lo, hi = proportion_confint(x, n, alpha=1 - level, method="beta")
    assert_allclose(
        [r.defective_rate_lower, r.defective_rate_upper], [lo, hi], rtol=1e-8, atol=1e-12
    )
    # One-sided upper bound = upper end of the two-sided interval at 2*level - 1.
    ci1 = stats.binomtest(x, n).proportion_ci(confidence_level=2 * level - 1, method="exact")
    assert_allclose(r.defective_rate_upper_bound, ci1.high, rtol=1e-8, atol=1e-12)
    assert (
        r.defective_rate_lower
        <= r.defective_rate
        <= r.defective_rate_upper_bound
        <= r.defective_rate_upper
    )


def test_ppm_and_z():
    r = attribute_capability([2, 0, 1], [500, 500, 500])
    assert r.defectives == 3 and r.inspected == 1500 and r.n_subgroups == 3
    assert_allclose(r.ppm_defective, 2000.0, rtol=1e-12)
    # Z = Phi^-1(1 - p): scipy.stats.norm.ppf(1 - 0.002)
    assert_allclose(r.z_process, stats.norm.ppf(1 - 0.002), rtol=1e-10)
    assert_allclose(
        r.z_process_lower_bound, stats.norm.ppf(1 - r.defective_rate_upper_95), rtol=1e-10
    )
    assert r.z_process_lower_bound < r.z_process
    d = r.to_dict()
    for key in ("defective_rate", "defective_rate_upper_95", "ppm_defective", "z_process"):
        assert key in d
    json.dumps(d)


def test_zero_defectives_gives_none_z_but_finite_bound():
    r = attribute_capability(0, 3000)
    assert r.defective_rate == 0.0 and r.z_process is None
    # Zero failures: one-sided upper bound 1 - alpha^(1/n) (exact for x = 0), about 3/n.
    assert_allclose(r.defective_rate_upper_95, 1 - 0.05 ** (1 / 3000), rtol=1e-9)
    assert r.z_process_lower_bound > 3.0
    assert "defective_rate_upper_90" in attribute_capability(0, 3000, level=0.9).to_dict()


@settings(max_examples=60, deadline=None)
@given(st.integers(0, 500), st.floats(0.5, 1000.0), st.sampled_from([0.9, 0.95, 0.99]))
def test_poisson_interval_matches_statsmodels(c, u, level):
    from statsmodels.stats.rates import confint_poisson

    r = defects_per_unit(c, u, level=level)
    # statsmodels.stats.rates.confint_poisson(count, exposure, method='exact-c', alpha=1-level)
    lo, hi = confint_poisson(c, u, method="exact-c", alpha=1 - level)
    assert_allclose([r.dpu_lower, r.dpu_upper], [lo, hi], rtol=1e-8, atol=1e-12)
    assert_allclose(r.dpu, c / u, rtol=1e-12)


def test_poisson_interval_by_definition():
    # Exact interval by its definition: P(X >= c | upper... ) -- the upper limit mu_u solves
    # P(Poisson(mu_u) <= c) = alpha/2 (scipy.stats.poisson.cdf), lower solves P(X >= c) = alpha/2.
    r = defects_per_unit([3, 5, 2], [10, 10, 10])
    mu_u, mu_l = r.dpu_upper * 30, r.dpu_lower * 30
    assert_allclose(stats.poisson.cdf(10, mu_u), 0.025, rtol=1e-8)
    assert_allclose(stats.poisson.sf(9, mu_l), 0.025, rtol=1e-8)
    assert_allclose(stats.poisson.cdf(10, r.dpu_upper_bound * 30), 0.05, rtol=1e-8)
    d = r.to_dict()
    assert "dpu_upper_95" in d and d["defects"] == 10 and d["units"] == 30.0


def test_errors():
    with pytest.raises(StudyInputError, match=r"`defectives` \(6\) exceeds `inspected` \(5\)"):
        attribute_capability([6], [5])
    with pytest.raises(StudyInputError, match="whole number"):
        attribute_capability([1.5], [10])
    with pytest.raises(StudyInputError, match="one inspected count per subgroup"):
        attribute_capability([1, 2], [10, 10, 10])
    with pytest.raises(StudyInputError, match="`inspected` value 0"):
        attribute_capability([0], [0])
    with pytest.raises(StudyInputError, match="`units`"):
        defects_per_unit([1, 2], [1.0, 0.0])
    with pytest.raises(StudyInputError, match="`level`"):
        defects_per_unit(1, 1, level=0.3)
    assert np.isfinite(defects_per_unit(0, 5).dpu_upper)
