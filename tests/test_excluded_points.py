"""The points of recorded exclusions are computed by the analysis, and the PDF chart draws them
from the result (issue 16: a renderer never computes statistics).

Subgroup mean and range as the X-bar and R chart defines them (NIST/SEMATECH e-Handbook of
Statistical Methods, section 6.3.2.1), computed here with numpy from the readings of the
committed demo study (invented, seeded: demo_data/README.md).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from studykit.analysis import analyze_study, read_study_measurements
from studykit.report import figures
from studykit.store import StudyFile

STUDY = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.study"


@pytest.fixture(scope="module")
def flange():
    study = StudyFile(STUDY).load()
    ms = read_study_measurements(study)
    return analyze_study(study, "flange_thickness", measurements=ms), ms.get("flange_thickness")


def test_excluded_points_are_subgroup_mean_and_range(flange):
    res, raw = flange
    assert res.phase1.chart.kind == "xbar_r"
    removed = [str(r.label) for r in res.phase1.removals]
    trial = {str(v) for v in res.phase1.trial_chart.labels}
    recorded = [lab for lab in removed if lab not in trial]
    assert recorded and sorted(res.excluded_points) == sorted(recorded)
    values = np.asarray(raw.values, dtype=float)
    subs = np.asarray(raw.subgroups).astype(str)
    for lab in recorded:
        v = values[(subs == lab) & np.isfinite(values)]
        loc, disp = res.excluded_points[lab]
        assert loc == pytest.approx(np.mean(v), rel=1e-12)
        assert disp == pytest.approx(np.ptp(v), rel=1e-12)


def _scatter_ys(ax):
    ys = []
    for c in ax.collections:
        offsets = np.asarray(c.get_offsets())
        if offsets.size:
            ys.extend(offsets[:, 1].tolist())
    return ys


def test_chart_draws_the_points_the_result_holds(flange):
    res, raw = flange
    marked = {lab: (1000.0 + i, 500.0 + i) for i, lab in enumerate(res.excluded_points)}
    fig = figures.control_chart_figure(dataclasses.replace(res, excluded_points=marked), raw=raw)
    location, dispersion = fig.axes[0], fig.axes[1]
    for loc, disp in marked.values():
        assert loc in _scatter_ys(location)
        assert disp in _scatter_ys(dispersion)
    # without the order of the readings the recorded exclusions are not placed (as before)
    bare = figures.control_chart_figure(dataclasses.replace(res, excluded_points=marked))
    assert not any(loc in _scatter_ys(bare.axes[0]) for loc, _ in marked.values())
