"""The hand-off pack: everything the series-production team needs, in one zip.

:func:`build_handoff` writes one zip holding the evidence PDF, the study file, the raw data,
the frozen phase-II limits of every characteristic (JSON and CSV from
:func:`studykit.stats.phase2.freeze`) and, for every variables characteristic, a printable
control-chart form (PDF, landscape) with the frozen limits drawn and empty space for plotting by
hand. Entries carry a fixed time stamp, so the same study gives the same zip.

The hand-off gate (:func:`handoff_readiness`): a characteristic is ready for series production
only when it was analysed, nothing signals on its final control chart, and it has a verdict
that meets its criterion (counted data, which have no capability criterion, need only the
stable chart); a study whose valid sign-offs include a rejection is ready for nothing. A pack
with anything not ready is refused (``when_not_ready="refuse"``) or made as a DRAFT: every
file says DRAFT with the reason (the chart forms in a banner over the form, the limits in a
``status`` field, the manifest and a ``DRAFT-NOT-FOR-PRODUCTION.txt`` beside them).
Every data file of the study goes into ``data/``, so ``studykit verify report.pdf --data
data/*`` works from the zip alone.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import re
import zipfile
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from studykit import names
from studykit.errors import StudyFileError, StudyInputError

__all__ = ["DRAFT_NOTE", "HandoffInfo", "build_handoff", "chart_form_pdf", "handoff_readiness"]

#: the stamp on every file of a pack that is not ready for series production
DRAFT_NOTE = "DRAFT - not for production"

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
    draft : dict
        characteristic (or ``"study"``) -> why it is not ready; empty for a pack ready for
        series production. A non-empty dict means every file is stamped DRAFT.
    """

    path: str
    entries: tuple
    plans: dict
    skipped: dict
    draft: dict = field(default_factory=dict)

    @property
    def is_draft(self) -> bool:
        return bool(self.draft)

    def to_dict(self) -> dict:
        return {
            "path": self.path,
            "entries": list(self.entries),
            "plans": dict(self.plans),
            "skipped": dict(self.skipped),
            "draft": dict(self.draft),
        }


def handoff_readiness(study, results, errors) -> dict:
    """Why each characteristic is not ready for series production: ``{name: reason}``, with
    the key ``"study"`` for a reason that holds for the whole study. Empty when all are ready.

    Ready means: analysed; no signal left on the final control chart (a signal a person has
    not resolved is an open question about the process, one kept with a recorded reason is
    decided); a verdict that meets the criterion (defects-per-unit data have no capability
    criterion and need only the stable chart). A valid
    sign-off that rejects the study makes nothing ready.
    """
    reasons: dict = {}
    for st in study.signoff_state():
        if st.valid and st.signoff.decision == "reject":
            so = st.signoff
            reasons["study"] = f"the study was rejected by {so.name} ({so.role}) on {so.when}" + (
                f": {so.comment}" if so.comment else ""
            )
            break
    for name in study.characteristic_names:
        res = results.get(name)
        if res is None:
            reasons[name] = f"not analysed ({errors.get(name, 'no result')})"
            continue
        signals = res.open_signals  # signals kept with a recorded reason are decided
        if signals:
            rules = sorted({str(getattr(sg, "rule", "signal")) for sg in signals})
            reasons[name] = (
                f"{len(signals)} open signal(s) on the control chart "
                f"({', '.join(rules)}): decide on them before freezing limits"
            )
            continue
        if res.attribute and res.verdict is None:
            continue  # defects per unit (c, u): no capability criterion, the stable chart only
        v = res.verdict
        if v is None or v.meets is None:
            reasons[name] = "no verdict" + (
                f" ({v.text})" if v is not None and getattr(v, "text", "") else ""
            )
        elif not v.meets:
            reasons[name] = "does not meet its criterion" + (
                f" ({v.text})" if getattr(v, "text", "") else ""
            )
    return reasons


def _safe_name(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("_") or "characteristic"


def chart_form_pdf(plan, *, study_title: str = "", part: str = "", draft: str = "") -> bytes:
    """A one-page landscape A4 control-chart form for the shop floor (PDF bytes).

    The frozen limits are drawn; a table under the chart has rows for date, time, operator,
    the values of each subgroup and remarks, one column per subgroup. With ``draft`` (the
    reason), a red DRAFT banner with the reason heads the form and a large DRAFT runs across it.

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
    from studykit.report.pdf import escape_text, grid_table, pdf_image, report_styles

    st = report_styles()
    size = landscape(A4)
    margin = 10 * mm
    width = size[0] - 2 * margin
    n_cols = 25
    story = []
    if draft:
        from studykit.report.pdf import framed_box

        story.append(
            framed_box(
                [Paragraph(f"<b>{DRAFT_NOTE.upper()}</b>: {escape_text(draft)}", st["body"])],
                background="#FDECEA",
                border="#B3261E",
                width=width,
            )
        )
        story.append(Spacer(1, 3))
    story += [
        Paragraph(
            f"Control chart form - {escape_text(plan.characteristic)}"
            + (f" [{escape_text(plan.unit)}]" if plan.unit else ""),
            st["h1"],
        ),
        Paragraph(
            f"{escape_text(study_title)}{' - ' + escape_text(part) if part else ''}. Chart "
            f"{escape_text(names.chart_kind_label(plan.kind))}, subgroup size "
            f"{plan.subgroup_size or 'as in phase I'}; frozen centre {plan.center:.6g}"
            + (f", within sigma {plan.within_sigma:.4g}" if plan.within_sigma else "")
            + f". Rules: {escape_text(plan.rules)}. Limits frozen from "
            f"{plan.phase1_subgroups} subgroups (source {plan.source_digest[:12]}...).",
            st["small"],
        ),
        Spacer(1, 3),
    ]
    fig = figures.blank_form_figure(
        plan, n_columns=n_cols, width=11.0, height=3.7 if draft else 4.3
    )
    story.append(pdf_image(figures.figure_png(fig, dpi=150), width))
    rows = [["Subgroup"] + [str(i) for i in range(1, n_cols + 1)]]
    n_values = plan.subgroup_size if plan.subgroup_size and plan.subgroup_size <= 5 else 1
    labels = (
        ["Date", "Time", "Operator"] + [f"Value {i}" for i in range(1, n_values + 1)] + ["Remark"]
    )
    for lab in labels:
        rows.append([lab] + [""] * n_cols)
    first = 22 * mm
    t = grid_table(rows, [first] + [(width - first) / n_cols] * n_cols, styles=st, zebra=False)
    from reportlab.lib import colors

    t.setStyle(
        [
            ("GRID", (0, 0), (-1, -1), 0.3, colors.HexColor("#D0D7DE")),
            ("FONTSIZE", (0, 0), (-1, -1), 6.5),
        ]
    )
    story.append(t)
    buf = io.BytesIO()
    doc = SimpleDocTemplate(
        buf,
        pagesize=size,
        leftMargin=margin,
        rightMargin=margin,
        topMargin=margin,
        bottomMargin=margin,
        invariant=1,
        title=("DRAFT " if draft else "") + f"Control chart form - {plan.characteristic}",
        creator="studykit",
    )

    from reportlab.pdfgen.canvas import Canvas

    class _Stamped(Canvas):
        """Draws DRAFT across the page on top of the form (a draft pack)."""

        def showPage(self):  # noqa: N802 - reportlab's name
            if draft:
                self.saveState()
                self.setFillColorRGB(0.70, 0.15, 0.12, alpha=0.16)
                self.setFont("Helvetica-Bold", 120)
                self.translate(size[0] / 2, size[1] / 2)
                self.rotate(22)
                self.drawCentredString(0, -40, "DRAFT")
                self.restoreState()
            super().showPage()

    doc.build(story, canvasmaker=_Stamped)
    return buf.getvalue()


def build_handoff(
    study_path,
    out_zip,
    *,
    report_pdf=None,
    progress: Callable[[int, int, str], None] | None = None,
    when_not_ready: str = "draft",
) -> HandoffInfo:
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
    when_not_ready : {"draft", "refuse"}
        What to do when a characteristic is not ready (:func:`handoff_readiness`): stamp
        every file DRAFT with the reason (default), or refuse with a
        :class:`~studykit.errors.StudyInputError` naming each reason (nothing is written).

    Returns
    -------
    HandoffInfo
    """
    if when_not_ready not in ("draft", "refuse"):
        raise StudyInputError(f"`when_not_ready` ({when_not_ready!r}) must be 'draft' or 'refuse'")
    from studykit.report.pdf import analyze_for_report, build_report
    from studykit.stats.phase2 import freeze

    spath = Path(study_path)
    if not spath.exists():
        raise StudyFileError(f"study file '{spath}' does not exist: check the path")
    from studykit.report.pdf import load_for_report

    study, gauges, _ = load_for_report(spath)
    results, errors, _ = analyze_for_report(study, gauges)
    draft = handoff_readiness(study, results, errors)
    if draft and when_not_ready == "refuse":
        listed = "; ".join(f"{k}: {v}" for k, v in draft.items())
        raise StudyInputError(
            f"no hand-off pack for series production: {listed}. Resolve these, or make a "
            "pack stamped DRAFT (--handoff-draft)"
        )
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
    entries: list[tuple[str, bytes]] = [
        ("report.pdf", pdf),
        (f"study/{spath.name}", spath.read_bytes()),
        *((f"data/{name}", blob) for name, blob in study.files),
    ]
    # the reproducible analysis notebook: opens study/<file> and compares with report.pdf
    from studykit.report.notebook import NOTEBOOK_FILENAME, analysis_notebook, notebook_bytes

    entries.append(
        (
            NOTEBOOK_FILENAME,
            notebook_bytes(
                analysis_notebook(spath, study_ref=f"study/{spath.name}", pdf_ref="report.pdf")
            ),
        )
    )
    if draft:
        entries.append(
            (
                "DRAFT-NOT-FOR-PRODUCTION.txt",
                (
                    f"{DRAFT_NOTE.upper()}\n\nThis hand-off pack was made although not every "
                    "characteristic is ready for series production. Do not use its limits or chart "
                    "forms in production until the reasons below are resolved and a new pack is "
                    "made.\n\n" + "\n".join(f"- {k}: {v}" for k, v in draft.items()) + "\n"
                ).encode("utf-8"),
            )
        )
    plans, skipped = {}, dict(errors)
    for name, res in results.items():
        try:
            plan = freeze(res.phase1, characteristic=name, unit=res.unit or "")
        except StudyInputError as exc:
            skipped[name] = str(exc)
            continue
        plans[name] = plan.to_dict()
        stem = _safe_name(name)
        stamp = ""
        if draft:
            others = [k for k in draft if k not in (name, "study")]
            stamp = (
                draft.get(name)
                or draft.get("study")
                or (
                    "this characteristic is ready, but the pack is a draft because "
                    + ", ".join(others[:4])
                    + (f" and {len(others) - 4} more" if len(others) > 4 else "")
                    + " are not (reasons in DRAFT-NOT-FOR-PRODUCTION.txt)"
                )
            )
        plan_json = plan.to_json()
        plan_csv = plan.to_csv()
        if stamp:
            plan_json = json.dumps(
                dict(json.loads(plan_json), status=f"{DRAFT_NOTE}: {stamp}"),
                indent=2,
                sort_keys=True,
            )
            head, _, rest = plan_csv.partition("\n")
            cell = f"{DRAFT_NOTE}: {stamp}".replace('"', "'")
            plan_csv = f'{head}\nstatus,"{cell}"\n{rest}'
        entries.append((f"limits/{stem}.json", plan_json.encode("utf-8")))
        entries.append((f"limits/{stem}.csv", plan_csv.encode("utf-8")))
        if not res.attribute:
            entries.append(
                (
                    f"forms/{stem}_chart_form.pdf",
                    chart_form_pdf(plan, study_title=study.title, part=study.part, draft=stamp),
                )
            )
    manifest = {
        "format": "studykit-handoff/1",
        "study": study.title,
        "status": "DRAFT" if draft else "ready",
        "draft_reasons": dict(draft),
        "content_digest": study.content_digest(),
        "data_sha256": study.data_sha256,
        "data_files": [
            {"filename": n, "bytes": len(b), "sha256": hashlib.sha256(b).hexdigest()}
            for n, b in study.files
        ],
        "files": {n: hashlib.sha256(b).hexdigest() for n, b in entries},
        "skipped": skipped,
    }
    entries.append(
        ("MANIFEST.json", json.dumps(manifest, indent=2, sort_keys=True).encode("utf-8"))
    )
    tmp = out.with_name(out.name + ".part")
    with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for name, blob in entries:
            info = zipfile.ZipInfo(name, date_time=_FIXED_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            zf.writestr(info, blob)
    os.replace(tmp, out)
    return HandoffInfo(str(out), tuple(n for n, _ in entries), plans, skipped, dict(draft))
