"""Workbook step "Shape": how the values are distributed, and the model the indices rest on.

Histogram with the chosen model's density (and the normal one for comparison) and the
specification limits; the normal probability plot with its confidence band; the normality
tests; the fitted families, each once, with the effect of allowing a threshold
(:mod:`studykit.report.model_list`). The engineer may choose the model (auto, normal, Box-Cox,
Johnson or a fitted family, with or without a threshold): the effect on the judged index is
shown before anything is recorded, and the choice is stored as a ``set_model`` decision (the
model id, e.g. ``weibull3``) with who and why.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit import names
from studykit.app.charts import ShapeView
from studykit.app.overview import (
    fmt,
    panel,
    panel_css,
    verdict_chip,
    verdict_kind,
    when_shown,
)
from studykit.app.steps.base import ChartStep
from studykit.app.widgets import esc, guarded, html_box
from studykit.errors import StudyInputError
from studykit.report import model_list
from studykit.report.model_list import family_lines

_BASE_MODELS = [
    ("Let studykit choose (auto)", "auto"),
    ("Normal", "normal"),
    ("Box-Cox transformation", "boxcox"),
    ("Johnson transformation", "johnson"),
]


def _model_options(result) -> list:
    """The model choices: the transformations, then each fitted family once (its threshold
    variant is chosen with the "Allow a threshold" box)."""
    options = list(_BASE_MODELS)
    if result is not None and result.ranking is not None:
        for line in family_lines(result.ranking):
            if line.family != "normal" and (_usable(line.plain) or _usable(line.shifted)):
                options.append((f"Fitted: {line.name}", line.family))
    return options


def _usable(row) -> bool:
    return row is not None and not row.error


def _threshold_variants(result) -> dict:
    """Family id -> the id of its threshold variant, for the families that have a usable one."""
    if result is None or result.ranking is None:
        return {}
    return {
        line.family: line.shifted.id
        for line in family_lines(result.ranking)
        if _usable(line.shifted)
    }


def _ad_p(row) -> str:
    if row is None or row.error:
        return "—"
    return row.ad_p_text or ("—" if row.ad_p_value is None else names.format_p(row.ad_p_value))


def ranking_html(result, *, limit: int = 10) -> str:
    """The fitted families as an HTML table, best first: each family once, its fit without and
    with a threshold side by side, and what allowing the threshold changes."""
    ranking = result.ranking
    if ranking is None:
        return ""
    chosen = result.model.name if result.model is not None else None
    L = model_list.LABELS
    body = []
    for line in family_lines(ranking)[:limit]:
        cells = []
        for row in (line.plain, line.shifted):
            if row is None:
                cells.append('<td class="num">—</td><td class="num">—</td>')
                continue
            mark = f" <b>{esc(L['used'])}</b>" if row.id == chosen else ""
            aic = "not fitted" if row.error else fmt(row.aic, 1)
            cells.append(
                f'<td class="num">{esc(aic)}{mark}</td><td class="num">{esc(_ad_p(row))}</td>'
            )
        note = line.best.note or ("" if line.best.converged else "did not converge")
        effect = model_list.threshold_effect(line, fmt)
        body.append(
            f'<tr><td class="num">{line.rank}</td><td>{esc(line.name)}</td>'
            + "".join(cells)
            + f'<td class="sk-small">{esc(effect)}'
            + (f"<br>{esc(note)}" if note else "")
            + "</td></tr>"
        )
    head = (
        f'<tr><th rowspan="2">#</th><th rowspan="2">{esc(L["family"])}</th>'
        f'<th colspan="2">{esc(L["plain"])}</th><th colspan="2">{esc(L["shifted"])}</th>'
        f'<th rowspan="2">{esc(L["effect"])}</th></tr>'
        f"<tr><th>{esc(L['aic'])}</th><th>{esc(L['ad_p'])}</th>"
        f"<th>{esc(L['aic'])}</th><th>{esc(L['ad_p'])}</th></tr>"
    )
    return (
        f'<div class="sk-panel-title">{esc(L["title"])}</div>'
        f'<div class="sk-small">{esc(L["rule"])} {esc(ranking.rule)}</div>'
        f'<div class="sk-scroll"><table class="sk-table sk-ranking"><thead>{head}</thead>'
        "<tbody>" + "".join(body) + "</tbody></table></div>"
        f'<div class="sk-small">{esc(model_list.SOURCE)}</div>'
    )


def effect_html(before, after) -> str:
    """Before/after of the judged index when the model changes."""

    def cells(r):
        v = r.verdict
        if v is None:
            return "<td>—</td><td>—</td><td>—</td><td>" + verdict_chip(None) + "</td>"
        label = r.model.label if r.model is not None else "—"
        kind, word = verdict_kind(v)
        return (
            f'<td>{esc(label)}</td><td class="num">{names.format_index(v.estimate)}</td>'
            f'<td class="num">{names.format_index(v.lower_bound)}</td>'
            f"<td>{verdict_chip(v.meets, text=word, kind=kind)}</td>"
        )

    index = names.index_label(before.verdict.index) if before.verdict is not None else "Index"
    return (
        '<table class="sk-table sk-effect"><thead><tr><th></th><th>Model</th>'
        f"<th>{esc(index)}</th><th>Lower bound</th><th>Verdict</th></tr></thead><tbody>"
        f"<tr><td>Now</td>{cells(before)}</tr><tr><td>With the choice</td>{cells(after)}"
        "</tr></tbody></table>"
    )


class ShapeStep(ChartStep):
    """Step "Shape" (key ``shape``)."""

    key = "shape"
    title = names.STEP_NAMES[key]
    guidance = "Check how the values are distributed and choose the model that describes them."
    what = "The shape step"

    def _build(self, ws, context) -> widgets.Widget:
        m = context.messages
        self._chart(ShapeView())
        self.chart = widgets.VBox([])
        self.tests = html_box("", "sk-normality")
        self.ranking = html_box("", "sk-ranking-box")
        self.model = widgets.Dropdown(
            options=_BASE_MODELS, value="auto", layout=widgets.Layout(width="320px")
        )
        self.model.add_class("sk-model-pick")
        self.threshold = widgets.Checkbox(
            value=False,
            description=model_list.LABELS["allow"],
            indent=False,
            disabled=True,
            layout=widgets.Layout(width="auto"),
        )
        self.threshold.add_class("sk-model-threshold")
        self._variants = {}
        self.effect = html_box("", "sk-model-effect")
        self.reason = widgets.Text(
            placeholder="why this model, e.g. 'runout is bounded at zero'",
            layout=widgets.Layout(width="420px"),
        )
        self.reason.add_class("sk-model-reason")
        self.save = widgets.Button(
            description="Record model choice", button_style="primary", disabled=True, icon="check"
        )
        self.save.add_class("sk-model-save")
        self.hint = html_box("", "sk-small")
        self.model.observe(guarded(lambda _c: self._on_model(), messages=m), names="value")
        self.threshold.observe(guarded(lambda _c: self._on_model(), messages=m), names="value")
        for w in (self.reason, ws.who):
            w.observe(guarded(lambda _c: self._update_buttons(), messages=m), names="value")
        self.save.on_click(guarded(lambda _b: self._on_save(), messages=m))
        self.body = widgets.VBox([])
        choice = widgets.VBox(
            [
                html_box('<div class="sk-panel-title">Model for the capability indices</div>'),
                widgets.HBox(
                    [widgets.VBox([self.model, self.threshold]), self.effect],
                    layout=widgets.Layout(flex_flow="row wrap", align_items="flex-start"),
                ),
                html_box('<div class="sk-field-label">Reason (required)</div>'),
                self.reason,
                widgets.HBox([self.save, self.hint], layout=widgets.Layout(align_items="center")),
            ]
        )
        self.content = widgets.VBox([self.tests, self.chart, choice, self.ranking])
        self.refresh(context)
        self.chart.children = [self.live.widget("sk-shape-chart")]
        when_shown(context, self.key, self.live.resync)
        return panel([panel_css(), ws.toolbar(), self.caution, self.body, self.content])

    def _show_error(self, name: str, exc: StudyInputError) -> None:
        self.body.children = [html_box(f'<div class="sk-msg sk-msg-error">{esc(exc)}</div>')]
        self.content.layout.display = "none"

    def _draw(self, res, new_name: bool) -> None:
        s = self.ws.session
        if res.attribute or res.probability_plot is None:
            self.body.children = [
                html_box(
                    '<div class="sk-coming">Counted data (defectives or defects) are judged by '
                    "their rate, not by a distribution of measured values: see the capability "
                    "step.</div>"
                )
            ]
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
        self._variants = _threshold_variants(res)
        family = model_list.base_of(recorded) if recorded else "auto"
        self._quiet = True
        try:
            self.model.options = options
            self.model.value = family if family in [v for _l, v in options] else "auto"
            self.threshold.value = recorded == self._variants.get(family)
            self.threshold.disabled = family not in self._variants
        finally:
            self._quiet = False
        self.effect.value = ""
        self.reason.value = ""
        self._update_buttons()

    @staticmethod
    def _tests_html(res) -> str:
        ad = res.normality["anderson_darling"] if res.normality else None
        sw = res.normality["shapiro_wilk"] if res.normality else None
        facts = [
            ("Values used", f"{res.n} in {res.subgroups} subgroups"),
            (
                "Mean / overall sigma",
                f"{names.format_value(res.mean, digits=names.spec_digits(res.spec))} / "
                f"{names.format_spread(res.overall_sigma, digits=names.spec_digits(res.spec))}",
            ),
        ]
        if ad is not None:
            facts.append(
                (
                    "Anderson-Darling (normal)",
                    f"A² = {fmt(ad.a2, 3)}, p = {names.format_p(ad.p_value)}",
                )
            )
        if sw is not None:
            facts.append(
                ("Shapiro-Wilk (normal)", f"W = {fmt(sw.w, 4)}, p = {names.format_p(sw.p_value)}")
            )
        if res.model is not None:
            facts.append(("Model used", f"{res.model.label} — {res.model.reason}"))
        return (
            '<dl class="sk-facts">'
            + "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in facts)
            + "</dl>"
        )

    def chosen(self) -> str:
        """The model id chosen: the family, or its threshold variant when the box is ticked."""
        variant = self._variants.get(self.model.value)
        return variant if variant and self.threshold.value else self.model.value

    def _update_buttons(self) -> None:
        s = self.ws.session
        missing = []
        if self.chosen() == s.study.model_for(s.current):
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
        self.threshold.disabled = self.model.value not in self._variants
        self._update_buttons()
        if self.chosen() == s.study.model_for(s.current):
            self.effect.value = ""
            return
        before = s.result(s.current)
        try:
            after = s.preview(s.current, model=self.chosen())
        except StudyInputError as exc:
            self.effect.value = (
                f'<div class="sk-msg sk-msg-warning"><span class="sk-msg-kind">'
                f"Cannot use this model</span>{esc(exc)}</div>"
            )
            return
        self.effect.value = effect_html(before, after)

    def _on_save(self) -> None:
        ws, s = self.ws, self.ws.session
        chosen = self.chosen()
        s.set_model(
            s.current,
            chosen,
            who=ws.who_name,
            reason=self.reason.value,
            override_reason=ws.override_reason,
        )
        words = dict((v, label) for label, v in self.model.options).get(self.model.value, chosen)
        if chosen != self.model.value:
            words += f" ({model_list.LABELS['shifted'].lower()})"
        ws.context.messages.ok(f"Model '{words}' recorded for {s.current}.")


STEP = ShapeStep()
