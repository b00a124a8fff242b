"""Workbook step "Capability": the indices with their bounds, PPM, the verdict and the plan.

The verdict sentence comes first (with our verdict chip), then the indices drawn as intervals
against the required threshold, expected (within, overall) and observed PPM, the findings in
plain words, the range of the judged index across the models the data do not reject, and the
demonstration planner: slide the index you believe the process has and read how many parts a
study needs (:func:`studykit.stats.planning.parts_needed`). Safety-critical characteristics
carry the caution banner.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit import names, theme
from studykit.app.charts import IntervalView
from studykit.app.overview import fmt, panel, panel_css, verdict_chip, when_shown
from studykit.app.steps.base import ChartStep
from studykit.app.widgets import caution_banner, esc, guarded, html_box
from studykit.errors import StudyInputError

_PLANNABLE = ("cp", "cpk", "pp", "ppk", "cpu", "cpl", "ppu", "ppl")


def verdict_html(result) -> str:
    """The verdict sentence in a coloured box with its chip."""
    v = result.verdict
    if v is None and result.attribute:
        return (
            '<div class="sk-verdict-box" style="border-color:'
            f'{theme.VERDICTS["withheld"].color}">'
            f"{verdict_chip(None, text=names.verdict_label(result), kind='withheld')}"
            '<div style="margin-top:6px">Counted data are judged by their defective (or '
            "defect) rate with its confidence interval below; no capability index "
            "criterion applies.</div></div>"
        )
    if v is None:
        text = (
            ("No verdict: " + "; ".join(result.warnings))
            if result.warnings
            else ("No verdict: the characteristic has no specification limit to judge against.")
        )
        meets = None
    else:
        text, meets = v.text, v.meets
    state = names.verdict_state(result)
    key, word = names.VERDICT_THEME[state], names.VERDICT_STATES[state]
    colour = theme.VERDICTS[key].color
    crit = result.criteria
    label = names.index_label(crit.get("index") or "")
    basis = (
        "lower " + f"{float(crit.get('confidence', 0.95)) * 100:g}% bound"
        if crit.get("basis") == "lower_bound"
        else "estimate"
    )
    also = ""
    if crit.get("interval_coverage") is not None:  # the tolerance-interval criterion
        from studykit.intervals import criterion_text

        also = (
            f"; and {esc(criterion_text(crit['interval_coverage'], crit['interval_confidence']))}"
        )
    return (
        f'<div class="sk-verdict-box" style="border-color:{colour}">'
        f"{verdict_chip(meets, text=word, kind=key)}"
        f'<div style="margin-top:6px">{esc(text)}</div>'
        f'<div class="sk-small" style="margin-top:4px">Criterion: {esc(label)} {esc(basis)} '
        f"≥ {fmt(crit.get('threshold'), 2)}{also}</div></div>"
    )


def indices_html(result) -> str:
    """The table of indices that goes to the customer: estimate, one-sided lower bound and
    two-sided interval at the study's level, and the bound's method (as in the PDF report)."""
    cap = result.capability
    if cap is None:
        return ""
    pct = f"{cap.level * 100:g}%"
    judged = result.criteria.get("index")
    verdict = getattr(result, "verdict", None)
    if verdict is not None and getattr(verdict, "index", None):
        judged = verdict.index
    tm = getattr(result, "time_model", None)
    by_class = (getattr(tm, "judged", None) or {}) if tm is not None else {}
    if by_class.get("basis") == "class_method":
        judged = None  # judged on the class's own index: the extra row below
    body = []
    for k in ("cp", "cpk", "pp", "ppk", "cpm"):
        est = getattr(cap, k, None)
        if est is None:
            continue
        b = (cap.bounds or {}).get(k) or {}
        two = (
            f"{fmt(b.get('lower'), 2)} – {fmt(b.get('upper'), 2)}"
            if b.get("lower") is not None
            else "—"
        )
        mark = " (judged)" if k == judged else ""
        body.append(
            f"<tr><td><b>{esc(names.index_label(k))}</b>{mark}</td>"
            f'<td class="num">{fmt(est, 2)}</td>'
            f'<td class="num">{fmt(b.get("lower_bound"), 2)}</td>'
            f'<td class="num">{two}</td>'
            f"<td>{esc(names.bound_method_label(b.get('method', '—')))}</td></tr>"
        )
    if by_class.get("basis") == "class_method":
        body.append(
            f"<tr><td><b>{esc(names.index_label(by_class['index']))}</b> by the time-dependent "
            f"model {esc(tm.cls)} (judged)</td>"
            f'<td class="num">{fmt(by_class.get("estimate"), 2)}</td>'
            f'<td class="num">{fmt(by_class.get("lower_bound"), 2)}</td>'
            '<td class="num">—</td><td>parametric bootstrap of the class model</td></tr>'
        )
    return (
        '<div class="sk-panel-title">Capability indices</div>'
        '<table class="sk-table sk-indices"><thead><tr><th>Index</th><th>Estimate</th>'
        f"<th>Lower {pct} bound (one-sided)</th><th>Two-sided {pct} interval</th>"
        "<th>Bound method</th></tr></thead><tbody>" + "".join(body) + "</tbody></table>"
    )


def _ppm(v) -> str:
    """PPM for a table: small values stay visible ('< 0.01'), large ones get separators."""
    if v is None:
        return "—"
    v = float(v)
    if v == 0:
        return "0"
    if v < 0.01:
        return "&lt; 0.01"
    return f"{v:,.2f}" if v < 100 else f"{v:,.0f}"


def ppm_html(result) -> str:
    cap = result.capability
    if cap is None:
        return ""
    rows = [
        ("Expected, within sigma", cap.ppm_within_below, cap.ppm_within_above, cap.ppm_within),
        ("Expected, overall", cap.ppm_overall_below, cap.ppm_overall_above, cap.ppm_overall),
        ("Observed in the data", cap.ppm_observed_below, cap.ppm_observed_above, cap.ppm_observed),
    ]
    has_lsl = result.spec.get("lsl") is not None
    has_usl = result.spec.get("usl") is not None
    body = "".join(
        f"<tr><td>{esc(n)}</td>"
        f'<td class="num">{_ppm(b) if has_lsl else "no LSL"}</td>'
        f'<td class="num">{_ppm(a) if has_usl else "no USL"}</td>'
        f'<td class="num"><b>{_ppm(t)}</b></td></tr>'
        for n, b, a, t in rows
    )
    return (
        '<div class="sk-panel-title">Parts per million outside the limits</div>'
        '<table class="sk-table sk-ppm"><thead><tr><th></th><th>Below LSL</th>'
        "<th>Above USL</th><th>Total</th></tr></thead><tbody>" + body + "</tbody></table>"
        f'<div class="sk-small">Method: {esc(names.bound_method_label(cap.method))}; model: '
        f"{esc(names.model_label(cap.model))}.</div>"
    )


def findings_html(result) -> str:
    items = list(result.findings)
    warnings = list(result.warnings)
    if not items and not warnings:
        return (
            '<div class="sk-panel-title">Findings</div><div class="sk-muted">Nothing to '
            "report beyond the numbers.</div>"
        )
    out = []
    for f in items:
        kind = {"warning": "warning", "error": "error"}.get(f.severity, "info")
        out.append(
            f'<div class="sk-msg sk-msg-{kind}"><b>{esc(names.finding_title(f.code))}'
            f"</b>: {esc(f.text)}</div>"
        )
    for w in warnings:
        out.append(f'<div class="sk-msg sk-msg-warning">{esc(w)}</div>')
    return '<div class="sk-panel-title">Findings</div>' + "".join(out)


def band_html(result) -> str:
    b = result.model_band
    if b is None:
        return ""
    text = (
        f"Across the models the data do not reject, the judged index "
        f"({esc(b.quantity)}) lies between "
        f"{fmt(b.low, 2)} ({esc(names.model_list(b.low_models))}) and {fmt(b.high, 2)} "
        f"({esc(names.model_list(b.high_models))})."
    )
    warn = f'<div class="sk-msg sk-msg-warning">{esc(b.warning)}</div>' if b.warning else ""
    return f'<div class="sk-panel-title">{names.MODEL_BAND}</div><div>{text}</div>{warn}'


def attribute_html(result) -> str:
    ac = result.attribute_capability
    if ac is None:
        return ""
    d = ac.to_dict()
    level = f"{float(d.get('level', 0.95)) * 100:g}%"
    facts = []
    shown = set()

    def add(label, text, *keys):
        if all(d.get(k) is not None for k in keys):
            facts.append((label, text))
            shown.update(keys)

    add(
        "Inspected / defectives",
        f"{d.get('inspected')} / {d.get('defectives')} in {d.get('n_subgroups')} lots",
        "inspected",
        "defectives",
        "n_subgroups",
    )
    if d.get("defective_rate") is not None:
        add(
            "Defective rate",
            f"{d['defective_rate'] * 100:.3f} % ({level} interval "
            f"{(d.get('defective_rate_lower') or 0) * 100:.3f} – "
            f"{(d.get('defective_rate_upper') or 0) * 100:.3f} %)",
            "defective_rate",
            "defective_rate_lower",
            "defective_rate_upper",
        )
    add(
        "PPM defective",
        f"{fmt(d.get('ppm_defective'), 0)} (upper {level} bound "
        f"{fmt(d.get('ppm_defective_upper_95'), 0)})",
        "ppm_defective",
        "ppm_defective_upper_95",
    )
    add(
        "Process Z",
        f"{fmt(d.get('z_process'), 2)} (lower {level} bound {fmt(d.get('z_process_lower_95'), 2)})",
        "z_process",
        "z_process_lower_95",
    )
    shown.update({"level", "defective_rate_upper_95"})
    facts += [
        (
            k.replace("_", " ").capitalize(),
            fmt(v, 4)
            if isinstance(v, float)
            else esc(names.bound_method_label(v) if k == "method" else v),
        )
        for k, v in d.items()
        if k not in shown
    ]
    return (
        '<div class="sk-panel-title">Counted data</div><dl class="sk-facts">'
        + "".join(f"<dt>{esc(k)}</dt><dd>{v}</dd>" for k, v in facts)
        + "</dl>"
    )


class CapabilityStep(ChartStep):
    """Step "Capability" (key ``capability``)."""

    key = "capability"
    title = names.STEP_NAMES[key]
    guidance = (
        "Compare the process spread with the tolerance and read the verdict with its "
        "confidence bound."
    )
    what = "The capability step"

    def _build(self, ws, context) -> widgets.Widget:
        m = context.messages
        self._chart(IntervalView())
        self.chart = widgets.VBox([])
        self.verdict = html_box("", "sk-verdict")
        self.ppm = html_box("", "sk-ppm-box")
        self.indices = html_box("", "sk-indices-box")
        self.findings = html_box("", "sk-findings")
        self.band = html_box("", "sk-band")
        self.attribute = html_box("", "sk-attribute")
        self.streams = widgets.VBox([])  # several streams: table and group chart
        self.streams.add_class("sk-streams")
        from studykit.app.steps.extras_views import PositionView

        self.interval = html_box("", "sk-tolerance-interval")  # ISO 16269-6 criterion panel
        self.position = PositionView()  # position studies kept beside the study
        self.assumed = widgets.FloatSlider(
            min=1.0,
            max=3.0,
            step=0.01,
            value=2.0,
            description="",
            readout_format=".2f",
            continuous_update=False,
            layout=widgets.Layout(width="420px"),
        )
        self.assumed.add_class("sk-plan-slider")
        self.plan = html_box("", "sk-plan")
        self.assumed.observe(guarded(lambda _c: self._on_plan(), messages=m), names="value")
        self.planner = widgets.VBox(
            [
                html_box(
                    '<div class="sk-panel-title">Demonstration planner</div>'
                    '<div class="sk-muted">If the process truly has this index, how many parts '
                    "does a study need for its lower bound to reach the requirement?</div>"
                ),
                widgets.HBox(
                    [html_box('<div class="sk-field-label">Assumed index</div>'), self.assumed],
                    layout=widgets.Layout(align_items="center"),
                ),
                self.plan,
            ]
        )
        self.numbers = widgets.VBox(
            [
                self.indices,
                self.chart,
                widgets.HBox([self.ppm, self.band], layout=widgets.Layout(flex_flow="row wrap")),
            ]
        )
        self.refresh(context)
        self.chart.children = [self.live.widget("sk-interval-chart")]
        when_shown(context, self.key, self.live.resync)
        return panel(
            [
                panel_css(),
                ws.toolbar(),
                self.caution,
                self.verdict,
                self.numbers,
                self.interval,
                self.attribute,
                self.streams,
                self.findings,
                self.planner,
                self.position.widget,
            ]
        )

    def _show_error(self, name: str, exc: StudyInputError) -> None:
        self.verdict.value = f'<div class="sk-msg sk-msg-error">{esc(exc)}</div>'

    def _draw(self, res, new_name: bool) -> None:
        s = self.ws.session
        self.caution.children = [caution_banner()] if res.spec.get("safety_critical") else []
        self.verdict.value = verdict_html(res)
        has_cap = res.capability is not None
        self.numbers.layout.display = "" if has_cap else "none"
        if has_cap:
            self.view.update(res)
            self.live.changed()
        self.ppm.value = ppm_html(res)
        self.indices.value = indices_html(res)
        self.band.value = band_html(res)
        self.attribute.value = attribute_html(res)
        from studykit.app.streams_view import streams_panel

        self.streams.children = streams_panel(res)
        from studykit.app.steps.extras_views import tolerance_interval_html

        self.interval.value = tolerance_interval_html(res)
        self.position.refresh(s.path, s.view_version)
        self.findings.value = findings_html(res)
        index = res.verdict.index if res.verdict is not None else None
        self.planner.layout.display = "" if index in _PLANNABLE else "none"
        if index in _PLANNABLE:
            threshold = float(res.verdict.threshold)
            start = res.verdict.estimate if res.verdict.estimate else threshold + 0.3
            self.assumed.min = round(threshold + 0.01, 2)
            self.assumed.max = max(round(threshold * 2, 2), self.assumed.min + 0.5)
            self.assumed.value = min(max(float(start), self.assumed.min), self.assumed.max)
            self._on_plan()

    def _on_plan(self) -> None:
        from studykit.stats.planning import parts_needed

        s = self.ws.session
        res = s.result(s.current)
        v = res.verdict
        if v is None or v.index not in _PLANNABLE:
            self.plan.value = ""
            return
        plan = parts_needed(
            float(self.assumed.value), float(v.threshold), index=v.index, level=float(v.level)
        )
        n = "—" if plan.n is None else f"{plan.n}"
        self.plan.value = (
            f'<div style="font-size:22px;font-weight:600;margin:6px 0">'
            f"{esc(n)} parts</div><div>{esc(plan.text)}</div>"
            f'<div class="sk-small">Study so far: {res.n} values. '
            f"{esc(plan.criterion)}.</div>"
        )


STEP = CapabilityStep()
