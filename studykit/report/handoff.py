"""The hand-off pack: everything the series-production team needs, in one zip.

:func:`build_handoff` writes one zip holding the evidence PDF, the study file, the raw data,
the frozen phase-II limits of every characteristic (JSON and CSV from
:func:`studykit.stats.phase2.freeze`) and, for every variables characteristic, a printable
control-chart form (PDF, landscape) with the frozen limits drawn and empty space for plotting by
hand. Entries carry a fixed time stamp, so the same study gives the same zip.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import re
import zipfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from studykit.errors import StudyFileError, StudyInputError

__all__ = ["HandoffInfo", "build_handoff", "chart_form_pdf"]

_FIXED_TIME = (2000, 1, 1, 0, 0, 0)


@dataclass(frozen=True)
class HandoffInfo:
    """What :func:`build_handoff` wrote.

    Attributes
    ----------
    path : str
        The zip.
    entries : tuple of str
        Names inside the zip, in order.
    plans : dict
        characteristic -> Phase2Plan.to_dict() for every characteristic frozen.
    skipped : dict
        characteristic -> why no limits were frozen.
    """

    path: str
    entries: tuple
    plans: dict
    skipped: dict

    def to_dict(self) -> dict:
        return {"path": self.path, "entries": list(self.entries), "plans": dict(self.plans),
                "skipped": dict(self.skipped)}


def _safe_name(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("_") or "characteristic"


def chart_form_pdf(plan, *, study_title: str = "", part: str = "") -> bytes:
    """A one-page landscape A4 control-chart form for the shop floor (PDF bytes).

    The frozen limits are drawn; a table under the chart has rows for date, time, operator,
    the values of each subgroup and remarks, one column per subgroup.

    Examples
    --------
    >>> from studykit.stats.charts import control_chart
    >>> from studykit.stats.phase2 import freeze
    >>> chart = control_chart([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])
    >>> pdf = chart_form_pdf(freeze(chart, characteristic="bore depth", unit="mm"))
    >>> pdf[:5]
    b'%PDF-'
    """
    from reportlab.lib.pagesizes import A4, landscape
    from reportlab.lib.units import mm
    from reportlab.platypus import Paragraph, SimpleDocTemplate, Spacer

    from studykit.report import figures
    from studykit.report.pdf import _esc, _image, _styles, _table

    st = _styles()
    size = landscape(A4)
    margin = 10 * mm
    width = size[0] - 2 * margin
    n_cols = 25
    story = [
        Paragraph(f"Control chart form - {_esc(plan.characteristic)}"
                  + (f" [{_esc(plan.unit)}]" if plan.unit else ""), st["h1"]),
        Paragraph(f"{_esc(study_title)}{' - ' + _esc(part) if part else ''}. Chart "
                  f"{_esc(plan.kind.replace('_', '-'))}, subgroup size "
                  f"{plan.subgroup_size or 'as in phase I'}; frozen centre {plan.center:.6g}"
                  + (f", within sigma {plan.within_sigma:.4g}" if plan.within_sigma else "")
                  + f". Rules: {_esc(plan.rules)}. Limits frozen from "
                  f"{plan.phase1_subgroups} subgroups (source {plan.source_digest[:12]}...).",
                  st["small"]),
        Spacer(1, 3),
    ]
    fig = figures.blank_form_figure(plan, n_columns=n_cols, width=11.0, height=4.3)
    story.append(_image(figures.figure_png(fig, dpi=150), width))
    rows = [["Subgroup"] + [str(i) for i in range(1, n_cols + 1)]]
    n_values = plan.subgroup_size if plan.subgroup_size and plan.subgroup_size <= 5 else 1
    labels = ["Date", "Time", "Operator"] + [f"Value {i}" for i in range(1, n_values + 1)] \
        + ["Remark"]
    for lab in labels:
        rows.append([lab] + [""] * n_cols)
    first = 22 * mm
    t = _table(rows, [first] + [(width - first) / n_cols] * n_cols, styles=st, zebra=False)
    from reportlab.lib import colors

    t.setStyle([("GRID", (0, 0), (-1, -1), 0.3, colors.HexColor("#D0D7DE")),
                ("FONTSIZE", (0, 0), (-1, -1), 6.5)])
    story.append(t)
    buf = io.BytesIO()
    doc = SimpleDocTemplate(buf, pagesize=size, leftMargin=margin, rightMargin=margin,
                            topMargin=margin, bottomMargin=margin, invariant=1,
                            title=f"Control chart form - {plan.characteristic}",
                            creator="studykit")
    doc.build(story)
    return buf.getvalue()


def build_handoff(study_path, out_zip, *, report_pdf=None,
                  progress: Callable[[int, int, str], None] | None = None) -> HandoffInfo:
    """Write the hand-off zip of a study file.

    Parameters
    ----------
    study_path : str or PathLike
        The study file (it goes into the zip as it is).
    out_zip : str or PathLike
        The zip to write.
    report_pdf : str or PathLike, optional
        An evidence PDF already made (signed or not); without it one is built.
    progress : callable, optional
        ``progress(done, total, name)``.

    Returns
    -------
    HandoffInfo
    """
    from studykit.report.pdf import analyze_for_report, build_report
    from studykit.stats.phase2 import freeze
    spath = Path(study_path)
    if not spath.exists():
        raise StudyFileError(f"study file '{spath}' does not exist: check the path")
    from studykit.report.pdf import _load

    study, gauges, _ = _load(spath)
    out = Path(out_zip)
    if report_pdf is None:
        pdf_path = out.with_name(out.stem + ".report.pdf.part")
        try:
            build_report(spath, pdf_path, progress=progress)
            pdf = pdf_path.read_bytes()
        finally:
            if pdf_path.exists():
                pdf_path.unlink()
    else:
        pdf = Path(report_pdf).read_bytes()
    results, errors, _ = analyze_for_report(study, gauges)
    entries: list[tuple[str, bytes]] = [
        ("report.pdf", pdf),
        (f"study/{spath.name}", spath.read_bytes()),
        (f"data/{study.data_filename}", study.data),
    ]
    plans, skipped = {}, dict(errors)
    for name, res in results.items():
        try:
            plan = freeze(res.phase1, characteristic=name, unit=res.unit or "")
        except StudyInputError as exc:
            skipped[name] = str(exc)
            continue
        plans[name] = plan.to_dict()
        stem = _safe_name(name)
        entries.append((f"limits/{stem}.json", plan.to_json().encode("utf-8")))
        entries.append((f"limits/{stem}.csv", plan.to_csv().encode("utf-8")))
        if not res.attribute:
            entries.append((f"forms/{stem}_chart_form.pdf",
                            chart_form_pdf(plan, study_title=study.title, part=study.part)))
    manifest = {
        "format": "studykit-handoff/1",
        "study": study.title,
        "content_digest": study.content_digest(),
        "data_sha256": study.data_sha256,
        "files": {n: hashlib.sha256(b).hexdigest() for n, b in entries},
        "skipped": skipped,
    }
    entries.append(("MANIFEST.json", json.dumps(manifest, indent=2, sort_keys=True)
                    .encode("utf-8")))
    tmp = out.with_name(out.name + ".part")
    with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for name, blob in entries:
            info = zipfile.ZipInfo(name, date_time=_FIXED_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            zf.writestr(info, blob)
    os.replace(tmp, out)
    return HandoffInfo(str(out), tuple(n for n, _ in entries), plans, skipped)
