"""The hand-off zip: PDF, study, data, frozen limits, one chart form per variables characteristic."""

from __future__ import annotations

import hashlib
import json
import shutil
import zipfile
from pathlib import Path

import pytest
from pypdf import PdfReader

from studykit.analysis import analyze_study
from studykit.errors import StudyFileError
from studykit.report.handoff import build_handoff
from studykit.stats.phase2 import Phase2Plan
from studykit.store import StudyFile

DEMO = Path(__file__).resolve().parents[1] / "demo_data"


@pytest.fixture(scope="module")
def pack(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("handoff")
    study = tmp / "demo.study"
    shutil.copy(DEMO / "pump_housing_pilot.study", study)
    info = build_handoff(study, tmp / "pack.zip")
    return tmp, study, info


def test_zip_holds_everything(pack):
    tmp, study, info = pack
    s = StudyFile(study).load()
    with zipfile.ZipFile(info.path) as zf:
        names = zf.namelist()
        assert "report.pdf" in names and f"study/{study.name}" in names
        assert zf.read(f"data/{s.data_filename}") == s.data
        assert zf.read(f"study/{study.name}") == study.read_bytes()
        manifest = json.loads(zf.read("MANIFEST.json"))
        for name, digest in manifest["files"].items():
            assert hashlib.sha256(zf.read(name)).hexdigest() == digest
        assert manifest["content_digest"] == s.content_digest()


def test_limits_are_the_frozen_phase1_limits(pack):
    tmp, study, info = pack
    s = StudyFile(study).load()
    with zipfile.ZipFile(info.path) as zf:
        for name in s.characteristic_names:
            if name in info.skipped:
                continue
            plan = Phase2Plan.from_json(zf.read(f"limits/{name}.json").decode())
            res = analyze_study(s, name)
            # a chart drawn on a model's scale (face_runout: lognormal normal scores) hands off
            # the chart of its raw values, which phase II plots new readings against
            loc = (res.phase1.raw_chart or res.chart).location
            if plan.location_ucl is not None and res.subgroup_size:
                assert plan.location_ucl == pytest.approx(float(loc.ucl[0]), rel=1e-12)
                assert plan.location_lcl == pytest.approx(float(loc.lcl[0]), rel=1e-12)
            assert plan.characteristic == name
            assert zf.read(f"limits/{name}.csv").decode().startswith("field,value")


def test_chart_forms_for_variables_characteristics(pack):
    tmp, study, info = pack
    s = StudyFile(study).load()
    with zipfile.ZipFile(info.path) as zf:
        for name in s.characteristic_names:
            form = f"forms/{name}_chart_form.pdf"
            if s.characteristic(name).is_attribute or name in info.skipped:
                assert form not in zf.namelist()
                continue
            (tmp / "f.pdf").write_bytes(zf.read(form))
            reader = PdfReader(tmp / "f.pdf")
            assert len(reader.pages) == 1
            text = reader.pages[0].extract_text()
            assert name in text and "Operator" in text
            w, h = reader.pages[0].mediabox.width, reader.pages[0].mediabox.height
            assert w > h  # landscape


def test_same_study_same_zip(pack, tmp_path):
    tmp, study, info = pack
    with zipfile.ZipFile(info.path) as zf:
        (tmp_path / "report.pdf").write_bytes(zf.read("report.pdf"))
    # the report inside is reused (building it again gives the same bytes: test_report)
    again = build_handoff(study, tmp_path / "again.zip", report_pdf=tmp_path / "report.pdf")
    assert Path(info.path).read_bytes() == Path(again.path).read_bytes()


def test_text_in_limits_csv_is_spreadsheet_safe(pack):
    _, _, info = pack
    with zipfile.ZipFile(info.path) as zf:
        for name in zf.namelist():
            if name.endswith(".csv"):
                for line in zf.read(name).decode().splitlines()[1:]:
                    value = line.split(",", 1)[1]
                    assert not value.startswith(("=", "+", "@")), (name, line)


def test_missing_study(tmp_path):
    with pytest.raises(StudyFileError, match="does not exist"):
        build_handoff(tmp_path / "none.study", tmp_path / "x.zip")
