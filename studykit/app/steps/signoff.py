"""Workbook step "Review & sign": comments, named sign-offs, the lock and its voiding.

Comments are kept per characteristic (or for the whole study). A sign-off records who, in which
role, what they decided, a comment and the time, together with the study's content digest. An
approval (role ``approved``, decision ``approve``) locks the study: any later change is refused
with a clear message unless a reason to change an approved study is given (the field appears at
the top of every panel while the study is locked); that change voids the approval, and the
voided sign-off stays on record, struck through with the reason. Several people may sign at the
same time from different browsers: the study file serialises the writes, and "Read the study
file again" shows what others did.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit import names
from studykit.app.overview import panel, panel_css, verdict_chip
from studykit.app.steps.base import StudyStep
from studykit.app.widgets import button, esc, guarded, html_box, labelled, text_field
from studykit.study import SIGNOFF_ROLES

_DECISIONS = [(names.decision_label(d), d) for d in ("approve", "reject", "comment")]


def _when(text: str) -> str:
    return esc((text or "").replace("T", " ").rstrip("Z"))


def lock_html(session) -> str:
    """The banner saying whether the study is approved, voided or open."""
    states = session.signoff_state()
    holder = session.study.lock_holder()
    voided = [st for st in states if not st.valid]
    out = []
    if holder is not None:
        out.append(
            f'<div class="sk-lock sk-locked"><b>Approved and locked.</b> '
            f"{esc(holder.name)} approved this study on {_when(holder.when)}. Changes to "
            "data or decisions are refused; to change it anyway, give a reason in the "
            "field at the top of the panel: the change then voids the approval, which "
            "stays on record as voided.</div>"
        )
    if voided:
        items = "".join(
            f"<li><b>{esc(st.signoff.name)}</b> "
            f"({esc(names.role_label(st.signoff.role))}, "
            f"{esc(names.decision_label(st.signoff.decision))}, "
            f"{_when(st.signoff.when)}): "
            f"{esc(st.why)}</li>"
            for st in voided
        )
        out.append(
            '<div class="sk-void sk-voided-banner"><b>✗ Sign-off voided.</b> The study '
            "changed after these sign-offs, so they no longer hold and the study must be "
            f'signed again:<ul style="margin:4px 0 0 0">{items}</ul></div>'
        )
    if not out:
        out.append(
            '<div class="sk-muted">Not approved yet. Review the evidence, comment, and '
            "sign below.</div>"
        )
    return "".join(out)


def signoffs_html(session) -> str:
    states = session.signoff_state()
    if not states:
        return (
            '<div class="sk-panel-title">Sign-offs</div><div class="sk-muted">Nobody has '
            "signed yet.</div>"
        )
    current = session.shown_digest
    body = []
    for st in states:
        s = st.signoff
        cls = "" if st.valid else ' class="sk-voided"'
        state = (
            verdict_chip(True, text=names.SIGNOFF_VALID)
            if st.valid
            else verdict_chip(False, text=names.SIGNOFF_VOIDED)
        )
        match = "matches the study now" if s.digest == current else "differs from the study now"
        body.append(
            f"<tr><td{cls}>{esc(s.name)}</td><td{cls}>{esc(names.role_label(s.role))}"
            f"</td><td{cls}>{esc(names.decision_label(s.decision))}</td>"
            f"<td{cls}>{esc(s.comment)}</td>"
            f"<td{cls}>{_when(s.when)}</td>"
            f'<td><code class="sk-digest" title="{esc(s.digest)}">{esc(s.digest[:12])}'
            f'</code><div class="sk-small">{match}</div></td><td>{state}'
            f"{'<div class=sk-small>' + esc(st.why) + '</div>' if st.why else ''}"
            f"</td></tr>"
        )
    return (
        '<div class="sk-panel-title">Sign-offs</div><table class="sk-table sk-signoffs">'
        "<thead><tr><th>Name</th><th>Role</th><th>Decision</th><th>Comment</th>"
        "<th>When (UTC)</th><th>Content signed</th><th>State</th></tr></thead><tbody>"
        + "".join(body)
        + "</tbody></table>"
    )


def rules_html(session) -> str:
    """The sign-off rules in force, and the waivers recorded."""
    from studykit.signoff_rules import RULE_TEXT

    rules = session.study.signoff_rules()
    items = "".join(
        f"<li>{'✓' if rules[k] else '✗ switched off:'} {esc(RULE_TEXT[k])}</li>" for k in RULE_TEXT
    )
    waivers = session.study.waivers()
    wv = ""
    if waivers:
        wv = (
            "<div><b>Waivers</b> (approval without a verdict):<ul style='margin:2px 0'>"
            + "".join(
                f"<li><b>{esc(n)}</b>: {esc(d.reason)} <span class='sk-small'>"
                f"({esc(d.who)}, {_when(d.when)})</span></li>"
                for n, d in waivers.items()
            )
            + "</ul></div>"
        )
    return (
        '<div class="sk-panel-title">Sign-off rules of this study</div>'
        f'<ul class="sk-rules" style="margin:2px 0">{items}</ul>{wv}'
    )


def open_verdicts_html(open_: dict) -> str:
    if not open_:
        return ""
    rows = "".join(f"<li><b>{esc(n)}</b>: {esc(w)}</li>" for n, w in open_.items())
    if all(w == names.VERDICT_STATES["not_analysed"] for w in open_.values()):
        return (
            '<div class="sk-muted sk-open-verdicts">Whether an approval is possible is '
            "known once every characteristic is analysed (<i>Analyse all "
            "characteristics</i> in the overview, or an approval, does it).</div>"
        )
    return (
        '<div class="sk-void sk-open-verdicts"><b>An approval is not possible yet.</b> '
        "These characteristics have no verdict; settle them, or record a waiver with its "
        f'reason for each (below):<ul style="margin:4px 0 0 0">{rows}</ul></div>'
    )


def comments_html(session, name: str) -> str:
    rows = [c for c in session.study.comments if c.characteristic in (None, name)]
    if not rows:
        return '<div class="sk-muted">No comments yet.</div>'
    return "".join(
        f'<div class="sk-proposal"><b>{esc(c.who)}</b> <span class="sk-small">'
        f"{_when(c.when)} · {esc(c.characteristic or 'whole study')}</span>"
        f"<div>{esc(c.text)}</div></div>"
        for c in rows
    )


def audit_html(session, *, limit: int = 12) -> str:
    entries = session.audit_log()[-limit:]
    body = "".join(
        f"<tr><td>{_when(e.when)}</td><td>{esc(e.who)}</td><td>{esc(e.what)}</td>"
        f"<td>{esc(e.why)}</td></tr>"
        for e in reversed(entries)
    )
    return (
        '<div class="sk-panel-title">Latest entries of the audit log</div>'
        '<table class="sk-table sk-audit"><thead><tr><th>When (UTC)</th><th>Who</th>'
        f"<th>What</th><th>Why</th></tr></thead><tbody>{body}</tbody></table>"
    )


class SignoffStep(StudyStep):
    """Step "Review & sign" (key ``signoff``)."""

    key = "signoff"
    title = names.STEP_NAMES[key]
    guidance = (
        "The team reviews the evidence and signs; a later change to data or decisions "
        "voids the sign-off."
    )

    what = "The review step"

    def is_done(self, context) -> bool:
        ws = self.opened(context)
        return bool(ws is not None and ws.session.is_locked)

    def _build(self, ws, context) -> widgets.Widget:
        m = context.messages
        self.lock = html_box("", "sk-lock-state")
        self.signoffs = html_box("", "sk-signoff-table")
        self.role = widgets.Combobox(
            options=[names.role_label(r) for r in SIGNOFF_ROLES],
            value=names.role_label("reviewed"),
            placeholder=", ".join(names.role_label(r) for r in SIGNOFF_ROLES) + " …",
            ensure_option=False,
            layout=widgets.Layout(width="200px"),
        )
        self.role.add_class("sk-sign-role")
        self.decision = widgets.ToggleButtons(options=_DECISIONS, value="approve")
        self.decision.add_class("sk-sign-decision")
        self.sign_comment = widgets.Textarea(
            placeholder="comment (required when rejecting)",
            layout=widgets.Layout(width="100%", max_width="640px", height="60px"),
        )
        self.sign = button(
            "Sign the study as it stands",
            "sk-sign",
            icon="pencil",
            primary=True,
            disabled=True,
            on_click=self._on_sign,
            messages=m,
        )
        self.sign_hint = html_box("", "sk-small")
        self.comments = html_box("", "sk-comments")
        self.comment = widgets.Textarea(
            placeholder="what should the team know?",
            layout=widgets.Layout(width="100%", max_width="640px", height="60px"),
        )
        self.comment.add_class("sk-comment-text")
        self.about = widgets.Checkbox(
            value=True, indent=False, description="about the characteristic shown"
        )
        self.add = button(
            "Add comment",
            "sk-add-comment",
            icon="comment",
            disabled=True,
            on_click=self._on_comment,
            messages=m,
        )
        self.reload = button(
            "Read the study file again",
            "sk-reload",
            icon="refresh",
            on_click=self._on_reload,
            messages=m,
        )
        self.audit = html_box("", "sk-audit-box")
        self.digest = html_box("", "sk-sign-digest")
        self.rules = html_box("", "sk-rules-box")
        self.gate = html_box("", "sk-gate")
        self.waive_reason = text_field(
            "sk-waive-reason", placeholder="why it may be approved without a verdict", width="420px"
        )
        self.waive = button(
            "Record waiver for the characteristic shown",
            "sk-waive",
            icon="check-square-o",
            disabled=True,
            on_click=self._on_waive,
            messages=m,
        )
        for w in (self.waive_reason, ws.who, self.comment, self.sign_comment, self.role):
            w.observe(guarded(lambda _c: self._update_buttons(), messages=m), names="value")

        sign_form = widgets.VBox(
            [
                html_box(
                    '<div class="sk-panel-title">Sign</div><div class="sk-muted">Your '
                    "signature covers the study as this page shows it; its content digest is "
                    "stored with it, and the sign-off is refused if the study changed after "
                    "the page was drawn.</div>"
                ),
                self.digest,
                self.gate,
                widgets.HBox(
                    [labelled("Role", self.role), labelled("Decision", self.decision)],
                    layout=widgets.Layout(flex_flow="row wrap"),
                ),
                labelled("Comment", self.sign_comment),
                widgets.HBox(
                    [self.sign, self.sign_hint], layout=widgets.Layout(align_items="center")
                ),
            ]
        )
        waive_form = widgets.VBox(
            [
                self.rules,
                widgets.HBox(
                    [self.waive_reason, self.waive],
                    layout=widgets.Layout(align_items="center", flex_flow="row wrap"),
                ),
            ]
        )
        comment_form = widgets.VBox(
            [
                html_box('<div class="sk-panel-title">Comments</div>'),
                self.comments,
                self.comment,
                widgets.HBox([self.about, self.add], layout=widgets.Layout(align_items="center")),
            ]
        )
        self.refresh(context)
        return panel(
            [
                panel_css(),
                ws.toolbar(),
                self.lock,
                self.reload,
                self.signoffs,
                sign_form,
                waive_form,
                comment_form,
                self.audit,
            ]
        )

    def refresh(self, context) -> None:
        ws = self.ws
        if ws is None or not hasattr(self, "lock"):
            return
        s = ws.session
        key = (s.current, id(s.study))
        if key == self._drawn:
            return
        self._drawn = key
        self.lock.value = lock_html(s)
        self.signoffs.value = signoffs_html(s)
        self.comments.value = comments_html(s, s.current)
        self.audit.value = audit_html(s)
        self.digest.value = (
            f'<div class="sk-small">Content you are signing: <code '
            f'class="sk-shown-digest">{esc(s.shown_digest)}</code></div>'
        )
        self.rules.value = rules_html(s)
        gate = {}
        if s.study.signoff_rules().get("approval_needs_verdicts"):
            gate = s.open_verdicts(analyse=False)  # analysing happens when someone approves
        self.gate.value = open_verdicts_html(gate)
        self._update_buttons()

    def _update_buttons(self) -> None:
        who = self.ws.who_name
        missing = [] if who else ["type your name at the top"]
        if not self.role.value.strip():
            missing.append("name your role")
        if self.decision.value == "reject" and not self.sign_comment.value.strip():
            missing.append("say in the comment what must change")
        self.sign.disabled = bool(missing)
        self.sign_hint.value = ("To sign: " + ", ".join(missing) + ".") if missing else ""
        self.add.disabled = not (who and self.comment.value.strip())
        s = self.ws.session
        waived = s.current in s.study.waivers()
        self.waive.description = (
            f"Withdraw the waiver of {s.current}" if waived else f"Record waiver for {s.current}"
        )
        self.waive.disabled = not (who and self.waive_reason.value.strip())

    def _on_sign(self) -> None:
        try:
            self._sign()
        finally:
            # a refused approval analysed every characteristic: show it here and in the
            # overview
            self._drawn = None
            self.ws.context.update()

    def _sign(self) -> None:
        ws, s = self.ws, self.ws.session
        signed = s.sign(
            who=ws.who_name,
            role=names.role_id(self.role.value),
            decision=self.decision.value,
            comment=self.sign_comment.value,
        )
        self.sign_comment.value = ""
        lock = " The study is now approved and locked." if s.is_locked else ""
        ws.context.messages.ok(
            f"Signed by {signed.name} as {names.role_label(signed.role)}: "
            f"{names.decision_label(signed.decision)}." + lock
        )

    def _on_waive(self) -> None:
        ws, s = self.ws, self.ws.session
        name = s.current
        withdraw = name in s.study.waivers()
        s.waive(
            name,
            reason=self.waive_reason.value,
            who=ws.who_name,
            withdraw=withdraw,
            override_reason=ws.override_reason,
        )
        self.waive_reason.value = ""
        ws.context.messages.ok(
            ("Waiver withdrawn for " if withdraw else "Waiver recorded for ")
            + f"{name}. Sign-offs made before no longer hold."
        )

    def _on_comment(self) -> None:
        ws, s = self.ws, self.ws.session
        s.add_comment(
            self.comment.value,
            who=ws.who_name,
            characteristic=s.current if self.about.value else None,
        )
        self.comment.value = ""
        ws.context.messages.ok("Comment added.")

    def _on_reload(self) -> None:
        self.ws.session.reload()
        self.ws.context.messages.info(
            "Read the study file again; changes made elsewhere are shown."
        )


STEP = SignoffStep()
