"""The study overview and the pieces every study panel shares.

* :class:`Workspace` holds, for one workbook, the :class:`~studykit.app.session.StudySession`
  of the open study file and the widgets every panel shows at its top: the characteristic
  picker, the "Your name" field (recorded as *who* with every decision) and, while the study is
  approved, the reason field that lets a change through the lock. The same widget instances
  appear in every panel, so a name typed once is used everywhere.
* :class:`OverviewPanel` is the table of all characteristics (verdict, index and lower bound,
  removals, review state), sortable by any column; a click on a name opens it in the
  stability, shape and capability panels. It analyses every characteristic when it is drawn
  (cached results are reused), so an open study never shows "not analysed yet"; above the
  table, :class:`OverviewChart` draws each characteristic's judged index against its
  requirement (the landing chart).

After every change the session reports, :class:`Workspace` calls ``context.update(study=...,
state=...)`` so the shell refreshes the header and every built panel.
"""

from __future__ import annotations

import math

import ipywidgets as widgets

from studykit import names, theme
from studykit.app.widgets import esc, guarded, html_box

__all__ = [
    "Workspace",
    "OverviewPanel",
    "OverviewChart",
    "workspace",
    "verdict_chip",
    "PANEL_CSS",
    "overview_rows",
    "SORT_KEYS",
]

WORKSPACE_KEY = "studykit.workspace"

PANEL_CSS = f"""
<style>
.sk-toolbar {{ gap: 14px; align-items: flex-end; padding: 0 0 12px 0; margin: 14px 0 12px 0;
  border-bottom: 1px solid {theme.RULE}; flex-wrap: wrap; }}
.sk-toolbar .widget-label {{ color: {theme.INK_SOFT}; }}
.sk-field-label {{ font-size: 12px; color: {theme.INK_SOFT}; text-transform: uppercase;
  letter-spacing: .04em; margin-bottom: 2px; }}
.sk-panel-title {{ font-size: 16px; font-weight: 600; color: {theme.INK}; margin: 14px 0 6px 0; }}
.sk-side {{ border-left: 3px solid {theme.RULE}; padding: 4px 0 4px 16px; }}
.sk-kv {{ display: grid; grid-template-columns: max-content auto; gap: 2px 14px; }}
.sk-kv dt {{ color: {theme.INK_SOFT}; }} .sk-kv dd {{ margin: 0; font-weight: 600; }}
.sk-chip {{ display: inline-block; padding: 2px 10px; border-radius: 11px; font-size: 13px;
  font-weight: 600; white-space: nowrap; border: 1px solid transparent; }}
.sk-verdict-box {{ border-left: 6px solid; padding: 12px 16px; margin: 4px 0 12px 0;
  font-size: 16px; line-height: 1.45; }}
.sk-ovtable .sk-ovcell {{ padding: 8px 12px 8px 0; border-bottom: 1px solid {theme.RULE_SOFT};
  display: flex; align-items: center; }}
.sk-ovtable .sk-ovhead {{ font-size: 12px; text-transform: uppercase; letter-spacing: .04em;
  color: {theme.INK_SOFT}; font-weight: 600; border-bottom: 2px solid {theme.RULE}; }}
.sk-ovtable .sk-ovcell.num {{ justify-content: flex-end; font-variant-numeric: tabular-nums; }}
.sk-root .sk-ovtable .sk-ovrow, .sk-root .sk-ovtable .sk-ovrow > .widget-html-content {{
  display: contents; line-height: normal; }}
.sk-root .jupyter-button.sk-link {{ background: transparent; color: {theme.OKABE_ITO["blue"]};
  text-decoration: underline; padding: 0; height: auto; text-align: left; font-weight: 600;
  box-shadow: none; }}
.sk-root .jupyter-button.sk-link:hover {{ color: {theme.INK}; }}
.sk-voided {{ text-decoration: line-through; color: {theme.INK_SOFT}; }}
.sk-lock {{ border: 1px solid {theme.OKABE_ITO["blue"]}; background: {theme.TINT}; padding: 10px 14px;
  border-radius: 3px; margin: 6px 0; }}
.sk-void {{ border: 2px solid {theme.VERDICTS["fail"].color};
  background: {theme.VERDICTS["fail"].background}; padding: 10px 14px; border-radius: 3px;
  margin: 6px 0; }}
.sk-proposal {{ border: 1px solid {theme.RULE}; padding: 8px 12px; margin: 4px 0;
  border-radius: 3px; background: {theme.PANEL}; }}
.sk-panel .widget-hbox {{ gap: 12px; }}
.sk-root .sk-panel .jupyter-button {{ width: auto; min-width: 0; align-self: flex-start;
  white-space: nowrap; }}
.sk-root .sk-panel .widget-toggle-buttons .widget-toggle-button {{ width: auto;
  padding: 0 14px; }}
.sk-kvtable td {{ padding: 2px 12px 2px 0; vertical-align: top; }}
.sk-kvtable td:first-child {{ color: {theme.INK_SOFT}; white-space: nowrap; }}
.sk-kvtable td:last-child {{ font-weight: 600; word-break: break-word; }}
.sk-panel .widget-hbox.sk-toolbar {{ gap: 18px; }}
.sk-summary {{ margin: 2px 0 10px 0; line-height: 1.8; }}
.sk-small {{ font-size: 12px; color: {theme.INK_SOFT}; }}
.sk-root .widget-text input, .sk-root .widget-textarea textarea,
.sk-root .widget-dropdown select {{ font-size: 14px; }}
</style>
"""


def panel_css() -> widgets.HTML:
    """The study panels' extra style sheet (idempotent: the same rules may appear twice)."""
    return widgets.HTML(PANEL_CSS, layout=widgets.Layout(height="0px", overflow="hidden"))


def fmt(v, digits: int = 3) -> str:
    """A number for a table: ``digits`` decimals, an em dash for None/NaN."""
    if v is None:
        return "—"
    try:
        f = float(v)
    except (TypeError, ValueError):
        return esc(v)
    if not math.isfinite(f):
        return "—"
    return f"{f:.{digits}f}"


def verdict_kind(verdict) -> tuple[str, str]:
    """(theme verdict key, word) for a :class:`~studykit.stats.capability.Verdict` or None.

    "More data needed" (caution) when the estimate meets the threshold but its lower bound
    does not: the data do not yet demonstrate the requirement, nor refute it.

    Examples
    --------
    >>> verdict_kind(None)
    ('withheld', 'No verdict')
    """
    if verdict is None or verdict.meets is None:
        return "withheld", names.VERDICT_STATES["no_verdict"]
    return result_kind(verdict)


def result_kind(result) -> tuple[str, str]:
    """(theme verdict key, the state's one name) of an analysis result: the states of
    :data:`studykit.names.VERDICT_STATES` ("No verdict: not in control", "Counted data: rate
    only", ...)."""
    state = names.verdict_state(result)
    return names.VERDICT_THEME[state], names.VERDICT_STATES[state]


def verdict_chip(meets, *, text: str | None = None, kind: str | None = None) -> str:
    """Our verdict chip: symbol, word and colour (never colour alone).

    ``meets`` True -> "Meets", False -> "Does not meet", None -> "No verdict".

    Examples
    --------
    >>> "No verdict" in verdict_chip(None)
    True
    """
    key, word = {
        True: ("pass", names.VERDICT_STATES["meets"]),
        False: ("fail", names.VERDICT_STATES["does_not_meet"]),
    }.get(meets, ("withheld", names.VERDICT_STATES["no_verdict"]))
    key = kind or key
    v = theme.VERDICTS[key]
    return (
        f'<span class="sk-chip" style="color:{v.text_color};background:{v.background};'
        f'border-color:{v.color}">{v.symbol} {esc(text or word)}</span>'
    )


class Workspace:
    """The study session of one workbook and the widgets every study panel shares."""

    def __init__(self, context, session):
        self.context = context
        self.session = session
        self.who = widgets.Text(placeholder="e.g. R. Okonkwo", layout=widgets.Layout(width="220px"))
        self.who.add_class("sk-who")
        names = list(session.names)
        self.picker = widgets.Dropdown(
            options=names, value=session.current, layout=widgets.Layout(width="260px")
        )
        self.picker.add_class("sk-picker")
        self.override = widgets.Text(
            placeholder="why the approved study must change", layout=widgets.Layout(width="340px")
        )
        self.override.add_class("sk-override")
        self._override_box = widgets.VBox(
            [
                html_box('<div class="sk-field-label">Change an approved study because</div>'),
                self.override,
            ],
            layout=widgets.Layout(display="none"),
        )
        messages = context.messages
        self.picker.observe(guarded(self._on_pick, messages=messages), names="value")
        session.subscribe(self._on_session)
        self._update_lock_field()

    # --- widgets --------------------------------------------------------------------------------
    def toolbar(self) -> widgets.Widget:
        """Picker + name + lock-override field, for the top of a panel."""

        def labelled(text, w):
            return widgets.VBox([html_box(f'<div class="sk-field-label">{esc(text)}</div>'), w])

        bar = widgets.HBox(
            [
                labelled("Characteristic", self.picker),
                labelled("Your name (recorded with each decision)", self.who),
                self._override_box,
            ]
        )
        bar.add_class("sk-toolbar")
        return bar

    @property
    def who_name(self) -> str:
        return self.who.value.strip()

    @property
    def override_reason(self) -> str | None:
        return self.override.value.strip() or None

    # --- events ---------------------------------------------------------------------------------
    def _on_pick(self, change) -> None:
        if change["new"] and change["new"] != self.session.current:
            self.session.select(change["new"])

    def _on_session(self, session, changed) -> None:
        if self.picker.value != session.current:
            self.picker.value = session.current
        self._update_lock_field()
        self.context.update(study=session.study, state=session.state_text())

    def _update_lock_field(self) -> None:
        self._override_box.layout.display = "" if self.session.is_locked else "none"
        if not self.session.is_locked:
            self.override.value = ""

    def open(self, name: str, step_key: str = "stability") -> None:
        """Show ``name`` and open a step (the workbook's ``select`` when it can be found)."""
        self.session.select(name)
        opener = self.context.extra.get("studykit.open_step")
        if opener is None:
            wb = _workbook(self.context)
            opener = None if wb is None else wb.select
        if opener is not None:
            opener(step_key)


def workspace(context):
    """The :class:`Workspace` of this workbook, made on first use; None without a study file.

    The session opens ``context.study_path`` (the study file the workbook was started on).
    """
    from studykit.app.session import StudySession

    path = getattr(context, "study_path", None)
    if path is None or getattr(context, "study", None) is None:
        return None
    ws = context.extra.get(WORKSPACE_KEY)
    if ws is not None and ws.session.path == path:
        return ws
    ws = Workspace(context, StudySession(path))
    from studykit.app.live import LiveLink

    # after the Workspace, so the page's version is set once every panel was redrawn
    ws.live = LiveLink(ws.session, messages=context.messages)
    context.extra[WORKSPACE_KEY] = ws
    state = ws.session.state_text()
    if state != "Study open" and context.state != state:
        context.update(state=state)  # the header shows "Approved · locked" from the start
    return ws


def no_study_panel(what: str) -> widgets.Widget:
    return html_box(
        '<div class="sk-coming"><b>No study file open.</b><br>'
        f"{esc(what)} works on a study file: start the workbook with "
        "<code>studykit serve STUDY_FILE</code>, or create one from a data file and a "
        "specifications table with <code>studykit study new</code>.</div>",
        "sk-no-study",
    )


# --- the overview -------------------------------------------------------------------------------

SORT_KEYS = {
    "characteristic": "Characteristic",
    "verdict": "Verdict",
    "estimate": "Index",
    "lower_bound": "Lower bound",
    "removed": "Removed subgroups",
    "review": "Review state",
}
_VERDICT_ORDER = {False: 0, None: 1, True: 2}


def review_state(session, name: str) -> str:
    """Review state of one characteristic: sign-off state of the study and its comments."""
    state = session.state_text()
    n = sum(1 for c in session.study.comments if c.characteristic == name)
    if state == "Study open":
        state = "Not signed"
    return f"{state}" + (f" · {n} comment{'s' if n != 1 else ''}" if n else "")


def overview_rows(session, *, analyse: bool = False) -> list[dict]:
    """One dict per characteristic: name, unit, safety, verdict (meets), index, estimate,
    lower_bound, removed, review, error, analysed (and threshold when analysed). Only cached
    results are used unless ``analyse``."""
    rows = []
    for i, name in enumerate(session.names):
        spec = session.study.characteristic(name)
        row = {
            "order": i,
            "characteristic": name,
            "unit": spec.unit,
            "safety": spec.safety_critical,
            "verdict": None,
            "index": None,
            "estimate": None,
            "lower_bound": None,
            "removed": None,
            "review": review_state(session, name),
            "error": None,
            "analysed": False,
            "verdict_text": "",
        }
        if analyse or session.is_cached(name):
            try:
                head = session.result(name).headline()
            except Exception as exc:  # noqa: BLE001 - shown in the row
                row["error"] = str(exc)
            else:
                row["kind"] = result_kind(session.result(name))
                row.update(
                    verdict=head["meets"],
                    index=head["index"],
                    estimate=head["estimate"],
                    lower_bound=head["lower_bound"],
                    removed=head["removed"],
                    analysed=True,
                    verdict_text=head["verdict"] or "",
                    threshold=session.result(name).criteria.get("threshold"),
                )
                from studykit.app.streams_view import stream_overview_rows

                row["streams"] = stream_overview_rows(session.result(name))
        rows.append(row)
    return rows


def sort_rows(rows: list[dict], key: str, *, descending: bool = False) -> list[dict]:
    """Rows sorted by a column of :data:`SORT_KEYS`; empty values always last.

    Examples
    --------
    >>> rows = [{"characteristic": "b", "estimate": None}, {"characteristic": "a",
    ...          "estimate": 2.0}, {"characteristic": "c", "estimate": 1.0}]
    >>> [r["characteristic"] for r in sort_rows(rows, "estimate")]
    ['c', 'a', 'b']
    >>> [r["characteristic"] for r in sort_rows(rows, "estimate", descending=True)]
    ['a', 'c', 'b']
    """
    if key not in SORT_KEYS:
        from studykit.errors import StudyInputError

        raise StudyInputError(f"`key` ({key!r}) is not a column; use one of {', '.join(SORT_KEYS)}")

    def value(r):
        v = r.get(key)
        if key == "verdict":
            return None if not r.get("analysed") else _VERDICT_ORDER[v]
        return v.lower() if isinstance(v, str) else v

    present = [r for r in rows if value(r) is not None]
    missing = [r for r in rows if value(r) is None]
    present.sort(key=value, reverse=descending)
    return present + missing


#: the element an HTML widget draws (ipywidgets 8): a cell written as this markup inside a row
#: widget (:func:`grid_row`) has the classes, so the look, of a cell drawn as its own widget
_CELL = (
    '<div class="lm-Widget jupyter-widgets widget-inline-hbox widget-html {classes}">'
    '<div class="widget-html-content">{value}</div></div>'
)


def grid_cells(cells) -> str:
    """Cells of the overview grid as one HTML string: ``cells`` is ``(html, classes)`` pairs.

    Examples
    --------
    >>> grid_cells([("1.94", ("sk-ovcell", "num"))])  # doctest: +ELLIPSIS
    '<div class="lm-Widget ... widget-html sk-ovcell num"><div class="widget-html-content">1.94</div></div>'
    """
    return "".join(_CELL.format(classes=" ".join(cls), value=value) for value, cls in cells)


def grid_row(html: str = "") -> widgets.HTML:
    """One widget for several cells of the overview grid (:func:`grid_cells`): it and its
    content box are ``display: contents``, so each cell is an item of the grid as a cell widget
    was. A row of static cells is two widget models (the HTML and its layout) instead of two
    per cell, which the page builds sooner (the grid had 72 cell widgets on the demo study)."""
    return html_box(html, "sk-ovrow")


class OverviewPanel(widgets.VBox):
    """All characteristics at a glance; sortable; a click opens one.

    Parameters
    ----------
    ws : Workspace
    """

    COLUMNS = ("characteristic", "verdict", "estimate", "lower_bound", "removed", "review")

    def __init__(self, ws):
        self.ws = ws
        messages = ws.context.messages
        self.sort = widgets.Dropdown(
            options=[(v, k) for k, v in SORT_KEYS.items()],
            value="characteristic",
            layout=widgets.Layout(width="200px"),
        )
        self.sort.add_class("sk-sort")
        self.descending = widgets.ToggleButton(
            value=False,
            description="Descending",
            icon="sort-amount-desc",
            layout=widgets.Layout(width="auto"),
        )
        self.analyse = widgets.Button(
            description="Analyse all characteristics",
            button_style="primary",
            icon="play",
            layout=widgets.Layout(width="auto"),
        )
        self.analyse.add_class("sk-analyse-all")
        self.progress = widgets.IntProgress(
            value=0,
            min=0,
            max=max(len(ws.session.names), 1),
            description="",
            layout=widgets.Layout(width="260px", display="none"),
        )
        self.progress.add_class("sk-progress")
        self.progress_text = html_box("", "sk-small")
        self.table = widgets.GridBox(
            [],
            layout=widgets.Layout(
                grid_template_columns="minmax(180px, 1.4fr) minmax(150px, 1fr) 110px 110px 100px "
                "minmax(150px, 1.2fr)",
                width="100%",
            ),
        )
        self.table.add_class("sk-ovtable")
        self.sort.observe(guarded(lambda _c: self.render(), messages=messages), names="value")
        self.descending.observe(guarded(lambda _c: self.render(), messages=messages), names="value")
        self.analyse.on_click(guarded(lambda _b: self.analyse_all(), messages=messages))
        head = html_box('<div class="sk-section">Characteristics at a glance</div>')
        controls = widgets.HBox(
            [html_box('<div class="sk-field-label">Sort by</div>'), self.sort, self.descending],
            layout=widgets.Layout(align_items="center", flex_flow="row wrap"),
        )
        self.chart = OverviewChart()
        super().__init__([head, controls, self.chart.box, self.table])
        self.add_class("sk-overview-panel")
        self._key = None
        self._head = None
        self._rows: dict[str, tuple] = {}

    def analyse_all(self) -> None:
        session = self.ws.session
        self.progress.max = max(len(session.names), 1)
        self.progress.value = 0
        self.progress.layout.display = ""

        def progress(done, total, name):
            self.progress.value = done
            self.progress_text.value = f"{done} of {total} analysed ({esc(name)})"
            self.render(force=True)

        session.analyze_all(progress=progress)
        self.progress_text.value = f"All {len(session.names)} characteristics analysed."
        self.render(force=True)

    def render(self, *, force: bool = True) -> None:
        """Draw the table and the chart; every characteristic not analysed since the study
        last changed is analysed first (milliseconds each), so an open study is never shown
        "not analysed yet"."""
        session = self.ws.session
        rows = overview_rows(session, analyse=True)  # cached results are not recomputed
        key = (
            id(session.study),
            tuple(session.is_cached(n) for n in session.names),
            self.sort.value,
            self.descending.value,
            session.current,
        )
        if not force and key == self._key:
            return
        self._key = key
        rows = sort_rows(rows, self.sort.value, descending=self.descending.value)
        self.chart.update(rows)
        if self._head is None:
            heads = ["Characteristic", "Verdict", "Index", "Lower bound", "Removed", "Review state"]
            self._head = grid_row(
                grid_cells(
                    (esc(h), ("sk-ovcell", "sk-ovhead", *(("num",) if i in (2, 3, 4) else ())))
                    for i, h in enumerate(heads)
                )
            )
        cells = [self._head]
        for r in rows:
            cells += self._row_cells(r, current=session.current)
        self.table.children = cells

    def _row_cells(self, r: dict, *, current: str) -> list:
        """The name cell of one row (a button) and one row widget (:func:`grid_row`) with its
        other five cells and the rows of its streams; made once per characteristic and reused."""
        name = r["characteristic"]
        if name not in self._rows:
            b = widgets.Button(
                description=name,
                tooltip=f"Open {name} in the Stability step",
                layout=widgets.Layout(width="auto"),
            )
            b.add_class("sk-link")
            b.add_class(f"sk-open-{name}")
            b.on_click(
                guarded(
                    lambda _b, n=name: self.ws.open(n, "stability"),
                    messages=self.ws.context.messages,
                )
            )
            mark = html_box("")
            name_cell = widgets.HBox([b, mark])
            name_cell.add_class("sk-ovcell")
            self._rows[name] = (name_cell, mark, grid_row())
        name_cell, mark, rest = self._rows[name]
        caution = theme.VERDICTS["caution"]
        safety = (
            (
                f' <span title="safety-critical" style="color:{caution.text_color}">'
                f"{caution.symbol}</span>"
            )
            if r["safety"]
            else ""
        )
        mark.value = safety + (" ◂" if name == current else "")
        if r["error"]:
            verdict = (
                f'<span class="sk-muted" title="{esc(r["error"])}">'
                f"{names.VERDICT_STATES['cannot_analyse']}</span>"
            )
        elif not r["analysed"]:
            verdict = f'<span class="sk-muted">{names.VERDICT_STATES["not_analysed"]}</span>'
        else:
            kind, word = r.get("kind") or ("withheld", names.VERDICT_STATES["no_verdict"])
            verdict = verdict_chip(r["verdict"], text=word, kind=kind)
        index_text = (
            f"{esc(names.index_label(r['index'] or ''))} {fmt(r['estimate'], 2)}"
            if r["analysed"] and r["estimate"] is not None
            else "—"
        )
        values = [
            f'<span title="{esc(r["verdict_text"])}">{verdict}</span>',
            index_text,
            fmt(r["lower_bound"], 2) if r["analysed"] else "—",
            esc(r["removed"]) if r["analysed"] else "—",
            esc(r["review"]),
        ]
        classes = (("sk-ovcell",), *(("sk-ovcell", "num"),) * 3, ("sk-ovcell",))
        from studykit.app.streams_view import stream_cells

        html = grid_cells(zip(values, classes, strict=True)) + stream_cells(r.get("streams") or [])
        if rest.value != html:
            rest.value = html
        return [name_cell, rest]


class OverviewChart:
    """The landing chart: each characteristic's judged index (estimate and lower bound) beside
    the value it must reach, coloured and marked by its verdict.

    One row per characteristic with an index (counted data and characteristics that cannot be
    analysed have none and are listed below the chart). The bokeh figure is made once; later
    updates replace its data and re-send it to the page (:class:`~studykit.app.charts.LiveChart`).
    """

    def __init__(self):
        self.box = widgets.VBox([])
        self.box.add_class("sk-overview-chart")
        self.note = html_box("", "sk-small")
        self._live = None
        self._drawn = None

    def _build(self):
        from bokeh.models import ColumnDataSource

        from studykit.app.charts import (
            LiveChart,
            hover,
            legend_above,
            row_dot,
            row_span,
            stretch_figure,
            tick_marker,
        )

        self.source = ColumnDataSource(self._columns([]))
        f = stretch_figure(
            120,
            y_range=["—"],
            x_range=(0, 2),
            tools="save",
            x_axis_label="Judged capability index",
        )
        need = tick_marker(
            f, "threshold", self.source, size=26, color=theme.ROLES["spec_limit"].color
        )
        span = row_span(f, "lower_bound", "estimate", self.source, color=theme.INK_SOFT, width=2)
        est = row_dot(
            f, "estimate", self.source, marker="marker", size=13, fill="color", line="line", width=2
        )
        tips = [
            ("Characteristic", "@name"),
            ("Index", "@index"),
            ("Estimate", "@estimate{0.00}"),
            ("Lower bound", "@lower_bound{0.00}"),
            ("Required", "@threshold{0.00}"),
            ("Verdict", "@word"),
        ]
        hover(f, est, tips)
        legend_above(
            f, [("Estimate (colour: verdict)", est), ("Lower bound", span), ("Required", need)]
        )
        theme.style_bokeh_figure(f)
        f.toolbar_location = None
        self.figure = f
        self._live = LiveChart(f)

    @staticmethod
    def _columns(rows: list[dict]) -> dict:
        markers = {"pass": "circle", "fail": "x", "caution": "triangle", "pending": "square"}
        cols = {
            k: []
            for k in (
                "name",
                "index",
                "estimate",
                "lower_bound",
                "threshold",
                "color",
                "line",
                "marker",
                "word",
            )
        }
        for r in rows:
            if not r.get("analysed") or r.get("estimate") is None:
                continue
            kind, word = r.get("kind") or ("pending", names.VERDICT_STATES["no_verdict"])
            lb = r.get("lower_bound")
            cols["name"].append(r["characteristic"])
            cols["index"].append(names.index_label(r.get("index") or ""))
            cols["estimate"].append(float(r["estimate"]))
            cols["lower_bound"].append(float("nan") if lb is None else float(lb))
            t = r.get("threshold")
            cols["threshold"].append(float("nan") if t is None else float(t))
            cols["color"].append(theme.VERDICTS[kind].color)
            cols["line"].append(theme.VERDICTS[kind].color if kind == "fail" else theme.INK)
            cols["marker"].append(markers.get(kind, "square"))
            cols["word"].append(word)
        return cols

    def update(self, rows: list[dict]) -> None:
        cols = self._columns(rows)
        left_out = [
            r["characteristic"] for r in rows if not r.get("analysed") or r.get("estimate") is None
        ]
        self.note.value = (
            "No index to draw for: "
            + ", ".join(esc(n) for n in left_out)
            + " (counted data, not analysable, or no specification limit)."
            if left_out
            else ""
        )
        key = repr(cols)
        if key == self._drawn:
            return
        self._drawn = key
        if not cols["name"]:
            self.box.children = [self.note]
            return
        if self._live is None:
            self._build()
        values = [
            v for k in ("estimate", "lower_bound", "threshold") for v in cols[k] if math.isfinite(v)
        ]
        lo, hi = min(values), max(values)
        pad = 0.1 * (hi - lo or 1.0)
        self.figure.x_range.start, self.figure.x_range.end = max(0.0, lo - pad), hi + pad
        self.figure.y_range.factors = list(reversed(cols["name"]))
        self.figure.height = 90 + 30 * len(cols["name"])
        self.source.data = cols
        self._live.changed()
        self._live.resync()
        widget = self._live.widget("sk-overview-bokeh")
        if self.box.children != (widget, self.note):
            self.box.children = [widget, self.note]


def _workbook(context):
    """The Workbook showing this context (the shell subscribes its bound method)."""
    for listener in getattr(context, "_listeners", []):
        wb = getattr(listener, "__self__", None)
        if wb is not None and hasattr(wb, "select") and hasattr(wb, "steps"):
            return wb
    return None


def is_shown(context, key: str) -> bool:
    """Whether step ``key`` is the open step (True when no workbook is found)."""
    wb = _workbook(context)
    return wb is None or getattr(wb, "current", key) == key


def when_shown(context, key: str, callback) -> None:
    """Call ``callback()`` each time the workbook opens step ``key`` again.

    Uses the shell's body container (``Workbook._body``); a shell hook ``shown(context)`` on
    the step would make this unnecessary.
    """
    wb = _workbook(context)
    body = getattr(wb, "_body", None)
    if body is None:
        return

    def on_children(change):
        if getattr(wb, "current", None) == key:
            guarded(callback, messages=context.messages)()

    body.observe(on_children, names="children")


def panel(children) -> widgets.VBox:
    """The root box of a study panel (carries the ``sk-panel`` class the style sheet uses)."""
    box = widgets.VBox(list(children))
    box.add_class("sk-panel")
    return box
