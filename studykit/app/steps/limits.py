"""Workbook step "Specification & criterion": the study overview and each characteristic's specification.

At the top, every characteristic at a glance (:class:`~studykit.app.overview.OverviewPanel`):
verdict, index and lower bound, removals, review state; sortable; a click opens one in the
stability step. Below, the specification of the chosen characteristic: LSL, USL, target,
safety-critical, and the acceptance criterion (index, threshold, basis; optionally the
tolerance interval "at least P % within specification with C % confidence"). A change is stored in
the study file as a ``set_spec``/``set_criteria`` decision with who and why; a reason is
required.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit import names
from studykit.app.overview import OverviewPanel, panel, panel_css
from studykit.app.steps.base import StudyStep
from studykit.app.widgets import caution_banner, esc, guarded, html_box, labelled
from studykit.errors import SpecError
from studykit.study import INDICES, Criteria


def _number_or_none(text: str, *, name: str):
    text = (text or "").strip().replace(",", ".")
    if text == "":
        return None
    try:
        return float(text)
    except ValueError:
        raise SpecError(
            f"`{name}` ({text!r}) is not a number: write it like 12.03, or leave it "
            "empty for no limit"
        ) from None


def _show(v) -> str:
    return "" if v is None else f"{v:g}"


class LimitsStep(StudyStep):
    """Step "Specification & criterion" (key ``limits``)."""

    key = "limits"
    title = names.STEP_NAMES[key]
    guidance = (
        "Check every characteristic at a glance, then set each one's specification "
        "limits, target and acceptance criterion (changes are recorded with a reason)."
    )

    what = "The limits step"
    overview = None

    def _build(self, ws, context) -> widgets.Widget:
        m = context.messages
        self.overview = OverviewPanel(ws)
        lay = widgets.Layout(width="150px")
        self.lsl = widgets.Text(layout=lay, placeholder="none")
        self.usl = widgets.Text(layout=lay, placeholder="none")
        self.target = widgets.Text(layout=lay, placeholder="none")
        self.safety = widgets.Checkbox(description="Safety-critical", indent=False)
        self.index = widgets.Dropdown(
            options=[(i[0].upper() + i[1:], i) for i in INDICES],
            layout=widgets.Layout(width="110px"),
        )
        self.threshold = widgets.BoundedFloatText(
            min=0.01, max=10, step=0.01, layout=widgets.Layout(width="110px")
        )
        self.basis = widgets.Dropdown(
            options=[("lower confidence bound", "lower_bound"), ("point estimate", "estimate")],
            layout=widgets.Layout(width="200px"),
        )
        # the tolerance-interval criterion beside the index (ISO 16269-6), in percent
        self.interval_on = widgets.Checkbox(
            description="Also judge a tolerance interval", indent=False
        )
        self.interval_on.add_class("sk-interval-on")
        self.interval_p = widgets.BoundedFloatText(
            value=99.0, min=50.0, max=99.9999, step=0.1, layout=widgets.Layout(width="110px")
        )
        self.interval_c = widgets.BoundedFloatText(
            value=95.0, min=50.0, max=99.99, step=0.5, layout=widgets.Layout(width="110px")
        )
        self.reason = widgets.Text(
            placeholder="why, e.g. 'drawing rev C, ECN-118'", layout=widgets.Layout(width="420px")
        )
        self.reason.add_class("sk-spec-reason")
        self.save = widgets.Button(
            description="Save specification", button_style="primary", icon="save", disabled=True
        )
        self.save.add_class("sk-spec-save")
        self.hint = html_box("", "sk-small")
        for w in (self.reason, ws.who):
            w.observe(guarded(lambda _c: self._update_buttons(), messages=m), names="value")
        self.save.on_click(guarded(lambda _b: self._on_save(), messages=m))
        self.heading = html_box("", "sk-spec-heading")
        self.caution = widgets.VBox([])
        self.history = html_box("", "sk-spec-history")

        form = widgets.VBox(
            [
                widgets.HBox(
                    [
                        labelled("Lower limit (LSL)", self.lsl),
                        labelled("Upper limit (USL)", self.usl),
                        labelled("Target", self.target),
                        labelled("", self.safety),
                    ],
                    layout=widgets.Layout(flex_flow="row wrap"),
                ),
                widgets.HBox(
                    [
                        labelled("Index judged", self.index),
                        labelled("At least", self.threshold),
                        labelled("Judged on", self.basis),
                    ],
                    layout=widgets.Layout(flex_flow="row wrap"),
                ),
                widgets.HBox(
                    [
                        labelled("", self.interval_on),
                        labelled("Parts within specification, at least (%)", self.interval_p),
                        labelled("Confidence (%)", self.interval_c),
                    ],
                    layout=widgets.Layout(flex_flow="row wrap"),
                ),
                labelled("Reason for the change (required)", self.reason),
                widgets.HBox([self.save, self.hint], layout=widgets.Layout(align_items="center")),
            ]
        )
        form.add_class("sk-spec-form")
        self.refresh(context)
        return panel(
            [
                panel_css(),
                self.overview,
                ws.toolbar(),
                self.heading,
                self.caution,
                form,
                self.history,
            ]
        )

    def refresh(self, context) -> None:
        ws = self.ws
        if ws is None or self.overview is None:
            return
        s = ws.session
        self.overview.render(force=False)
        key = (s.current, id(s.study))
        if key == self._drawn:
            return
        self._drawn = key
        spec = s.study.characteristic(s.current)
        crit = s.study.criteria_for(s.current)
        self.heading.value = (
            f'<div class="sk-panel-title">Specification of '
            f"{esc(spec.name)}{' (' + esc(spec.unit) + ')' if spec.unit else ''}"
            f'</div><div class="sk-muted">{esc(spec.description)}</div>'
        )
        self.caution.children = [caution_banner()] if spec.safety_critical else []
        self.lsl.value, self.usl.value = _show(spec.lsl), _show(spec.usl)
        self.target.value = _show(spec.target)
        self.safety.value = spec.safety_critical
        self.index.value, self.threshold.value = crit.index, crit.threshold
        self.basis.value = crit.basis
        self.interval_on.value = crit.has_interval
        if crit.has_interval:
            self.interval_p.value = round(100 * crit.interval_coverage, 6)
            self.interval_c.value = round(100 * crit.interval_confidence, 6)
        attribute = spec.is_attribute
        for w in (
            self.lsl,
            self.usl,
            self.target,
            self.index,
            self.threshold,
            self.basis,
            self.interval_on,
            self.interval_p,
            self.interval_c,
        ):
            w.disabled = attribute
        self.reason.value = ""
        rows = [
            d
            for d in s.study.decisions
            if d.characteristic == spec.name and d.action in ("set_spec", "set_criteria")
        ]
        if rows:
            body = "".join(
                f"<tr><td>{esc(d.when.replace('T', ' ').rstrip('Z'))}</td><td>{esc(d.who)}</td>"
                f"<td>{esc(_change_text(d))}</td><td>{esc(d.reason)}</td></tr>"
                for d in rows
            )
            self.history.value = (
                '<div class="sk-panel-title">Changes on record</div>'
                '<table class="sk-table"><thead><tr><th>When (UTC)</th>'
                "<th>Who</th><th>Change</th><th>Reason</th></tr></thead>"
                f"<tbody>{body}</tbody></table>"
            )
        else:
            self.history.value = (
                '<div class="sk-small" style="margin-top:10px">No change '
                "since the study was created.</div>"
            )
        self._update_buttons()

    def _update_buttons(self) -> None:
        missing = []
        if not self.reason.value.strip():
            missing.append("give a reason")
        if not self.ws.who_name:
            missing.append("type your name at the top")
        self.save.disabled = bool(missing)
        self.hint.value = ("To save: " + ", ".join(missing) + ".") if missing else ""

    def _on_save(self) -> None:
        ws, s = self.ws, self.ws.session
        name = s.current
        spec = {"safety_critical": bool(self.safety.value)}
        crit = None
        if not s.study.characteristic(name).is_attribute:
            spec.update(
                lsl=_number_or_none(self.lsl.value, name="lsl"),
                usl=_number_or_none(self.usl.value, name="usl"),
                target=_number_or_none(self.target.value, name="target"),
            )
            on = bool(self.interval_on.value)
            crit = Criteria(
                index=self.index.value,
                threshold=float(self.threshold.value),
                basis=self.basis.value,
                confidence=s.study.criteria_for(name).confidence,
                interval_coverage=float(self.interval_p.value) / 100 if on else None,
                interval_confidence=float(self.interval_c.value) / 100 if on else None,
            )
        changed = s.update_characteristic(
            name,
            who=ws.who_name,
            reason=self.reason.value,
            spec=spec,
            criteria=crit,
            override_reason=ws.override_reason,
        )
        if changed:
            ws.context.messages.ok(
                f"Specification of {name} saved with your reason; the analysis was updated."
            )
        else:
            ws.context.messages.info(f"Nothing changed in the specification of {name}.")


def _change_text(d) -> str:
    if d.action == "set_spec":
        old = d.payload.get("old", {})
        return "; ".join(
            f"{k}: {old.get(k)!r} → {v!r}" for k, v in d.payload.get("changes", {}).items()
        )
    crit = d.payload.get("criteria", {})
    try:
        return "criterion: " + Criteria.from_dict(crit).describe()
    except SpecError:
        return "criterion changed"


STEP = LimitsStep()
