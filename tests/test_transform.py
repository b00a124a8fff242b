"""Box-Cox checked against scipy.stats; Johnson system checked by recovering known transforms."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import special, stats

from studykit.errors import AnalysisError, StudyInputError
from studykit.stats import transform as tr


def _rng(seed):
    return np.random.default_rng(seed)


SAMPLES = {
    "lognormal": stats.lognorm(0.5, scale=math.e).rvs(size=80, random_state=_rng(7)),
    "gamma": stats.gamma(2.0, scale=3.0).rvs(size=125, random_state=_rng(8)),
    "weibull": stats.weibull_min(3.5, scale=10.0).rvs(size=125, random_state=_rng(9)),
    "left_skew": 100.0 - stats.gamma(3.0).rvs(size=60, random_state=_rng(10)),
    "large": stats.lognorm(0.1, scale=1e4).rvs(size=50, random_state=_rng(11)),
}


# -- Box-Cox ----------------------------------------------------------------------------------
@pytest.mark.parametrize("name", sorted(SAMPLES))
@pytest.mark.parametrize("alpha", [0.05, 0.10])
def test_box_cox_matches_scipy(name, alpha):
    x = SAMPLES[name]
    r = tr.box_cox(x, alpha=alpha)
    # reference: scipy.stats.boxcox_normmax(x, method='mle') and scipy.stats.boxcox(x, alpha=)
    lam_ref = stats.boxcox_normmax(x, method="mle")
    _, lam_ref2, ci_ref = stats.boxcox(x, alpha=alpha)
    assert_allclose(r.lam, lam_ref, rtol=1e-6, atol=1e-7)
    assert_allclose(r.lam, lam_ref2, rtol=1e-6, atol=1e-7)
    assert_allclose(r.lam_interval, ci_ref, rtol=1e-6, atol=1e-7)
    # reference: scipy.stats.boxcox_llf(lam, x) is the same profile log-likelihood
    assert_allclose(r.loglik, stats.boxcox_llf(r.lam, x), rtol=1e-10)
    assert r.lam_used == r.lam and r.note is None and r.shift == 0.0
    # reference: scipy.stats.boxcox(x, lmbda=...) and scipy.special.inv_boxcox
    assert_allclose(r.transform(x), stats.boxcox(x, lmbda=r.lam), rtol=1e-12)
    y = stats.boxcox(x, lmbda=r.lam)
    assert_allclose(r.inverse(y), special.inv_boxcox(y, r.lam), rtol=1e-12)
    assert_allclose(r.transformed_mean, y.mean(), rtol=1e-12)
    assert_allclose(r.transformed_sd, y.std(ddof=1), rtol=1e-12)
    # reference: scipy.stats.shapiro
    assert_allclose(r.shapiro_after, tuple(stats.shapiro(y)), rtol=1e-12)


def test_box_cox_original_scale_report():
    x = SAMPLES["lognormal"]
    r = tr.box_cox(x, round_to="nice")
    assert r.lam_used == 0.0 and "rounded" in r.note and "inside" in r.note
    # with lambda = 0 the back-transformed mean is the geometric mean (definition)
    assert_allclose(r.original_center, stats.gmean(x), rtol=1e-12)
    s = np.log(x).std(ddof=1)
    assert_allclose(
        [r.original_lower, r.original_upper], stats.gmean(x) * np.exp([-3 * s, 3 * s]), rtol=1e-12
    )
    assert_allclose(r.loglik_used, stats.boxcox_llf(0.0, x), rtol=1e-12)
    json.dumps(r.to_dict(), allow_nan=False)


def test_box_cox_rounding_rules():
    x = SAMPLES["gamma"]
    r = tr.box_cox(x)
    nice = tr.box_cox(x, round_to="nice")
    inside = [c for c in tr.NICE_LAMBDAS if r.lam_interval[0] <= c <= r.lam_interval[1]]
    if inside:
        assert nice.lam_used == min(inside, key=lambda c: abs(c - r.lam))
    else:
        assert nice.lam_used == r.lam and "no convenient" in nice.note
    step = tr.box_cox(x, round_to=0.1)
    assert_allclose(step.lam_used, round(r.lam / 0.1) * 0.1, rtol=1e-12)
    assert "rounded" in step.note
    # a user lambda outside the interval is used and said to be outside
    far = tr.box_cox(x, lam=3.0)
    assert far.lam_used == 3.0 and "outside the interval" in far.note
    # estimate and interval are unchanged by the choice
    assert far.lam == r.lam and far.lam_interval == r.lam_interval


def test_box_cox_shift_for_non_positive_data():
    x = SAMPLES["gamma"] - 5.0
    assert x.min() < 0
    r = tr.box_cox(x)
    expected_shift = -x.min() + 0.05 * np.ptp(x)  # our documented rule
    assert_allclose(r.shift, expected_shift, rtol=1e-12)
    assert_allclose(r.lam, stats.boxcox_normmax(x + expected_shift, method="mle"), rtol=1e-6)
    assert_allclose(r.inverse(r.transform(x)), x, rtol=1e-10, atol=1e-10)
    # a spec limit below the shifted support maps to the lower bound of the transform
    low = r.transform(x.min() - 100.0)
    assert low == (-1.0 / r.lam_used if r.lam_used > 0 else -math.inf)
    with pytest.raises(AnalysisError, match=r"Box-Cox needs positive data; the smallest"):
        tr.box_cox(x, shift=None)
    with pytest.raises(StudyInputError, match=r"`shift` \(1\) leaves the smallest reading"):
        tr.box_cox(x, shift=1)
    user = tr.box_cox(x, shift=10.0)
    assert user.shift == 10.0


def test_box_cox_transform_works_on_spec_limits():
    x = SAMPLES["weibull"]
    r = tr.box_cox(x)
    lsl, usl = 2.0, 16.0
    t = r.transform([lsl, usl])
    assert_allclose(t, stats.boxcox(np.array([lsl, usl]), lmbda=r.lam_used), rtol=1e-12)
    assert isinstance(r.transform(usl), float)
    assert_allclose(r.inverse(t), [lsl, usl], rtol=1e-12)


def test_box_cox_bad_options():
    x = SAMPLES["gamma"]
    with pytest.raises(StudyInputError, match=r"`alpha` \(1.5\) must be between 0 and 1"):
        tr.box_cox(x, alpha=1.5)
    with pytest.raises(StudyInputError, match=r"`round_to` \('round'\) must be None, 'nice'"):
        tr.box_cox(x, round_to="round")
    with pytest.raises(StudyInputError, match=r"`round_to` \(-0.5\) must be None"):
        tr.box_cox(x, round_to=-0.5)
    with pytest.raises(StudyInputError, match=r"`shift` \('yes'\) must be 'auto'"):
        tr.box_cox(x, shift="yes")
    with pytest.raises(AnalysisError, match="zero spread"):
        tr.box_cox([3.0, 3.0, 3.0])


def test_box_cox_refuses_data_without_relative_spread():
    x = stats.norm(1e6, 0.01).rvs(size=125, random_state=_rng(31))
    with pytest.raises(AnalysisError, match="too small for a power transformation"):
        tr.box_cox(x)


@settings(max_examples=30, deadline=None)
@given(c=st.floats(min_value=1e-3, max_value=1e3), seed=st.integers(0, 2**32 - 1))
def test_box_cox_lambda_is_scale_invariant(c, seed):
    # l(lam) for c*x differs from l(lam) for x by a constant (Box & Cox 1964, section 3)
    x = stats.gamma(3.0).rvs(size=40, random_state=_rng(seed))
    a = tr.box_cox(x)
    b = tr.box_cox(c * x)
    assert_allclose(b.lam, a.lam, rtol=1e-5, atol=1e-6)
    assert_allclose(b.lam_interval, a.lam_interval, rtol=1e-5, atol=1e-6)


# -- Johnson ----------------------------------------------------------------------------------
# No numeric worked example of the Chou, Polansky & Mason (1998) procedure was found
# (tests/reference/check_values.md). The checks are (1) the Slifker-Shapiro formulas return the exact parameters
# when fed population quantiles of a known member (scipy.stats.johnsonsu / johnsonsb /
# lognorm.ppf), and (2) samples from known members are transformed close to the true
# transformation, with loose tolerances.
Z = [0.3, 0.524, 0.8, 1.0, 1.25]


@pytest.mark.parametrize("z", Z)
def test_quantile_formulas_recover_exact_su(z):
    q = stats.johnsonsu.ppf(special.ndtr(np.array([-3, -1, 1, 3]) * z), 1.0, 2.0, loc=10, scale=3)
    kind, g, eta, eps, lam, qr = tr._johnson_params(q, z)
    assert kind == "SU" and qr > 1
    assert_allclose([g, eta, eps, lam], [1.0, 2.0, 10.0, 3.0], rtol=1e-9)


@pytest.mark.parametrize("z", Z)
def test_quantile_formulas_recover_exact_sb(z):
    q = stats.johnsonsb.ppf(special.ndtr(np.array([-3, -1, 1, 3]) * z), -0.5, 1.5, loc=2, scale=5)
    kind, g, eta, eps, lam, qr = tr._johnson_params(q, z)
    assert kind == "SB" and qr < 1
    assert_allclose([g, eta, eps, lam], [-0.5, 1.5, 2.0, 5.0], rtol=1e-9)


@pytest.mark.parametrize("z", Z)
def test_quantile_formulas_recover_exact_sl(z):
    # SL: z = gamma + eta ln(x - eps) <=> lognorm(s=1/eta, loc=eps, scale=exp(-gamma/eta))
    g, eta, eps = 1.0, 2.0, 3.0
    q = stats.lognorm.ppf(
        special.ndtr(np.array([-3, -1, 1, 3]) * z), 1 / eta, loc=eps, scale=math.exp(-g / eta)
    )
    kind, g2, eta2, eps2, lam, qr = tr._johnson_params(q, z, sl_tolerance=1e-9)
    assert kind == "SL" and lam is None
    assert_allclose([g2, eta2, eps2], [g, eta, eps], rtol=1e-9)


def _true_transform_gap(r, x, f):
    q = np.quantile(x, np.linspace(0.05, 0.95, 19))
    return np.max(np.abs(r.transform(q) - f(q)))


def test_johnson_recovers_su_sample():
    a, b, loc, scale = 1.0, 2.0, 10.0, 3.0
    x = stats.johnsonsu.rvs(a, b, loc=loc, scale=scale, size=1000, random_state=_rng(21))
    r = tr.johnson(x)
    assert r.kind == "SU"
    gap = _true_transform_gap(r, x, lambda v: a + b * np.arcsinh((v - loc) / scale))
    assert gap < 0.15  # loose: sampling error of the four percentiles
    assert r.shapiro_p > 0.05
    assert_allclose(r.inverse(r.transform(x)), x, rtol=1e-10)


def test_johnson_recovers_sb_sample():
    a, b, loc, scale = 0.8, 1.2, 2.0, 5.0
    x = stats.johnsonsb.rvs(a, b, loc=loc, scale=scale, size=1000, random_state=_rng(22))
    r = tr.johnson(x)
    assert r.kind == "SB"
    gap = _true_transform_gap(r, x, lambda v: a + b * np.log((v - loc) / (loc + scale - v)))
    assert gap < 0.15
    assert r.epsilon < x.min() and r.epsilon + r.lam > x.max()
    assert r.shapiro_p > 0.05
    # limits outside the bounded range fall at -inf / +inf
    assert r.transform(r.epsilon - 1.0) == -math.inf
    assert r.transform(r.epsilon + r.lam + 1.0) == math.inf


def test_johnson_selection_evidence_and_dict():
    x = stats.johnsonsu.rvs(-1.0, 1.5, loc=0, scale=1, size=150, random_state=_rng(23))
    r = tr.johnson(x)
    ps = [c["shapiro_p"] for c in r.candidates]
    assert r.shapiro_p == max(ps)
    chosen = [c for c in r.candidates if c["z"] == r.z][0]
    assert chosen["kind"] == r.kind
    assert (chosen["quantile_ratio"] > 1) == (r.kind == "SU")
    # reference: scipy.stats.shapiro of the transformed readings
    assert_allclose(r.shapiro_p, stats.shapiro(r.transform(x)).pvalue, rtol=1e-12)
    assert r.delta == r.eta and set(r.parameters) == {"gamma", "eta", "epsilon", "lambda"}
    d = json.loads(json.dumps(r.to_dict(), allow_nan=False))
    assert d["kind"] == r.kind and len(d["candidates"]) == len(r.candidates)


def test_johnson_percentile_positions():
    # Chou et al. position n P + 0.5 (1-based), linear between order statistics
    xs = np.arange(1.0, 11.0)  # 1..10
    got = tr._percentiles(xs, np.array([0.25, 0.5, 0.001, 0.999]))
    assert_allclose(got, [3.0, 5.5, 1.0, 10.0])


def test_johnson_bad_input():
    with pytest.raises(AnalysisError, match="at least 10"):
        tr.johnson([1.0, 2.0, 3.0])
    with pytest.raises(StudyInputError, match="`z_grid` must be a non-empty list"):
        tr.johnson(np.arange(20.0), z_grid=[])
