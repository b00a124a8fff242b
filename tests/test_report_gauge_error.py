"""The PDF section "Gauge error and short gauge studies" and its ``verify`` coverage, on a copy of
the demo study (invented data) with a short gauge study attached (readings invented for the
test; numbers are compared with the stored results, whose arithmetic is checked in
tests/test_gauge_type1.py and tests/test_measurement_error.py)."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from studykit.cli import main

ROOT = Path(__file__).resolve().parents[1]
# 20 invented readings of a reference part of 8.0004 mm (flange thickness, 7.900-8.100 mm)
READINGS = [
    8.0012,
    8.0009,
    8.0015,
    8.0007,
    8.0011,
    8.0013,
    8.0008,
    8.0010,
    8.0014,
    8.0009,
    8.0012,
    8.0006,
    8.0011,
    8.0010,
    8.0013,
    8.0008,
    8.0012,
    8.0009,
    8.0011,
    8.0010,
]


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    d = tmp_path_factory.mktemp("gauge_error_report")
    study = d / "demo.study"
    shutil.copy(ROOT / "demo_data" / "pump_housing_pilot.study", study)
    csv = d / "reference.csv"
    csv.write_text("reading\n" + "\n".join(f"{v:.4f}" for v in READINGS) + "\n")
    assert (
        main(
            [
                "gauge",
                str(csv),
                "--reference",
                "8.0004",
                "--value",
                "reading",
                "--study",
                str(study),
                "--characteristic",
                "flange_thickness",
                "--who",
                "Test",
            ]
        )
        == 0
    )
    from studykit.report.pdf import build_report

    pdf = d / "report.pdf"
    build_report(study, pdf)
    return study, pdf


def _text(pdf: Path) -> str:
    return subprocess.run(
        ["pdftotext", "-layout", str(pdf), "-"], capture_output=True, text=True, check=True
    ).stdout


def test_section_shows_short_study_and_process_only_indices(made):
    from studykit.analysis import analyze_study, gauge_results
    from studykit.store import StudyFile

    study, pdf = made
    text = _text(pdf)
    assert "Gauge error and short gauge studies" in text
    sf = StudyFile(study)
    p = sf.results("gauge_short", "flange_thickness")[-1].payload
    assert f"{p['cg']:.3g}, {p['cgk']:.3g}" in text  # printed as stored
    assert "Bias t-test" in text
    res = analyze_study(
        sf.load(), "flange_thickness", gauge=gauge_results(sf).get("flange_thickness")
    )
    me = res.measurement_error
    assert f"{me['within']['process']['cp']:.3g}" in text
    assert f"{me['overall']['process']['pp']:.3g}" in text
    assert "Gauge error taken out" in text


def test_verify_recomputes_the_short_study(made):
    from studykit.report.verify import verify_report

    study, pdf = made
    res = verify_report(pdf, study=study, allow_unsigned=True)
    checks = {c.item: c for c in res.checks}
    c = checks["short gauge study of flange_thickness"]
    assert c.status == "pass", c.detail
    assert all(ch.status != "fail" for ch in res.checks), [
        ch for ch in res.checks if ch.status == "fail"
    ]


def test_verify_names_a_changed_short_study_number(made):
    from studykit.report.pdf import read_evidence
    from studykit.report.verify import _short_gauge_checks

    _, pdf = made
    evidence = read_evidence(pdf.read_bytes())
    checks: list = []
    assert _short_gauge_checks(evidence, checks) > 0 and checks[0].status == "pass"
    evidence["short_gauges"]["flange_thickness"]["cgk"] *= 1.01
    checks = []
    _short_gauge_checks(evidence, checks)
    assert checks[0].status == "fail" and "cgk" in checks[0].detail


def test_safety_caution_kept_beside_process_only_indices(tmp_path):
    """A safety-critical characteristic's process-only indices carry the safety caution."""
    import numpy as np

    from studykit.analysis import SAFETY_CAUTION, analyze_characteristic
    from studykit.data import CharacteristicData
    from studykit.report import gauge_error
    from studykit.report.pdf import report_styles
    from studykit.study import Characteristic

    x = np.random.default_rng(3).normal(10.0, 0.5, 60)  # invented for the test
    gauge = {"components": [{"name": "gauge_rr", "sigma": 0.2, "interval_df": 20.0}]}
    res = analyze_characteristic(
        CharacteristicData("x", None, x),
        Characteristic("x", lsl=7, usl=13, safety_critical=True),
        gauge=gauge,
    )
    story: list = []
    gauge_error.gauge_error_section(story, 1, {}, {"x": res}, report_styles(), 480)
    texts = []
    for flowable in story:
        for cell in getattr(flowable, "_cellvalues", []):
            texts += [getattr(p, "text", "") for p in cell]
    assert any(SAFETY_CAUTION.split(":")[0] in t for t in texts)
