"""The hand-off gate and the evidence's data files.

A pack for series production is made only for characteristics with a verdict that meets the
criterion and no open signal; otherwise it is refused, or made with every file stamped DRAFT
and the reason. Every data file of the study is in the PDF cover, its digest table and the
zip, and `verify` passes with the zip's own files.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path

import pytest
from pypdf import PdfReader

from studykit.cli import main
from studykit.report.handoff import DRAFT_NOTE, build_handoff, handoff_readiness
from studykit.report.pdf import analyze_for_report
from studykit.report.verify import verify_report
from studykit.store import StudyFile
from studykit.study import Characteristic

DEMO = Path(__file__).resolve().parents[1] / "demo_data"


def _one_char_study(tmp_path: Path, name: str) -> Path:
    path = tmp_path / f"{name}.study"
    StudyFile.create(
        path,
        data=(DEMO / "pump_housing_pilot.csv").read_bytes(),
        filename="pump_housing_pilot.csv",
        title="Gate test",
        characteristics=[
            {
                "bore_diameter": Characteristic("bore_diameter", unit="mm", lsl=11.97, usl=12.03),
                "flange_thickness": Characteristic("flange_thickness", unit="mm", lsl=7.9, usl=8.1),
            }[name]
        ],
        who="T",
    )
    return path


def _readiness(path: Path) -> dict:
    study = StudyFile(path).load()
    results, errors, _ = analyze_for_report(study, {})
    return handoff_readiness(study, results, errors)


def test_ready_study_gives_a_pack_without_stamp(tmp_path):
    path = _one_char_study(tmp_path, "bore_diameter")
    assert _readiness(path) == {}
    info = build_handoff(path, tmp_path / "ok.zip", when_not_ready="refuse")
    assert not info.is_draft
    with zipfile.ZipFile(info.path) as zf:
        assert "DRAFT-NOT-FOR-PRODUCTION.txt" not in zf.namelist()
        assert json.loads(zf.read("MANIFEST.json"))["status"] == "ready"
        form = PdfReader(zf.open("forms/bore_diameter_chart_form.pdf"))
        assert "DRAFT" not in form.pages[0].extract_text()


def test_open_signals_are_not_ready(tmp_path):
    # flange thickness of the demo pilot run signals until subgroups 17 and 18 are removed
    # with their recorded cause (see demo_data/README.md)
    path = _one_char_study(tmp_path, "flange_thickness")
    reasons = _readiness(path)
    assert "open signal" in reasons["flange_thickness"]
    StudyFile(path).exclude("flange_thickness", "17", reason="chipped insert", who="T")
    StudyFile(path).exclude("flange_thickness", "18", reason="chipped insert", who="T")
    assert "flange_thickness" not in _readiness(path)


def test_rejection_makes_nothing_ready(tmp_path):
    path = _one_char_study(tmp_path, "bore_diameter")
    StudyFile(path).add_signoff(
        "Q. Lead", role="approved", decision="reject", comment="wrong gauge"
    )
    reasons = _readiness(path)
    assert "rejected by Q. Lead" in reasons["study"] and "wrong gauge" in reasons["study"]


def test_handoff_gate_refuses_by_default(tmp_path, capsys):
    study = tmp_path / "demo.study"
    study.write_bytes((DEMO / "pump_housing_pilot.study").read_bytes())
    code = main(
        [
            "report",
            str(study),
            "-o",
            str(tmp_path / "r.pdf"),
            "--handoff",
            str(tmp_path / "pack.zip"),
            "--quiet",
        ]
    )
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "pull_off_force: does not meet its criterion" in err[0]
    assert not (tmp_path / "pack.zip").exists()


@pytest.fixture(scope="module")
def draft_pack(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("draft")
    study = tmp / "demo.study"
    study.write_bytes((DEMO / "pump_housing_pilot.study").read_bytes())
    assert (
        main(
            [
                "report",
                str(study),
                "-o",
                str(tmp / "r.pdf"),
                "--handoff",
                str(tmp / "pack.zip"),
                "--handoff-draft",
                "--quiet",
            ]
        )
        == 0
    )
    return tmp, study


def test_handoff_draft_stamps_every_file(draft_pack, capsys):
    tmp, study = draft_pack
    with zipfile.ZipFile(tmp / "pack.zip") as zf:
        names = zf.namelist()
        manifest = json.loads(zf.read("MANIFEST.json"))
        assert manifest["status"] == "DRAFT"
        assert "pull_off_force" in manifest["draft_reasons"]
        assert "pull_off_force" in zf.read("DRAFT-NOT-FOR-PRODUCTION.txt").decode()
        forms = [n for n in names if n.startswith("forms/")]
        limits = [n for n in names if n.startswith("limits/")]
        assert forms and limits
        for n in forms:
            text = PdfReader(zf.open(n)).pages[0].extract_text()
            assert DRAFT_NOTE.upper() in text, n
            assert len(PdfReader(zf.open(n)).pages) == 1
        own = PdfReader(zf.open("forms/pull_off_force_chart_form.pdf")).pages[0].extract_text()
        assert "does not meet its criterion" in own
        for n in limits:
            body = zf.read(n).decode()
            if n.endswith(".json"):
                assert json.loads(body)["status"].startswith(DRAFT_NOTE)
            else:
                assert body.splitlines()[1].startswith(f'status,"{DRAFT_NOTE}')


def test_every_data_file_in_cover_digest_table_and_zip(draft_pack):
    tmp, study = draft_pack
    s = StudyFile(study).load()
    assert len(s.files) == 5  # the demo study's data files (4-cavity and tool-wear added)
    reader = PdfReader(tmp / "r.pdf")
    cover = reader.pages[0].extract_text()
    digests = reader.pages[-1].extract_text()
    with zipfile.ZipFile(tmp / "pack.zip") as zf:
        manifest = json.loads(zf.read("MANIFEST.json"))
        for name, blob in s.files:
            assert name in cover and name in digests
            assert zf.read(f"data/{name}") == blob
        assert [f["filename"] for f in manifest["data_files"]] == [n for n, _ in s.files]


def test_verify_with_the_zips_data_files(draft_pack, tmp_path, capsys):
    tmp, _ = draft_pack
    with zipfile.ZipFile(tmp / "pack.zip") as zf:
        zf.extractall(tmp_path)
    data = sorted(str(p) for p in (tmp_path / "data").iterdir())
    assert len(data) == 5  # the demo study's data files
    code = main(["verify", str(tmp_path / "report.pdf"), "--data", *data, "--allow-unsigned"])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "every page" in out and "CONSISTENT BUT UNSIGNED" in out
    # one file short: named, not verified
    res = verify_report(tmp_path / "report.pdf", data=data[:2], allow_unsigned=True)
    assert res.exit_code == 1
    assert any("was not given" in c.detail for c in res.failures)
