"""The workbook shows the streams of a characteristic: the Capability step's "Streams" panel
(table, tests, group chart) and the stream rows under their characteristic in the overview."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import ipywidgets as widgets
import pytest

from studykit.app.session import demo_study_path
from studykit.app.shell import build_workbook
from studykit.app.steps.capability import CapabilityStep
from studykit.app.steps.intake import IntakeStep
from studykit.app.steps.limits import LimitsStep

STREAMED = "impeller_hub_bore"


@pytest.fixture
def wb(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    steps = [IntakeStep(), LimitsStep(), CapabilityStep()]
    wb = build_workbook(path, steps=steps)
    for s in steps[1:]:
        wb.select(s.key)
    assert not [m for m in wb.context.messages.messages if m[0] == "error"]
    return wb


def test_capability_step_shows_the_streams_panel(wb):
    cap = wb.step("capability")
    cap.ws.picker.value = STREAMED
    res = cap.ws.session.result(STREAMED)
    assert "Class A2" in cap.streams.children[0].value  # ISO 22514-2 class of the whole
    html = cap.streams.children[1].value
    assert "Streams" in html and html.count("sk-stream-row") == 4
    assert f"Worst stream: {res.streams.worst}" in html
    assert "one-way ANOVA" in html and "Brown-Forsythe" in html
    img = cap.streams.children[2]
    assert isinstance(img, widgets.Image) and img.value[:4] == b"\x89PNG"
    cap.ws.picker.value = "flange_thickness"  # no stream column: only the class
    assert len(cap.streams.children) == 1
    assert "Class A1" in cap.streams.children[0].value


def test_capability_step_shows_the_trend_class(tmp_path):
    # a study of the invented tool-wear file alone (the demo study does not hold it)
    from studykit.store import StudyFile
    from studykit.study import Characteristic

    demo = Path(__file__).resolve().parents[1] / "demo_data"
    path = tmp_path / "wear.study"
    StudyFile.create(
        path,
        data=(demo / "shaft_seat_wear.csv").read_bytes(),
        filename="shaft_seat_wear.csv",
        title="wear",
        who="test",
        characteristics=[
            Characteristic("shaft_seat_diameter", unit="mm", lsl=14.98, usl=15.02, target=15.0)
        ],
    )
    steps = [IntakeStep(), CapabilityStep()]
    wb = build_workbook(path, steps=steps)
    wb.select("capability")
    cap = wb.step("capability")
    res = cap.ws.session.result("shaft_seat_diameter")
    html = cap.streams.children[0].value
    assert "Class C3" in html and "location systematic" in html
    assert f"Ppk {res.time_model.indices['ppk']:.2f}" in html


def test_overview_lists_streams_under_their_characteristic(wb):
    lim = wb.step("limits")
    lim.overview.analyse.click()
    cells = lim.overview.table.children
    # the heading row, then per characteristic its name cell and one row widget holding its
    # other five cells and six cells per stream
    names = [c.children[0].description for c in cells[1::2]]
    at = names.index(STREAMED)
    texts = re.findall(
        r'<div class="widget-html-content">(.*?)</div></div>', cells[2 + 2 * at].value
    )
    streams = [texts[5 + 6 * k : 11 + 6 * k] for k in range(4)]
    assert len(texts) == 5 + 6 * 4
    assert [row[0] for row in streams] == [
        "↳ stream 1",
        "↳ stream 2",
        "↳ stream 3 (worst)",
        "↳ stream 4",
    ]
    res = lim.ws.session.result(STREAMED)
    row3 = streams[2]
    assert f"{res.streams.results['3'].verdict.lower_bound:.2f}" in row3[3]
