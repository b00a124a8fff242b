"""The workbook shell with the real steps on a copy of the demo study: per-workbook steps, the
``shown`` hook, the open-step hook, the header's lock state and the single overview."""

from __future__ import annotations

import shutil

import pytest
from study_helpers import waive_open_verdicts

from studykit.app.overview import OverviewPanel
from studykit.app.session import StudySession, demo_study_path
from studykit.app.shell import build_workbook, default_steps, study_state
from studykit.errors import DataFileError

NAME = "flange_thickness"


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    return path


class Counting:
    """A minimal step that counts build/refresh/shown calls."""

    def __init__(self, key):
        import ipywidgets as widgets

        self.key, self.title, self.guidance = key, key.title(), f"The {key} step."
        self.calls = {"build": 0, "refresh": 0, "shown": 0}
        self._widgets = widgets

    def build(self, context):
        self.calls["build"] += 1
        return self._widgets.HTML(self.key)

    def refresh(self, context):
        self.calls["refresh"] += 1

    def shown(self, context):
        self.calls["shown"] += 1


def test_every_workbook_gets_its_own_step_objects():
    a, b = default_steps(), default_steps()
    assert [s.key for s in a] == [
        "intake",
        "limits",
        "measuring",
        "stability",
        "shape",
        "capability",
        "signoff",
        "export",
    ]
    assert all(x is not y for x, y in zip(a, b, strict=True))
    wb1, wb2 = build_workbook(), build_workbook()
    assert not {id(s) for s in wb1.steps} & {id(s) for s in wb2.steps}
    assert wb1.step("measuring").title == "Gauge check"


def test_shown_is_called_when_a_built_step_opens_again():
    one, two = Counting("one"), Counting("two")
    wb = build_workbook(steps=[one, two])
    assert one.calls == {"build": 1, "refresh": 0, "shown": 0}
    wb.select("two")
    wb.select("one")
    wb.select("one")
    assert one.calls["build"] == 1 and one.calls["shown"] == 2
    assert two.calls == {"build": 1, "refresh": 0, "shown": 0}


def test_a_failing_shown_is_a_message_and_the_step_still_opens():
    one, two = Counting("one"), Counting("two")

    def broken(context):
        raise RuntimeError("stale chart")

    two.shown = broken
    wb = build_workbook(steps=[one, two])
    wb.select("two")
    wb.select("one")
    wb.select("two")
    assert wb.current == "two"
    assert wb.context.messages.messages[0][1].startswith("Something went wrong: RuntimeError")


def test_the_open_step_hook_is_the_workbooks_select(study_path):
    wb = build_workbook(study_path)
    opener = wb.context.extra["studykit.open_step"]
    assert opener == wb.select
    ws = wb.context.extra["studykit.workspace"]
    ws.open(NAME, "stability")
    assert wb.current == "stability" and ws.session.current == NAME


def test_the_real_chart_steps_resync_on_reopen(study_path, monkeypatch):
    wb = build_workbook(study_path)
    wb.select("stability")
    step = wb.step("stability")
    calls = []
    monkeypatch.setattr(step.live, "resync", lambda: calls.append(1) or False)
    wb.select("measuring")
    wb.select("stability")
    assert calls  # the chart widget is brought up to date when the step is shown again


def test_header_shows_the_lock_as_soon_as_the_study_loads(study_path):
    waive_open_verdicts(study_path)
    StudySession(study_path).sign(who="M. Approver", role="approved", decision="approve")
    wb = build_workbook(study_path)  # a study opens on its overview (Specification & criterion)
    assert wb.current == "limits"
    assert wb.context.state == "Approved · locked"
    assert "Approved · locked" in wb._header.value


def test_header_shows_a_voided_approval(study_path):
    waive_open_verdicts(study_path)
    s = StudySession(study_path)
    s.sign(who="M. Approver", role="approved", decision="approve")
    s.exclude(NAME, "3", reason="late change", who="A. Tester", override_reason="ECN-7")
    assert study_state(s.study) == "Approval voided"
    wb = build_workbook(study_path)
    assert "Approval voided" in wb._header.value


def test_an_open_study_is_shown_once_in_the_overview(study_path):
    wb = build_workbook(study_path)
    card = wb._overview_card
    assert wb.current == "limits"  # a study opens on the limits step, which shows the overview
    assert card.children == () and card.layout.display == "none"
    wb.select("intake")
    assert len(card.children) == 1 and isinstance(card.children[0], OverviewPanel)
    wb.select("limits")
    assert card.children == () and card.layout.display == "none"
    wb.select("measuring")
    assert isinstance(card.children[0], OverviewPanel)
    assert card.children[0] is not wb.step("limits").overview
    # a row of the card opens the characteristic in the stability step
    names = [c.children[0] for c in card.children[0].table.children if hasattr(c, "children")]
    button = next(b for b in names if getattr(b, "description", None) == NAME)
    button.click()
    assert wb.current == "stability"
    assert wb.context.extra["studykit.workspace"].session.current == NAME


def test_without_a_study_the_card_lists_the_confirmed_data():
    wb = build_workbook()
    assert "No measurements confirmed yet" in wb._overview.value
    assert wb._overview_card.children == (wb._overview,)


def test_the_default_reader_gets_the_workbooks_size_limit():
    wb = build_workbook(max_upload_bytes=10)
    with pytest.raises(DataFileError, match="limit"):
        wb.context.read_measurements(b"Bore\n10.01\n10.02\n10.03\n", "bore.csv")
