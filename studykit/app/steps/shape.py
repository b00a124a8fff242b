"""Workbook step "Shape": how the values are distributed, and the model the indices rest on.

Histogram with the chosen model's density (and the normal one for comparison) and the
specification limits; the normal probability plot with its confidence band; the normality
tests; the ranking of fitted families. The engineer may choose the model (auto, normal,
Box-Cox, Johnson or a fitted family): the effect on the judged index is shown before anything
is recorded, and the choice is stored as a ``set_model`` decision with who and why.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit import names
from studykit.app.charts import LiveChart, ShapeView
from studykit.app.overview import (
    fmt,
    no_study_panel,
    panel,
    panel_css,
    verdict_chip,
    verdict_kind,
    when_shown,
    workspace,
)
from studykit.app.widgets import esc, guarded, html_box
from studykit.errors import StudyInputError

_BASE_MODELS = [("Let studykit choose (auto)", "auto"), ("Normal", "normal"),
                ("Box-Cox transformation", "boxcox"), ("Johnson transformation", "johnson")]


def _model_options(result) -> list:
    options = list(_BASE_MODELS)
    if result is not None and result.ranking is not None:
        for row in result.ranking.rows:
            if row.id != "normal" and not row.error:
                options.append((f"Fitted: {names.model_label(row.id)}", row.id))
    return options


def ranking_html(result, *, limit: int = 10) -> str:
    """The ranking of fitted families as an HTML table (best first)."""
    ranking = result.ranking
    if ranking is None:
        return ""
    chosen = result.model.name if result.model is not None else None
    body = []
    for row in ranking.rows[:limit]:
        mark = " ◂ used" if row.id == chosen else ""
        ad_p = row.ad_p_text or ("—" if row.ad_p_value is None
                                 else names.format_p(row.ad_p_value))
        note = row.error or row.note or ("" if row.converged else "did not converge")
        body.append(
            f"<tr><td class=\"num\">{row.rank}</td><td>{esc(names.model_label(row.id))}"
            f"<b>{mark}</b></td>"
            f'<td class="num">{fmt(row.aic, 1)}</td><td class="num">{fmt(row.ad_statistic, 3)}'
            f'</td><td class="num">{esc(ad_p)}</td><td>{esc(note)}</td></tr>')
    return ('<div class="sk-panel-title">Fitted models, best first</div>'
            f'<div class="sk-small">{esc(ranking.rule)}</div>'
            '<table class="sk-table sk-ranking"><thead><tr><th>#</th><th>Model</th><th>AIC</th>'
            "<th>AD statistic</th><th>AD p-value</th><th>Note</th></tr></thead><tbody>"
            + "".join(body) + "</tbody></table>")


def effect_html(before, after) -> str:
    """Before/after of the judged index when the model changes."""
    def cells(r):
        v = r.verdict
        if v is None:
            return "<td>—</td><td>—</td><td>—</td><td>" + verdict_chip(None) + "</td>"
        label = r.model.label if r.model is not None else "—"
        kind, word = verdict_kind(v)
        return (f"<td>{esc(label)}</td><td class=\"num\">{fmt(v.estimate)}</td>"
                f'<td class="num">{fmt(v.lower_bound)}</td>'
                f"<td>{verdict_chip(v.meets, text=word, kind=kind)}</td>")

    index = (before.verdict.index if before.verdict is not None else "index").capitalize()
    return ('<table class="sk-table sk-effect"><thead><tr><th></th><th>Model</th>'
            f"<th>{esc(index)}</th><th>Lower bound</th><th>Verdict</th></tr></thead><tbody>"
            f"<tr><td>Now</td>{cells(before)}</tr><tr><td>With the choice</td>{cells(after)}"
            "</tr></tbody></table>")


class ShapeStep:
    """Step "Shape" (key ``shape``)."""

    key = "shape"
    title = names.STEP_NAMES[key]
    guidance = "Check how the values are distributed and choose the model that describes them."

    def __init__(self):
        self.ws = None
        self.view = None
        self._drawn = None

    def build(self, context) -> widgets.Widget:
        ws = self.ws = workspace(context)
        if ws is None:
            return no_study_panel("The shape step")
        m = context.messages
        self.view = ShapeView()
        self.live = LiveChart(self.view.layout)
        self.chart = widgets.VBox([])
        self.caution = widgets.VBox([])
        self.tests = html_box("", "sk-normality")
        self.ranking = html_box("", "sk-ranking-box")
        self.model = widgets.Dropdown(options=_BASE_MODELS, value="auto",
                                      layout=widgets.Layout(width="320px"))
        self.model.add_class("sk-model-pick")
        self.effect = html_box("", "sk-model-effect")
        self.reason = widgets.Text(placeholder="why this model, e.g. 'runout is bounded at zero'",
                                   layout=widgets.Layout(width="420px"))
        self.reason.add_class("sk-model-reason")
        self.save = widgets.Button(description="Record model choice", button_style="primary",
                                   disabled=True, icon="check")
        self.save.add_class("sk-model-save")
        self.hint = html_box("", "sk-small")
        self.model.observe(guarded(lambda _c: self._on_model(), messages=m), names="value")
        for w in (self.reason, ws.who):
            w.observe(guarded(lambda _c: self._update_buttons(), messages=m), names="value")
        self.save.on_click(guarded(lambda _b: self._on_save(), messages=m))
        self.body = widgets.VBox([])
        choice = widgets.VBox([
            html_box('<div class="sk-panel-title">Model for the capability indices</div>'),
            widgets.HBox([self.model, self.effect],
                         layout=widgets.Layout(flex_flow="row wrap",
                                               align_items="flex-start")),
            html_box('<div class="sk-field-label">Reason (required)</div>'), self.reason,
            widgets.HBox([self.save, self.hint], layout=widgets.Layout(align_items="center"))])
        self.content = widgets.VBox([self.tests, self.chart, choice, self.ranking])
        self.refresh(context)
        self.chart.children = [self.live.widget("sk-shape-chart")]
        when_shown(context, self.key, self.live.resync)
        return panel([panel_css(), ws.toolbar(), self.caution, self.body, self.content])

    def shown(self, context) -> None:
        """The step is open again: bring its chart widget up to date."""
        if self.view is not None:
            self.live.resync()

    def refresh(self, context) -> None:
        ws = self.ws
        if ws is None or self.view is None:
            return
        s = ws.session
        try:
            res = s.result(s.current)
        except StudyInputError as exc:
            self.body.children = [html_box(f'<div class="sk-msg sk-msg-error">{esc(exc)}</div>')]
            self.content.layout.display = "none"
            return
        key = (s.current, id(res))
        if key == self._drawn:
            return
        self._drawn = key
        if res.attribute or res.probability_plot is None:
            self.body.children = [html_box(
                '<div class="sk-coming">Counted data (defectives or defects) are judged by '
                "their rate, not by a distribution of measured values: see the capability "
                "step.</div>")]
            self.content.layout.display = "none"
            return
        self.body.children = []
        self.content.layout.display = ""
        self.view.update(res)
        self.live.changed()
        self.tests.value = self._tests_html(res)
        self.ranking.value = ranking_html(res)
        recorded = s.study.model_for(s.current)
        options = _model_options(res)
        self._quiet = True
        try:
            self.model.options = options
            self.model.value = recorded if recorded in [v for _l, v in options] else "auto"
        finally:
            self._quiet = False
        self.effect.value = ""
        self.reason.value = ""
        self._update_buttons()

    @staticmethod
    def _tests_html(res) -> str:
        ad = res.normality["anderson_darling"] if res.normality else None
        sw = res.normality["shapiro_wilk"] if res.normality else None
        facts = [("Values used", f"{res.n} in {res.subgroups} subgroups"),
                 ("Mean / overall sigma", f"{fmt(res.mean, 5)} / {fmt(res.overall_sigma, 5)}")]
        if ad is not None:
            facts.append(("Anderson-Darling (normal)",
                          f"A² = {fmt(ad.a2, 3)}, p = {esc(names.format_p(ad.p_value))}"))
        if sw is not None:
            facts.append(("Shapiro-Wilk (normal)", f"W = {fmt(sw.w, 4)}, p = {esc(names.format_p(sw.p_value))}"))
        if res.model is not None:
            facts.append(("Model used", f"{res.model.label} — {res.model.reason}"))
        return ('<dl class="sk-facts">' + "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>"
                                                  for k, v in facts) + "</dl>")

    def _update_buttons(self) -> None:
        s = self.ws.session
        missing = []
        if self.model.value == s.study.model_for(s.current):
            missing.append("choose a model different from the one recorded")
        if not self.reason.value.strip():
            missing.append("give a reason")
        if not self.ws.who_name:
            missing.append("type your name at the top")
        self.save.disabled = bool(missing)
        self.hint.value = ("To record: " + ", ".join(missing) + ".") if missing else ""

    def _on_model(self) -> None:
        if getattr(self, "_quiet", False):
            return
        s = self.ws.session
        self._update_buttons()
        if self.model.value == s.study.model_for(s.current):
            self.effect.value = ""
            return
        before = s.result(s.current)
        try:
            after = s.preview(s.current, model=self.model.value)
        except StudyInputError as exc:
            self.effect.value = (f'<div class="sk-msg sk-msg-warning"><span class="sk-msg-kind">'
                                 f"Cannot use this model</span>{esc(exc)}</div>")
            return
        self.effect.value = effect_html(before, after)

    def _on_save(self) -> None:
        ws, s = self.ws, self.ws.session
        s.set_model(s.current, self.model.value, who=ws.who_name, reason=self.reason.value,
                    override_reason=ws.override_reason)
        ws.context.messages.ok(f"Model '{self.model.value}' recorded for {s.current}.")


STEP = ShapeStep()
