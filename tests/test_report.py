"""The evidence PDF: pages render, text holds the reported numbers, same study -> same bytes."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from pypdf import PdfReader

from studykit.analysis import SAFETY_CAUTION, analyze_all, gauge_results
from studykit.errors import StudyFileError, StudyInputError
from studykit.report.pdf import EVIDENCE_FORMAT, build_report, read_evidence
from studykit.store import StudyFile
from studykit.study import Characteristic

DEMO = Path(__file__).resolve().parents[1] / "demo_data"


def small_study(tmp: Path, *, safety: bool = True) -> Path:
    """One characteristic of the demo data (fast to analyse)."""
    path = tmp / "small.study"
    StudyFile.create(
        path,
        data=(DEMO / "pump_housing_pilot.csv").read_bytes(),
        filename="pump_housing_pilot.csv",
        title="Small evidence study",
        part="Test part",
        supplier="Test supplier",
        characteristics=[
            Characteristic(
                "bore_diameter",
                unit="mm",
                lsl=11.97,
                usl=12.03,
                target=12.0,
                safety_critical=safety,
            )
        ],
        who="tester",
    )
    return path


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    study = tmp / "demo.study"
    shutil.copy(DEMO / "pump_housing_pilot.study", study)
    calls = []
    info = build_report(study, tmp / "demo.pdf", progress=lambda *a: calls.append(a))
    return study, tmp / "demo.pdf", info, calls


def _analyze(study_path):
    """analyze_all with the gauge results stored in the study file, as `studykit analyze`."""
    sf = StudyFile(study_path)
    study = sf.load()
    return study, analyze_all(study, gauges=gauge_results(sf))


def _text(pdf: Path) -> str:
    return "\n".join(p.extract_text() or "" for p in PdfReader(pdf).pages)


def test_report_holds_the_numbers_of_the_result_object(demo_report):
    study_path, pdf, info, _ = demo_report
    study, result = _analyze(study_path)
    text = _text(pdf)
    assert info.pages == len(PdfReader(pdf).pages) >= 5
    for name, res in result.results.items():
        assert name in text
        if res.verdict is not None:
            # the cover prints the judged index estimate and bound with two decimals
            assert f"{res.verdict.estimate:.2f}" in text
            assert f"{res.verdict.lower_bound:.2f}" in text
            assert info.verdicts[name] == res.verdict.meets
    assert study.data_sha256 in text
    assert study.content_digest() in text
    assert "Montgomery" in text and "Bissell" in text and "ISO 22514-2" in text


def test_embedded_evidence_is_the_analyze_json(demo_report):
    study_path, pdf, info, _ = demo_report
    study, result = _analyze(study_path)
    ev = read_evidence(pdf)
    assert ev["format"] == EVIDENCE_FORMAT
    assert ev["study"]["data_sha256"] == study.data_sha256 == info.data_sha256
    assert ev["study"]["content_digest"] == study.content_digest()
    for name, res in result.results.items():
        assert ev["results"][name] == res.to_dict()


def test_safety_caution_on_cover_and_in_its_section(demo_report):
    study_path, pdf, _, _ = demo_report
    study = StudyFile(study_path).load()
    critical = [n for n, c in study.characteristics.items() if c.safety_critical]
    assert critical, "the demo study marks a safety-critical characteristic"
    pages = [(p.extract_text() or "").replace("\n", " ") for p in PdfReader(pdf).pages]
    words = SAFETY_CAUTION.split()[:8]
    probe = " ".join(words)
    assert probe in pages[0]
    for name in critical:
        section = [t for t in pages[1:] if f". {name}" in t and "Stability" in t]
        assert section and probe in section[0]


def test_progress_is_reported_per_characteristic(demo_report):
    _, _, info, calls = demo_report
    total = calls[-1][1]
    assert total == 2 * len(info.characteristics) + 1
    assert [c[0] for c in calls] == list(range(1, total + 1))
    analysed = {c[2].split(" ", 1)[1] for c in calls if c[2].startswith("analysed")}
    assert analysed == set(info.characteristics)
    named = {c[2].split(" ", 1)[1] for c in calls if c[2].startswith("drawn")}
    assert named == set(info.characteristics) - set(info.errors)


@pytest.mark.skipif(shutil.which("pdftoppm") is None, reason="poppler-utils not installed")
def test_pages_render_to_png(demo_report, tmp_path):
    _, pdf, info, _ = demo_report
    subprocess.run(
        ["pdftoppm", "-png", "-r", "30", str(pdf), str(tmp_path / "page")],
        check=True,
        capture_output=True,
        timeout=120,
    )
    pngs = sorted(tmp_path.glob("page*.png"))
    assert len(pngs) == info.pages
    assert all(p.stat().st_size > 2000 for p in pngs)


def test_footer_has_page_numbers_and_study_id(demo_report):
    study_path, pdf, info, _ = demo_report
    study = StudyFile(study_path).load()
    pages = PdfReader(pdf).pages
    for i, page in enumerate(pages, start=1):
        t = page.extract_text()
        assert f"page {i} of {info.pages}" in t
        assert study.content_digest()[:12] in t


def test_same_study_gives_the_same_bytes(tmp_path):
    study = small_study(tmp_path)
    a = build_report(study, tmp_path / "a.pdf")
    b = build_report(study, tmp_path / "b.pdf")
    assert (tmp_path / "a.pdf").read_bytes() == (tmp_path / "b.pdf").read_bytes()
    assert a.evidence_sha256 == b.evidence_sha256
    assert set(a.signature_boxes) == {"prepared", "reviewed", "approved"}


def test_worker_processes_give_the_same_bytes(demo_report, tmp_path):
    # analysis and figures in two forked processes: the same PDF, byte for byte, as in one
    # process (the demo study has measured and counted characteristics and a gauge section)
    study_path, pdf, info, calls = demo_report
    seen = []
    par = build_report(
        study_path, tmp_path / "par.pdf", workers=2, progress=lambda *a: seen.append(a)
    )
    assert (tmp_path / "par.pdf").read_bytes() == pdf.read_bytes()
    assert par.evidence_sha256 == info.evidence_sha256
    assert seen == calls  # same progress lines in the same order


def test_changed_decision_changes_the_report(tmp_path):
    study = small_study(tmp_path)
    a = build_report(study, tmp_path / "a.pdf")
    StudyFile(study).exclude("bore_diameter", "3", reason="probe fell", who="tester")
    b = build_report(study, tmp_path / "b.pdf")
    assert a.content_digest != b.content_digest
    text = _text(tmp_path / "b.pdf")
    assert "probe fell" in text and "Removal log" in text


def test_errors_are_clear(tmp_path):
    with pytest.raises(StudyFileError, match="does not exist"):
        build_report(tmp_path / "missing.study", tmp_path / "x.pdf")
    with pytest.raises(StudyInputError, match="must be a Study or the path"):
        build_report(42, tmp_path / "x.pdf")
    (tmp_path / "plain.pdf").write_bytes(b"%PDF-1.4\n%%EOF\n")
    with pytest.raises(StudyFileError, match="studykit report|cannot be read"):
        read_evidence(tmp_path / "plain.pdf")


def test_signals_and_automatic_removals_are_reported(tmp_path):
    # one subgroup far off (removed in phase I) and a lasting shift (run-rule signals)
    lines = (DEMO / "pump_housing_pilot.csv").read_text().splitlines()
    out = [lines[0]]
    for line in lines[1:]:
        cells = line.split(",")
        if cells[0] == "6":
            cells[3] = f"{float(cells[3]) + 0.02:.3f}"
        if int(cells[0]) >= 14:
            cells[3] = f"{float(cells[3]) + 0.005:.3f}"
        out.append(",".join(cells))
    path = tmp_path / "shift.study"
    StudyFile.create(
        path,
        data=("\n".join(out) + "\n").encode(),
        filename="shift.csv",
        title="Shifted",
        characteristics=[Characteristic("bore_diameter", unit="mm", lsl=11.97, usl=12.03)],
        who="tester",
    )
    # a saved study removes nothing silently: the trial chart shows the signals ...
    study, result = _analyze(path)
    assert not result.results["bore_diameter"].phase1.removals
    assert result.results["bore_diameter"].chart.location.signals
    # ... and subgroup 6 goes only when someone records it (here: accepting the rule's proposal)
    StudyFile(path).exclude(
        "bore_diameter",
        "6",
        who="tester",
        automatic=True,
        reason="beyond the upper control limit of the trial chart",
    )
    build_report(path, tmp_path / "shift.pdf")
    study, result = _analyze(path)
    res = result.results["bore_diameter"]
    assert res.phase1.removals and res.chart.location.signals
    text = _text(tmp_path / "shift.pdf").replace("\n", " ")
    assert "Removal log" in text and "Signals on the final limits" in text
    for removal in res.phase1.removals:
        assert removal.reason[:30] in text
    for sig in res.chart.location.signals:
        assert f"test {sig.number}" in text


def test_evidence_is_an_incremental_update_after_the_pages(demo_report):
    # PDF 32000-1:2008, 7.5.6 (incremental updates) and 7.5.4 (cross-reference table: each
    # entry the byte offset of "N 0 obj"); 7.11.4 / 7.7.4 (embedded files in the name tree)
    from studykit.report.pdf import BOXES_KEY, EVIDENCE_FILENAME, read_evidence_bytes

    _, pdf, info, _ = demo_report
    data = pdf.read_bytes()
    first_end = data.index(b"%%EOF") + len(b"%%EOF\n")
    pages, update = data[:first_end], data[first_end:]
    assert data.count(b"%%EOF") == 2 and update.endswith(b"%%EOF\n")
    evidence = read_evidence_bytes(pdf)
    assert evidence not in pages and evidence in update  # the pages revision is untouched
    prev = int(re.search(rb"/Prev (\d+)", update).group(1))
    assert pages[prev:].startswith(b"xref\n")  # points at the pages' own table
    start = int(re.findall(rb"startxref\n(\d+)", update)[-1])
    table = data[start : data.index(b"trailer", start)].split(b"\n")
    assert table[0] == b"xref" and table[1:3] == [b"0 1", b"0000000000 65535 f "]
    i, checked = 3, 0
    while i < len(table) and table[i]:
        first, count = map(int, table[i].split())
        for k in range(count):
            offset = int(table[i + 1 + k][:10])
            assert data[offset:].startswith(b"%d 0 obj" % (first + k))
            checked += 1
        i += count + 1
    assert checked == 6  # catalog, information, embedded file, file spec, names, name tree
    reader = PdfReader(pdf, strict=True)
    assert len(reader.pages) == info.pages
    assert list(reader.attachments) == [EVIDENCE_FILENAME]
    assert reader.attachments[EVIDENCE_FILENAME][0] == evidence
    assert json.loads(reader.metadata[BOXES_KEY]) == info.signature_boxes
    assert reader.metadata["/Title"].startswith("Capability evidence - ")


def test_figure_normal_density_is_scipys_bit_for_bit():
    # the shape figure's normal density is drawn without importing scipy.stats: the same
    # numbers as the reference library (scipy.stats.norm.pdf), element for element
    import numpy as np
    from scipy import stats

    from studykit.report.figures import _norm_pdf

    rng = np.random.default_rng(3)
    for loc, scale in ((0.0, 1.0), (12.003, 0.0041), (-3.5, 250.0), (1e-9, 1e-12)):
        x = loc + scale * rng.normal(0.0, 3.0, 400)
        x[[3, 7, 11]] = [np.nan, np.inf, -np.inf]
        assert np.array_equal(_norm_pdf(x, loc, scale), stats.norm.pdf(x, loc, scale), True)
    for bad in (0.0, -1.0, np.nan):
        assert np.array_equal(_norm_pdf(x, 0.0, bad), stats.norm.pdf(x, 0.0, bad), True)


_LAYOUT_IMPORTS = """
import json, sys
from studykit.report import pdf
study, gauges, _, chain = pdf._load_with_chain(sys.argv[1])
results, errors, _ = pdf.analyze_for_report(study, gauges, workers=2)
pdf.collect_evidence(study, results, errors, gauges, chain)
loaded = "scipy.stats" in sys.modules
print(json.dumps({"scipy_stats": loaded, "fitted": [
    n for n, r in results.items() if getattr(r.model, "fitted", None) is not None
    and r.probability_limits is not None], "first": study.characteristic_names[0]}))
"""


def test_layout_process_does_not_import_scipy_stats(tmp_path):
    # the forked analysis workers send back results of fitted (non-normal) models without the
    # frozen scipy distribution and with the chart's limits in measured units already computed,
    # so the process that lays out the report (here: gathers the evidence) never loads
    # scipy.stats (about 0.5 s and 60 MB)
    import sys

    study_path = tmp_path / "demo.study"
    shutil.copy(DEMO / "pump_housing_pilot.study", study_path)
    out = subprocess.run(
        [sys.executable, "-c", _LAYOUT_IMPORTS, str(study_path)],
        capture_output=True,
        text=True,
        check=True,
    )
    got = json.loads(out.stdout.strip().splitlines()[-1])
    # not vacuous: the demo has characteristics after the first charted on a fitted model
    assert got["fitted"] and got["first"] not in got["fitted"]
    assert got["scipy_stats"] is False
