"""The study panels without a browser: build every step on a copy of the demo study and drive
their widgets as a person would (tap selection simulated through the bokeh source).

Reference: Ppk recomputed with numpy from the study's data copy (see test_app_session.py for
the formula and its source).
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest
from study_helpers import waive_open_verdicts
from test_app_session import raw_values, reference_ppk

from studykit.app.charts import control_chart_columns, histogram_columns, interval_columns
from studykit.app.overview import overview_rows, sort_rows
from studykit.app.session import StudySession, demo_study_path
from studykit.app.shell import build_workbook
from studykit.app.steps.capability import CapabilityStep
from studykit.app.steps.export import ExportStep, download_link
from studykit.app.steps.intake import IntakeStep
from studykit.app.steps.limits import LimitsStep
from studykit.app.steps.shape import ShapeStep
from studykit.app.steps.signoff import SignoffStep
from studykit.app.steps.stability import StabilityStep
from studykit.store import StudyFile

NAME = "flange_thickness"


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    return path


@pytest.fixture
def wb(study_path):
    steps = [
        IntakeStep(),
        LimitsStep(),
        StabilityStep(),
        ShapeStep(),
        CapabilityStep(),
        SignoffStep(),
        ExportStep(),
    ]
    wb = build_workbook(study_path, steps=steps)
    for s in steps[1:]:
        wb.select(s.key)
    errors = [m for m in wb.context.messages.messages if m[0] == "error"]
    assert not errors, errors
    ws = wb.context.extra["studykit.workspace"]
    ws.who.value = "A. Tester"
    ws.picker.value = NAME
    return wb


def test_tap_removal_changes_every_panel_and_the_file(wb, study_path):
    stab, cap, lim = wb.step("stability"), wb.step("capability"), wb.step("limits")
    session = stab.ws.session
    before = session.result(NAME).capability.ppk
    src = stab.view.sources["location"]["points"]
    row = src.data["label"].index("5")
    src.selected.indices = [row]  # what a tap on the chart does
    assert stab.tap_events == 1 and stab.subgroup.value == "5"
    assert "in use" in stab.selected_info.value
    assert stab.act.disabled and "give a reason" in stab.act_hint.value
    stab.reason.value = "gauge dropped, parts re-measured"
    assert not stab.act.disabled and stab.act.description == "Remove subgroup"
    stab.act.click()
    after = session.result(NAME).capability.ppk
    spec = session.study.characteristic(NAME)
    assert after == pytest.approx(
        reference_ppk(session.study, NAME, {"17", "18", "5"}, spec.lsl, spec.usl), rel=1e-9
    )
    assert after != pytest.approx(before, rel=1e-6)
    # the capability panel shows the new bound; the stability chart shows 5 as removed
    assert f"{session.result(NAME).verdict.lower_bound:.2f}" in cap.verdict.value
    status = dict(zip(src.data["label"], src.data["status"], strict=True))
    assert status["5"] == "removed"
    assert "gauge dropped" in stab.log.value and "A. Tester" in stab.log.value
    d = StudyFile(study_path).load().excluded_subgroups(NAME)["5"]
    assert (d.who, d.reason) == ("A. Tester", "gauge dropped, parts re-measured")
    # the overview row follows
    row = next(r for r in overview_rows(session) if r["characteristic"] == NAME)
    assert row["removed"] == 3
    assert "3" in "".join(getattr(c, "value", "") for c in lim.overview.table.children)
    # undo through the same control
    stab.subgroup.value = "5"
    assert stab.act.description == "Restore subgroup"
    stab.reason.value = "re-measured values are fine"
    stab.act.click()
    assert session.result(NAME).capability.ppk == pytest.approx(before, rel=1e-12)


def test_proposals_need_a_decision_each(wb):
    stab = wb.step("stability")
    s = stab.ws.session
    s.restore(NAME, "17", reason="review", who="A. Tester")
    s.restore(NAME, "18", reason="review", who="A. Tester")
    stab.find.click()
    assert stab._proposals and stab.record.disabled
    proposal, state, reason = stab._proposals[0]
    state.value = "accept"
    assert stab.record.disabled  # no reason yet
    reason.value = "chipped insert"
    assert not stab.record.disabled
    for _p, other, _r in stab._proposals[1:]:
        other.value = "reject"
    if stab._proposals[1:]:
        assert stab.record.disabled  # a rejection needs its reason too (it is recorded)
    for _p, _other, why in stab._proposals[1:]:
        why.value = "first part after warm-up, a common cause"
    assert not stab.record.disabled
    rejected = [p.label for p, _o, _r in stab._proposals[1:]]
    stab.record.click()
    assert proposal.label in s.result(NAME).removed_subgroups
    assert "rule" in stab.log.value
    kept = s.kept_signals(NAME)
    assert sorted(lab for lab, _rule in kept) == sorted(rejected)
    assert all(d.payload["origin"] == "rejected_proposal" for d in kept.values())
    for label in rejected:
        assert f"<td>{label}</td>" in stab.kept_log.value


def test_keep_with_reason_from_the_side_panel(wb):
    stab = wb.step("stability")
    s = stab.ws.session
    s.restore(NAME, "17", reason="review", who="A. Tester")
    stab.subgroup.value = "17"
    assert stab.keep.description == "Keep, with reason" and stab.keep.disabled  # no reason
    stab.reason.value = "first part after warm-up; common cause per FMEA"
    assert not stab.keep.disabled
    stab.keep.click()
    assert ("17", "beyond_limits") in s.kept_signals(NAME)
    assert "common cause per FMEA" in stab.kept_log.value
    ring = stab.view.sources["location"]["kept"].data
    assert ring["x"] and "common cause per FMEA" in ring["why"][0]
    assert "kept with a reason" in stab.summary.value
    # the same button now withdraws it
    stab.subgroup.value = "17"
    assert stab.keep.description == "Reopen signal"
    stab.reason.value = "cause not confirmed"
    stab.keep.click()
    assert s.kept_signals(NAME) == {}


def test_warning_limits_toggle(wb):
    stab = wb.step("stability")
    assert not any(r.visible for r in stab.view.warning_renderers)
    stab.warning_toggle.value = True
    assert all(r.visible for r in stab.view.warning_renderers)


def _overview_text(panel) -> str:
    return " ".join(
        getattr(c, "value", "")
        for row in panel.table.children
        for c in (row.children if hasattr(row, "children") else [row])
    )


def test_overview_analyses_on_opening_and_after_a_change(wb, study_path):
    lim = wb.step("limits")
    session = lim.ws.session
    # the landing view analysed every characteristic: no "not analysed yet" for an open study
    assert all(session.is_cached(n) or session.error(n) for n in session.names)
    assert "not analysed yet" not in _overview_text(lim.overview)
    # its chart has one row per characteristic with an index, in the table's values
    rows = {r["characteristic"]: r for r in overview_rows(session)}
    drawn = lim.overview.chart.source.data
    assert sorted(drawn["name"]) == sorted(n for n, r in rows.items() if r["estimate"] is not None)
    for name, est, lb in zip(drawn["name"], drawn["estimate"], drawn["lower_bound"], strict=True):
        assert est == rows[name]["estimate"] and lb == rows[name]["lower_bound"]
    # a specification change invalidates the result; the overview analyses it again at once
    lim.usl.value = "8.08"
    lim.reason.value = "drawing rev C"
    lim.save.click()
    assert StudyFile(study_path).load().characteristic(NAME).usl == 8.08
    assert session.is_cached(NAME)
    assert "not analysed yet" not in _overview_text(lim.overview)
    after = {r["characteristic"]: r for r in overview_rows(session)}[NAME]
    assert after["estimate"] != rows[NAME]["estimate"]  # the new limit is in the number
    i = list(lim.overview.chart.source.data["name"]).index(NAME)
    assert lim.overview.chart.source.data["estimate"][i] == after["estimate"]


def test_overview_sorts_and_opens(wb):
    lim = wb.step("limits")
    rows = overview_rows(lim.ws.session)
    ordered = sort_rows(rows, "lower_bound", descending=True)
    bounds = [r["lower_bound"] for r in ordered if r["lower_bound"] is not None]
    assert bounds == sorted(bounds, reverse=True)
    lim.overview.sort.value = "lower_bound"
    lim.overview.descending.value = True
    # the table: the heading row, then per characteristic its name cell (a button) and one row
    # widget with its other cells and the rows of its streams
    names_shown = [c.children[0].description for c in lim.overview.table.children[1::2]]
    assert names_shown == [r["characteristic"] for r in ordered]
    button = lim.overview.table.children[1].children[0]
    button.click()
    assert wb.current == "stability"
    assert lim.ws.session.current == button.description


def test_spec_panel_needs_a_reason(wb, study_path):
    lim = wb.step("limits")
    lim.usl.value = "8.08"
    assert lim.save.disabled
    lim.reason.value = "drawing rev C"
    lim.save.click()
    assert StudyFile(study_path).load().characteristic(NAME).usl == 8.08
    assert "drawing rev C" in lim.history.value
    lim.lsl.value = "abc"
    lim.reason.value = "typo"
    lim.save.click()
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error" and "`lsl` ('abc') is not a number" in text


def test_shape_model_preview_then_record(wb, study_path):
    shape = wb.step("shape")
    assert (
        "Anderson-Darling" in shape.tests.value and "Fitted model families" in shape.ranking.value
    )
    shape.model.value = "boxcox"
    assert "With the choice" in shape.effect.value
    assert shape.save.disabled
    shape.reason.value = "skew seen on the histogram"
    shape.save.click()
    assert StudyFile(study_path).load().model_for(NAME) == "boxcox"
    assert shape.ws.session.result(NAME).model.name == "boxcox"


def test_capability_planner_uses_parts_needed(wb):
    from studykit.stats.planning import parts_needed

    cap = wb.step("capability")
    res = cap.ws.session.result(NAME)
    cap.assumed.value = 2.0
    plan = parts_needed(
        2.0, res.verdict.threshold, index=res.verdict.index, level=res.verdict.level
    )
    assert f"{plan.n} parts" in cap.plan.value
    assert "Parts per million" in cap.ppm.value


def test_safety_caution_on_safety_critical(wb):
    cap = wb.step("capability")
    session = cap.ws.session
    critical = [n for n in session.names if session.study.characteristic(n).safety_critical]
    assert critical
    cap.ws.picker.value = critical[0]
    assert cap.caution.children and "do not replace" in cap.caution.children[0].value
    cap.ws.picker.value = NAME
    assert not cap.caution.children


def test_signoff_locks_and_voids_visibly(wb):
    sign = wb.step("signoff")
    session = sign.ws.session
    for name in session.open_verdicts():  # the lock is under test here, not the gate
        session.waive(name, reason="lock under test", who="Q. Lead")
    sign.role.value = "approved"
    sign.decision.value = "approve"
    sign.sign.click()
    assert "Approved and locked" in sign.lock.value
    assert wb.context.state == "Approved · locked"
    assert sign.ws._override_box.layout.display == ""
    stab = wb.step("stability")
    stab.subgroup.value = "3"
    stab.reason.value = "late find"
    stab.act.click()
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error" and "locked" in text
    sign.ws.override.value = "customer asked for the re-check"
    stab.act.click()
    assert "Sign-off voided" in sign.lock.value and "sk-voided" in sign.signoffs.value
    assert wb.context.state == "Approval voided"
    sign.comment.value = "please re-sign"
    sign.add.click()
    assert "please re-sign" in sign.comments.value


def test_export_gives_download_links(wb):
    ex = wb.step("export")
    ex.json.click()
    assert 'download="pilot-results.json"' in ex.links.value
    assert "data:application/json;base64," in ex.links.value
    assert "/tmp" not in ex.links.value and str(ex.ws.session.path) not in ex.links.value


def test_handoff_from_a_study_not_ready_is_a_visible_draft(wb):
    # the invented demo study: pull_off_force's lower bound misses its criterion, so the pack
    # must say DRAFT in the page, in the file name and inside the zip
    import base64
    import io
    import re
    import zipfile

    ex = wb.step("export")
    ex.handoff.click()
    assert 'download="pilot-handoff-DRAFT.zip"' in ex.links.value
    warnings = [m[1] for m in wb.context.messages.messages if m[0] == "warning"]
    assert any("DRAFT, not for production" in w and "pull_off_force" in w for w in warnings)
    data = re.search(r"data:application/zip;base64,([A-Za-z0-9+/=]+)", ex.links.value).group(1)
    with zipfile.ZipFile(io.BytesIO(base64.b64decode(data))) as zf:
        assert "DRAFT-NOT-FOR-PRODUCTION.txt" in zf.namelist()


def test_download_link_escapes_the_name():
    html = download_link(b"x", 'a"b<c>.txt', "text/plain")
    assert 'download="a_b_c_.txt"' in html


def test_chart_columns_read_the_result():
    session = StudySession(demo_study_path())
    res = session.result(NAME)
    cols = control_chart_columns(
        res, full_chart=session.full_chart(NAME), details=session.subgroup_details(NAME)
    )
    loc = cols["location"]["points"]
    status = dict(zip(loc["label"], loc["status"], strict=True))
    assert status["17"] == status["18"] == "removed" and status["1"] == "kept"
    raw = raw_values(session.study, NAME)
    # a removed subgroup sits at its own mean (numpy on the raw values)
    i = loc["label"].index("17")
    assert loc["value"][i] == pytest.approx(np.mean(raw["17"]), rel=1e-12)
    # kept points are the chart's own points, not recomputed
    kept = [v for v, s in zip(loc["value"], loc["status"], strict=True) if s == "kept"]
    np.testing.assert_array_equal(kept, res.chart.location.points)
    hist = histogram_columns(res)
    assert sum(hist["bars"]["count"]) == res.n
    widths = np.subtract(hist["bars"]["right"], hist["bars"]["left"])
    assert float(np.sum(np.multiply(hist["bars"]["top"], widths))) == pytest.approx(1.0)
    iv = interval_columns(res)
    j = iv["rows"]["name"].index("Ppk (judged)")
    assert iv["rows"]["lower_bound"][j] == pytest.approx(res.verdict.lower_bound)


def test_without_a_study_file_the_panels_say_so():
    steps = [
        IntakeStep(),
        LimitsStep(),
        StabilityStep(),
        ShapeStep(),
        CapabilityStep(),
        SignoffStep(),
        ExportStep(),
    ]
    wb = build_workbook(None, steps=steps)
    for s in steps[1:]:
        wb.select(s.key)
        assert "No study file open" in wb._body.children[0].value
    assert not wb.context.messages.messages


def test_stability_tick_needs_every_characteristic_quiet(wb):
    stab = wb.step("stability")
    assert not stab.is_done(wb.context)  # not every characteristic analysed yet
    stab.ws.session.analyze_all()
    quiet = all(
        not stab.ws.session.result(n).chart.location.signals
        and not (
            stab.ws.session.result(n).chart.dispersion is not None
            and stab.ws.session.result(n).chart.dispersion.signals
        )
        for n in stab.ws.session.names
    )
    assert stab.is_done(wb.context) is quiet


def test_header_shows_the_lock_of_a_study_approved_earlier(study_path):
    waive_open_verdicts(study_path)
    StudySession(study_path).sign(who="M. Approver", role="approved", decision="approve")
    wb = build_workbook(study_path, steps=[IntakeStep(), StabilityStep()])
    wb.select("stability")
    assert wb.context.state == "Approved · locked"
