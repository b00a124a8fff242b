"""Decisions on signals: "keep, with reason" (``keep_signal``), its withdrawal (``reopen_signal``)
and rejected automatic proposals, through the study file, the analysis, the CLI and the session.

The study is a copy of the demo study (invented data, demo_data/make_demo.py) with the two
removals of 'flange_thickness' (subgroups 17 and 18) restored, so that both points lie beyond the
control limits again.
"""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest

from studykit.analysis import analyze_study
from studykit.app.session import StudySession, demo_study_path
from studykit.cli import main
from studykit.errors import StudyFileError, StudyInputError
from studykit.store import StudyFile
from studykit.study import Decision

NAME = "flange_thickness"


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    sf = StudyFile(path)
    sf.restore(NAME, "17", reason="test: back in", who="T. Tester")
    sf.restore(NAME, "18", reason="test: back in", who="T. Tester")
    return path


def _beyond(res):
    chart = res.chart
    return sorted(
        str(chart.labels[int(s.trigger)]) for s in chart.signals if s.rule == "beyond_limits"
    )


def test_decision_needs_subgroup_rule_reason_and_valid_origin():
    with pytest.raises(StudyInputError, match="subgroup"):
        Decision(NAME, "keep_signal", reason="r", who="A", payload={"rule": "beyond_limits"})
    with pytest.raises(StudyInputError, match="rule"):
        Decision(NAME, "keep_signal", subgroup=3, reason="r", who="A")
    with pytest.raises(StudyInputError, match="reason"):
        Decision(NAME, "keep_signal", subgroup=3, who="A", payload={"rule": "run"})
    with pytest.raises(StudyInputError, match="who"):
        Decision(NAME, "keep_signal", subgroup=3, reason="r", payload={"rule": "run"})


def test_origin_must_be_known(study_path):
    study = StudyFile(study_path).load()
    with pytest.raises(StudyInputError, match="origin"):
        study.keep_signal(NAME, "17", rule="beyond_limits", reason="r", who="A", origin="robot")


def test_kept_point_beyond_limits_lets_the_verdict_stand(study_path):
    sf = StudyFile(study_path)
    before = analyze_study(sf.load(), NAME)
    assert _beyond(before) == ["17", "18"]
    assert before.verdict.meets is None  # withheld: points beyond the limits, no decision yet
    sf.apply(
        lambda s: s.keep_signal(
            NAME,
            "17",
            rule="beyond_limits",
            who="A. Keeper",
            reason="warm-up part; common cause per process FMEA",
        )
    )
    half = analyze_study(sf.load(), NAME)
    assert half.verdict.meets is None  # 18 is still open
    assert [f.code for f in half.findings][:2] == ["not_in_control", "signals_kept"]
    sf.apply(
        lambda s: s.keep_signal(
            NAME, "18", rule="beyond_limits", who="A. Keeper", reason="same warm-up"
        )
    )
    after = analyze_study(sf.load(), NAME)
    # the subgroups stay in the analysis: same values, same numbers as the withheld ones
    assert after.n == before.n and after.removed_subgroups == ()
    assert after.verdict.estimate == before.verdict.estimate
    assert after.verdict.lower_bound == before.verdict.lower_bound
    # the verdict now follows the criterion (basis lower_bound: demonstrated when the lower
    # bound reaches the threshold -- the rule of studykit.stats.capability.judge)
    v = after.verdict
    expected = (v.lower_bound if v.basis == "lower_bound" else v.estimate) >= v.threshold
    assert v.meets is expected
    codes = [f.code for f in after.findings]
    assert "not_in_control" not in codes and "signals_kept" in codes
    kept_text = next(f.text for f in after.findings if f.code == "signals_kept")
    assert "warm-up part; common cause per process FMEA" in kept_text and "A. Keeper" in kept_text
    d = after.to_dict()
    assert [(k["subgroup"], k["rule"], k["origin"], k["on_chart"]) for k in d["kept_signals"]] == [
        ("17", "beyond_limits", "person", True),
        ("18", "beyond_limits", "person", True),
    ]
    # the signals are still on the chart (listed as reviewed, not hidden)
    assert sorted(
        s["subgroups"][0] for s in d["chart"]["signals"] if s["rule"] == "beyond_limits"
    ) == ["17", "18"]


def test_kept_verdict_matches_the_ppk_formula(study_path):
    """With the normal model, Ppk = min(USL - mean, mean - LSL) / (3 s), s the sample standard
    deviation of every value used (ISO 22514-2:2017, 6.2 / AIAG SPC manual 2nd ed., ch. IV):
    the kept subgroups 17 and 18 are part of those values."""
    sf = StudyFile(study_path)
    sf.append_decision(
        Decision(NAME, "set_model", who="A", reason="test", payload={"model": "normal"})
    )
    for label in ("17", "18"):
        sf.apply(
            lambda s, lab=label: s.keep_signal(
                NAME, lab, rule="beyond_limits", who="A", reason="known common cause"
            )
        )
    study = sf.load()
    res = analyze_study(study, NAME)
    x = np.asarray(res.values, dtype=float)
    from studykit.analysis import read_study_measurements

    raw = np.asarray(read_study_measurements(study).get(NAME).values, dtype=float)
    assert x.size == np.count_nonzero(~np.isnan(raw))  # nothing removed
    spec = study.characteristic(NAME)
    s = np.std(x, ddof=1)
    ppk = min(spec.usl - x.mean(), x.mean() - spec.lsl) / (3 * s)
    assert res.verdict.estimate == pytest.approx(ppk, rel=1e-12)
    assert res.verdict.meets is not None


def test_reopen_restores_the_withholding_and_the_digest(study_path):
    sf = StudyFile(study_path)
    digest0 = sf.load().content_digest()
    assert "kept" not in sf.load().content_dict()["decisions"][NAME]
    sf.apply(lambda s: s.keep_signal(NAME, "17", rule="beyond_limits", who="A", reason="r"))
    study = sf.load()
    assert study.content_digest() != digest0  # a keep changes what is judged
    assert list(study.kept_signals(NAME)) == [("17", "beyond_limits")]
    with pytest.raises(StudyInputError, match="no kept signal"):
        study.reopen_signal(NAME, "18", rule="beyond_limits", who="A", reason="r")
    sf.apply(
        lambda s: s.reopen_signal(
            NAME, "17", rule="beyond_limits", who="B", reason="cause not confirmed"
        )
    )
    study = sf.load()
    assert study.kept_signals(NAME) == {}
    assert study.content_digest() == digest0
    assert analyze_study(study, NAME).verdict.meets is None
    whats = [e.what for e in sf.audit_log()]
    assert f"keep signal (point beyond the control limits) at subgroup 17 of '{NAME}'" in whats
    assert f"reopen signal (point beyond the control limits) at subgroup 17 of '{NAME}'" in whats


def test_keep_on_an_approved_study_needs_the_override(study_path):
    sf = StudyFile(study_path)
    sf.add_signoff("C. Approver", role="approved", decision="approve")
    with pytest.raises(StudyFileError, match="locked|approved"):
        sf.apply(lambda s: s.keep_signal(NAME, "17", rule="beyond_limits", who="A", reason="r"))
    sf.apply(
        lambda s: s.keep_signal(
            NAME,
            "17",
            rule="beyond_limits",
            who="A",
            reason="r",
            override_lock=True,
            override_reason="late review",
        )
    )
    assert not sf.load().is_locked


def test_cli_keep_and_reopen(study_path, capsys):
    p = str(study_path)
    assert (
        main(
            [
                "study",
                "keep",
                p,
                NAME,
                "17",
                "--rule",
                "1",
                "--reason",
                "warm-up part",
                "--who",
                "A. Keeper",
            ]
        )
        == 0
    )
    assert (
        "kept the signal (point beyond the control limits) at subgroup 17"
        in capsys.readouterr().out
    )
    # the same again, an unknown rule, a rule not signalling there, an unknown subgroup
    for args, msg in (
        (["17", "--rule", "beyond_limits"], "already kept"),
        (["17", "--rule", "bogus"], "is not a run rule"),
        (["5", "--rule", "run"], "shows no 'run' signal"),
        (["999", "--rule", "1"], "has no subgroup '999'"),
    ):
        assert main(["study", "keep", p, NAME, *args, "--reason", "r", "--who", "A"]) == 2
        err = capsys.readouterr().err
        assert msg in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert main(["analyze", "--study", p, "-c", NAME, "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["kept_signals"][0]["reason"] == "warm-up part"
    assert main(["study", "show", p]) == 0
    assert "17 (point beyond the control limits)" in capsys.readouterr().out
    assert main(["study", "show", p, "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    flange = next(c for c in shown["characteristics"] if c["name"] == NAME)
    assert [(k["subgroup"], k["who"]) for k in flange["kept_signals"]] == [("17", "A. Keeper")]
    assert (
        main(
            [
                "study",
                "reopen",
                p,
                NAME,
                "17",
                "--rule",
                "beyond_limits",
                "--reason",
                "cause not confirmed",
                "--who",
                "B",
            ]
        )
        == 0
    )
    capsys.readouterr()
    assert StudyFile(study_path).load().kept_signals(NAME) == {}


def test_session_keep_and_rejected_proposals(study_path):
    s = StudySession(study_path)
    assert s.signals_at(NAME, "17") == ["beyond_limits", "zone_a"]
    props = s.open_proposals(NAME)
    assert {p.label for p in props if p.iteration == 1} == {"17", "18"}
    p17 = next(p for p in props if p.label == "17")
    p18 = next(p for p in props if p.label == "18")
    n, k = s.record_proposal_decisions(
        NAME,
        [(p18, "chipped insert, NCR-0412")],
        [(p17, "first part after warm-up; common cause")],
        who="A. Keeper",
    )
    assert (n, k) == (1, 1)
    kept = s.kept_signals(NAME)
    assert list(kept) == [("17", "beyond_limits")]
    assert kept[("17", "beyond_limits")].payload["origin"] == "rejected_proposal"
    assert "17" not in {p.label for p in s.open_proposals(NAME)}
    res = s.result(NAME)
    assert res.removed_subgroups == ("18",)
    assert [k["origin"] for k in res.kept_signals] == ["rejected_proposal"]
    # a person keeps every open signal at a subgroup at once; refusals are clear
    with pytest.raises(StudyInputError, match="no open signal"):
        s.keep_signal(NAME, "3", reason="r", who="A")
    with pytest.raises(StudyInputError, match="reason"):
        s.keep_signal(NAME, "17", reason=" ", who="A")
    with pytest.raises(StudyInputError, match="removed"):
        s.keep_signal(NAME, "18", reason="r", who="A")
    rejected = [e.what for e in s.audit_log() if "rejected proposal" in e.what]
    assert rejected == [
        f"keep signal (point beyond the control limits) at subgroup 17 of "
        f"'{NAME}' "
        "(rejected proposal)"
    ]


def test_pdf_lists_kept_signals_in_the_characteristic_section(tmp_path):
    from pathlib import Path

    from pypdf import PdfReader

    from studykit.report.pdf import build_report, read_evidence
    from studykit.study import Characteristic

    demo = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.csv"
    lines = demo.read_text().splitlines()
    out = [lines[0]]
    for line in lines[1:]:  # subgroup 6 of the bore far off: a point beyond the limits
        cells = line.split(",")
        if cells[0] == "6":
            cells[3] = f"{float(cells[3]) + 0.02:.3f}"
        out.append(",".join(cells))
    path = tmp_path / "shift.study"
    sf = StudyFile.create(
        path,
        data=("\n".join(out) + "\n").encode(),
        filename="shift.csv",
        title="Shifted",
        characteristics=[Characteristic("bore_diameter", unit="mm", lsl=11.97, usl=12.03)],
        who="tester",
    )
    assert "6" in _beyond(analyze_study(sf.load(), "bore_diameter"))
    sf.apply(
        lambda s: s.keep_signal(
            "bore_diameter",
            "6",
            rule="beyond_limits",
            who="Q. Lead",
            reason="gauge re-zeroed at 08:10, values re-checked",
        )
    )
    build_report(path, tmp_path / "shift.pdf")
    text = " ".join(
        (p.extract_text() or "").replace("\n", " ") for p in PdfReader(tmp_path / "shift.pdf").pages
    )
    assert "Signals kept with a reason" in text
    assert "gauge re-zeroed at 08:10" in text and "Q. Lead" in text
    ev = read_evidence(tmp_path / "shift.pdf")  # the embedded evidence JSON carries them too
    assert [(k["subgroup"], k["who"]) for k in ev["results"]["bore_diameter"]["kept_signals"]] == [
        ("6", "Q. Lead")
    ]
    # the PDF's control chart rings the kept point (a labelled scatter at subgroup 6's mean)
    from studykit.report.figures import control_chart_figure

    res = analyze_study(sf.load(), "bore_diameter")
    fig = control_chart_figure(res)
    rings = [c for c in fig.axes[0].collections if c.get_label() == "Signal kept (reason on file)"]
    assert len(rings) == 1
    i6 = [str(v) for v in res.chart.labels].index("6")
    assert rings[0].get_offsets()[0][1] == pytest.approx(res.chart.location.points[i6])
    # `verify` rebuilds the study with the keep decision and gets the same numbers, from the
    # study file and from the data file alone
    from studykit.report.verify import verify_report

    data = tmp_path / "shift.csv"
    data.write_bytes(sf.load().data)
    for kw in ({"study": path}, {"data": data}):
        res = verify_report(tmp_path / "shift.pdf", allow_unsigned=True, **kw)
        assert res.ok, [c.line() for c in res.checks]
