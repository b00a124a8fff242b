"""Tolerance-interval criterion, position studies and the analysis notebook, end to end.

The demo study (invented data, demo_data/make_demo.py) judges the bore by "at least 99 % within
specification with 95 % confidence" beside Ppk and keeps the mounting-hole position study. The
statistics themselves are checked against published values in tests/test_intervals.py and
tests/test_position.py; here the checks are that the surfaces (JSON, verdict, PDF, verify, the
notebook, the hand-off pack) carry exactly those numbers and decide with them.
"""

from __future__ import annotations

import json
import shutil
import zipfile
from pathlib import Path

import numpy as np
import pytest

from studykit.analysis import analyze_characteristic, analyze_study
from studykit.cli import main
from studykit.data import CharacteristicData
from studykit.errors import SpecError
from studykit.positions import POSITION_KIND, position_payload, recheck_position, stored_positions
from studykit.stats.position import position_study
from studykit.stats.tolerance import normal_factor_two_sided
from studykit.store import StudyFile
from studykit.study import Characteristic, Criteria

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_data"


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """A copy of the demo study, its report and its notebook (written by the CLI)."""
    d = tmp_path_factory.mktemp("extras")
    study = d / "demo.study"
    shutil.copy(DEMO / "pump_housing_pilot.study", study)
    code = main(
        [
            "report",
            str(study),
            "-o",
            str(d / "r.pdf"),
            "--notebook",
            str(d / "analysis.ipynb"),
            "--quiet",
        ]
    )
    assert code == 0
    return d


# -- the criterion -----------------------------------------------------------------------------


def test_criteria_interval_fields_validated_and_absent_when_unset():
    assert "interval_coverage" not in Criteria().to_dict()  # digests of older studies unchanged
    c = Criteria(interval_coverage="0.99", interval_confidence=0.95)
    assert c.to_dict()["interval_coverage"] == 0.99 and c.has_interval
    assert Criteria.from_dict(c.to_dict()) == c
    assert "at least 99% of parts within specification with 95% confidence" in c.describe()
    with pytest.raises(SpecError, match="both"):
        Criteria(interval_coverage=0.99)
    with pytest.raises(SpecError, match="between 0.5 and 1"):
        Criteria(interval_coverage=99, interval_confidence=0.95)


def test_interval_criterion_refused_on_counted_data(tmp_path):
    shutil.copy(DEMO / "pump_housing_pilot.study", tmp_path / "s.study")
    study = StudyFile(tmp_path / "s.study").load()
    with pytest.raises(SpecError, match="needs measured values"):
        study.with_criteria(
            "leak_test_defectives",
            Criteria(interval_coverage=0.99, interval_confidence=0.95),
            who="t",
            reason="r",
        )


def test_demo_bore_carries_the_interval_and_its_numbers():
    sf = StudyFile(DEMO / "pump_housing_pilot.study")
    res = analyze_study(sf.load(), "bore_diameter")
    ti = res.to_dict()["tolerance_interval"]
    x = res.values
    # normal model, two limits: x-bar -/+ k s with the exact two-sided factor (ISO 16269-6:2014
    # 5.2; the factor itself is checked against the standard's Table C.4 in test_intervals.py)
    k = normal_factor_two_sided(x.size, 0.99, 0.95)
    assert ti["model"] == "normal" and ti["sides"] == 2 and ti["factor_method"] == "exact"
    assert ti["factor"] == pytest.approx(k, rel=1e-12)
    assert ti["lower"] == pytest.approx(x.mean() - k * x.std(ddof=1), rel=1e-12)
    assert ti["upper"] == pytest.approx(x.mean() + k * x.std(ddof=1), rel=1e-12)
    assert ti["meets"] is True and res.verdict.meets is True
    assert ti["criterion"] == "at least 99% of parts within specification with 95% confidence"
    # the sample size the criterion needs without assuming a model: smallest n with
    # 1 - n p^(n-1) + (n-1) p^n >= C for p = 0.99 (ISO 16269-6:2014 Table F.1 gives 473)
    assert ti["plan"]["distribution_free"] == 473
    assert res.to_dict()["criteria"]["interval_coverage"] == 0.99


def _sample(seed=7, n=60, mean=10.0, sd=0.1):
    return CharacteristicData("d", "mm", np.random.default_rng(seed).normal(mean, sd, n))


def test_interval_criterion_fails_the_verdict_the_index_passes():
    # limits about 4 s from the mean: Ppk about 1.3 passes ">= 1.0"; at least 99.99 % within
    # with 95 % confidence needs x-bar -/+ k s inside them with k(60, 0.9999, 0.95) about 4.5
    spec = Characteristic("d", lsl=9.6, usl=10.4)
    data = _sample()
    x = data.values
    k = normal_factor_two_sided(x.size, 0.9999, 0.95)
    m, sd = x.mean(), x.std(ddof=1)
    assert m - k * sd < 9.6 or m + k * sd > 10.4  # the premise of this test
    index_only = Criteria(index="ppk", threshold=1.0, basis="estimate")
    both = Criteria(
        index="ppk",
        threshold=1.0,
        basis="estimate",
        interval_coverage=0.9999,
        interval_confidence=0.95,
    )
    a = analyze_characteristic(data, spec, criteria=index_only)
    b = analyze_characteristic(_sample(), spec, criteria=both)
    assert a.verdict.meets is True and a.tolerance_interval is None
    assert b.tolerance_interval["meets"] is False
    assert b.verdict.meets is False
    assert "tolerance-interval criterion" in b.verdict.text and "not met" in b.verdict.text
    # the index numbers are those of the index-only verdict
    assert b.verdict.estimate == a.verdict.estimate
    assert b.verdict.lower_bound == a.verdict.lower_bound


def test_extreme_coverage_keeps_the_analysis_and_says_no_free_size():
    crit = Criteria(
        index="ppk",
        threshold=1.0,
        basis="estimate",
        interval_coverage=0.99999,
        interval_confidence=0.99,
    )
    res = analyze_characteristic(_sample(), Characteristic("d", lsl=9.4, usl=10.6), criteria=crit)
    # more than 100 000 parts: 1 - n P^(n-1) + (n-1) P^n < 0.99 at n = 1e5 for P = 0.99999
    assert res.tolerance_interval["plan"]["distribution_free"] is None
    assert res.verdict is not None


def test_interval_criterion_not_judged_without_enough_values_for_a_free_interval():
    # a Weibull model gets the distribution-free interval: 30 values cannot give 99 %/95 %
    # (the extremes of n values cover P with confidence 1 - n P^(n-1) + (n-1) P^n, 3.6 % here)
    x = np.random.default_rng(3).weibull(2.0, 30) + 5.0
    spec = Characteristic("w", lsl=4.0, usl=9.0, model="weibull")
    crit = Criteria(
        index="ppk",
        threshold=0.5,
        basis="estimate",
        interval_coverage=0.99,
        interval_confidence=0.95,
    )
    res = analyze_characteristic(CharacteristicData("w", None, x), spec, criteria=crit)
    assert res.model.name == "weibull"
    assert res.tolerance_interval["model"] == "distribution_free"
    assert res.tolerance_interval["meets"] is None
    assert res.verdict.meets is None and "cannot be judged" in res.verdict.text


def test_study_set_interval_option(tmp_path, capsys):
    study = tmp_path / "s.study"
    shutil.copy(DEMO / "pump_housing_pilot.study", study)
    assert (
        main(
            [
                "study",
                "set",
                str(study),
                "flange_thickness",
                "--interval",
                "0.95,0.9",
                "--reason",
                "customer asks",
            ]
        )
        == 0
    )
    crit = StudyFile(study).load().criteria_for("flange_thickness")
    assert (crit.interval_coverage, crit.interval_confidence) == (0.95, 0.9)
    assert (
        main(
            [
                "study",
                "set",
                str(study),
                "flange_thickness",
                "--interval",
                "none",
                "--reason",
                "withdrawn",
            ]
        )
        == 0
    )
    assert not StudyFile(study).load().criteria_for("flange_thickness").has_interval
    capsys.readouterr()
    assert (
        main(["study", "set", str(study), "flange_thickness", "--interval", "99", "--reason", "x"])
        == 2
    )
    assert "--interval '99'" in capsys.readouterr().err


# -- position studies in the study file ----------------------------------------------------------


def test_demo_position_study_is_the_csv_recomputed():
    rows = [
        ln.split(",") for ln in (DEMO / "mounting_hole_position.csv").read_text().splitlines()[1:]
    ]
    fresh = position_study(
        [float(r[1]) for r in rows], [float(r[2]) for r in rows], tolerance=0.20
    ).to_dict()
    stored = stored_positions(DEMO / "pump_housing_pilot.study")
    assert list(stored) == ["mounting_hole_position"]
    assert stored["mounting_hole_position"]["result"] == fresh
    assert recheck_position(stored["mounting_hole_position"]) == fresh


def test_position_payload_refuses_bad_input():
    with pytest.raises(SpecError):
        position_payload(
            "hole", [0.0, 0.01, 0.02, 0.0, 0.01], [0.0, 0.02, 0.01, 0.01, 0.0], tolerance=-1
        )


# -- PDF and verify --------------------------------------------------------------------------------


def _pdf_text(path) -> str:
    from pypdf import PdfReader

    return "\n".join(p.extract_text() for p in PdfReader(str(path)).pages)


def test_report_has_both_sections_and_the_evidence_carries_them(built):
    from studykit.report.pdf import read_evidence

    text = _pdf_text(built / "r.pdf")
    assert "Tolerance intervals" in text and "Positional tolerances" in text
    assert "One-dimensional shortcut" in text and "times fewer" in text
    ev = read_evidence(built / "r.pdf")
    assert ev["results"]["bore_diameter"]["tolerance_interval"]["meets"] is True
    assert (
        ev["positions"]["mounting_hole_position"]["result"]
        == stored_positions(built / "demo.study")["mounting_hole_position"]["result"]
    )


def test_verify_recomputes_interval_and_position(built, capsys):
    code = main(
        [
            "verify",
            str(built / "r.pdf"),
            "--allow-unsigned",
            "--study",
            str(built / "demo.study"),
            "--json",
        ]
    )
    out = json.loads(capsys.readouterr().out)
    checks = {c["item"]: c for c in out["checks"]}
    assert checks["position study mounting_hole_position"]["status"] == "pass"
    assert checks["numbers of bore_diameter"]["status"] == "pass"
    assert checks["every page"]["status"] == "pass"
    assert code == out["exit_code"]


def test_verify_position_check_fails_on_a_changed_number(built):
    from studykit.report.pdf import read_evidence
    from studykit.report.verify import _position_checks

    ev = read_evidence(built / "r.pdf")
    ev["positions"]["mounting_hole_position"]["result"]["ppm_expected"] *= 0.5
    checks: list = []
    assert _position_checks(ev, checks) > 0
    assert checks[0].status == "fail" and "ppm_expected" in checks[0].detail


# -- the analysis notebook -----------------------------------------------------------------------


def _execute(path):
    import nbformat
    from nbclient import NotebookClient

    nb = nbformat.read(str(path), as_version=4)
    NotebookClient(
        nb, timeout=600, kernel_name="python3", resources={"metadata": {"path": str(path.parent)}}
    ).execute()
    return "\n".join(
        o.get("text", "") for c in nb.cells if c.cell_type == "code" for o in c.outputs
    )


def test_notebook_recomputes_every_number_of_the_report(built):
    from studykit.report.pdf import read_evidence
    from studykit.report.verify import compare_numbers

    nb = json.loads((built / "analysis.ipynb").read_text())
    assert all(c.get("outputs", []) == [] for c in nb["cells"])  # stored without outputs
    out = _execute(built / "analysis.ipynb")
    ev = read_evidence(built / "r.pdf")
    n_expected = sum(compare_numbers(r, r)[0] for r in ev["results"].values()) + sum(
        compare_numbers(p["result"], p["result"])[0] for p in ev["positions"].values()
    )
    assert f"all {n_expected} numbers of the report agree" in out
    assert "bore_diameter" in out and "mounting_hole_position" in out
    # the gauge R&R is recomputed from its stored readings (10 parts x 3 appraisers x 3
    # trials, demo_data/README.md) and every stored number compared
    stored = StudyFile(built / "demo.study").results("gauge_rr")[-1].payload
    stored = {k: v for k, v in stored.items() if k != "source"}
    n_gauge = compare_numbers(stored, stored)[0]
    grr = next(c for c in stored["components"] if c["name"] == "gauge_rr")
    assert (
        f"recomputed from its 90 readings: %GRR {grr['pct_study_variation']:.2f}, "
        f"ndc {stored['ndc']}; all {n_gauge} stored numbers agree" in out
    )


def test_notebook_stops_when_a_stored_gauge_number_was_changed(built, tmp_path):
    from nbclient.exceptions import CellExecutionError

    from studykit.report.notebook import write_notebook

    study = tmp_path / "demo.study"
    shutil.copy(built / "demo.study", study)
    sf = StudyFile(study)
    payload = json.loads(json.dumps(sf.results("gauge_rr")[-1].payload))
    payload["ndc"] = payload["ndc"] + 1  # a number the readings do not give
    sf.attach_result("gauge_rr", "flange_thickness", payload, who="t")
    write_notebook(study, tmp_path / "a.ipynb")
    with pytest.raises(CellExecutionError, match="differs from the stored result"):
        _execute(tmp_path / "a.ipynb")


def test_generated_notebook_runs_under_nbval(built):
    # the notebook of the demo study, run by nbval as CI does (DEVELOPERS.md, "Stack notes":
    # --nbval-lax --nbval-current-env); its last cell compares with the PDF beside it
    import subprocess
    import sys

    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "pytest",
            "--nbval-lax",
            "--nbval-current-env",
            "-p",
            "no:cacheprovider",
            "-q",
            "analysis.ipynb",
        ],
        cwd=built,
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-2000:]
    assert " passed" in proc.stdout


def test_notebook_stops_when_the_report_is_of_another_state(built, tmp_path):
    from nbclient.exceptions import CellExecutionError

    study = tmp_path / "demo.study"
    shutil.copy(built / "demo.study", study)
    shutil.copy(built / "r.pdf", tmp_path / "r.pdf")
    from studykit.report.notebook import write_notebook

    write_notebook(study, tmp_path / "a.ipynb", pdf_path=tmp_path / "r.pdf")
    StudyFile(study).update_spec("bore_diameter", usl=12.02, who="t", reason="tighter")
    with pytest.raises(CellExecutionError, match="differ from the report"):
        _execute(tmp_path / "a.ipynb")


def test_report_notebook_option_refuses_another_suffix(tmp_path, capsys):
    code = main(
        [
            "report",
            str(DEMO / "pump_housing_pilot.study"),
            "-o",
            str(tmp_path / "r.pdf"),
            "--notebook",
            str(tmp_path / "a.txt"),
            "--quiet",
        ]
    )
    assert code == 2 and ".ipynb" in capsys.readouterr().err
    assert not (tmp_path / "r.pdf").exists()


def test_handoff_pack_holds_the_notebook(built, tmp_path):
    from studykit.report.handoff import build_handoff

    h = build_handoff(
        built / "demo.study",
        tmp_path / "pack.zip",
        report_pdf=built / "r.pdf",
        when_not_ready="draft",
    )
    assert "analysis.ipynb" in h.entries
    with zipfile.ZipFile(tmp_path / "pack.zip") as z:
        nb = json.loads(z.read("analysis.ipynb"))
        names = set(z.namelist())
    code = "\n".join(c["source"] for c in nb["cells"] if c["cell_type"] == "code")
    assert "STUDY = Path('study/demo.study')" in code and "PDF = 'report.pdf'" in code
    assert {"study/demo.study", "report.pdf"} <= names
    assert POSITION_KIND == "position"


def test_position_cli_keeps_the_study_in_a_study_file(tmp_path, capsys):
    study = tmp_path / "s.study"
    shutil.copy(DEMO / "pump_housing_pilot.study", study)
    csv = DEMO / "mounting_hole_position.csv"
    assert (
        main(
            [
                "position",
                str(csv),
                "--x",
                "hole_dx",
                "--y",
                "hole_dy",
                "--tolerance",
                "0.25",
                "--study",
                str(study),
                "--name",
                "second_hole",
                "--who",
                "A. Tester",
                "--json",
            ]
        )
        == 0
    )
    out = json.loads(capsys.readouterr().out)
    kept = stored_positions(study)
    assert set(kept) == {"mounting_hole_position", "second_hole"}
    assert kept["second_hole"]["result"]["ppm_expected"] == out["ppm_expected"]
    assert kept["second_hole"]["columns"] == {"x": "hole_dx", "y": "hole_dy"}
    assert out["stored"]["name"] == "second_hole"
    assert StudyFile(study).results(POSITION_KIND)[-1].who == "A. Tester"
    # --study without --name is refused before anything is stored
    assert (
        main(
            [
                "position",
                str(csv),
                "--x",
                "hole_dx",
                "--y",
                "hole_dy",
                "--tolerance",
                "0.25",
                "--study",
                str(study),
            ]
        )
        == 2
    )
    assert "--name" in capsys.readouterr().err
    assert len(StudyFile(study).results(POSITION_KIND)) == 2


def test_analyze_prints_the_interval_line(capsys):
    assert (
        main(["analyze", "--study", str(DEMO / "pump_housing_pilot.study"), "-c", "bore_diameter"])
        == 0
    )
    out = capsys.readouterr().out
    assert (
        "tolerance interval (at least 99% of parts within specification with 95% confidence): holds"
    ) in out


def test_a_changed_interval_number_is_found_by_the_comparison_verify_makes():
    from studykit.report.verify import compare_numbers

    res = analyze_study(StudyFile(DEMO / "pump_housing_pilot.study").load(), "bore_diameter")
    fresh = json.loads(json.dumps(res.to_dict()))
    forged = json.loads(json.dumps(fresh))
    forged["tolerance_interval"]["upper"] = 12.01  # the interval drawn narrower
    _, diffs = compare_numbers(forged, fresh)
    assert diffs == [
        f"tolerance_interval.upper: report 12.01, recomputed "
        f"{fresh['tolerance_interval']['upper']:.10g}"
    ]


def test_position_view_shows_the_caution_for_a_safety_critical_position():
    from studykit.app.steps.extras_views import position_html
    from studykit.positions import position_result

    payload = dict(stored_positions(DEMO / "pump_housing_pilot.study")["mounting_hole_position"])
    d = position_result(payload).to_dict()
    assert "do not replace" not in position_html("hole", payload, d)
    payload["safety_critical"] = True
    assert "do not replace" in position_html("hole", payload, d)


def test_position_view_redraws_only_when_the_positions_change(monkeypatch):
    """A save that leaves the position studies as they were (a removal elsewhere) does not
    redraw the position figure; a changed position study does."""
    import studykit.positions as positions_module
    import studykit.report.figures as figures_module
    from studykit.app.steps.extras_views import PositionView

    stored = stored_positions(DEMO / "pump_housing_pilot.study")
    current = {"value": stored}
    monkeypatch.setattr(positions_module, "stored_positions", lambda _p: current["value"])
    drawn = []
    real_png = figures_module.figure_png
    monkeypatch.setattr(
        figures_module, "figure_png", lambda *a, **k: drawn.append(1) or real_png(*a, **k)
    )
    view = PositionView()
    view.refresh("study", version=1)
    assert len(drawn) == 1 and view.image.value
    view.refresh("study", version=2)  # a new version of the file, same positions
    assert len(drawn) == 1
    name = next(iter(stored))
    changed = {name: {**stored[name], "note": "re-measured"}}
    current["value"] = changed
    view.refresh("study", version=3)
    assert len(drawn) == 2
