"""The "Gauge check" workbook step without a browser, on a copy of the demo study.

References for the expected numbers: the variance components of a crossed gauge study with the
appraiser-by-part interaction pooled into the error, recomputed here with numpy from the sums of
squares (Montgomery, Design and Analysis of Experiments, 8th ed., section 13.3, two-factor
random-effects model, expected mean squares; pooling the interaction when it is not significant
as in AIAG, Measurement Systems Analysis, 4th ed., ANOVA method, "from memory"); %GRR of the
study variation = 100 * sigma_GRR / sigma_total and of the tolerance = 100 * 6 sigma_GRR /
(USL - LSL) (AIAG MSA 4th ed., "from memory").
"""

from __future__ import annotations

import csv
import datetime
import io
import shutil
from pathlib import Path

import numpy as np
import pytest

from studykit.app.session import demo_study_path
from studykit.app.shell import build_workbook
from studykit.app.steps.limits import LimitsStep
from studykit.app.steps.measuring import (
    FIGURE_TITLES,
    GaugeStep,
    gauge_result_from_payload,
    guess_columns,
    read_gauge_upload,
)
from studykit.errors import DataFileError
from studykit.store import StudyFile

NAME = "flange_thickness"
GAUGE_CSV = Path(__file__).resolve().parents[1] / "demo_data" / "gauge_flange_thickness.csv"


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    return path


@pytest.fixture
def wb(study_path):
    step = GaugeStep()
    wb = build_workbook(study_path, steps=[LimitsStep(), step])
    wb.select("measuring")
    ws = wb.context.extra["studykit.workspace"]
    ws.picker.value = NAME
    assert not [m for m in wb.context.messages.messages if m[0] == "error"]
    return wb


def upload(step, data: bytes, name: str = "gauge.csv"):
    step.upload.value = (
        {
            "name": name,
            "type": "text/csv",
            "size": len(data),
            "content": memoryview(data),
            "last_modified": datetime.datetime(2026, 1, 1),
        },
    )


def last(wb):
    return wb.context.messages.messages[0]


def reference_pooled_grr(path: Path, lsl: float, usl: float) -> tuple[float, float]:
    """(%GRR of study variation, %GRR of tolerance) by the pooled random-effects ANOVA, numpy
    only (see the module docstring for the formulas' sources)."""
    rows = list(csv.DictReader(io.StringIO(path.read_text())))
    parts = sorted({r["part"] for r in rows}, key=int)
    apprs = sorted({r["appraiser"] for r in rows})
    p, o = len(parts), len(apprs)
    r = len(rows) // (p * o)
    cube = np.zeros((p, o, r))
    fill = np.zeros((p, o), dtype=int)
    for row in rows:
        i, j = parts.index(row["part"]), apprs.index(row["appraiser"])
        cube[i, j, fill[i, j]] = float(row["value"])
        fill[i, j] += 1
    grand = cube.mean()
    ss_p = o * r * np.sum((cube.mean(axis=(1, 2)) - grand) ** 2)
    ss_o = p * r * np.sum((cube.mean(axis=(0, 2)) - grand) ** 2)
    ss_t = np.sum((cube - grand) ** 2)
    ss_e_pooled = ss_t - ss_p - ss_o  # interaction + within-cell error
    df_e = p * o * r - p - o + 1
    ms_p, ms_o, ms_e = ss_p / (p - 1), ss_o / (o - 1), ss_e_pooled / df_e
    var_rep = ms_e
    var_app = max((ms_o - ms_e) / (p * r), 0.0)
    var_part = max((ms_p - ms_e) / (o * r), 0.0)
    grr = np.sqrt(var_rep + var_app)
    total = np.sqrt(var_rep + var_app + var_part)
    return 100 * grr / total, 100 * 6 * grr / (usl - lsl)


def test_the_stored_study_is_shown_with_its_verdict_tables_and_figures(wb, study_path):
    step = wb.step("measuring")
    stored = StudyFile(study_path).results("gauge_rr", NAME)[-1]
    v = stored.payload["verdict"]
    text = step.verdict.value
    word = {
        "acceptable": "Acceptable",
        "conditionally acceptable": "Conditionally acceptable",
        "not acceptable": "Not acceptable",
    }[v["status"]]
    assert word in text and stored.who in text
    assert f"{v['pct_grr_study_variation']:.1f} %" in text
    assert f"{v['pct_grr_tolerance']:.1f} %" in text
    assert str(stored.payload["ndc"]) in text
    assert "the customer&#x27;s rule governs" in text  # the bands are common practice, no rule
    pooled = stored.payload["interaction_pooled"]
    assert "Gauge R&amp;R (all measurement)" in step.components.value
    assert "interval" in step.components.value
    # headers in words (issue 15 item 2): no compressed percent headers
    for words in ("Share of variance", "Spread (σ)", "Share of study spread", "Share of tolerance"):
        assert f"<th>{words}</th>" in step.components.value
    assert "%" + "Contrib" not in step.components.value
    # the ANOVA used comes first; the full model only behind a toggle, after pooling
    assert step.anova.value.startswith('<div class="sk-panel-title">Analysis of variance used')
    assert ("<details" in step.anova.value) is pooled
    assert ("pooled into the repeatability" in step.anova.value) is pooled
    assert "Average-and-range" in step.range_method.value
    pngs = [bytes(box.children[0].value) for box in step.figures.children]
    assert len(pngs) == len(FIGURE_TITLES) == 3  # the story: sources, readings, repeatability
    assert "sk-gauge-figure-sources" in step.figures.children[0].children[0]._dom_classes
    assert all(p.startswith(b"\x89PNG\r\n\x1a\n") and len(p) > 5000 for p in pngs)


def test_the_figures_come_from_the_stored_readings(study_path):
    stored = StudyFile(study_path).results("gauge_rr", NAME)[-1]
    res = gauge_result_from_payload(stored.payload)
    # the recomputed study equals the stored one (same readings, same options)
    assert res.pct_grr == pytest.approx(
        stored.payload["verdict"]["pct_grr_study_variation"], rel=1e-12
    )
    assert res.ndc == stored.payload["ndc"]


def test_a_characteristic_without_a_gauge_study_says_so(wb):
    step = wb.step("measuring")
    wb.context.extra["studykit.workspace"].picker.value = "bore_diameter"
    assert "No gauge study is attached for bore_diameter" in step.verdict.value
    assert "not checked" in step.verdict.value
    assert step.details.layout.display == "none"


def test_a_new_study_is_previewed_then_attached_with_who_and_reason(wb, study_path):
    step = wb.step("measuring")
    ws = wb.context.extra["studykit.workspace"]
    spec = StudyFile(study_path).load().characteristic(NAME)
    before = len(StudyFile(study_path).results("gauge_rr", NAME))
    upload(step, GAUGE_CSV.read_bytes(), name="gauge_flange_thickness.csv")
    assert (
        step.col_part.value,
        step.col_appraiser.value,
        step.col_trial.value,
        step.col_value.value,
    ) == ("part", "appraiser", "trial", "value")
    assert (float(step.lsl.value), float(step.usl.value)) == (spec.lsl, spec.usl)
    step.compute.click()
    assert last(wb)[0] == "info", last(wb)
    assert "Preview (not stored yet)" in step.preview.value
    assert len(StudyFile(study_path).results("gauge_rr", NAME)) == before  # nothing stored yet
    assert step.attach.disabled  # no name, no reason
    ws.who.value = "Q. Engineer"
    assert step.attach.disabled
    step.reason.value = "gauge GR-07 after recalibration"
    assert not step.attach.disabled
    step.attach.click()
    assert last(wb)[0] == "ok", last(wb)
    results = StudyFile(study_path).results("gauge_rr", NAME)
    assert len(results) == before + 1
    new = results[-1]
    assert new.who == "Q. Engineer"
    assert new.payload["reason"] == "gauge GR-07 after recalibration"
    assert new.payload["source_file"] == "gauge_flange_thickness.csv"
    pct_sv, pct_tol = reference_pooled_grr(GAUGE_CSV, spec.lsl, spec.usl)
    assert new.payload["interaction_pooled"] is True
    assert new.payload["verdict"]["pct_grr_study_variation"] == pytest.approx(pct_sv, rel=1e-9)
    assert new.payload["verdict"]["pct_grr_tolerance"] == pytest.approx(pct_tol, rel=1e-9)
    # the page shows the new study, and the capability findings use it
    assert "Q. Engineer" in step.verdict.value and "1 earlier gauge study" in step.verdict.value
    codes = [f.code for f in ws.session.result(NAME).findings]
    assert any(c.startswith("gauge_") and c != "gauge_not_checked" for c in codes), codes


def test_an_unreadable_value_is_a_message_with_the_row(wb, study_path):
    step = wb.step("measuring")
    data = GAUGE_CSV.read_text().splitlines()
    data[3] = data[3].rsplit(",", 1)[0] + ",abc"
    upload(step, ("\n".join(data) + "\n").encode(), name="bad.csv")
    step.compute.click()
    kind, text, _ = last(wb)
    assert kind == "error"
    assert "bad.csv" in text and "row 4" in text and "'abc' is not a number" in text
    assert "Traceback" not in text and "studykit-gauge" not in text  # no server path
    assert step.attach_box.layout.display == "none"


def test_wrong_files_and_sizes_are_refused_in_the_page(wb):
    step = wb.step("measuring")
    upload(step, b"%PDF-1.7 ...", name="study.pdf")
    kind, text = last(wb)[:2]
    assert kind == "error" and "'.pdf' files cannot be read here" in text
    upload(step, b"part,value\n1,2\n", name="two.csv")
    assert "needs one row per reading" in last(wb)[1]
    wb.context.max_upload_bytes = 100
    upload(step, GAUGE_CSV.read_bytes())
    assert "above the upload limit" in last(wb)[1]
    assert step.columns_box.layout.display == "none"


def test_a_one_sided_tolerance_is_refused(wb):
    step = wb.step("measuring")
    upload(step, GAUGE_CSV.read_bytes())
    step.usl.value = ""
    step.compute.click()
    assert "give both tolerance limits" in last(wb)[1]


def test_an_approved_study_refuses_the_attachment_without_a_reason_to_change(wb, study_path):
    step = wb.step("measuring")
    ws = wb.context.extra["studykit.workspace"]
    for name in ws.session.open_verdicts():  # the lock is under test here, not the gate
        ws.session.waive(name, reason="lock under test", who="Q. Lead")
    ws.session.sign(who="M. Approver", role="approved", decision="approve")
    before = len(StudyFile(study_path).results("gauge_rr", NAME))
    upload(step, GAUGE_CSV.read_bytes())
    step.compute.click()
    ws.who.value = "Q. Engineer"
    step.reason.value = "new gauge"
    step.attach.click()
    kind, text = last(wb)[:2]
    assert kind == "error" and "approved" in text.lower(), text
    assert len(StudyFile(study_path).results("gauge_rr", NAME)) == before


def test_guess_columns_reads_the_headers():
    assert guess_columns(["Sample", "Inspector", "Repeat", "Result"]) == {
        "part": "Sample",
        "appraiser": "Inspector",
        "trial": "Repeat",
        "value": "Result",
    }
    # no trial column: the readings' order in the file is the trial order
    assert guess_columns(["part", "operator", "value"])["trial"] is None


def test_read_gauge_upload_names_the_upload_not_a_server_path():
    with pytest.raises(DataFileError, match=r"file 'g\.csv'.*no column named 'Wert'"):
        read_gauge_upload(
            GAUGE_CSV.read_bytes(), "g.csv", part="part", appraiser="appraiser", value="Wert"
        )
    table = read_gauge_upload(
        GAUGE_CSV.read_bytes(),
        "g.csv",
        part="part",
        appraiser="appraiser",
        value="value",
        trial="trial",
    )
    assert len(table["values"]) == len(GAUGE_CSV.read_text().splitlines()) - 1


def test_without_a_study_file_the_step_says_so():
    wb = build_workbook(None, steps=[GaugeStep()])
    assert "No study file open" in wb._body.children[0].value
