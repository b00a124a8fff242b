"""One vocabulary on every surface: the demo study rendered to screen text (the workbook steps'
HTML, built without a browser as test_app_panels does), PDF text (pypdf) and terminal text
(``analyze --study``, ``study show``, ``verify``) carries no raw identifier and no second name
for one thing; and the helpers of :mod:`studykit.names` (chart-kind spellings, number
formatting for the tolerance, p-values, verdict states, the confidence parameter).

The rules are ours (names review of the workbook, PDF and terminal; no external source): the
raw identifiers are built from the id tables of ``studykit.names`` (``names.raw_ids()``).
"""

from __future__ import annotations

import html
import re
import shutil
from pathlib import Path

import ipywidgets as widgets
import pytest
from pypdf import PdfReader

from studykit import names
from studykit.app.session import demo_study_path
from studykit.app.shell import build_workbook
from studykit.cli import main
from studykit.report.pdf import build_report

DEMO = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.study"

#: Second names for one thing that earlier versions showed (the state's one name is in
#: names.VERDICT_STATES; the gauge total is names.GAUGE_TOTAL; a sign-off is Valid or Voided).
SECOND_NAMES = (
    "Meets criteria",
    "Does not meet criteria",
    "Not judged",
    "NOT JUDGED",
    "Not yet assessed",
    "not yet assessed",
    "Rate reported",
    "Holds",
    "Valid now?",
    "cannot analyse",
    "Not demonstrated",
    "excluded subgroup",
    "exclude subgroup",
    "%GRR of",
    "Gauge RR",
    "Model uncertainty",
    "3-parameter",
    "2-parameter",
)


def _raw_hits(text: str) -> list[str]:
    """Raw ids in ``text`` (case-sensitive, as whole words), with some context."""
    hits = []
    for rid in (*names.raw_ids(), "xbar-r", "xbar-s"):
        pat = r"(?<![A-Za-z0-9_\-])" + re.escape(rid) + r"(?![A-Za-z0-9_\-])"
        for m in re.finditer(pat, text):
            hits.append(f"{rid!r}: ...{text[max(0, m.start() - 60) : m.end() + 30]}...")
    return hits


def _second_names(text: str) -> list[str]:
    return [n for n in SECOND_NAMES if n in text]


#: British spelling in user text (the command ``studykit analyze`` keeps its name).
_AMERICAN = re.compile(
    r"(?<!studykit )\b(analyz(?:e|ed|es|ing)|center(?:ed|s)?|colors?|"
    r"behaviors?|favou?rable|minimiz\w*|maximiz\w*|summariz\w*|"
    r"recogniz\w*)\b"
)


def _american(text: str) -> list[str]:
    return sorted({m.group(0) for m in _AMERICAN.finditer(text)} - {"favourable"})


def _check(text: str, surface: str) -> None:
    hits = _raw_hits(text)
    assert not hits, f"raw ids on the {surface}:\n" + "\n".join(hits[:20])
    twice = _second_names(text)
    assert not twice, f"second names on the {surface}: {twice}"
    us = _american(text)
    assert not us, f"American spelling on the {surface}: {us}"


def _widget_texts(w, out: list) -> list:
    if isinstance(w, widgets.HTML | widgets.HTMLMath | widgets.Label):
        out.append(str(w.value))
    for attr in ("description", "tooltip", "placeholder"):
        v = getattr(w, attr, None)
        if isinstance(v, str) and v:
            out.append(v)
    out.extend(str(o) for o in getattr(w, "_options_labels", ()) or ())
    if isinstance(w, widgets.Combobox):  # the role boxes: their suggestions are text too
        out.extend(str(o) for o in w.options)
        out.append(str(w.value))
    for child in getattr(w, "children", ()) or ():
        _widget_texts(child, out)
    return out


def _plain(markup: str) -> str:
    markup = re.sub(r"<(style|script)\b.*?</\1>", " ", markup, flags=re.S)
    markup = re.sub(r"<[^>]+>", " ", markup)
    return html.unescape(markup)


@pytest.fixture(scope="module")
def study_copy(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("names") / "pilot.study"
    shutil.copy(demo_study_path(), path)
    return path


@pytest.fixture(scope="module")
def screen(study_copy) -> dict:
    """Plain text of every workbook step for every characteristic of the demo study."""
    wb = build_workbook(study_copy)
    for step in wb.steps:
        wb.select(step.key)
    ws = wb.context.extra["studykit.workspace"]
    out = {}
    for name in ws.session.names:
        ws.picker.value = name
        for step in wb.steps:
            wb.select(step.key)
            out[(name, step.key)] = _plain("\n".join(_widget_texts(wb, [])))
    return out


def test_screen_text_has_no_raw_id_and_one_name_each(screen):
    assert len(screen) >= 5 * 6, sorted(screen)
    _check("\n".join(screen.values()), "workbook")


def test_screen_capability_step_shows_findings_table_and_states(screen):
    cap = {name: text for (name, key), text in screen.items() if key == "capability"}
    # every finding of the JSON, by its title, in the capability step (gauge not checked too)
    assert "Gauge not checked" in cap["bore_diameter"], cap["bore_diameter"][:2000]
    assert "Gauge checked" in cap["flange_thickness"]
    assert "Run-rule signals" in cap["face_runout"]
    # the table of indices with estimates and bounds (the numbers that go to the customer)
    text = cap["flange_thickness"]
    assert "Capability indices" in text and "Lower 95% bound (one-sided)" in text
    assert re.search(r"Ppk\s+\(judged\)\s+2\.28\s+2\.05", text), text[:3000]
    # one name per state: estimate passes, bound fails
    assert names.VERDICT_STATES["not_demonstrated"] in cap["pull_off_force"]
    assert names.VERDICT_STATES["meets"] in cap["flange_thickness"]


def test_workbook_json_export_carries_every_finding(study_copy):
    import json

    from studykit.app.session import StudySession

    data = json.loads(StudySession(study_copy).results_json())
    codes = {
        n: [f["code"] for f in c.get("findings", [])] for n, c in data["characteristics"].items()
    }
    assert "gauge_not_checked" in codes["bore_diameter"]
    assert "gauge_checked" in codes["flange_thickness"]


@pytest.fixture(scope="module")
def pdf_path(study_copy, tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("pdf") / "demo.pdf"
    build_report(study_copy, out)
    return out


def test_pdf_text_has_no_raw_id_and_one_name_each(pdf_path):
    pdf_text = "\n".join(p.extract_text() or "" for p in PdfReader(str(pdf_path)).pages)
    assert "Verdicts at a glance" in pdf_text
    _check(pdf_text, "PDF report")
    assert names.VERDICT_STATES["not_demonstrated"] in pdf_text
    assert "X-bar-R" in pdf_text and "I-MR" in pdf_text
    # the signature boxes name the roles as the workbook does (names.ROLES), not by their ids
    assert all(f"Digital signature - {r}" in pdf_text for r in names.ROLES.values())
    assert not re.search(r"Digital signature - (prepared|reviewed|approved)", pdf_text)


def test_terminal_text_has_no_raw_id_and_one_name_each(study_copy, pdf_path, capsys):
    for name in (
        "bore_diameter",
        "face_runout",
        "flange_thickness",
        "pull_off_force",
        "leak_test_defectives",
    ):
        assert main(["analyze", "--study", str(study_copy), "-c", name]) == 0
    assert main(["study", "show", str(study_copy)]) == 0
    assert main(["verify", str(pdf_path), "--study", str(study_copy), "--allow-unsigned"]) == 0
    out = capsys.readouterr().out
    assert "verdict: MEETS" in out and "verdict: MORE DATA NEEDED" in out
    assert "Gauge not checked:" in out
    # no 6-digit indices in sentences (the planning line said "if the true Ppk is 1.89439")
    assert not re.search(r"\b(Cp|Cpk|Pp|Ppk) (is|of) \d+\.\d{3,}", out), out
    assert not _P_ZERO.findall(out), _P_ZERO.findall(out)  # p-values never "0.000"
    _check(out, "terminal")


# ----------------------------------------------------------------------------- the helpers


@pytest.mark.parametrize("spelling", ["xbar_r", "xbar-r", "X-bar-R", "XBAR_R", "xbarr"])
def test_chart_kind_spellings_are_one_kind(spelling):
    assert names.chart_kind_id(spelling) == "xbar_r"
    assert names.chart_kind_label(names.chart_kind_id(spelling)) == "X-bar-R"


def test_chart_kind_unknown_names_the_accepted_spellings():
    with pytest.raises(ValueError, match="xbar-r"):
        names.chart_kind_id("xbar")


@pytest.mark.parametrize("spelling", ["xbar_r", "X-bar-R"])
def test_cli_accepts_every_chart_spelling(spelling, capsys):
    data = str(DEMO.parent / "pump_housing_pilot.csv")
    assert main(["analyze", data, "-c", "bore_diameter", "--chart", spelling]) == 0
    assert "chart: X-bar-R" in capsys.readouterr().out


def test_value_digits_resolve_a_hundredth_of_the_tolerance():
    # tolerance 0.02: 1/100 is 0.0002, so 4 decimals; 20.0055 and 20.0052 stay apart
    assert names.format_value(20.0055, 19.99, 20.01) != names.format_value(20.0052, 19.99, 20.01)
    assert names.value_digits(19.99, 20.01) == 4
    assert names.value_digits(7.9, 8.1) == 3  # tolerance 0.2 -> 0.002
    assert names.value_digits(0, 100) == 0
    assert names.value_digits(None, 0.05) == 4  # one-sided: the default
    for lsl, usl in ((19.99, 20.01), (7.9, 8.1), (11.97, 12.03), (0.0, 3.0)):
        step = 10.0 ** -names.value_digits(lsl, usl)
        assert step <= (usl - lsl) / 100 + 1e-15


def test_p_values_never_print_as_zero():
    assert names.format_p(0.0) == "< 0.001"
    assert names.format_p(4.9e-4) == "< 0.001"
    assert names.format_p(0.0005) == "0.001"
    assert names.format_p(0.316) == "0.316"


def test_indices_in_sentences_have_two_decimals():
    assert names.format_index(2.284262470720637) == "2.28"
    assert names.format_index(None) == "-"


def test_verdict_states_are_distinct():
    est_only = {
        "verdict": {"meets": False, "basis": "lower_bound", "estimate": 1.9, "threshold": 1.67},
        "chart": {"kind": "imr"},
        "findings": [],
    }
    fails = {
        "verdict": {"meets": False, "basis": "lower_bound", "estimate": 1.2, "threshold": 1.67},
        "chart": {"kind": "imr"},
        "findings": [],
    }
    unstable = {
        "verdict": {"meets": None},
        "chart": {"kind": "xbar_r"},
        "findings": [{"code": "not_in_control"}],
    }
    no_spec = {"verdict": None, "chart": {"kind": "xbar_r"}, "findings": []}
    rate = {"verdict": None, "chart": {"kind": "u"}, "findings": []}
    states = [names.verdict_state(r) for r in (est_only, fails, unstable, no_spec, rate, None)]
    assert states == [
        "not_demonstrated",
        "does_not_meet",
        "no_verdict_not_in_control",
        "no_verdict_no_spec",
        "rate_only",
        "not_analysed",
    ]
    labels = [names.verdict_label(s) for s in states]
    assert len(set(labels)) == len(labels)
    assert len(set(names.VERDICT_STATES.values())) == len(names.VERDICT_STATES)


def test_confidence_has_one_name_and_none_means_not_given():
    assert names.confidence_of(None) == names.DEFAULT_CONFIDENCE
    assert names.confidence_of(0.95, default=0.9) == 0.95  # an explicit 0.95 is kept
    assert names.confidence_of(level=0.9) == 0.9
    assert names.confidence_of(alpha=0.01) == pytest.approx(0.99)
    with pytest.raises(ValueError, match="once"):
        names.confidence_of(0.9, level=0.95)


def test_default_criterion_is_defined_once():
    from studykit.analysis import _criteria_dict
    from studykit.stats.capability import DEFAULT_CRITERIA, INDEX_NAMES
    from studykit.study import Criteria

    c = Criteria()
    assert (c.index, c.threshold, c.basis, c.confidence) == tuple(
        names.DEFAULT_CRITERION[k] for k in ("index", "threshold", "basis", "confidence")
    )
    assert _criteria_dict(None) == dict(names.DEFAULT_CRITERION)
    assert DEFAULT_CRITERIA["pre_launch"]["threshold"] == 1.67
    assert INDEX_NAMES == names.INDEX_IDS


def _find(w, cls: str) -> list:
    found = [w] if cls in getattr(w, "_dom_classes", ()) else []
    for child in getattr(w, "children", ()) or ():
        found.extend(_find(child, cls))
    return found


def test_role_boxes_offer_role_names_not_ids(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(DEMO, path)
    wb = build_workbook(path)
    boxes = []
    for step, cls in (("signoff", "sk-sign-role"), ("export", "sk-pdf-role")):
        wb.select(step)
        boxes += _find(wb, cls)
    assert len(boxes) == 2, boxes
    for box in boxes:
        assert tuple(box.options) == ("Author", "Reviewer", "Approver"), box.options
        assert box.value in names.ROLES.values()
    # a name or an id typed by a person is recorded as the id; other roles as typed
    assert [names.role_id(t) for t in ("Approver", "approved", " reviewer ", "QA lead")] == [
        "approved",
        "approved",
        "reviewed",
        "QA lead",
    ]


def test_family_labels_in_the_ranking_are_those_of_names():
    """The ranking's ``label`` (JSON and shape step) is the name of names.MODEL_LABELS, never
    "Weibull, 3-parameter" (issue 15 item 3: each family once, the threshold as an option)."""
    import importlib
    import pkgutil

    import studykit.stats.families as fam

    seen = {}
    for info in pkgutil.iter_modules(fam.__path__):
        mod = importlib.import_module(f"studykit.stats.families.{info.name}")
        for obj in vars(mod).values():
            if isinstance(obj, type) and getattr(obj, "id", "") and getattr(obj, "label", ""):
                seen[obj.id] = obj.label
    assert {"weibull3", "exponential2", "lognormal3", "gamma3", "loglogistic3"} <= set(seen)
    wrong = {k: v for k, v in seen.items() if names.MODEL_LABELS.get(k) != v}
    assert not wrong, wrong


def test_upload_buttons_carry_no_counter():
    """ipywidgets writes "label (n)" into an upload button; the served page's script moves the
    count into ``data-files`` (checked in a browser by tests/browser/test_offline_screens.py)."""
    from studykit.app.server_guard import upload_guard_script
    from studykit.app.widgets import CSS, upload_button

    w = upload_button("Choose file")
    assert w.description == "Choose file" and "sk-no-count" in w._dom_classes
    script = upload_guard_script(50 * 2**20, 100 * 2**20)
    assert "data-files" in script and ".widget-upload.sk-no-count" in script
    assert "attr(title)" not in CSS  # no label drawn by CSS over a hidden text


def test_every_model_family_has_its_name_here():
    from studykit.stats import fit

    ids = {row_id for row_id in getattr(fit, "FAMILIES", {})} or {
        cls.id for cls in vars(fit).values() if isinstance(cls, type) and getattr(cls, "id", "")
    }
    assert ids, "no family ids found in studykit.stats.fit"
    missing = sorted(i for i in ids if i not in names.MODEL_LABELS)
    assert not missing, missing


# ----------------------------------------------------------------------------- timestamps


def test_pdf_creation_date_is_the_studys_own_time(pdf_path):
    # the demo's latest recorded event is L. Haverkamp's comment at 2026-03-03T10:05:00Z
    info = PdfReader(str(pdf_path)).metadata
    assert info["/CreationDate"].startswith("D:20260303100500"), info["/CreationDate"]


def test_one_clock_per_decision(tmp_path):
    from studykit.store import StudyFile

    path = tmp_path / "s.study"
    shutil.copy(DEMO, path)
    sf = StudyFile(path)
    sf.exclude("bore_diameter", "5", reason="setup part", who="A. Tester")
    study = sf.load()
    decision = study.decisions[-1]
    entry = sf.audit_log()[-1]
    assert entry.what == "remove subgroup 5 of 'bore_diameter'"
    assert entry.when == decision.when  # the removal log and the audit log agree
    # and in the demo study itself
    demo = StudyFile(DEMO)
    by_time = {e.when for e in demo.audit_log()}
    assert all(d.when in by_time for d in demo.load().decisions)


def test_confidence_parameter_spellings_agree():
    from studykit.stats.attribute import attribute_capability, defects_per_unit
    from studykit.stats.planning import parts_needed, planning_table

    assert parts_needed(2.0, 1.67, confidence=0.9).n == parts_needed(2.0, 1.67, level=0.9).n
    assert parts_needed(2.0, 1.67).level == names.DEFAULT_CONFIDENCE
    assert planning_table([2.0], [1.33], confidence=0.99).level == 0.99
    a = attribute_capability([1, 2, 0], [100, 100, 100], confidence=0.9)
    b = attribute_capability([1, 2, 0], [100, 100, 100], level=0.9)
    assert a.to_dict() == b.to_dict() and a.level == 0.9
    assert defects_per_unit([3, 1], [10, 10]).level == names.DEFAULT_CONFIDENCE


# ----------------------------------------------------------------------------- numbers on screen

#: The demo study's two-sided characteristics and the decimals their tolerance asks for
#: (names.value_digits: 1/100 of USL - LSL; 12.03 - 11.97 = 0.06 -> 4, 8.1 - 7.9 = 0.2 -> 3).
TWO_SIDED = {"bore_diameter": 4, "flange_thickness": 3}

_P_ZERO = re.compile(r"\bp\s*(?:=|:)?\s*0\.0+(?![0-9])")


def _decimals(number: str) -> int:
    return len(number.split(".", 1)[1]) if "." in number else 0


def test_demo_value_digits_are_those_of_the_tolerance():
    from studykit.app.session import StudySession

    s = StudySession(DEMO)
    for name, d in TWO_SIDED.items():
        assert names.spec_digits(s.result(name).spec) == d


def test_screen_numbers_have_the_tolerances_digits(screen):
    for name, d in TWO_SIDED.items():
        stab = screen[(name, "stability")]
        m = re.search(r"Within sigma\s+(-?\d+\.\d+)", stab)
        assert m, stab[:1500]
        assert _decimals(m.group(1)) == d + 1, (name, m.group(0))  # a spread: one more
        shape = screen[(name, "shape")]
        m = re.search(r"Mean / overall sigma\s+(-?\d+\.\d+)\s*/\s*(-?\d+\.\d+)", shape)
        assert m, shape[:1500]
        assert _decimals(m.group(1)) == d and _decimals(m.group(2)) == d + 1, m.group(0)
    every = "\n".join(screen.values())
    assert not _P_ZERO.findall(every), _P_ZERO.findall(every)
    # no long indices in the workbook's sentences either (two decimals: names.format_index)
    long_index = re.findall(
        r"\b(?:Cp|Cpk|Pp|Ppk|PPL|PPU|CPL|CPU) (?:is |of |= )?\d+\.\d{3,}", every
    )
    assert not long_index, long_index


@pytest.mark.parametrize("name", sorted(TWO_SIDED))
def test_chart_limits_have_the_tolerances_digits(study_copy, name):
    """The control chart shows its limits (LCL, CL, UCL) with the tolerance's decimals, on a
    line of their own under the chart's name (so a phone shows them uncut)."""
    from studykit.app.charts import ControlChartView
    from studykit.app.session import StudySession

    s = StudySession(study_copy)
    res = s.result(name)
    view = ControlChartView()
    view.update(res, full_chart=s.full_chart(name), details=s.subgroup_details(name))
    d = TWO_SIDED[name]
    text = view.limit_titles["location"].text
    found = re.findall(r"\b(LCL|CL|UCL) (-?\d+\.\d+)", text)
    assert [k for k, _ in found] == ["LCL", "CL", "UCL"], text
    assert all(_decimals(v) == d for _, v in found), text
    assert len(view.figures["location"].title.text) <= 40, view.figures["location"].title.text
    assert "X-bar-R" in view.figures["location"].title.text or "I-MR" in (
        view.figures["location"].title.text
    )
    lower = re.findall(r"\b(?:LCL|CL|UCL) (-?\d+\.\d+)", view.limit_titles["dispersion"].text)
    assert lower and all(_decimals(v) == d + 1 for v in lower), view.limit_titles["dispersion"]
    hover = view.sources["location"]["points"].data["value_text"]
    assert hover and all(_decimals(v) == d for v in hover if v != "—"), hover[:5]


def test_pdf_numbers_have_the_tolerances_digits(pdf_path):
    text = "\n".join(p.extract_text() or "" for p in PdfReader(str(pdf_path)).pages)
    means = re.findall(r"\bMean\s+(-?\d+\.\d+)", text)
    sigmas = re.findall(r"\bWithin sigma\s+(-?\d+\.\d+)", text)
    assert means and sigmas, text[:2000]
    # each two-sided characteristic's mean and sigma (demo: 12.0023..., 7.9996...)
    for mean, d in (("12.0023", 4), ("7.99965", 3)):
        shown = [m for m in means if abs(float(m) - float(mean)) < 0.01]
        assert shown and all(_decimals(m) == d for m in shown), (mean, means)
    assert not _P_ZERO.findall(text), _P_ZERO.findall(text)


def test_format_spread_is_one_decimal_finer():
    assert names.format_spread(0.0044836, 11.97, 12.03) == "0.00448"
    assert names.format_value(12.0023357, 11.97, 12.03) == "12.0023"
    assert names.spec_digits({"lsl": 7.9, "usl": 8.1}) == 3
    assert names.spec_digits(None) == 4
