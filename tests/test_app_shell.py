"""The workbook shell without a browser: steps, messages, guarded callbacks, the intake step."""

from __future__ import annotations

import datetime
import html
import logging
from types import SimpleNamespace

import ipywidgets as widgets
import pytest

from studykit.app import build_workbook, guarded
from studykit.app.shell import Step, WorkbookContext, default_steps
from studykit.app.widgets import SAFETY_NOTE, MessageArea, caution_banner
from studykit.errors import DataFileError, StudyInputError

CSV = b"Bore (mm),Batch\n10.01,1\n10.02,1\n9.99,2\n10.00,2\n10.03,3\n,3\n"


def upload(step, data: bytes, name: str = "bore.csv"):
    step._upload.value = (
        {
            "name": name,
            "type": "text/csv",
            "size": len(data),
            "content": memoryview(data),
            "last_modified": datetime.datetime(2026, 1, 1),
        },
    )


def test_guarded_shows_input_errors_verbatim():
    area = MessageArea()

    @guarded(messages=area)
    def cb():
        raise DataFileError("column 'Bore' holds text", file="a.csv", row=3)

    assert cb() is None
    kind, text, _ = area.messages[0]
    assert kind == "error"
    assert text == "file 'a.csv', row 3: column 'Bore' holds text"


def test_guarded_summarises_other_errors_and_logs_the_traceback(caplog):
    area = MessageArea()

    @guarded(messages=area)
    def cb(x):
        return {}[x]

    with caplog.at_level(logging.ERROR, logger="studykit.app"):
        assert cb("missing") is None
    text = area.messages[0][1]
    assert text.startswith("Something went wrong: KeyError: 'missing'")
    assert "Traceback" not in text
    assert any(r.exc_info for r in caplog.records)


def test_guarded_passes_results_through_and_uses_the_current_area():
    area = MessageArea()
    assert guarded(lambda: 42)() == 42
    guarded(lambda: 1 / 0)()
    assert area.messages[0][1].startswith("Something went wrong: ZeroDivisionError")


def test_message_area_keeps_the_newest_six_and_escapes_html():
    area = MessageArea()
    for i in range(8):
        area.info(f"note {i}")
    area.error("<script>alert(1)</script>")
    assert len(area.messages) == 6
    assert "<script>" not in area._list.value and "&lt;script&gt;" in area._list.value


def test_default_steps_follow_the_protocol():
    steps = default_steps()
    assert len({s.key for s in steps}) == len(steps) == 8
    for s in steps:
        assert isinstance(s, Step)
        assert s.title and s.guidance and "\n" not in s.guidance


def test_empty_workbook_shows_no_study_state():
    wb = build_workbook()
    assert isinstance(wb, widgets.VBox)
    assert wb.context.state == "No study loaded"
    assert "No study loaded" in wb._header.value and "New capability study" in wb._header.value
    assert "No measurements confirmed yet" in wb._overview.value
    assert wb.current == "intake"


def test_missing_study_file_is_a_message_not_a_crash(tmp_path):
    wb = build_workbook(tmp_path / "gone.study")
    assert wb.context.state == "Study file not found"
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error" and "gone.study" in text and "does not exist" in text


def test_every_step_opens():
    wb = build_workbook()
    for s in wb.steps:
        wb.select(s.key)
        assert wb.current == s.key
        assert html.escape(s.title) in wb._guidance.value
        assert isinstance(wb._body.children[0], widgets.Widget)
    errors = [m for m in wb.context.messages.messages if m[0] == "error"]
    assert errors == []


def test_placeholder_step_says_it_is_coming():
    from studykit.app.steps._coming import ComingStep

    step = ComingStep("later", "Later", "Comes later.", "What it will do.")
    wb = build_workbook(steps=[step])
    assert "coming in a later version" in wb._body.children[0].value
    assert "What it will do." in wb._body.children[0].value


def test_upload_shows_detection_then_confirm_uses_it():
    wb = build_workbook()
    step = wb.steps[0]
    upload(step, CSV)
    html = step._result.value
    assert "Bore" in html and "mm" in html and "Batch" in html
    assert "3 (all 3 subgroups)" not in html  # subgroup 3 has one missing value
    assert ">1<" in html  # one missing cell
    assert step._upload.value == ()  # bytes released
    assert wb.context.measurements is None  # nothing used before confirmation
    assert step._chart_area.layout.display == ""
    (chart,) = step._chart_box.children
    assert type(chart).__name__ == "BokehModel"
    step._pick.value = step._pick.options[0]
    step._confirm.click()
    assert wb.context.measurements is not None
    assert wb.context.state == "Data confirmed"
    assert "<td>Bore</td>" in wb._overview.value
    assert wb._buttons["intake"].description.startswith("✓")


def test_upload_over_the_limit_is_refused():
    wb = build_workbook(max_upload_bytes=20)
    upload(wb.steps[0], CSV)
    text = wb.context.messages.messages[0][1]
    assert "above the upload limit" in text and "bore.csv" in text
    assert wb.steps[0]._confirm.disabled


def test_unreadable_upload_shows_the_reader_message():
    wb = build_workbook()
    upload(wb.steps[0], b"\x00\x01\x02 not a table", name="junk.csv")
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error" and "junk.csv" in text and "Traceback" not in text


def test_reader_crash_is_summarised():
    def reader(data, name):
        raise RuntimeError("disk on fire")

    wb = build_workbook(reader=reader)
    upload(wb.steps[0], CSV)
    assert wb.context.messages.messages[0][1].startswith(
        "Something went wrong: RuntimeError: disk on fire"
    )


def test_characteristic_names_are_escaped():
    wb = build_workbook()
    upload(wb.steps[0], b"<b>x</b>\n1\n2\n3\n", name="x.csv")
    assert "<b>x</b>" not in wb.steps[0]._result.value


def test_safety_critical_characteristics_get_the_caution_banner():
    wb = build_workbook()
    study = SimpleNamespace(
        title="Bracket",
        part="BR-7",
        characteristics={
            "Weld": SimpleNamespace(name="Weld", safety_critical=True),
            "Hole": SimpleNamespace(name="Hole", safety_critical=False),
        },
    )
    wb.context.update(study=study, title=study.title, part=study.part, state="Study open")
    assert "Bracket" in wb._header.value and "BR-7" in wb._header.value
    (banner,) = wb._caution.children
    assert "Weld" in banner.value and "Hole" not in banner.value
    assert "do not replace" in banner.value and "product validation" in caution_banner().value
    assert "licensed" in SAFETY_NOTE and "govern acceptance" in SAFETY_NOTE
    assert "<td>Weld</td>" in wb._overview.value and "<td>Yes</td>" in wb._overview.value


def test_a_new_step_plugs_in_and_is_refreshed():
    calls = []

    class Probe:
        key, title, guidance = "probe", "Probe", "A test step."

        def build(self, context: WorkbookContext):
            calls.append("build")
            return widgets.HTML("probe")

        def refresh(self, context: WorkbookContext):
            calls.append(("refresh", context.state))

    wb = build_workbook(steps=[Probe()])
    wb.context.update(state="Changed")
    assert calls == ["build", ("refresh", "Changed")]
    with pytest.raises(TypeError, match="unknown field"):
        wb.context.update(colour="red")


def test_a_failing_step_build_is_reported():
    class Broken:
        key, title, guidance = "broken", "Broken", "Fails."

        def build(self, context):
            raise StudyInputError("`usl` (9.5) must be greater than `lsl` (10.0)")

        def refresh(self, context):
            pass

    class Fine(Broken):
        key = "fine"

        def build(self, context):
            return widgets.HTML("ok")

    wb = build_workbook(steps=[Fine(), Broken()])
    wb.select("broken")
    assert wb.current == "fine"
    assert wb.context.messages.messages[0][1] == "`usl` (9.5) must be greater than `lsl` (10.0)"
