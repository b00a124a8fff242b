"""Short gauge study of one reference part: Cg, Cgk, bias and its t-test.

The sample is invented for this test (not published): ten readings of a 5.000 mm reference part,
chosen so that every number can be checked by hand. Offsets from the reference in micrometres:
1, 3, 2, 2, 4, 0, 2, 1, 3, 2 -> sum 20, mean 2 um (bias 0.002 mm); deviations from the mean
-1, 1, 0, 0, 2, -2, 0, -1, 1, 0 -> sum of squares 12, s^2 = 12/9 = 4/3 um^2, s = 2/sqrt(3) um.
Tolerance T = 0.1 mm = 100 um, K = 20 %, L = 6 (common practice, no source):
Cg = 0.2 * 100 / (6 * 2/sqrt(3)) = 5 sqrt(3) / 3 = 2.886751...
Cgk = (0.1 * 100 - 2) / (3 * 2/sqrt(3)) = 4 sqrt(3) / 3 = 2.309401...
t = 2 / sqrt((4/3) / 10) = sqrt(30) = 5.477226..., 9 degrees of freedom.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from studykit.errors import StudyInputError
from studykit.stats.gauge_type1 import short_gauge_study

READINGS = [5.001, 5.003, 5.002, 5.002, 5.004, 5.000, 5.002, 5.001, 5.003, 5.002]


def test_cg_cgk_by_hand():
    r = short_gauge_study(READINGS, reference=5.0, tolerance=0.1)
    # hand arithmetic in the module docstring above
    assert_allclose(r.mean, 5.002, rtol=1e-12)
    assert_allclose(r.sd, 0.002 / math.sqrt(3), rtol=1e-9)
    assert_allclose(r.bias, 0.002, rtol=1e-9)
    assert_allclose(r.cg, 5 * math.sqrt(3) / 3, rtol=1e-9)
    assert_allclose(r.cgk, 4 * math.sqrt(3) / 3, rtol=1e-9)
    assert_allclose(r.bias_pct_tolerance, 2.0, rtol=1e-9)  # 100 * 0.002 / 0.1
    assert_allclose(r.pct_repeatability, 20 / (5 * math.sqrt(3) / 3), rtol=1e-9)  # K / Cg
    assert r.status == "capable"
    assert r.lsl == pytest.approx(4.95) and r.usl == pytest.approx(5.05)


def test_k_and_l_options_by_hand():
    # K = 10 %, L = 4: Cg = 0.1 * 100 / (4 s) = 10 / (8/sqrt(3)) = 5 sqrt(3) / 4;
    # Cgk = (0.05 * 100 - 2) / (2 s) = 3 / (4/sqrt(3)) = 3 sqrt(3) / 4 (hand arithmetic)
    r = short_gauge_study(READINGS, reference=5.0, lsl=4.95, usl=5.05, k_percent=10, l_sigmas=4)
    assert_allclose(r.cg, 5 * math.sqrt(3) / 4, rtol=1e-9)
    assert_allclose(r.cgk, 3 * math.sqrt(3) / 4, rtol=1e-9)
    assert r.status == "not capable"  # Cgk 1.299 < 1.33
    assert "Cgk below the limit" in r.message


def test_t_test_against_scipy():
    r = short_gauge_study(READINGS, reference=5.0, tolerance=0.1)
    ref = stats.ttest_1samp(READINGS, 5.0)  # scipy.stats.ttest_1samp(values, reference)
    assert_allclose(r.t_statistic, ref.statistic, rtol=1e-9)
    assert_allclose(r.p_value, ref.pvalue, rtol=1e-9)
    assert r.df == int(ref.df) == 9
    assert_allclose(r.t_statistic, math.sqrt(30), rtol=1e-9)  # hand arithmetic above
    ci = ref.confidence_interval(0.95)  # scipy's interval on the mean; bias = mean - reference
    assert_allclose([r.bias_lower, r.bias_upper], [ci.low - 5.0, ci.high - 5.0], rtol=1e-9)
    assert r.bias_significant is True
    assert "significant" in r.message


def test_t_test_against_scipy_random_samples():
    rng = np.random.default_rng(17)
    for _ in range(20):
        x = rng.normal(10.0, 0.01, size=int(rng.integers(5, 60)))
        ref = float(rng.normal(10.0, 0.005))
        r = short_gauge_study(x, reference=ref, tolerance=0.5)
        s = stats.ttest_1samp(x, ref)  # scipy.stats.ttest_1samp(values, reference)
        assert_allclose([r.t_statistic, r.p_value], [s.statistic, s.pvalue], rtol=1e-8)
        assert r.bias_significant == (s.pvalue < 0.05)


def test_no_spread_and_few_readings():
    r = short_gauge_study([2.0] * 5, reference=2.0, tolerance=1.0)
    assert r.cg is None and r.cgk is None and r.p_value is None
    assert r.status == "not capable"
    assert any("no spread" in n for n in r.notes)
    assert any("Only 5 readings" in n for n in r.notes)


def test_negative_cgk_when_bias_eats_the_share():
    # bias 0.012 > K/200 * T = 0.01: Cgk negative (hand arithmetic: (0.01 - 0.012) / (3 s))
    x = [v + 0.010 for v in READINGS]
    r = short_gauge_study(x, reference=5.0, tolerance=0.1)
    assert_allclose(r.cgk, (0.01 - 0.012) / (3 * 0.002 / math.sqrt(3)), rtol=1e-8)
    assert r.pct_repeatability_bias is None
    assert r.status == "not capable"


def test_to_dict_is_json_ready():
    import json

    d = short_gauge_study(READINGS, reference=5.0, tolerance=0.1).to_dict()
    json.dumps(d, allow_nan=False)
    assert d["kind"] == "gauge_short"
    assert d["t_test"]["df"] == 9 and d["verdict"]["status"] == "capable"
    assert len(d["values"]) == 10


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"reference": 5.0}, "need the tolerance"),
        ({"reference": 5.0, "tolerance": 0.1, "lsl": 1, "usl": 2}, "not both"),
        ({"reference": 5.0, "lsl": 5.1, "usl": 5.0}, "greater than"),
        ({"reference": float("nan"), "tolerance": 0.1}, "reference"),
        ({"reference": 5.0, "tolerance": -1}, "positive"),
        ({"reference": 5.0, "tolerance": 0.1, "k_percent": 150}, "up to 100"),
        ({"reference": 5.0, "tolerance": 0.1, "l_sigmas": 0}, "positive"),
        ({"reference": 5.0, "tolerance": 0.1, "alpha": 1.5}, "between 0 and 1"),
    ],
)
def test_bad_options(kwargs, message):
    with pytest.raises(StudyInputError, match=message):
        short_gauge_study(READINGS, **kwargs)


def test_bad_readings():
    with pytest.raises(StudyInputError, match="at least 2 readings"):
        short_gauge_study([1.0], reference=1.0, tolerance=1)
    with pytest.raises(StudyInputError, match="position 1"):
        short_gauge_study([1.0, float("nan"), 1.1], reference=1.0, tolerance=1)
