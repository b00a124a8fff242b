"""Phase I on long series: removal limits that keep the chart-wide false-alarm probability.

Sources named beside each check:
* the per-point probability of a 3-sigma normal chart, 2 Phi(-3) = 0.0027, and the Sidak
  identity 1 - (1 - alpha)^m (Chakraborti, Human and Graham 2009, Quality Engineering 21(1),
  sections 2-3, from memory); values computed here with scipy.stats.norm (reference library);
* the distribution of the range of n normal values: scipy.stats.studentized_range with very
  large degrees of freedom (reference library);
* the moving range of normal values: |X_i - X_(i-1)| ~ |N(0, 2 sigma^2)| (definition).
The long series are seeded, invented data.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from studykit.analysis import analyze_characteristic
from studykit.data import CharacteristicData
from studykit.stats.chance import REFERENCE_POINTS, series_chance
from studykit.stats.charts import control_chart
from studykit.stats.constants import d2, d3
from studykit.stats.phase1 import phase1
from studykit.study import Characteristic

N_REMOVED_MODERATE = 0  # seeded: the count found (none beyond the removal limits)
FAP_25 = 1 - (1 - 2 * stats.norm.sf(3.0)) ** 25  # 3-sigma chart of 25 points: 6.5 %


@pytest.fixture(scope="module")
def stable_200k():
    return np.random.default_rng(20261202).normal(10.0, 0.01, 200_000)


def test_short_chart_keeps_the_3_sigma_limits():
    # 25 points or fewer: the removal limits are the control limits (nothing changes)
    x = np.zeros(REFERENCE_POINTS)
    x[::2] = 0.5
    ch = control_chart(x, mu=0.0, sigma=1.0, rules="limits_only")
    c = series_chance(ch.location)
    assert not c.adjusted
    np.testing.assert_array_equal(c.upper, ch.location.ucl)
    np.testing.assert_array_equal(c.lower, ch.location.lcl)
    assert c.fap == pytest.approx(FAP_25, rel=1e-12)


def test_long_location_chart_removal_limit_is_sidak_adjusted():
    m = 10_000
    ch = control_chart(np.zeros(m), mu=0.0, sigma=1.0, rules="limits_only")
    c = series_chance(ch.location)
    assert c.adjusted and c.points == m
    alpha = 1 - (1 - stats.norm.sf(3.0)) ** (REFERENCE_POINTS / m)  # per side
    assert c.upper[0] == pytest.approx(stats.norm.isf(alpha), rel=1e-10)
    assert c.lower[0] == pytest.approx(-stats.norm.isf(alpha), rel=1e-10)
    # Sidak: both sides over m points give the chart-wide probability of 25 points
    whole = 1 - (1 - 2 * stats.norm.sf(c.upper[0])) ** m
    assert whole == pytest.approx(FAP_25, rel=1e-3)


def test_moving_range_removal_limit_is_exact():
    m = 50_001
    rng = np.random.default_rng(7)
    ch = control_chart(rng.normal(size=m), kind="imr", sigma=1.0, rules="limits_only")
    c = series_chance(ch.dispersion)
    # 3-sigma UCL of the moving range: (d2 + 3 d3) sigma; its exact tail 2 Phi(-UCL / sqrt 2)
    p0 = 2 * stats.norm.sf((d2(2) + 3 * d3(2)) / np.sqrt(2))
    assert c.expected == pytest.approx(p0 * (m - 1), rel=1e-9)
    alpha = 1 - (1 - p0) ** (REFERENCE_POINTS / (m - 1))
    assert 2 * stats.norm.sf(c.upper[1] / np.sqrt(2)) == pytest.approx(alpha, rel=1e-8)


def test_range_chart_tails_agree_with_scipy_studentized_range():
    rng = np.random.default_rng(11)
    k = 2_000  # subgroups of 5
    x = rng.normal(size=5 * k)
    ch = control_chart(x, np.repeat(np.arange(k), 5), kind="xbar_r", sigma=1.0, rules="limits_only")
    c = series_chance(ch.dispersion, ch.sizes)
    p0 = stats.studentized_range.sf(d2(5) + 3 * d3(5), 5, 1e7)  # df -> infinity
    assert c.expected == pytest.approx(p0 * k, rel=1e-6)
    alpha = 1 - (1 - p0) ** (REFERENCE_POINTS / k)
    assert stats.studentized_range.sf(c.upper[0], 5, 1e7) == pytest.approx(alpha, rel=1e-4)


def test_long_stable_series_keeps_every_value(stable_200k):
    res = phase1(stable_200k, kind="imr", removal_rules="limits_only")
    assert res.n_removed_auto == 0 and res.iterations == 0 and res.stopped == "stable"
    loc, disp = res.chance["location"], res.chance["dispersion"]
    # the points beyond the 3-sigma limits are as many as chance gives (seeded: exact counts)
    assert (loc.beyond_limits, disp.beyond_limits) == (516, 1806)
    assert loc.expected == pytest.approx(2 * stats.norm.sf(3.0) * 200_000, rel=0.01)
    assert not loc.more_than_chance and not disp.more_than_chance
    assert loc.beyond_removal == 0 and disp.beyond_removal == 0
    assert not res.unexplained_beyond_limits


def test_long_series_with_real_shifts_removes_them_only(stable_200k):
    x = stable_200k.copy()
    bad = np.arange(1_000, 200_000, 6_700)  # 30 readings 10 sigma high (a special cause)
    x[bad] += 0.1
    res = phase1(x, kind="imr", removal_rules="limits_only")
    removed = sorted(r.label for r in res.removals)
    # each shifted reading goes; its moving range to the next reading is explained by it
    assert removed == sorted(int(i) + 1 for i in bad)
    assert all(r.rule == "beyond_limits" and r.chart == "location" for r in res.removals)
    assert all("removal limit" in r.reason for r in res.removals)
    assert res.iterations == 1 and res.stopped == "stable"


def test_sustained_moderate_shift_is_not_trimmed_but_withholds(stable_200k):
    # 5,000 readings 1.2 sigma high: together far more points beyond the 3-sigma limits than
    # chance gives, but hardly any individually convincing -> the shift is not trimmed away
    # point by point, and the chart is not shown stable
    x = stable_200k.copy()
    x[50_000:55_000] += 0.012
    res = phase1(x, kind="imr", removal_rules="limits_only")
    assert res.n_removed_auto == N_REMOVED_MODERATE
    loc = res.chance["location"]
    assert loc.more_than_chance and loc.beyond_limits == 673 and loc.p_value < 1e-6
    assert res.unexplained_beyond_limits


def test_analysis_of_a_long_stable_series_keeps_the_normal_model(stable_200k):
    data = CharacteristicData("diameter", "mm", stable_200k)
    res = analyze_characteristic(data, Characteristic("diameter", lsl=9.94, usl=10.06))
    assert res.phase1.n_removed_auto == 0
    assert res.model.name == "normal"
    assert res.n == 200_000
    assert res.verdict.meets is True  # Ppk about 2: judged, not withheld by chance points
    codes = [f.code for f in res.findings]
    assert "chance_signals" in codes and "not_in_control" not in codes
    d = res.to_dict()
    cs = d["phase1"]["chance_signals"]["location"]
    assert cs["beyond_limits"] == 516 and cs["beyond_removal_limits"] == 0
    assert cs["more_than_chance"] is False
