"""The reproducible analysis notebook: a Jupyter notebook that recomputes a study's report.

:func:`analysis_notebook` writes a notebook for the statistician on the customer's side. It
opens the study file and recomputes every reported number with the studykit library, one short
explained cell per step: the data and their digests, the gauge results, phase I with the
recorded decisions, the shape of the distribution, the capability indices and the verdict. Its
last cell compares the recomputed numbers with the evidence embedded in the PDF when the PDF is
beside it (``studykit verify`` does the same check; the notebook shows how, step by step).

The notebook holds code and words only, no outputs and no numbers of its own: run, it computes
them. It is written by ``studykit report STUDY --notebook analysis.ipynb``, by the workbook's
export step and into the hand-off pack.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from studykit import __version__

__all__ = ["NOTEBOOK_FILENAME", "analysis_notebook", "notebook_bytes", "write_notebook"]

#: File name of the notebook in the hand-off pack.
NOTEBOOK_FILENAME = "analysis.ipynb"


def _md(text: str) -> dict:
    return {"cell_type": "markdown", "metadata": {}, "source": text.strip("\n")}


def _code(text: str) -> dict:
    return {
        "cell_type": "code",
        "metadata": {},
        "execution_count": None,
        "outputs": [],
        "source": text.strip("\n"),
    }


def _cells(study_ref: str, pdf_ref: str | None, title: str) -> list[dict]:
    pdf_line = "None" if pdf_ref is None else repr(pdf_ref)
    return [
        _md(f"""
# Reproducing the capability study "{title}"

This notebook recomputes every number of the study's evidence report with the open-source
`studykit` library (written by studykit {__version__}). Each cell does one step and says what it
computes. Run all cells (Kernel > Restart and run all); nothing here is typed in by hand: the
data, specifications, criteria and recorded decisions are read from the study file.

Set `STUDY` to the study file and, to compare with the report, `PDF` to the evidence PDF.
"""),
        _code(f"""
from pathlib import Path
import hashlib
import json

import studykit
from studykit.store import StudyFile

STUDY = Path({study_ref!r})
PDF = {pdf_line}
print("studykit", studykit.__version__)
"""),
        _md("""
## 1. The data and their digests

The study file keeps an exact copy of each data file with its SHA-256. The audit chain of the
study file is checked first (a file changed outside studykit is refused), then each file's
digest is recomputed from its bytes.
"""),
        _code("""
study_file = StudyFile(STUDY)
chain = study_file.require_intact()
study = study_file.load()
print(study.title, "|", study.part, "|", study.supplier)
print("audit chain:", chain.entries, "entries, head", chain.head[:16])
print("content digest:", study.content_digest())
for name, blob in study.files:
    print(f"{name}: {len(blob)} bytes, sha256 {hashlib.sha256(blob).hexdigest()}")
"""),
        _md("""
## 2. The gauge

A crossed gauge R&R stored beside a characteristic keeps its readings (part x appraiser x
trial). Each is recomputed here from those readings with the library's `gauge_rr` (two-way
random-effects ANOVA, the stored settings: interaction pooling level, study variation,
specification limits, confidence) and every stored number is compared with the recomputed one
at the tolerance `verify` uses; a difference stops the notebook. Short gauge studies of one
reference part are recomputed from their readings too. The stored gauge R&R also feeds the
analysis (its finding, and the indices with the gauge variance removed).
"""),
        _code("""
from studykit.analysis import gauge_results
from studykit.report.gauge_error import recheck_short_study, stored_short_studies
from studykit.report.verify import compare_numbers
from studykit.stats.gauge import gauge_rr

gauges = {name: g for name, g in gauge_results(study_file).items()
          if name in study.characteristics}
for name, g in sorted(gauges.items()):
    print(f"{name}: {(g.get('verdict') or {}).get('message')}")
    if "values" not in g:
        print("   stored without its readings: read as stored, not recomputed")
        continue
    readings, parts, appraisers, trials = [], [], [], []
    for part, row in zip(g["part_labels"], g["values"]):
        for appraiser, cell in zip(g["appraiser_labels"], row):
            for trial, value in enumerate(cell, start=1):
                if value is not None:  # a missing reading is stored as null
                    readings.append(value)
                    parts.append(part)
                    appraisers.append(appraiser)
                    trials.append(trial)
    fresh = gauge_rr(readings, parts, appraisers, trials=trials,
                     alpha_interaction=g["alpha_interaction"],
                     study_variation=g["study_variation"], lsl=g["lsl"], usl=g["usl"],
                     confidence=g["confidence"]).to_dict()
    stored = {key: value for key, value in g.items() if key in fresh}
    n, diffs = compare_numbers(stored, fresh, path=name)
    if diffs or set(fresh) - set(stored):
        raise AssertionError(f"gauge R&R of {name} differs from the stored result: "
                             f"{diffs[:5] or sorted(set(fresh) - set(stored))}")
    grr = next(c for c in fresh["components"] if c["name"] == "gauge_rr")
    print(f"   recomputed from its {len(readings)} readings: %GRR "
          f"{grr['pct_study_variation']:.2f}, ndc {fresh['ndc']}; "
          f"all {n} stored numbers agree")
short_gauges = stored_short_studies(STUDY, study)
for name, payload in short_gauges.items():
    fresh = recheck_short_study(payload)
    print(f"{name}: short study Cg {fresh['cg']:.3f}, Cgk {fresh['cgk']:.3f}, "
          f"bias {fresh['bias']:.6g}")
"""),
        _md("""
## 3. Phase I: stability, with the recorded decisions

Only the removals recorded in the study (each with who, when and why) are applied; nothing is
removed silently. Below are the recorded decisions, then the analysis of every characteristic
exactly as the report makes it (`analyze_for_report`), and each final chart's limits.
"""),
        _code("""
from studykit.report.pdf import analyze_for_report

for d in study.decisions:
    print(f"{d.characteristic}: {d.action} {d.subgroup or ''} by {d.who}: {d.reason}")
results, errors, measurements = analyze_for_report(study, gauges)
for name, res in results.items():
    chart = res.chart
    removed = ", ".join(res.removed_subgroups) or "none"
    loc = res.to_dict()["chart"]["location"] or {}
    print(f"{name}: {chart.kind} chart, {res.n} values in {res.subgroups} subgroups, "
          f"removed subgroups: {removed}, open signals: {len(res.open_signals)}; "
          f"limits LCL {loc.get('lcl')}, centre {loc.get('center')}, UCL {loc.get('ucl')}")
for name, message in errors.items():
    print(f"{name}: not analysed: {message}")
"""),
        _md("""
## 4. Shape of the distribution

The Anderson-Darling and Shapiro-Wilk tests of normality, and the model the capability uses
(normal unless rejected or chosen with a recorded reason).
"""),
        _code("""
for name, res in results.items():
    if res.normality is None:
        continue
    ad, sw = res.normality["anderson_darling"], res.normality["shapiro_wilk"]
    model = None if res.model is None else res.model.name
    print(f"{name}: Anderson-Darling A2* {ad.a2_star:.4f} (p {ad.p_value:.4g}), "
          f"Shapiro-Wilk W {sw.w:.4f} (p {sw.p_value:.4g}); model {model}")
"""),
        _md("""
## 5. Capability

The indices with their confidence bounds, and the tolerance interval where the study's
criterion asks for one ("at least P % of parts within specification with C % confidence",
ISO 16269-6).
"""),
        _code("""
for name, res in results.items():
    if res.capability is None:
        continue
    cap = res.capability.to_dict()
    shown = {k: cap.get(k) for k in ("cp", "cpk", "pp", "ppk", "cpm") if cap.get(k) is not None}
    print(name, {k: round(v, 4) for k, v in shown.items()})
    if res.tolerance_interval:
        print("   tolerance interval:", res.tolerance_interval["statement"])
"""),
        _md("""
## 6. Verdict

Each characteristic's verdict against its acceptance criterion, as the report prints it.
"""),
        _code("""
from studykit.analysis import SAFETY_SENTENCE

for name, res in results.items():
    meets = None if res.verdict is None else res.verdict.meets
    print(f"{name} [{study.criteria_for(name).describe()}]: meets = {meets}")
    if res.verdict is not None:
        print("   ", res.verdict.text)
    if res.cautions:
        print("   ", SAFETY_SENTENCE)
"""),
        _md("""
## 7. Positional tolerances

Position studies kept beside the study (X and Y deviations against a true-position zone of
diameter T) are recomputed from their stored deviations: the bivariate normal model, the expected
PPM outside the zone and its equivalent index, and the one-dimensional shortcut beside them.
"""),
        _code("""
from studykit.positions import position_result, stored_positions

def three(v):
    return "-" if v is None else f"{v:.3f}"


positions = {}
for name, payload in stored_positions(STUDY).items():
    pos = position_result(payload)
    positions[name] = pos.to_dict()
    print(f"{name}: {pos.n} parts, zone {pos.tolerance:g}; expected {pos.ppm_expected:.4g} PPM "
          f"outside (index {three(pos.index)}); shortcut {pos.shortcut_ppm:.4g} PPM "
          f"(index {three(pos.shortcut_index)}); observed outside {pos.observed_outside}")
"""),
        _md("""
## 8. The same numbers as the report

Every number above, as JSON (the same fields as `studykit analyze --json`). With `PDF` set, the
numbers are compared with the evidence embedded in the report, at the relative tolerance
`verify` uses; a difference stops the notebook with the list of differing fields.
"""),
        _code("""
from studykit.report.verify import compare_numbers

recomputed = {name: res.to_dict() for name, res in results.items()}
if PDF is not None:
    from studykit.report.pdf import read_evidence

    evidence = read_evidence(PDF)
    n, diffs = compare_numbers(evidence["results"], json.loads(json.dumps(recomputed)))
    for name, payload in (evidence.get("positions") or {}).items():
        m, more = compare_numbers(payload["result"], positions.get(name), path=name)
        n, diffs = n + m, diffs + more
    if diffs:
        raise AssertionError(f"{len(diffs)} number(s) differ from the report: {diffs[:5]}")
    print(f"all {n} numbers of the report agree")
print(json.dumps({name: {"verdict": d["verdict"], "capability": d["capability"]}
                  for name, d in recomputed.items()}, indent=1)[:2000])
"""),
    ]


def _relative(target: Path, start: Path) -> str:
    """``target`` relative to folder ``start`` when possible (portable), else absolute."""
    try:
        return os.path.relpath(target.resolve(), start.resolve())
    except ValueError:  # another drive (Windows)
        return str(target.resolve())


def analysis_notebook(
    study_path,
    *,
    notebook_dir=None,
    pdf_path=None,
    study_ref: str | None = None,
    pdf_ref: str | None = None,
) -> dict:
    """The notebook (nbformat 4, as a dict) that recomputes the report of ``study_path``.

    Parameters
    ----------
    study_path : path
        The study file.
    notebook_dir : path, optional
        Folder the notebook is written to; the study (and PDF) are referred to relative to it.
    pdf_path : path, optional
        The evidence PDF to compare with in the last cell.
    study_ref, pdf_ref : str, optional
        Write these references instead (e.g. the file names inside the hand-off pack).

    Examples
    --------
    >>> nb = analysis_notebook("demo_data/pump_housing_pilot.study", study_ref="s.study")
    >>> nb["nbformat"], sum(c["cell_type"] == "code" for c in nb["cells"])
    (4, 9)
    """
    from studykit.store import StudyFile

    study_path = Path(study_path)
    title = StudyFile(study_path).load().title
    where = Path(notebook_dir) if notebook_dir is not None else Path.cwd()
    if study_ref is None:
        study_ref = _relative(study_path, where)
    if pdf_ref is None and pdf_path is not None:
        pdf_ref = _relative(Path(pdf_path), where)
    return {
        "nbformat": 4,
        "nbformat_minor": 5,
        "metadata": {
            "kernelspec": {"display_name": "Python 3", "language": "python", "name": "python3"},
            "language_info": {"name": "python"},
            "studykit": {"version": __version__},
        },
        "cells": [
            dict(c, id=f"step-{i:02d}") for i, c in enumerate(_cells(study_ref, pdf_ref, title))
        ],
    }


def notebook_bytes(notebook: dict) -> bytes:
    """The notebook as the bytes of an ``.ipynb`` file (stable key order)."""
    return (json.dumps(notebook, indent=1, sort_keys=True, ensure_ascii=False) + "\n").encode(
        "utf-8"
    )


def write_notebook(study_path, out_path, *, pdf_path=None) -> Path:
    """Write the analysis notebook of ``study_path`` to ``out_path`` (refers to the study and
    the PDF relative to the notebook's folder)."""
    from studykit.errors import StudyInputError

    out = Path(out_path)
    if out.suffix.lower() != ".ipynb":
        raise StudyInputError(f"--notebook '{out}': the file name must end in .ipynb")
    nb = analysis_notebook(study_path, notebook_dir=out.parent, pdf_path=pdf_path)
    try:
        out.write_bytes(notebook_bytes(nb))
    except OSError as exc:
        raise StudyInputError(f"cannot write the notebook '{out}': {exc.strerror or exc}") from None
    return out
