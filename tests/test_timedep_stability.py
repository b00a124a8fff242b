"""Stability of a process whose location moves by its ISO 22514-2 class (studykit/time_model.py,
studykit.stats.timedep.class_limits).

The class limits are checked against an independent computation (numpy's least-squares line and
the 3-sigma rule of a Shewhart chart on the class model's subgroup-mean spread; the limits
themselves are ours, the class from memory of ISO 22514-2). The data are simulated with a fixed
seed (tool wear as a straight trend); each test asserts its preconditions so it cannot pass
vacuously.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from studykit.cli import main
from studykit.stats import timedep


def _wear(seed=11, k=25, n=5, slope=0.0006, sigma=0.002, jump=None):
    rng = np.random.default_rng(seed)
    means = 15.0 + slope * (np.arange(k) - k / 2)
    if jump is not None:
        means[jump] += 0.012  # one subgroup far off the trend: a real special cause
    x = np.repeat(means, n) + rng.normal(0, sigma, k * n)
    return x, np.repeat(np.arange(1, k + 1), n)


def test_class_limits_against_an_independent_line():
    x, g = _wear()
    out = timedep.class_limits(x, g, "C3")
    m = x.reshape(25, 5).mean(axis=1)
    t = np.arange(1, 26, dtype=float)
    b, a = np.polyfit(t, m, 1)  # equal subgroup sizes: the weighted line is the plain one
    np.testing.assert_allclose(out["centre"], a + b * t, rtol=0, atol=1e-12)
    resid = x - np.repeat(a + b * t, 5)
    s_r = np.sqrt(np.sum(resid**2) / (x.size - 2))  # spread about the line, N - 2 df
    np.testing.assert_allclose(out["half"], 3 * s_r / np.sqrt(5), rtol=1e-12)
    assert out["beyond"] == []


def test_class_limits_c1_uses_the_variance_components():
    rng = np.random.default_rng(5)
    x = np.repeat(rng.normal(10, 0.3, 20), 4) + rng.normal(0, 0.1, 80)
    g = np.repeat(np.arange(20), 4)
    vc = timedep.variance_components(x, g)
    out = timedep.class_limits(x, g, "C1")
    np.testing.assert_allclose(out["centre"], x.mean())
    np.testing.assert_allclose(out["half"], 3 * np.sqrt(vc.sigma_between**2 + vc.msw / 4))


def _analyze(tmp_path, x, g):
    path = tmp_path / "wear.csv"
    rows = ["subgroup,seat [mm]"] + [f"{int(a)},{b:.5f}" for a, b in zip(g, x, strict=True)]
    path.write_text("\n".join(rows) + "\n")
    return path


def _json(capsys, path):
    args = [str(path), "-c", "seat", "--lsl", "14.97", "--usl", "15.03", "--phase1", "off"]
    assert main(["analyze", *args, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_a_trend_the_class_explains_does_not_withhold_the_verdict(tmp_path, capsys):
    x, g = _wear()
    d = _json(capsys, _analyze(tmp_path, x, g))
    assert d["time_model"]["class"] == "C3"
    sig = d["chart"]["signals"]
    assert any(s["rule"] == "beyond_limits" and s["chart"] == "location" for s in sig)
    assert not any(s["rule"] == "beyond_limits" and s["chart"] == "dispersion" for s in sig)
    codes = [f["code"] for f in d["findings"]]
    assert "moves_by_class" in codes and "not_in_control" not in codes
    assert d["verdict"]["meets"] is not None  # judged on the class's own index
    assert d["time_model"]["verdict_basis"]["basis"] == "class_method"


def test_a_subgroup_off_the_trend_still_withholds(tmp_path, capsys):
    x, g = _wear(jump=12)
    d = _json(capsys, _analyze(tmp_path, x, g))
    assert d["time_model"]["class"] in ("C3", "C4")
    lim = timedep.class_limits(x, g, d["time_model"]["class"])
    assert "13" in lim["beyond"]  # the precondition: subgroup 13 is off the class's limits
    codes = [f["code"] for f in d["findings"]]
    assert "not_in_control" in codes and "moves_by_class" not in codes
    assert d["verdict"]["meets"] is None


def test_class_limits_refuses_a_class_that_does_not_move():
    x, g = _wear()
    with pytest.raises(Exception, match="only C1, C3, C4"):
        timedep.class_limits(x, g, "A1")


def test_the_indices_table_marks_the_class_index_as_judged():
    """The demo's worn-tool seat (class C3) is judged on the class's Ppk: the workbook's table
    shows that row as judged, not the usual Ppk (one verdict on every surface)."""
    from pathlib import Path

    from studykit.analysis import analyze_study
    from studykit.app.steps.capability import indices_html
    from studykit.store import StudyFile

    demo = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.study"
    res = analyze_study(StudyFile(demo).load(), "shaft_seat_diameter")
    assert res.time_model.judged["basis"] == "class_method"
    html = indices_html(res)
    assert html.count("(judged)") == 1
    assert "by the time-dependent model C3 (judged)" in html
    assert f"{res.time_model.judged['lower_bound']:.2f}" in html


def test_the_class_limits_reach_the_charts():
    """The workbook's location chart and the PDF figure draw the class model's limits from the
    result (a renderer never computes them): the same numbers as ``class_limits``."""
    from pathlib import Path

    from studykit.analysis import analyze_study
    from studykit.app.charts import control_chart_columns
    from studykit.store import StudyFile

    demo = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.study"
    study = StudyFile(demo).load()
    res = analyze_study(study, "shaft_seat_diameter")
    lim = res.time_model.location_limits
    band = control_chart_columns(res)["location"]["class_band"]
    assert len(band["x"]) == len(lim["labels"]) == 30
    np.testing.assert_allclose(
        np.asarray(band["upper"]) - np.asarray(band["lower"]), 2 * np.asarray(lim["half"])
    )
    # a class that does not move the location draws nothing
    still = analyze_study(study, "bore_diameter")
    assert still.time_model.cls in ("A1", "A2")
    assert control_chart_columns(still)["location"]["class_band"]["x"] == []
