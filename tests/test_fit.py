"""Distribution fits checked against scipy.stats fits, scipy's Anderson-Darling and definitions."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats

from studykit.errors import AnalysisError, StudyInputError
from studykit.stats import fit

N = 125


def _sample(dist, seed, size=N):
    return dist.rvs(size=size, random_state=np.random.default_rng(seed))


# family id -> (sample, scipy distribution, fixed arguments for .fit, our params from scipy's)
CASES = {
    "normal": (_sample(stats.norm(10, 2), 1), stats.norm, {}, lambda p: {"mean": p[0], "sd": p[1]}),
    "lognormal": (
        _sample(stats.lognorm(0.4, scale=5), 2),
        stats.lognorm,
        {"floc": 0},
        lambda p: {"log_mean": math.log(p[2]), "log_sd": p[0]},
    ),
    "lognormal3": (
        _sample(stats.lognorm(0.5, loc=5, scale=2), 3),
        stats.lognorm,
        {},
        lambda p: {"log_mean": math.log(p[2]), "log_sd": p[0], "threshold": p[1]},
    ),
    "weibull": (
        _sample(stats.weibull_min(2.5, scale=4), 4),
        stats.weibull_min,
        {"floc": 0},
        lambda p: {"shape": p[0], "scale": p[2]},
    ),
    "weibull3": (
        _sample(stats.weibull_min(2.5, loc=10, scale=3), 5),
        stats.weibull_min,
        {},
        lambda p: {"shape": p[0], "scale": p[2], "threshold": p[1]},
    ),
    "gamma": (
        _sample(stats.gamma(3.0, scale=2), 6),
        stats.gamma,
        {"floc": 0},
        lambda p: {"shape": p[0], "scale": p[2]},
    ),
    "gamma3": (
        _sample(stats.gamma(2.5, loc=5, scale=1.5), 7),
        stats.gamma,
        {},
        lambda p: {"shape": p[0], "scale": p[2], "threshold": p[1]},
    ),
    "exponential": (
        _sample(stats.expon(scale=3), 8),
        stats.expon,
        {"floc": 0},
        lambda p: {"scale": p[1]},
    ),
    "logistic": (
        _sample(stats.logistic(5, 1.5), 9),
        stats.logistic,
        {},
        lambda p: {"location": p[0], "scale": p[1]},
    ),
    "loglogistic": (
        _sample(stats.fisk(4.0, scale=3), 10),
        stats.fisk,
        {"floc": 0},
        lambda p: {"shape": p[0], "scale": p[2]},
    ),
    "loglogistic3": (
        _sample(stats.fisk(3.0, loc=5, scale=3), 11),
        stats.fisk,
        {},
        lambda p: {"shape": p[0], "scale": p[2], "threshold": p[1]},
    ),
    "sev": (
        _sample(stats.gumbel_l(20, 2), 12),
        stats.gumbel_l,
        {},
        lambda p: {"location": p[0], "scale": p[1]},
    ),
    "lev": (
        _sample(stats.gumbel_r(20, 2), 13),
        stats.gumbel_r,
        {},
        lambda p: {"location": p[0], "scale": p[1]},
    ),
    "halfnormal": (
        np.abs(_sample(stats.norm(0, 0.3), 14)),
        stats.halfnorm,
        {"floc": 0},
        lambda p: {"scale": p[1]},
    ),
}


def test_every_family_has_a_case():
    assert set(CASES) | {"exponential2"} == set(fit.FAMILIES)


@pytest.mark.parametrize("fid", sorted(CASES))
def test_fit_is_at_least_as_likely_as_scipy(fid):
    x, dist, kw, mapping = CASES[fid]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = dist.fit(x, **kw)  # reference: scipy.stats.<dist>.fit
    ref_ll = float(dist.logpdf(x, *ref).sum())
    m = fit.FAMILIES[fid].fit(x)
    # ours must not be worse than scipy's (tiny tolerance for rounding)
    assert m.loglik >= ref_ll - 1e-7 * abs(ref_ll)
    # and our log-likelihood is the sum of scipy's logpdf at our estimate
    assert_allclose(m.loglik, m.dist.logpdf(x).sum(), rtol=1e-10)
    expected = mapping(ref)
    assert set(m.parameters) == set(expected)
    # scipy stops at its optimizer tolerance, and a threshold profile is flat near its top
    rtol = 2e-2 if fid.endswith("3") else 1e-4
    for name, value in expected.items():
        assert_allclose(m.parameters[name], value, rtol=rtol, atol=1e-6, err_msg=name)


def test_exponential2_unbiased_estimates_from_scipy_fit():
    # scipy.stats.expon.fit(x) gives the ML estimates loc = x(1), scale = mean - x(1); the
    # unbiased estimates (Johnson, Kotz & Balakrishnan 1994, ch. 19) are
    # scale* = n/(n-1) scale, theta* = x(1) - scale*/n.
    x = _sample(stats.expon(loc=4, scale=2), 15)
    loc, scale = stats.expon.fit(x)
    m = fit.FAMILIES["exponential2"].fit(x)
    n = x.size
    assert_allclose(m.parameters["scale"], n / (n - 1) * scale, rtol=1e-12)
    assert_allclose(m.parameters["threshold"], loc - n / (n - 1) * scale / n, rtol=1e-12)
    assert m.parameters["threshold"] < x.min()
    assert m.note is not None and "unbiased" in m.note


@pytest.mark.parametrize("fid", sorted(fit.FAMILIES))
def test_fast_log_functions_match_scipy(fid):
    x = CASES.get(fid, CASES["exponential"])[0]
    if fid == "exponential2":
        x = _sample(stats.expon(loc=4, scale=2), 15)
    fam = fit.FAMILIES[fid]
    m = fam.fit(x)
    d = m.dist
    xs = np.sort(x)
    assert_allclose(fam._logpdf(xs, m.parameters), d.logpdf(xs), rtol=1e-9, atol=1e-12)
    assert_allclose(fam._logcdf(xs, m.parameters), d.logcdf(xs), rtol=1e-8, atol=1e-12)
    assert_allclose(fam._logsf(xs, m.parameters), d.logsf(xs), rtol=1e-8, atol=1e-12)


def _ad_by_definition(x, cdf):
    """A^2 = -n - sum_i (2i-1)/n [ln u_i + ln(1 - u_(n+1-i))] (Stephens 1974, eq. for A^2)."""
    u = np.sort(cdf(np.asarray(x)))
    n = u.size
    i = np.arange(1, n + 1)
    return -n - np.sum((2 * i - 1) * (np.log(u) + np.log(1 - u[::-1]))) / n


@pytest.mark.parametrize("fid", sorted(set(fit.FAMILIES) - {"normal", "lognormal", "lognormal3"}))
def test_ad_statistic_by_definition(fid):
    x = CASES.get(fid, CASES["exponential"])[0]
    if fid == "exponential2":
        x = _sample(stats.expon(loc=4, scale=2), 15)
    m = fit.FAMILIES[fid].fit(x)
    assert_allclose(m.ad_statistic, _ad_by_definition(x, m.cdf), rtol=1e-7)


def test_normal_ad_matches_references():
    # tests/reference/check_values.md, NIST e-Handbook 6.3.2.2 individuals data: A^2 0.304858, p 0.507862
    # (COMPUTED with scipy.stats.anderson and the D'Agostino & Stephens 1986 case-3 formula)
    x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
    m = fit.FAMILIES["normal"].fit(x)
    assert_allclose(m.ad_statistic, 0.304858, atol=5e-7)
    assert_allclose(m.ad_p_value, 0.507862, atol=5e-7)
    # the statistic is scipy.stats.anderson(x, 'norm'), which uses s with divisor n-1
    assert_allclose(
        m.ad_statistic, stats.anderson(x, "norm", method="interpolate").statistic, rtol=1e-12
    )


def test_lognormal_ad_is_normal_ad_of_logs():
    x = CASES["lognormal"][0]
    m = fit.FAMILIES["lognormal"].fit(x)
    ref = stats.anderson(np.log(x), "norm", method="interpolate")  # scipy 1.17
    assert_allclose(m.ad_statistic, ref.statistic, rtol=1e-12)
    # p-value: statsmodels.stats.diagnostic.normal_ad uses the same D'Agostino-Stephens formula
    from statsmodels.stats.diagnostic import normal_ad

    assert_allclose(m.ad_p_value, normal_ad(np.log(x))[1], rtol=1e-9)


# family -> (scipy.stats.anderson dist, data transform) for the tabulated p-values
ANDERSON = {
    "weibull": ("gumbel_l", np.log),
    "sev": ("gumbel_l", None),
    "lev": ("gumbel_r", None),
    "exponential": ("expon", None),
    "logistic": ("logistic", None),
    "loglogistic": ("logistic", np.log),
}


@pytest.mark.parametrize("fid", sorted(ANDERSON))
@pytest.mark.parametrize("source", ["own", "weibull", "lognormal", "lev"])
def test_tabulated_p_values_match_scipy_anderson(fid, source):
    dist, transform = ANDERSON[fid]
    x = CASES[fid][0] if source == "own" else CASES[source][0]
    m = fit.FAMILIES[fid].fit(x)
    y = x if transform is None else transform(x)
    # reference: scipy.stats.anderson(y, dist, method='interpolate') (scipy 1.17): the same
    # tables (D'Agostino & Stephens 1986; Stephens 1977, 1979), critical values rounded to 3
    # decimals and scipy's logistic fit stops at xtol=1e-5, hence the tolerances
    ref = stats.anderson(y, dist, method="interpolate")
    assert_allclose(m.ad_statistic, ref.statistic, rtol=1e-4)
    assert_allclose(m.ad_p_value, ref.pvalue, atol=2e-3)


def test_exponential_table_by_simulation():
    # Monte Carlo check of the 5 % point of Table 4.14 (A*^2 = 1.321 with A*^2 = A^2(1+0.6/n)):
    # under exponential data with fitted scale, about 5 % of samples exceed it.
    rng = np.random.default_rng(20261202)
    n, reps = 30, 6000
    x = np.sort(rng.exponential(size=(reps, n)), axis=1)
    u = 1 - np.exp(-x / x.mean(axis=1, keepdims=True))
    i = np.arange(1, n + 1)
    a2 = -n - np.sum((2 * i - 1) * (np.log(u) + np.log1p(-u[:, ::-1])), axis=1) / n
    share = np.mean(a2 * (1 + 0.6 / n) > 1.321)
    assert abs(share - 0.05) < 0.01  # binomial sd at 6000 reps: 0.0028
    # and our p-value at that point is 5 %
    p, text = fit.ad_p_table(1.321 / (1 + 0.6 / n), n, fit.AD_EXPON)
    assert_allclose(p, 0.05, atol=1e-12)


CALIBRATION = {
    "normal": stats.norm(10, 2),
    "exponential": stats.expon(scale=3),
    "weibull": stats.weibull_min(1.8, scale=5),
    "sev": stats.gumbel_l(3, 1),
    "logistic": stats.logistic(0, 1),
}


@pytest.mark.parametrize("fid", sorted(CALIBRATION))
def test_p_values_are_calibrated_by_simulation(fid):
    # Monte Carlo check of the whole chain (fit, A^2, modification, table or formula): for
    # samples from the family itself, P(p < 0.05) should be 0.05 and P(p < 0.10) 0.10.
    # 2000 samples: binomial sd 0.0049 and 0.0067; limits at about 3 sd.
    dist = CALIBRATION[fid]
    rng = np.random.default_rng(77)
    samples = dist.rvs(size=(2000, 30), random_state=rng)
    ps = np.array([fit.FAMILIES[fid].fit(s).ad_p_value for s in samples])
    assert abs(np.mean(ps < 0.05) - 0.05) < 0.015
    assert abs(np.mean(ps < 0.10) - 0.10) < 0.02


@pytest.mark.parametrize("fid", sorted(fit.FAMILIES))
def test_aic_bic_by_definition(fid):
    x = CASES.get(fid, CASES["exponential"])[0]
    m = fit.FAMILIES[fid].fit(x)
    k = m.family.n_params
    assert k == len(m.parameters)
    assert_allclose(m.aic, 2 * k - 2 * m.loglik, rtol=1e-14)
    assert_allclose(m.bic, k * math.log(x.size) - 2 * m.loglik, rtol=1e-14)


def test_ranking_rows_lrt_and_order():
    x = CASES["weibull3"][0]
    r = fit.fit_all(x)
    assert [row.rank for row in r.rows] == list(range(1, len(fit.FAMILIES) + 1))
    ok = [row for row in r.rows if row.error is None and row.converged]
    assert [row.aic for row in ok] == sorted(row.aic for row in ok)
    assert r.best is r.models[r.rows[0].id]
    by_id = {row.id: row for row in r.rows}
    for three, two in [
        ("weibull3", "weibull"),
        ("lognormal3", "lognormal"),
        ("gamma3", "gamma"),
        ("loglogistic3", "loglogistic"),
    ]:
        stat = 2 * (r.models[three].loglik - r.models[two].loglik)
        # reference: scipy.stats.chi2.sf(stat, 1)
        assert_allclose(by_id[three].lrt_p_value, stats.chi2.sf(max(stat, 0), 1), rtol=1e-10)
        assert by_id[three].lrt_against == two
    assert by_id["normal"].lrt_p_value is None
    # shifted Weibull data: the threshold variant is clearly better than the 2-parameter one
    assert by_id["weibull3"].lrt_p_value < 1e-3
    json.dumps(r.to_dict(), allow_nan=False)
    import dataclasses

    assert tuple(f.name for f in dataclasses.fields(fit.FitRow)) == fit.ROW_FIELDS
    assert tuple(r.to_dict()["rows"][0]) == fit.ROW_FIELDS


def test_non_positive_data_skip_families_with_a_reason():
    x = CASES["normal"][0] - 10.0  # straddles zero
    r = fit.fit_all(x)
    by_id = {row.id: row for row in r.rows}
    for fid in ["lognormal", "weibull", "gamma", "exponential", "loglogistic"]:
        assert by_id[fid].error is not None and "positive data" in by_id[fid].error
        assert fid not in r.models
    assert "data >= 0" in by_id["halfnormal"].error
    assert by_id["normal"].error is None
    errors = [row.rank for row in r.rows if row.error is not None]
    assert errors == list(range(len(r.rows) - len(errors) + 1, len(r.rows) + 1))
    assert json.loads(json.dumps(r.to_dict(), allow_nan=False))["rows"][-1]["loglik"] is None


def test_symmetric_data_put_lognormal3_at_the_search_limit():
    x = CASES["normal"][0]
    m = fit.FAMILIES["lognormal3"].fit(x)
    assert not m.converged and "search limit" in m.note
    # it then is (nearly) the normal fit
    assert m.loglik >= fit.FAMILIES["normal"].fit(x).loglik - 0.05


def test_j_shaped_data_have_no_interior_threshold_maximum():
    x = _sample(stats.weibull_min(0.7, loc=3, scale=2), 16)
    with pytest.raises(AnalysisError, match="no interior maximum"):
        fit.FAMILIES["weibull3"].fit(x)
    r = fit.fit_all(x, families=["weibull3", "weibull", "exponential2"])
    assert r.rows[-1].id == "weibull3" and "no interior maximum" in r.rows[-1].error


def test_tiny_relative_spread_runs_clean():
    # readings 1e4 +- 0.01: no numpy warnings; the gamma shape tends to mean^2/var (moments of
    # the gamma distribution, from memory: mean k*theta, variance k*theta^2)
    x = stats.norm(1e4, 0.01).rvs(size=125, random_state=np.random.default_rng(30))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = fit.fit_all(x)
    assert all(row.error is None for row in r.rows)
    assert_allclose(r.models["gamma"].parameters["shape"], x.mean() ** 2 / x.var(), rtol=0.02)
    # 1e6 +- 0.01: below double precision for a gamma shape; said so, the rest still fitted
    x = stats.norm(1e6, 0.01).rvs(size=125, random_state=np.random.default_rng(31))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = fit.fit_all(x)
    by_id = {row.id: row for row in r.rows}
    assert "too small to estimate a gamma shape" in by_id["gamma"].error
    assert by_id["normal"].error is None


def test_bad_input_messages():
    with pytest.raises(StudyInputError, match=r"`families` contains unknown id\(s\) \['norm'\]"):
        fit.fit_all([1.0, 2.0, 3.0], families=["norm"])
    with pytest.raises(AnalysisError, match="non-finite value"):
        fit.fit_all([1.0, float("nan"), 3.0])
    with pytest.raises(AnalysisError, match="zero spread"):
        fit.fit_all([2.0, 2.0, 2.0, 2.0])
    with pytest.raises(AnalysisError, match="at least 3"):
        fit.fit_all([1.0, 2.0])
    with pytest.raises(AnalysisError, match="at least 5"):
        fit.FAMILIES["weibull3"].fit([1.0, 2.0, 3.5])
    with pytest.raises(StudyInputError, match="numbers only"):
        fit.fit_all(["a", "b", "c"])


def test_model_methods_and_dict():
    x = CASES["gamma"][0]
    m = fit.FAMILIES["gamma"].fit(x)
    q = np.array([0.00135, 0.5, 0.99865])
    assert_allclose(m.cdf(m.ppf(q)), q, rtol=1e-10)
    assert_allclose(m.sf(m.ppf(q)), 1 - q, rtol=1e-9)
    assert_allclose(
        m.pdf(3.0), stats.gamma.pdf(3.0, m.parameters["shape"], scale=m.parameters["scale"])
    )
    assert_allclose(m.rvs(5, random_state=3), m.rvs(5, random_state=3))
    d = json.loads(json.dumps(m.to_dict(), allow_nan=False))
    assert d["family"] == "gamma" and d["n"] == x.size and d["ad_p_value"] is None


# -- properties -------------------------------------------------------------------------------
scales = st.floats(min_value=1e-3, max_value=1e3)
shifts = st.floats(min_value=-1e3, max_value=1e3)


@settings(max_examples=25, deadline=None)
@given(c=scales, seed=st.integers(0, 2**32 - 1))
@pytest.mark.parametrize(
    "fid", ["weibull", "gamma", "lognormal", "loglogistic", "exponential", "halfnormal"]
)
def test_scale_equivariance(fid, c, seed):
    x = stats.weibull_min.rvs(1.7, scale=2.0, size=40, random_state=np.random.default_rng(seed))
    a = fit.FAMILIES[fid].fit(x).parameters
    b = fit.FAMILIES[fid].fit(c * x).parameters
    for name in a:
        if name == "log_mean":
            assert_allclose(b[name], a[name] + math.log(c), rtol=1e-7, atol=1e-7)
        elif name == "scale":
            assert_allclose(b[name], c * a[name], rtol=1e-7)
        else:
            assert_allclose(b[name], a[name], rtol=1e-7)


@settings(max_examples=25, deadline=None)
@given(c=scales, shift=shifts, seed=st.integers(0, 2**32 - 1))
@pytest.mark.parametrize("fid", ["normal", "logistic", "sev", "lev"])
def test_location_scale_equivariance(fid, c, shift, seed):
    x = stats.gumbel_r.rvs(size=40, random_state=np.random.default_rng(seed))
    a = fit.FAMILIES[fid].fit(x).parameters
    b = fit.FAMILIES[fid].fit(shift + c * x).parameters
    loc = "mean" if fid == "normal" else "location"
    sc = "sd" if fid == "normal" else "scale"
    assert_allclose(b[loc], shift + c * a[loc], rtol=1e-7, atol=1e-7 * (abs(shift) + c))
    assert_allclose(b[sc], c * a[sc], rtol=1e-7)


@settings(max_examples=10, deadline=None)
@given(shift=st.floats(min_value=-50, max_value=50), seed=st.integers(0, 2**32 - 1))
def test_threshold_moves_with_the_data(shift, seed):
    x = stats.weibull_min.rvs(
        2.5, loc=1.0, scale=2.0, size=60, random_state=np.random.default_rng(seed)
    )
    try:
        a = fit.FAMILIES["weibull3"].fit(x)
    except AnalysisError:
        return
    b = fit.FAMILIES["weibull3"].fit(x + shift)
    assert_allclose(b.parameters["threshold"], a.parameters["threshold"] + shift, atol=1e-3)
    assert_allclose(b.loglik, a.loglik, atol=1e-6)


@pytest.mark.parametrize("fid", ["lognormal3", "weibull3", "gamma3", "loglogistic3"])
@pytest.mark.parametrize("rel", [1e-3, 1e-2])
def test_threshold_is_the_profile_maximum(fid, rel):
    # The profile likelihood at thresholds just either side of ours, each maximised over the
    # other parameters by scipy.stats.<dist>.fit(x, floc=theta), must not beat our fit: the
    # root of the profile slope is within a small fraction of the spacing of the readings.
    x, dist, _, _ = CASES[fid]
    m = fit.FAMILIES[fid].fit(x)
    theta = m.parameters["threshold"]
    step = rel * float(np.std(x))
    for t in (theta - step, theta + step):
        if t >= x.min():
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = dist.fit(x, floc=t)  # reference: scipy.stats.<dist>.fit with fixed loc
        ref_ll = float(dist.logpdf(x, *ref).sum())
        assert m.loglik >= ref_ll - 1e-9 * abs(ref_ll), (t, ref_ll, m.loglik)


@pytest.mark.parametrize(
    "fid, inner, dist",
    [
        ("weibull3", fit._inner_weibull, stats.weibull_min),
        ("gamma3", fit._inner_gamma, stats.gamma),
        ("loglogistic3", fit._inner_loglogistic, stats.fisk),
    ],
)
def test_row_wise_inner_fits_on_the_profile_grid(fid, inner, dist):
    # Each row of the profile grid (thresholds 1e-4 sd to 1e3 sd below min(x), the first
    # one leaving a single reading far out in log(x - theta)) fitted from the default start:
    # the full-precision row fit is at least as likely as scipy.stats.<dist>.fit(x, floc=theta)
    # (reference), and the rough fit of the grid is within 1e-6 (relative) of the full one.
    x = np.sort(CASES[fid][0])
    sd = float(np.std(x))
    thetas = x.min() - sd * 10.0**fit.GRID_DECADES
    ys = x[None, :] - thetas[:, None]
    ll, _, _ = inner(ys)
    ll_rough, _, _ = inner(ys, rough=True)
    assert_allclose(ll_rough, ll, rtol=1e-6)
    for t, ll_t in zip(thetas, ll, strict=True):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = dist.fit(x, floc=t)  # reference: scipy.stats.<dist>.fit with fixed loc
        ref_ll = float(dist.logpdf(x, *ref).sum())
        assert ll_t >= ref_ll - 1e-9 * abs(ref_ll), (t, ref_ll, ll_t)


def test_pickled_fitted_model_leaves_the_frozen_distribution_behind():
    """A pickled fit (what a report worker sends back) carries the family and parameters, not
    the cached scipy frozen distribution; the copy rebuilds it on first use and gives the same
    numbers as scipy.stats.gumbel_r with the fitted parameters (reference: scipy)."""
    import pickle

    x = stats.gumbel_r.rvs(loc=10.0, scale=0.5, size=200, random_state=11)
    m = fit.FAMILIES["lev"].fit(x)
    q = np.array([0.00135, 0.5, 0.99865])
    before = m.dist.ppf(q)
    assert "dist" in m.__dict__  # cached by the call above (m.ppf itself needs no scipy.stats)
    copy = pickle.loads(pickle.dumps(m))
    assert "dist" not in copy.__dict__
    assert copy.parameters == m.parameters and copy.name == m.name
    assert np.array_equal(copy.ppf(q), before)
    ref = stats.gumbel_r(m.parameters["location"], m.parameters["scale"])
    assert np.array_equal(copy.cdf(x), ref.cdf(x))
