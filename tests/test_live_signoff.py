"""Issue 13, deliver 1-3 and 7 without a browser: live study state, sign-offs bound to the
content seen, the study's sign-off rules, and signing the PDF from the workbook.

The expectations are the rules this project sets for itself (issue 13); no outside source
applies ("ours").
"""

from __future__ import annotations

import datetime
import logging
import os
import shutil

import pytest
from study_helpers import waive_open_verdicts

from studykit.app.access import ENV_ACCESS
from studykit.app.session import StudySession, demo_study_path
from studykit.cli import main
from studykit.signoff_rules import SignOffRefused
from studykit.store import ChangeWatch, StaleView, StudyFile

NAME = "flange_thickness"
PASS = "test-only-passphrase"  # made at test time, never stored in the repo


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    return path


# --- the study file: versions, stale views, the digest seen -----------------------------------


def test_version_moves_with_every_write_and_the_watch_sees_it(study_path):
    sf = StudyFile(study_path)
    watch = ChangeWatch(sf)
    v0 = sf.version()
    assert watch.version() == v0
    StudyFile(study_path).add_comment("from elsewhere", who="B. Other")
    assert sf.version() == v0 + 1 == watch.version()
    (entry,) = sf.entries_since(v0)
    assert entry.who == "B. Other"
    watch.close()


def test_the_watch_follows_a_study_file_replaced_on_disk(study_path, tmp_path):
    # A study file can be replaced whole (created again with --force, a backup restored, a copy
    # put in its place). A connection held open keeps reading the old file, so the watch must
    # notice the new file, or a page would keep showing a study that no longer exists.
    sf = StudyFile(study_path)
    watch = ChangeWatch(sf)
    v0 = watch.version()
    other = tmp_path / "other.study"
    shutil.copy(study_path, other)
    for k in range(3):
        StudyFile(other).add_comment(f"written in the copy {k}", who="B. Other")
    os.replace(other, study_path)
    assert watch.version() == sf.version() == v0 + 3
    watch.close()


def test_a_write_on_an_older_view_is_refused_and_nothing_is_saved(study_path):
    sf = StudyFile(study_path)
    v0 = sf.version()
    StudyFile(study_path).exclude(NAME, "3", reason="seen by B", who="B. Other")
    before = sf.load()
    with sf.expecting(v0), pytest.raises(StaleView, match="B. Other: remove subgroup 3") as exc:
        sf.exclude(NAME, "5", reason="decided on the old view", who="A. Tester")
    assert [e.who for e in exc.value.newer] == ["B. Other"]
    after = sf.load()
    assert after.decisions == before.decisions and "5" not in after.excluded_subgroups(NAME)
    with sf.expecting(sf.version()):  # on the current view it lands
        sf.exclude(NAME, "5", reason="decided on the current view", who="A. Tester")
    assert "5" in sf.load().excluded_subgroups(NAME)


def test_a_signoff_is_refused_when_the_content_differs_from_what_was_seen(study_path):
    sf = StudyFile(study_path)
    seen = sf.load().content_digest()
    StudyFile(study_path).exclude(NAME, "3", reason="seen by B", who="B. Other")
    with pytest.raises(StaleView, match="not the " + seen[:12]):
        sf.add_signoff("R. Viewer", role="reviewed", decision="approve", expected_digest=seen)
    assert sf.load().signoffs == ()
    now = sf.load().content_digest()
    s = sf.add_signoff("R. Viewer", role="reviewed", decision="approve", expected_digest=now)
    assert s.digest == now  # the sign-off records the digest of the content seen


# --- the sign-off rules -----------------------------------------------------------------------


def test_one_person_may_not_sign_two_roles(study_path):
    waive_open_verdicts(study_path)
    s = StudySession(study_path)
    s.sign(who="P. Person", role="reviewed", decision="approve")
    with pytest.raises(SignOffRefused, match="P. Person already signed this study as reviewed"):
        s.sign(who="  p. person ", role="approved", decision="approve")
    assert not s.is_locked
    s.sign(who="P. Person", role="reviewed", decision="comment", comment="same role again")
    s.sign(who="Q. Other", role="approved", decision="approve")
    assert s.is_locked


def test_approval_needs_a_verdict_or_a_waiver_for_every_characteristic(study_path):
    s = StudySession(study_path)
    open_ = s.open_verdicts()
    # the invented demo study: pull_off_force meets on its estimate but not on its lower bound;
    # the tool-wear seat's trend leaves points beyond the control limits (no verdict); the
    # counted-data characteristic has a verdict of its own (from the exact bound on its rate)
    assert open_ == {
        "pull_off_force": "More data needed",
        "shaft_seat_diameter": "No verdict: not in control",
    }
    with pytest.raises(SignOffRefused, match="pull_off_force: More data needed"):
        s.sign(who="M. Approver", role="approved", decision="approve")
    s.sign(who="R. Viewer", role="reviewed", decision="approve")  # only approvals are gated
    s.waive("leak_test_defectives", reason="judged by PPM in the customer's PPAP", who="Q. Lead")
    with pytest.raises(SignOffRefused, match="pull_off_force"):  # a needless waiver opens nothing
        s.sign(who="M. Approver", role="approved", decision="approve")
    s.waive("pull_off_force", reason="customer deviation D-17 until lot 4", who="Q. Lead")
    # one waiver does not open the gate while another characteristic has no verdict
    with pytest.raises(SignOffRefused, match="shaft_seat_diameter"):
        s.sign(who="M. Approver", role="approved", decision="approve")
    assert s.open_verdicts() == {"shaft_seat_diameter": "No verdict: not in control"}
    s.waive("shaft_seat_diameter", reason="insert change every 30 subgroups", who="Q. Lead")
    assert s.open_verdicts() == {}
    s.sign(who="M. Approver", role="approved", decision="approve")
    assert s.is_locked
    # the waiver is part of the content: the review signed before it no longer holds
    states = {st.signoff.name: st.valid for st in s.signoff_state()}
    assert states == {"R. Viewer": False, "M. Approver": True}
    waivers = s.study.waivers()
    assert waivers["pull_off_force"].reason == "customer deviation D-17 until lot 4"


def test_rejection_records_its_reason(study_path):
    s = StudySession(study_path)
    with pytest.raises(SignOffRefused, match="rejection needs its reason"):
        s.sign(who="R. Viewer", role="reviewed", decision="reject", comment="  ")
    s.sign(who="R. Viewer", role="reviewed", decision="reject", comment="gauge check missing")
    assert s.study.signoffs[-1].comment == "gauge check missing"


def test_rules_are_changed_only_with_a_recorded_reason(study_path):
    s = StudySession(study_path)
    with pytest.raises(Exception, match="reason"):
        s.set_signoff_rules({"distinct_signers": False}, reason="", who="Q. Lead")
    assert s.set_signoff_rules(
        {"distinct_signers": False}, reason="two-person supplier", who="Q. Lead"
    )
    assert s.study.signoff_rules()["distinct_signers"] is False
    d = s.study.decisions[-1]
    assert (d.action, d.who, d.reason) == ("set_signoff_rules", "Q. Lead", "two-person supplier")
    assert "change sign-off rules" in s.audit_log()[-1].what
    s.sign(who="P. Person", role="reviewed", decision="approve")
    s.sign(who="P. Person", role="prepared", decision="approve")  # allowed now


def test_cli_sign_applies_the_same_rules(study_path, capsys):
    path = str(study_path)
    digest = StudyFile(study_path).load().content_digest()
    assert (
        main(
            [
                "study",
                "sign",
                path,
                "--role",
                "reviewed",
                "--decision",
                "approve",
                "--who",
                "P. Person",
                "--saw",
                digest[:16],
            ]
        )
        == 0
    )
    assert (
        main(
            [
                "study",
                "sign",
                path,
                "--role",
                "approved",
                "--decision",
                "approve",
                "--who",
                "P. Person",
            ]
        )
        == 2
    )
    assert "distinct_signers" in capsys.readouterr().err
    assert (
        main(
            [
                "study",
                "sign",
                path,
                "--role",
                "approved",
                "--decision",
                "approve",
                "--who",
                "M. Approver",
            ]
        )
        == 2
    )
    assert "approval_needs_verdicts" in capsys.readouterr().err
    for name in ("pull_off_force", "leak_test_defectives", "shaft_seat_diameter"):
        assert (
            main(["study", "waive", path, name, "--reason", "deviation D-17", "--who", "Q. Lead"])
            == 0
        )
    # the waivers changed the content: a sign-off on the digest seen before is refused
    assert (
        main(
            [
                "study",
                "sign",
                path,
                "--role",
                "approved",
                "--decision",
                "approve",
                "--who",
                "M. Approver",
                "--saw",
                digest,
            ]
        )
        == 2
    )
    assert "nothing was saved" in capsys.readouterr().err
    assert (
        main(
            [
                "study",
                "sign",
                path,
                "--role",
                "approved",
                "--decision",
                "approve",
                "--who",
                "M. Approver",
            ]
        )
        == 0
    )
    assert StudyFile(study_path).load().is_locked
    assert main(["study", "rules", path, "--distinct-signers", "off"]) == 2
    assert (
        main(
            [
                "study",
                "rules",
                path,
                "--distinct-signers",
                "off",
                "--reason",
                "x",
                "--who",
                "Q. Lead",
            ]
        )
        == 2
    )  # approved: locked
    assert "locked" in capsys.readouterr().err
    assert main(["study", "show", path]) == 0
    out = capsys.readouterr().out
    assert "on: one person may not sign two roles" in out and "Waivers (3)" in out


# --- the live session -------------------------------------------------------------------------


def test_a_change_elsewhere_reaches_the_session_with_who_changed_what(study_path):
    a, b = StudySession(study_path), StudySession(study_path)
    assert a.check_for_changes() is False
    b.exclude(NAME, "3", reason="seen by B", who="B. Other")
    assert a.check_for_changes() is True
    assert "3" in a.result(NAME).removed_subgroups
    assert [(e.who, e.what) for e in a.external_changes] == [
        ("B. Other", f"remove subgroup 3 of '{NAME}'")
    ]
    assert a.check_for_changes() is False


def test_an_action_on_a_page_that_shows_an_older_state_is_refused(study_path):
    a, b = StudySession(study_path), StudySession(study_path)
    a.page_version = a.view_version  # the page acknowledged what it shows
    b.add_comment("a change the page has not shown yet", who="B. Other")
    with pytest.raises(StaleView, match="Nothing was saved.*B. Other: comment"):
        a.exclude(NAME, "5", reason="decided on the old view", who="A. Tester")
    # the session read the file again; once the page shows it, the action lands
    assert a.view_version == StudyFile(study_path).version()
    a.page_version = a.view_version
    a.exclude(NAME, "5", reason="decided on the current view", who="A. Tester")
    assert a.page_version == a.view_version  # its own change counts as seen


def test_a_gauge_result_attached_on_an_older_view_is_refused(study_path):
    a, b = StudySession(study_path), StudySession(study_path)
    a.page_version = a.view_version
    b.add_comment("a change the page has not shown yet", who="B. Other")
    payload = {"note": "a stored result (test input)"}
    before = len(StudyFile(study_path).results("gauge_short"))
    with pytest.raises(StaleView, match="Nothing was saved.*B. Other: comment"):
        a.attach_result("gauge_short", NAME, payload, who="A. Tester", reason="GR-07")
    assert len(StudyFile(study_path).results("gauge_short")) == before
    a.page_version = a.view_version
    a.attach_result("gauge_short", NAME, payload, who="A. Tester", reason="GR-07")
    assert len(StudyFile(study_path).results("gauge_short")) == before + 1


def test_a_page_behind_its_own_kernel_cannot_sign(study_path):
    a = StudySession(study_path)
    a.page_version = a.view_version
    StudySession(study_path).exclude(NAME, "3", reason="seen by B", who="B. Other")
    a.check_for_changes()  # the kernel has the change; the page has not acknowledged it
    with pytest.raises(StaleView, match="B. Other"):
        a.sign(who="R. Viewer", role="reviewed", decision="approve")
    assert StudyFile(study_path).load().signoffs == ()


def test_live_link_follows_the_file_and_the_page(study_path):
    from studykit.app.shell import build_workbook

    wb = build_workbook(study_path)
    ws = wb.context.extra["studykit.workspace"]
    live = ws.live
    assert live.shown.value == ws.session.view_version
    live.seen.value = live.shown.value  # what the front-end link does once the page shows it
    assert live.connected and ws.session.page_version == ws.session.view_version
    StudySession(study_path).sign(who="B. Other", role="reviewed", decision="approve")
    assert live.check() is True
    assert "B. Other" in live.note.value and "sign-off" in live.note.value
    assert live.shown.value == ws.session.view_version != ws.session.page_version
    assert "Signed in part" in wb._header.value
    assert live.widget in wb._live.children
    live.stop()


# --- signing the PDF in the workbook ----------------------------------------------------------


@pytest.fixture
def export_step(study_path, tmp_path):
    from studykit.app.shell import build_workbook

    logging.getLogger("pyhanko").setLevel(logging.CRITICAL)
    wb = build_workbook(study_path)
    wb.select("export")
    step = wb.step("export")
    step.ws.who.value = "Pat Prep"
    return wb, step


def _upload(step, path):
    data = path.read_bytes()
    step.p12.value = (
        {
            "name": path.name,
            "type": "application/x-pkcs12",
            "size": len(data),
            "content": memoryview(data),
            "last_modified": datetime.datetime(2026, 3, 5, tzinfo=datetime.UTC),
        },
    )


def test_browser_signing_verifies_and_forgets_the_certificate(export_step, tmp_path, monkeypatch):
    import base64
    import re

    from studykit.report.signing import make_demo_certificate
    from studykit.report.verify import verify_report

    monkeypatch.setenv(ENV_ACCESS, "loopback")
    wb, step = export_step
    cert = make_demo_certificate(tmp_path / "keys", name="Pat Prep", passphrase=PASS)
    _upload(step, tmp_path / "keys" / "Pat_Prep.p12")
    step.passphrase.value = PASS
    assert step.sign_pdf.disabled  # no PDF yet
    step.pdf.click()
    assert not step.sign_pdf.disabled
    step.sign_pdf.click()
    errors = [m for m in wb.context.messages.messages if m[0] == "error"]
    assert not errors, errors
    assert step.passphrase.value == "" and step.p12.value == ()
    href = re.search(r'href="data:application/pdf;base64,([^"]+)"', step.signed_links.value)
    signed = tmp_path / "signed.pdf"
    signed.write_bytes(base64.b64decode(href.group(1)))
    result = verify_report(signed, study=step.ws.session.path, trust=[cert.cert_path])
    assert result.ok, result.summary()
    assert "1 signature" in step.signed_links.value


def test_wrong_passphrase_is_a_message_and_is_forgotten(export_step, tmp_path, monkeypatch):
    from studykit.report.signing import make_demo_certificate

    monkeypatch.setenv(ENV_ACCESS, "token")
    wb, step = export_step
    make_demo_certificate(tmp_path / "keys", name="Pat Prep", passphrase=PASS)
    step.pdf.click()
    _upload(step, tmp_path / "keys" / "Pat_Prep.p12")
    step.passphrase.value = "not-the-passphrase"
    step.sign_pdf.click()
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error" and "wrong passphrase" in text and "not-the-passphrase" not in text
    assert step.passphrase.value == "" and step.p12.value == ()
    assert step.signed_links.value == ""


def test_browser_signing_is_refused_on_an_open_network_address(export_step, tmp_path, monkeypatch):
    monkeypatch.setenv(ENV_ACCESS, "open")
    wb, step = export_step
    step.pdf.click()
    assert step.sign_pdf.disabled and "without an access token" in step.sign_hint.value
    step._pdf = step._pdf  # even a forced click is refused
    step.sign_pdf.disabled = False
    step.sign_pdf.click()
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error" and "refused" in text


def test_server_tells_kernels_how_it_is_reached():
    from studykit.app.access import access_kind, signing_refusal

    assert access_kind("::1", False) == "loopback"
    assert access_kind("192.168.1.20", False) == "open"
    assert access_kind("192.168.1.20", True) == "token"
    assert signing_refusal({}) is None  # a kernel not started by studykit's server
