"""Workbook step "Evidence & hand-off": the PDF evidence, the JSON results, the hand-off zip.

Everything is made on the server into a temporary folder and handed to the browser as a
download link (a ``data:`` URL); no widget takes or shows a server path. Long work shows a
progress bar. The PDF and the hand-off come from :mod:`studykit.report` (``build_report``,
``build_handoff``); when that module is missing the step says so plainly.
"""

from __future__ import annotations

import base64
import re
import tempfile
from pathlib import Path

import ipywidgets as widgets

from studykit.app.overview import no_study_panel, panel, panel_css, workspace
from studykit.app.widgets import esc, guarded, html_box


def download_link(data: bytes, filename: str, mime: str, *, label: str | None = None) -> str:
    """An HTML download link carrying ``data`` in a ``data:`` URL.

    Examples
    --------
    >>> html = download_link(b"{}", "results.json", "application/json")
    >>> 'download="results.json"' in html and "base64,e30=" in html
    True
    """
    b64 = base64.b64encode(data).decode("ascii")
    safe = re.sub(r'[^A-Za-z0-9_.-]+', "_", filename)
    size = f"{len(data) / 1024:.0f} KB" if len(data) >= 1024 else f"{len(data)} bytes"
    return (f'<a class="sk-download" download="{esc(safe)}" href="data:{mime};base64,{b64}" '
            f'style="font-weight:600">⬇ {esc(label or safe)}</a> <span class="sk-small">'
            f"({size})</span>")


def _report_functions():
    """``(build_report, build_handoff)`` from studykit.report, None for each one missing."""
    try:
        from studykit.report.pdf import build_report
    except ImportError:
        try:
            from studykit.report import build_report
        except ImportError:
            build_report = None
    try:
        from studykit.report.handoff import build_handoff
    except ImportError:
        build_handoff = None
    return build_report, build_handoff


def _stem(session) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "_", session.path.stem).strip("_") or "study"


class ExportStep:
    """Step "Evidence & hand-off" (key ``export``)."""

    key = "export"
    title = "Evidence & hand-off"
    guidance = "Produce the PDF evidence and the limits for series production."

    def __init__(self):
        self.ws = None

    def build(self, context) -> widgets.Widget:
        ws = self.ws = workspace(context)
        if ws is None:
            return no_study_panel("The export step")
        m = context.messages
        self.build_report, self.build_handoff = _report_functions()
        self.pdf = widgets.Button(description="Make the PDF evidence", button_style="primary",
                                  icon="file-pdf-o", layout=widgets.Layout(width="auto"))
        self.pdf.add_class("sk-make-pdf")
        self.handoff = widgets.Button(description="Make the hand-off zip", icon="archive",
                                      layout=widgets.Layout(width="auto"))
        self.handoff.add_class("sk-make-handoff")
        self.json = widgets.Button(description="Results as JSON", icon="download",
                                   layout=widgets.Layout(width="auto"))
        self.json.add_class("sk-make-json")
        self.progress = widgets.IntProgress(value=0, min=0, max=1,
                                            layout=widgets.Layout(width="320px",
                                                                  display="none"))
        self.progress.add_class("sk-export-progress")
        self.progress_text = html_box("", "sk-small")
        self.links = html_box("", "sk-downloads")
        self.state = html_box("", "sk-export-state")
        self.pdf.on_click(guarded(lambda _b: self._on_pdf(), messages=m))
        self.handoff.on_click(guarded(lambda _b: self._on_handoff(), messages=m))
        self.json.on_click(guarded(lambda _b: self._on_json(), messages=m))
        missing = []
        if self.build_report is None:
            self.pdf.disabled = True
            missing.append("the PDF evidence")
        if self.build_handoff is None:
            self.handoff.disabled = True
            missing.append("the hand-off zip")
        note = ""
        if missing:
            note = ('<div class="sk-msg sk-msg-warning"><span class="sk-msg-kind">Not available'
                    "</span>The report module is not available in this installation, so "
                    f"{esc(' and '.join(missing))} cannot be made here.</div>")
        intro = html_box(
            '<div class="sk-panel-title" style="margin-top:0">Evidence</div>'
            '<div class="sk-muted">The PDF carries every number of this workbook, the digests '
            "of the raw data and of the decisions, and places for the digital signatures. The "
            "hand-off zip holds the frozen phase-I limits for series production, shop-floor "
            "chart forms, the study file and the PDF.</div>" + note)
        self.refresh(context)
        return panel([panel_css(), intro, self.state,
                             widgets.HBox([self.pdf, self.handoff, self.json],
                                          layout=widgets.Layout(flex_flow="row wrap")),
                             widgets.HBox([self.progress, self.progress_text],
                                          layout=widgets.Layout(align_items="center")),
                             self.links])

    def refresh(self, context) -> None:
        ws = self.ws
        if ws is None or not hasattr(self, "state"):
            return
        s = ws.session
        text = s.state_text()
        if s.is_locked:
            self.state.value = ('<div class="sk-msg sk-msg-ok"><span class="sk-msg-kind">'
                                "Approved</span>The evidence will show the valid approval."
                                "</div>")
        elif text == "Approval voided":
            self.state.value = ('<div class="sk-msg sk-msg-error"><span class="sk-msg-kind">'
                                "Voided</span>The approval no longer holds: the evidence will "
                                "say so. Sign again in the review step first.</div>")
        else:
            self.state.value = ('<div class="sk-msg sk-msg-info"><span class="sk-msg-kind">'
                                "Not approved</span>The evidence can be made now; it will show "
                                "that nobody has approved the study yet.</div>")

    # --- work -----------------------------------------------------------------------------------
    def _progress(self, done: int, total: int, what: str) -> None:
        self.progress.max = max(int(total), 1)
        self.progress.value = min(int(done), self.progress.max)
        self.progress_text.value = esc(what)

    def _start(self, what: str) -> None:
        self.progress.value = 0
        self.progress.layout.display = ""
        self.progress_text.value = esc(what)
        for b in (self.pdf, self.handoff, self.json):
            b.disabled = True

    def _finish(self) -> None:
        self.progress.layout.display = "none"
        self.progress_text.value = ""
        self.pdf.disabled = self.build_report is None
        self.handoff.disabled = self.build_handoff is None
        self.json.disabled = False

    def _add_link(self, html: str) -> None:
        self.links.value = f'<div style="margin:6px 0">{html}</div>' + self.links.value

    def _on_pdf(self) -> None:
        s = self.ws.session
        self._start("Starting …")
        try:
            with tempfile.TemporaryDirectory() as d:
                out = Path(d) / f"{_stem(s)}.pdf"
                info = self.build_report(s.path, out, progress=self._progress)
                data = out.read_bytes()
        finally:
            self._finish()
        pages = getattr(info, "pages", None)
        self._add_link(download_link(data, f"{_stem(s)}-evidence.pdf", "application/pdf",
                                     label=f"{_stem(s)}-evidence.pdf"
                                     + (f" ({pages} pages)" if pages else "")))
        self.ws.context.messages.ok("The PDF evidence is ready: use the download link.")

    def _on_handoff(self) -> None:
        s = self.ws.session
        self._start("Starting …")
        try:
            with tempfile.TemporaryDirectory() as d:
                out = Path(d) / f"{_stem(s)}-handoff.zip"
                info = self.build_handoff(s.path, out, progress=self._progress)
                data = out.read_bytes()
        finally:
            self._finish()
        skipped = getattr(info, "skipped", {}) or {}
        self._add_link(download_link(data, f"{_stem(s)}-handoff.zip", "application/zip"))
        note = ("; no limits frozen for " + ", ".join(skipped)) if skipped else ""
        self.ws.context.messages.ok("The hand-off zip is ready" + note + ".")

    def _on_json(self) -> None:
        s = self.ws.session
        self._start("Analysing …")
        try:
            s.analyze_all(progress=lambda i, n, name: self._progress(i, n, f"analysing {name}"))
            data = s.results_json()
        finally:
            self._finish()
        self._add_link(download_link(data, f"{_stem(s)}-results.json", "application/json"))


STEP = ExportStep()
