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

from studykit import names
from studykit.app.overview import panel, panel_css
from studykit.app.steps.base import StudyStep
from studykit.app.widgets import button, esc, guarded, html_box, labelled, upload_button


def download_link(data: bytes, filename: str, mime: str, *, label: str | None = None) -> str:
    """An HTML download link carrying ``data`` in a ``data:`` URL.

    Examples
    --------
    >>> html = download_link(b"{}", "results.json", "application/json")
    >>> 'download="results.json"' in html and "base64,e30=" in html
    True
    """
    b64 = base64.b64encode(data).decode("ascii")
    safe = re.sub(r"[^A-Za-z0-9_.-]+", "_", filename)
    size = f"{len(data) / 1024:.0f} KB" if len(data) >= 1024 else f"{len(data)} bytes"
    return (
        f'<a class="sk-download" download="{esc(safe)}" href="data:{mime};base64,{b64}" '
        f'style="font-weight:600">⬇ {esc(label or safe)}</a> <span class="sk-small">'
        f"({size})</span>"
    )


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


class ExportStep(StudyStep):
    """Step "Evidence & hand-off" (key ``export``)."""

    key = "export"
    title = names.STEP_NAMES[key]
    guidance = "Produce the PDF evidence and the limits for series production."

    what = "The export step"

    def __init__(self):
        self._pdf = None  # (bytes, file name, content digest) of the last PDF made here

    def _build(self, ws, context) -> widgets.Widget:
        m = context.messages
        self.build_report, self.build_handoff = _report_functions()
        self.pdf, self.handoff, self.json, self.notebook = (
            button(text, f"sk-make-{key}", icon=icon, primary=key == "pdf", width="auto")
            for text, key, icon in (
                ("Make the PDF evidence", "pdf", "file-pdf-o"),
                ("Make the hand-off zip", "handoff", "archive"),
                ("Results as JSON", "json", "download"),
                ("Analysis notebook", "notebook", "book"),
            )
        )
        self.progress = widgets.IntProgress(
            value=0, min=0, max=1, layout=widgets.Layout(width="320px", display="none")
        )
        self.progress.add_class("sk-export-progress")
        self.progress_text = html_box("", "sk-small")
        self.links = html_box("", "sk-downloads")
        self.state = html_box("", "sk-export-state")
        self.pdf.on_click(guarded(lambda _b: self._on_pdf(), messages=m))
        self.handoff.on_click(guarded(lambda _b: self._on_handoff(), messages=m))
        self.json.on_click(guarded(lambda _b: self._on_json(), messages=m))
        self.notebook.on_click(guarded(lambda _b: self._on_notebook(), messages=m))
        missing = []
        if self.build_report is None:
            self.pdf.disabled = True
            missing.append("the PDF evidence")
        if self.build_handoff is None:
            self.handoff.disabled = True
            missing.append("the hand-off zip")
        note = ""
        if missing:
            note = (
                '<div class="sk-msg sk-msg-warning"><span class="sk-msg-kind">Not available'
                "</span>The report module is not available in this installation, so "
                f"{esc(' and '.join(missing))} cannot be made here.</div>"
            )
        intro = html_box(
            '<div class="sk-panel-title" style="margin-top:0">Evidence</div>'
            '<div class="sk-muted">The PDF carries every number of this workbook, the digests '
            "of the raw data and of the decisions, and places for the digital signatures. The "
            "hand-off zip holds the frozen phase-I limits for series production, shop-floor "
            "chart forms, the study file, the PDF and the analysis notebook. The analysis "
            "notebook recomputes every number of the report with the studykit library, step "
            "by step, for a statistician to rerun.</div>" + note
        )
        sign_box = self._build_signing(context)
        self.refresh(context)
        return panel(
            [
                panel_css(),
                intro,
                self.state,
                widgets.HBox(
                    [self.pdf, self.handoff, self.json, self.notebook],
                    layout=widgets.Layout(flex_flow="row wrap"),
                ),
                widgets.HBox(
                    [self.progress, self.progress_text], layout=widgets.Layout(align_items="center")
                ),
                self.links,
                sign_box,
            ]
        )

    # --- signing the PDF with the signer's own certificate -----------------------------------
    def _build_signing(self, context) -> widgets.Widget:
        from studykit.study import SIGNOFF_ROLES

        m = context.messages
        self.p12 = upload_button(
            accept=".p12,.pfx",
            multiple=False,
            description="Choose certificate (.p12)",
            layout=widgets.Layout(width="auto"),
        )
        self.p12.add_class("sk-p12")
        self.passphrase = widgets.Password(
            placeholder="passphrase of the .p12", layout=widgets.Layout(width="240px")
        )
        self.passphrase.add_class("sk-p12-passphrase")
        self.sign_role = widgets.Combobox(
            options=[names.role_label(r) for r in SIGNOFF_ROLES],
            value=names.role_label("prepared"),
            ensure_option=False,
            layout=widgets.Layout(width="160px"),
        )
        self.sign_role.add_class("sk-pdf-role")
        self.sign_pdf = button(
            "Sign the PDF with my certificate",
            "sk-sign-pdf",
            icon="certificate",
            disabled=True,
            width="auto",
        )
        self.sign_hint = html_box("", "sk-small")
        self.signed_links = html_box("", "sk-signed-downloads")
        for w in (self.p12, self.passphrase, self.sign_role, self.ws.who):
            w.observe(guarded(lambda _c: self._update_sign_button(), messages=m), names="value")
        self.sign_pdf.on_click(guarded(self._on_sign_pdf_click, messages=m))
        self._update_sign_button()

        return widgets.VBox(
            [
                html_box(
                    '<div class="sk-panel-title">Sign the PDF</div><div class="sk-muted">'
                    "Add your digital signature (PAdES) to the PDF made above, with your own "
                    "certificate. The .p12 file and its passphrase are used for this one "
                    "signature and then dropped: never saved, never written to a log. Several "
                    "signers sign in turn; each signature is added to the last signed PDF."
                    "</div>"
                ),
                widgets.HBox(
                    [
                        labelled("Your name (written into the signature)", self.ws.who),
                        labelled("Certificate", self.p12),
                        labelled("Passphrase", self.passphrase),
                        labelled("Role", self.sign_role),
                    ],
                    layout=widgets.Layout(flex_flow="row wrap", align_items="flex-end"),
                ),
                widgets.HBox(
                    [self.sign_pdf, self.sign_hint], layout=widgets.Layout(align_items="center")
                ),
                self.signed_links,
            ]
        )

    def _update_sign_button(self) -> None:
        from studykit.app.access import signing_refusal

        missing = []
        refusal = signing_refusal()
        if refusal:
            self.sign_pdf.disabled = True
            self.sign_hint.value = esc(refusal[0].upper() + refusal[1:]) + "."
            return
        if self._pdf is None:
            missing.append("make the PDF evidence first")
        if not self.ws.who_name:
            missing.append("type your name at the top")
        if not self.p12.value:
            missing.append("choose your .p12 certificate")
        if not self.passphrase.value:
            missing.append("type its passphrase")
        if not (self.sign_role.value or "").strip():
            missing.append("name your role")
        self.sign_pdf.disabled = bool(missing)
        self.sign_hint.value = ("To sign: " + ", ".join(missing) + ".") if missing else ""

    def _forget_certificate(self) -> None:
        """Drop the certificate and passphrase from the page and the kernel."""
        self.passphrase.value = ""
        self.p12.value = ()

    def _on_sign_pdf_click(self, _button=None) -> None:
        try:
            self._on_sign_pdf()
        finally:
            self._forget_certificate()
            self._update_sign_button()

    def _on_sign_pdf(self) -> None:
        from studykit.app.access import signing_refusal
        from studykit.errors import StudyInputError
        from studykit.report.signing import sign_report

        refusal = signing_refusal()
        if refusal:
            raise StudyInputError(refusal)
        if self._pdf is None:
            raise StudyInputError("make the PDF evidence first: the signature goes on that PDF")
        s = self.ws.session
        data, filename, digest = self._pdf
        if digest != s.shown_digest:
            raise StudyInputError(
                "the study changed after this PDF was made (its content digest differs), so the "
                "PDF no longer shows the study as it is: make the PDF evidence again, then sign"
            )
        files = self.p12.value
        if not files:
            raise StudyInputError("choose your .p12 certificate file")
        upload = files[0]
        p12_name = str(upload.get("name", "certificate.p12"))
        p12_data = bytes(upload["content"])
        with tempfile.TemporaryDirectory() as d:
            src = Path(d) / "in.pdf"
            out = Path(d) / "signed.pdf"
            src.write_bytes(data)
            info = sign_report(
                src,
                out,
                p12_name,
                self.passphrase.value,
                role=names.role_id(self.sign_role.value),
                name=self.ws.who_name,
                p12_data=p12_data,
            )
            signed = out.read_bytes()
        del p12_data
        self._pdf = (signed, filename, digest)
        from studykit.report.signing import signature_count

        n = signature_count(signed)
        stem = filename[:-4] if filename.endswith(".pdf") else filename
        self.signed_links.value = (
            '<div style="margin:6px 0">'
            + download_link(
                signed,
                f"{stem}-signed.pdf",
                "application/pdf",
                label=f"{stem}-signed.pdf ({n} signature{'s' if n != 1 else ''})",
            )
            + "</div>"
        )
        where = (
            "in its box on the sign-off page"
            if info.visible
            else "(invisible: no box for this role)"
        )
        self.ws.context.messages.ok(
            f"Signed by {info.name} as {names.role_label(info.role)} with the certificate of {info.subject} "
            f"{where}. Download the signed PDF; `studykit verify` checks it."
        )

    def refresh(self, context) -> None:
        ws = self.ws
        if ws is None or not hasattr(self, "state"):
            return
        s = ws.session
        text = s.state_text()
        if s.is_locked:
            self.state.value = (
                '<div class="sk-msg sk-msg-ok"><span class="sk-msg-kind">'
                "Approved</span>The evidence will show the valid approval."
                "</div>"
            )
        elif text == "Approval voided":
            self.state.value = (
                '<div class="sk-msg sk-msg-error"><span class="sk-msg-kind">'
                "Voided</span>The approval no longer holds: the evidence will "
                "say so. Sign again in the review step first.</div>"
            )
        else:
            self.state.value = (
                '<div class="sk-msg sk-msg-info"><span class="sk-msg-kind">'
                "Not approved</span>The evidence can be made now; it will show "
                "that nobody has approved the study yet.</div>"
            )

    # --- work -----------------------------------------------------------------------------------
    def _progress(self, done: int, total: int, what: str) -> None:
        self.progress.max = max(int(total), 1)
        self.progress.value = min(int(done), self.progress.max)
        self.progress_text.value = esc(what)

    def _start(self, what: str) -> None:
        self.progress.value = 0
        self.progress.layout.display = ""
        self.progress_text.value = esc(what)
        for b in (self.pdf, self.handoff, self.json, self.notebook):
            b.disabled = True

    def _finish(self) -> None:
        self.progress.layout.display = "none"
        self.progress_text.value = ""
        self.pdf.disabled = self.build_report is None
        self.handoff.disabled = self.build_handoff is None
        self.json.disabled = False
        self.notebook.disabled = False

    def _add_link(self, html: str) -> None:
        self.links.value = f'<div style="margin:6px 0">{html}</div>' + self.links.value

    def _made(self, build, suffix: str) -> tuple:
        """(what ``build`` returned, the bytes of its file) for the study file open, the
        buttons held and the progress shown meanwhile; ``suffix`` ends the temporary name."""
        s = self.ws.session
        self._start("Starting …")
        try:
            with tempfile.TemporaryDirectory() as d:
                out = Path(d) / f"{_stem(s)}{suffix}"
                info = build(s.path, out, progress=self._progress)
                return info, out.read_bytes()
        finally:
            self._finish()

    def _on_pdf(self) -> None:
        s = self.ws.session
        info, data = self._made(self.build_report, ".pdf")
        self._pdf = (data, f"{_stem(s)}-evidence.pdf", s.shown_digest)
        if hasattr(self, "sign_pdf"):
            self.signed_links.value = ""
            self._update_sign_button()
        pages = getattr(info, "pages", None)
        self._add_link(
            download_link(
                data,
                f"{_stem(s)}-evidence.pdf",
                "application/pdf",
                label=f"{_stem(s)}-evidence.pdf" + (f" ({pages} pages)" if pages else ""),
            )
        )
        self.ws.context.messages.ok("The PDF evidence is ready: use the download link.")

    def _on_handoff(self) -> None:
        s = self.ws.session
        info, data = self._made(self.build_handoff, "-handoff.zip")
        skipped = getattr(info, "skipped", {}) or {}
        draft = dict(getattr(info, "draft", {}) or {})
        name = f"{_stem(s)}-handoff" + ("-DRAFT" if draft else "") + ".zip"
        self._add_link(download_link(data, name, "application/zip"))
        note = ("; no limits frozen for " + ", ".join(skipped)) if skipped else ""
        if draft:
            reasons = "; ".join(f"{k}: {v}" for k, v in draft.items())
            self.ws.context.messages.warning(
                "The hand-off zip is a DRAFT, not for production: every chart form and limits "
                "file is stamped DRAFT because not every characteristic is ready for series "
                f"production ({reasons}){note}. Settle these, then make the pack again."
            )
        else:
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

    def _on_notebook(self) -> None:
        """The reproducible analysis notebook (see :mod:`studykit.report.notebook`): it opens
        the study file and the evidence PDF by their download names, kept beside it."""
        from studykit.report.notebook import analysis_notebook, notebook_bytes

        s = self.ws.session
        pdf_name = f"{_stem(s)}-evidence.pdf"
        nb = analysis_notebook(
            s.path, study_ref=s.path.name, pdf_ref=pdf_name if self._pdf is not None else None
        )
        self._add_link(
            download_link(
                notebook_bytes(nb), f"{_stem(s)}-analysis.ipynb", "application/x-ipynb+json"
            )
        )
        where = (
            f"the study file {s.path.name} and {pdf_name}"
            if self._pdf is not None
            else f"the study file {s.path.name}"
        )
        self.ws.context.messages.ok(
            f"The analysis notebook is ready: keep it in one folder with {where}, open it in "
            "Jupyter and run all cells to recompute every number of the report."
        )


STEP = ExportStep()
