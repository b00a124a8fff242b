"""The tolerance-interval hook on analysis results agrees with ``studykit interval --study``."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from studykit.analysis import analyze_study
from studykit.cli import main
from studykit.errors import AnalysisError
from studykit.intervals import interval_for_result, interval_model_for
from studykit.stats.tolerance import tolerance_interval
from studykit.store import StudyFile

STUDY = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.study"


@pytest.fixture(scope="module")
def study():
    return StudyFile(STUDY).load()


@pytest.mark.parametrize("name", ["flange_thickness", "face_runout"])
def test_hook_matches_the_command_on_the_demo_study(capsys, study, name):
    res = analyze_study(study, name)
    ti = interval_for_result(res)
    assert main(["interval", "--study", str(STUDY), "-c", name, "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert ti.n == res.n == d["n"]
    assert ti.model == d["model"]
    for key in ("lower", "upper", "factor"):
        a, b = getattr(ti, key), d[key]
        assert (a is None and b is None) or a == pytest.approx(b, rel=1e-12)
    assert ti.meets == d["meets"]


def test_hook_uses_the_values_the_analysis_used(study):
    res = analyze_study(study, "flange_thickness")
    ti = interval_for_result(res, coverage=0.99, model="normal")
    ref = tolerance_interval(np.asarray(res.values), coverage=0.99, lsl=7.9, usl=8.1)
    assert (ti.lower, ti.upper) == pytest.approx((ref.lower, ref.upper), rel=1e-12)


def test_attribute_data_is_refused(study):
    res = analyze_study(study, "leak_test_defectives")
    with pytest.raises(AnalysisError, match="attribute"):
        interval_for_result(res)


def test_model_mapping():
    assert interval_model_for("normal") == "normal"
    assert interval_model_for("boxcox") == "boxcox"
    assert interval_model_for("johnson") == "distribution_free"
