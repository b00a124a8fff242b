"""The workbook's study session: removals, specs, model, lock, sign-offs, two sessions on a file.

Reference numbers are computed here independently of studykit, with numpy on the raw values
of the study's own data copy (read with the csv module):
Ppk = min(USL - mean, mean - LSL) / (3 s), s the sample standard deviation (n - 1), the overall
performance index of ISO 22514-2:2017, 6.2 / AIAG SPC manual 2nd ed. (2005), p. 134 (from
memory).
"""

from __future__ import annotations

import csv
import io
import shutil
import threading

import numpy as np
import pytest
from study_helpers import waive_open_verdicts

from studykit.app.session import StudySession, demo_study_path
from studykit.errors import StudyFileError, StudyInputError
from studykit.store import StaleView, StudyFile
from studykit.study import Criteria

NAME = "flange_thickness"


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    return path


def raw_values(study, name: str) -> dict[str, list[float]]:
    """Subgroup label -> values of ``name``, read from the study's data copy with csv."""
    reader = csv.reader(io.StringIO(study.data.decode("utf-8-sig")))
    header = next(reader)
    col = next(i for i, h in enumerate(header) if h.split(" [")[0] == name)
    out: dict[str, list[float]] = {}
    for row in reader:
        if row and row[col].strip():
            out.setdefault(row[0], []).append(float(row[col]))
    return out


def reference_ppk(study, name: str, excluded: set[str], lsl: float, usl: float) -> float:
    x = np.concatenate([v for k, v in raw_values(study, name).items() if k not in excluded])
    mean, s = x.mean(), x.std(ddof=1)  # numpy, n - 1
    return min(usl - mean, mean - lsl) / (3 * s)


def test_removal_changes_the_index_and_is_on_file(study_path):
    session = StudySession(study_path)
    before = session.result(NAME)
    assert sorted(before.removed_subgroups) == ["17", "18"]
    spec = session.study.characteristic(NAME)
    assert before.capability.ppk == pytest.approx(
        reference_ppk(session.study, NAME, {"17", "18"}, spec.lsl, spec.usl), rel=1e-9
    )
    heard = []
    session.subscribe(lambda s, changed: heard.append(changed))

    session.exclude(NAME, "5", reason="gauge dropped, parts re-measured", who="A. Tester")

    after = session.result(NAME)
    assert sorted(after.removed_subgroups) == ["17", "18", "5"]
    assert after.n == before.n - 5
    expected = reference_ppk(session.study, NAME, {"17", "18", "5"}, spec.lsl, spec.usl)
    assert after.capability.ppk == pytest.approx(expected, rel=1e-9)
    assert after.capability.ppk != pytest.approx(before.capability.ppk, rel=1e-6)
    assert heard and NAME in heard[-1]
    on_file = StudyFile(study_path).load()
    decision = on_file.excluded_subgroups(NAME)["5"]
    assert (decision.who, decision.reason) == ("A. Tester", "gauge dropped, parts re-measured")
    assert not decision.automatic
    assert StudyFile(study_path).audit_log()[-1].what == "remove subgroup 5 of 'flange_thickness'"
    log = session.removal_log(NAME)
    assert [(r.label, r.origin, r.in_force) for r in log][-1] == ("5", "person", True)


def test_restore_brings_the_subgroup_back(study_path):
    session = StudySession(study_path)
    first = session.result(NAME).capability.ppk
    session.exclude(NAME, "5", reason="suspect", who="A. Tester")
    session.restore(NAME, "5", reason="suspicion cleared", who="A. Tester")
    assert session.result(NAME).capability.ppk == pytest.approx(first, rel=1e-12)
    rows = [r for r in session.removal_log(NAME) if r.label == "5"]
    assert [(r.action, r.in_force) for r in rows] == [("exclude", False), ("restore", False)]


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"reason": "", "who": "A. Tester"}, "`reason` is empty"),
        ({"reason": "x", "who": "  "}, "`who` is empty"),
    ],
)
def test_removal_needs_reason_and_name(study_path, kwargs, match):
    session = StudySession(study_path)
    with pytest.raises(StudyInputError, match=match):
        session.exclude(NAME, "5", **kwargs)
    assert "5" not in StudyFile(study_path).load().excluded_subgroups(NAME)


def test_unknown_or_repeated_subgroup_is_refused(study_path):
    session = StudySession(study_path)
    with pytest.raises(StudyInputError, match=r"`subgroup` \('99'\) is not a subgroup"):
        session.exclude(NAME, "99", reason="x", who="A")
    with pytest.raises(StudyInputError, match="already excluded"):
        session.exclude(NAME, "17", reason="x", who="A")
    with pytest.raises(StudyInputError, match="is not excluded"):
        session.restore(NAME, "3", reason="x", who="A")


def test_proposals_are_reviewed_before_they_are_recorded(study_path):
    session = StudySession(study_path)
    assert session.propose_removals(NAME) == ()  # the recorded exclusions cover the signals
    session.restore(NAME, "17", reason="review", who="A. Tester")
    session.restore(NAME, "18", reason="review", who="A. Tester")
    proposals = session.propose_removals(NAME)
    labels = [p.label for p in proposals]
    assert "17" in labels
    assert all(p.rule != "manual" for p in proposals)
    # nothing recorded by proposing
    assert not StudyFile(study_path).load().excluded_subgroups(NAME)
    with pytest.raises(StudyInputError, match="`reason` is empty"):
        session.record_removals(NAME, [(proposals[0], "")], who="A. Tester")
    n = session.record_removals(NAME, [(proposals[0], "insert chipped, NCR-0412")], who="A. Tester")
    assert n == 1
    d = StudyFile(study_path).load().excluded_subgroups(NAME)[proposals[0].label]
    assert d.automatic and d.who == "A. Tester" and d.payload["rule"] == proposals[0].rule
    assert session.removal_log(NAME)[-1].origin == "rule"


def test_spec_change_is_recorded_and_recomputed(study_path):
    session = StudySession(study_path)
    spec = session.study.characteristic(NAME)
    with pytest.raises(StudyInputError, match="`reason` is empty"):
        session.update_characteristic(NAME, who="A", reason=" ", spec={"usl": 8.08})
    changed = session.update_characteristic(
        NAME,
        who="A. Tester",
        reason="drawing rev C",
        spec={"usl": 8.08},
        criteria=Criteria(index="ppk", threshold=1.33),
    )
    assert changed
    res = session.result(NAME)
    assert res.spec["usl"] == 8.08 and res.criteria["threshold"] == 1.33
    assert res.capability.ppk == pytest.approx(
        reference_ppk(session.study, NAME, {"17", "18"}, spec.lsl, 8.08), rel=1e-9
    )
    actions = [
        (d.action, d.who, d.reason)
        for d in StudyFile(study_path).load().decisions
        if d.characteristic == NAME
    ][-2:]
    assert actions == [
        ("set_spec", "A. Tester", "drawing rev C"),
        ("set_criteria", "A. Tester", "drawing rev C"),
    ]
    assert not session.update_characteristic(NAME, who="A", reason="x", spec={"usl": 8.08})


def test_model_choice_is_a_decision(study_path):
    session = StudySession(study_path)
    with pytest.raises(StudyInputError, match="`model`"):
        session.set_model(NAME, "banana", who="A", reason="x")
    preview = session.preview(NAME, model="boxcox")
    assert preview.model.name == "boxcox"
    assert session.result(NAME).model.name == "normal"  # preview records nothing
    session.set_model(NAME, "boxcox", who="A. Tester", reason="tails look heavy")
    assert session.result(NAME).model.name == "boxcox"
    assert StudyFile(study_path).load().model_for(NAME) == "boxcox"


def test_approval_locks_and_a_forced_change_voids_it(study_path):
    waive_open_verdicts(study_path)
    session = StudySession(study_path)
    session.sign(who="M. Approver", role="approved", decision="approve", comment="ok")
    assert session.is_locked and session.state_text() == "Approved · locked"
    with pytest.raises(StudyFileError, match="approved .* and therefore locked"):
        session.exclude(NAME, "5", reason="x", who="A. Tester")
    session.exclude(NAME, "5", reason="x", who="A. Tester", override_reason="customer asked")
    assert not session.is_locked
    assert session.state_text() == "Approval voided"
    (state,) = session.signoff_state()
    assert not state.valid and "customer asked" in state.why
    # comments are allowed on a locked study and never void a sign-off
    session.sign(who="M. Approver", role="approved", decision="approve")
    session.add_comment("looked again", who="B. Reviewer", characteristic=NAME)
    assert session.is_locked


def test_two_sessions_sign_at_once_one_lands_the_other_is_refused_then_lands(study_path):
    """Two pages drawn from the same file sign at the same moment: the file takes the first;
    the second was made on a view that no longer shows every sign-off, so it is refused with
    what changed, its page is redrawn, and signing again lands (issue 13, deliver 1)."""
    a, b = StudySession(study_path), StudySession(study_path)
    barrier = threading.Barrier(2)
    errors = []

    def sign(session, who, role):
        try:
            barrier.wait()
            session.sign(who=who, role=role, decision="approve")
        except StaleView as exc:
            errors.append((session, who, role, exc))

    threads = [
        threading.Thread(target=sign, args=(a, "P. One", "prepared")),
        threading.Thread(target=sign, args=(b, "R. Two", "reviewed")),
    ]
    for t in threads:
        t.start()
    for t in threads:
        t.join(30)
    assert len(errors) == 1
    session, who, role, exc = errors[0]
    other = "R. Two" if who == "P. One" else "P. One"
    assert other in str(exc) and "Nothing was saved" in str(exc)
    # the refused session now shows the other sign-off, and may sign again
    assert [st.signoff.name for st in session.signoff_state()] == [other]
    assert [e.who for e in session.external_changes] == [other]
    session.sign(who=who, role=role, decision="approve")
    names = sorted(s.name for s in StudyFile(study_path).load().signoffs)
    assert names == ["P. One", "R. Two"]


def test_a_change_in_another_session_reaches_this_one_on_reload(study_path):
    a, b = StudySession(study_path), StudySession(study_path)
    ppk_a = a.result(NAME).capability.ppk
    b.exclude(NAME, "3", reason="seen by B", who="B. Other")
    assert a.result(NAME).capability.ppk == ppk_a  # not read yet
    a.reload()
    assert "3" in a.result(NAME).removed_subgroups
    assert a.result(NAME).capability.ppk == pytest.approx(b.result(NAME).capability.ppk, rel=1e-12)


def test_subgroup_details_come_from_the_file(study_path):
    session = StudySession(study_path)
    details = session.subgroup_details(NAME)
    raw = raw_values(session.study, NAME)
    assert details["1"]["values"] == raw["1"]
    assert details["1"]["note"] == "first parts after setup approval"
    assert details["1"]["time"].startswith("2026-03-02 06:00")


def test_results_json_holds_every_characteristic(study_path):
    import json

    session = StudySession(study_path)
    done = []
    session.analyze_all(progress=lambda i, n, name: done.append((i, n)))
    assert done[-1][0] == done[-1][1] == len(session.names)
    payload = json.loads(session.results_json())
    assert set(payload["characteristics"]) == set(session.names)
    assert payload["characteristics"][NAME]["phase1"]["removed_subgroups"] == ["17", "18"]
