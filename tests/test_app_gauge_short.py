"""The short gauge study and the gauge-error panel of the "Gauge check" step, without a browser,
on a copy of the demo study (invented data). Expected numbers come from the stored results and
the analysis result (their arithmetic is checked in tests/test_gauge_type1.py and
tests/test_measurement_error.py); readings invented for the test (hand arithmetic there)."""

from __future__ import annotations

import datetime
import math
import shutil

import pytest

from studykit.app.session import demo_study_path
from studykit.app.shell import build_workbook
from studykit.app.steps.limits import LimitsStep
from studykit.app.steps.measuring import GaugeStep, read_reference_upload
from studykit.errors import DataFileError
from studykit.store import StudyFile

NAME = "flange_thickness"
READINGS = b"reading\n5.001\n5.003\n5.002\n5.002\n5.004\n5.000\n5.002\n5.001\n5.003\n5.002\n"


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    return path


@pytest.fixture
def wb(study_path):
    step = GaugeStep()
    wb = build_workbook(study_path, steps=[LimitsStep(), step])
    wb.select("measuring")
    ws = wb.context.extra["studykit.workspace"]
    ws.picker.value = NAME
    assert not [m for m in wb.context.messages.messages if m[0] == "error"]
    return wb


def _step(wb):
    return next(s for s in wb.steps if s.key == "measuring")


def _upload(widget, data: bytes, name: str = "readings.csv"):
    widget.value = (
        {
            "name": name,
            "type": "text/csv",
            "size": len(data),
            "content": memoryview(data),
            "last_modified": datetime.datetime(2026, 1, 1),
        },
    )


def test_gauge_error_panel_shows_the_result_block(wb):
    step = _step(wb)
    ws = wb.context.extra["studykit.workspace"]
    me = ws.session.result(NAME).measurement_error
    html = step.error_box.value
    assert "Gauge error taken out" in html
    for basis, k in (("within", "cp"), ("overall", "pp")):
        assert f"{me[basis]['process'][k]:.3f}" in html
        assert f"{me[basis]['observed'][k]:.3f}" in html
    # the demo study holds a short study of flange_thickness (demo_data/make_demo.py)
    assert "Short gauge study (one reference part)" in step.short_box.value
    assert "L. Haverkamp" in step.short_box.value


def test_no_gauge_no_error_panel(wb):
    step = _step(wb)
    ws = wb.context.extra["studykit.workspace"]
    ws.picker.value = "bore_diameter"
    assert step.error_box.value == ""
    assert "No short gauge study" in step.short_box.value


def test_short_study_previewed_then_attached(wb, study_path):
    step = _step(wb)
    ws = wb.context.extra["studykit.workspace"]
    _upload(step.short_upload, READINGS)
    assert step.short_value.value == "reading"
    assert step.short_lsl.value == "7.9" and step.short_usl.value == "8.1"  # from the spec
    step.short_lsl.value, step.short_usl.value = "4.95", "5.05"
    step.short_reference.value = "5"
    step.short_compute.click()
    assert not [m for m in wb.context.messages.messages if m[0] == "error"], (
        wb.context.messages.messages
    )
    # Cg = 5 sqrt(3)/3 = 2.887 (hand arithmetic in tests/test_gauge_type1.py)
    assert f"{5 * math.sqrt(3) / 3:.3f}" in step.short_preview.value
    assert step.short_attach.disabled
    ws.who.value = "Q. Engineer"
    step.short_reason.value = "gauge GR-07 on master M-5.000"
    assert not step.short_attach.disabled
    step.short_attach.click()
    stored = StudyFile(study_path).results("gauge_short", NAME)
    assert len(stored) == 2 and stored[-1].who == "Q. Engineer"  # the demo's, then this one
    assert stored[-1].payload["reason"] == "gauge GR-07 on master M-5.000"
    assert stored[-1].payload["limits_from"] == "entered"
    assert "Capable" in step.short_box.value and "Q. Engineer" in step.short_box.value


def test_short_study_bad_reference_is_a_message_not_a_traceback(wb):
    step = _step(wb)
    _upload(step.short_upload, READINGS)
    step.short_reference.value = "five"
    step.short_compute.click()
    kind, text = wb.context.messages.messages[0][:2]
    assert kind == "error" and "reference value" in text and "not a number" in text


def test_read_reference_upload_names_the_file_row_and_column():
    with pytest.raises(DataFileError, match=r"file 'r.csv', row 3, column 'reading'"):
        read_reference_upload(b"reading\n5.001\nfive\n", "r.csv", value="reading")
    with pytest.raises(DataFileError, match="cannot be read here"):
        read_reference_upload(b"x", "r.pdf")
