"""bokeh chart builders for the workbook panels: they draw result objects, nothing else.

Every builder makes its figures once, bound to named ``ColumnDataSource`` objects, and an
``update(...)`` method that only replaces the sources' data; so a removal or a spec change
redraws in milliseconds and the live widget (``jupyter_bokeh.BokehModel``) stays the same.
Colours, dashes and markers come from :mod:`studykit.theme` roles.

The pure functions ``*_columns`` turn a :class:`~studykit.analysis.CharacteristicResult` into the
plain columns a chart shows; they are what the unit tests check.
"""

from __future__ import annotations

import math

import numpy as np

from studykit import names, theme

__all__ = [
    "ControlChartView",
    "ShapeView",
    "IntervalView",
    "control_chart_columns",
    "histogram_columns",
    "interval_columns",
    "hover",
    "key_line",
    "legend_above",
    "row_dot",
    "row_span",
    "stretch_figure",
    "tick_marker",
]

LOCATION_NAMES = {
    "xbar_r": "Subgroup mean",
    "xbar_s": "Subgroup mean",
    "imr": "Individual value",
    "p": "Proportion defective",
    "np": "Defectives",
    "c": "Defects",
    "u": "Defects per unit",
}
DISPERSION_NAMES = {
    "xbar_r": "Subgroup range",
    "xbar_s": "Subgroup std. deviation",
    "imr": "Moving range",
}
_TOOLS = "pan,box_zoom,wheel_zoom,reset,save"
#: Columns of a control chart's points source (one row per subgroup) and of its limits source.
_POINT_COLUMNS = (
    "x",
    "label",
    "value",
    "status",
    "time",
    "note",
    "values",
    "removed_why",
    "rules",
    "kept_why",
    "value_text",
)
_LIMIT_COLUMNS = (
    "center",
    "lcl",
    "ucl",
    "lower_warning",
    "upper_warning",
    "lower_zone",
    "upper_zone",
)


# --- the pieces every workbook chart is made of ---------------------------------------------------


def stretch_figure(height: int, *, x_range=(0, 1), y_range=(0, 1), **options):
    """A bokeh figure as wide as its panel; a ``(low, high)`` range is numeric (the views set
    it on update), a list of names a categorical axis; ``options`` go to ``figure``."""
    from bokeh.models import Range1d
    from bokeh.plotting import figure

    def axis(r):
        return Range1d(*r) if isinstance(r, tuple) else r

    return figure(
        height=height,
        sizing_mode="stretch_width",
        x_range=axis(x_range),
        y_range=axis(y_range),
        **options,
    )


def legend_above(fig, items, **options) -> None:
    """The chart's key in a row above the plot, in the one style of the workbook's charts.

    ``items`` are ``(label, renderer or list of renderers)`` pairs or ready ``LegendItem``
    objects (an entry the view relabels or hides later); ``options`` go to ``Legend``.
    """
    from bokeh.models import Legend, LegendItem

    entries = [
        i
        if isinstance(i, LegendItem)
        else LegendItem(label=i[0], renderers=i[1] if isinstance(i[1], list) else [i[1]])
        for i in items
    ]
    legend = Legend(
        items=entries,
        orientation="horizontal",
        location="top_left",
        spacing=12,
        label_text_font_size="12px",
        border_line_color=None,
        **options,
    )
    fig.add_layout(legend, "above")


def key_line(fig, role: str):
    """A line without data in the style of ``role``: its swatch in the legend (bokeh 3.9 draws
    none for a renderer without data, so the swatch is a renderer of its own)."""
    nan = [float("nan")]
    return fig.line(nan, nan, **theme.bokeh_line_kwargs(role))


def hover(fig, renderer, tooltips) -> None:
    """Hover text (``(label, field)`` pairs) on one renderer of ``fig``."""
    from bokeh.models import HoverTool

    fig.add_tools(HoverTool(renderers=[renderer], tooltips=tooltips))


def row_span(fig, low: str, high: str, source, *, color: str, width: float):
    """A line from ``low`` to ``high`` on each row of a horizontal chart (an interval)."""
    return fig.segment(
        x0=low, x1=high, y0="name", y1="name", source=source, line_color=color, line_width=width
    )


def row_dot(fig, x: str, source, *, marker: str, size: int, fill: str, line: str, width: float):
    """A dot at ``x`` on each row of a horizontal chart (an estimate); colours may be fields."""
    return fig.scatter(
        x,
        "name",
        source=source,
        marker=marker,
        size=size,
        fill_color=fill,
        line_color=line,
        line_width=width,
    )


def tick_marker(fig, x: str, source, *, size: int, color: str):
    """A short upright bar at ``x`` on each row of a horizontal chart (a bound, a requirement)."""
    return fig.scatter(
        x,
        "name",
        source=source,
        marker="dash",
        angle=math.pi / 2,
        size=size,
        line_color=color,
        line_width=3,
    )


def _floats(a) -> list:
    return [float("nan") if v is None else float(v) for v in np.asarray(a, dtype=float).tolist()]


def _fmt(v, digits: int = 4) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "—"
    return f"{v:.{digits}g}"


def _number_text(v, digits: int | None) -> str:
    """A chart number: the tolerance's decimals (``names.format_value``) on the measured
    scale; five significant digits on a model's scale (``digits`` None)."""
    if digits is None:
        return _fmt(v, 5)
    if v is None or not math.isfinite(float(v)):
        return "—"
    return names.format_value(v, digits=digits)


def _span(*columns, pad: float = 0.08, floor: float | None = None) -> tuple[float, float]:
    """(low, high) over the finite values of some columns, padded; (0, 1) when empty.

    Figures use fixed ranges set here: a bokeh ``DataRange1d`` does not follow data that
    arrive as patches in a live ``BokehModel`` view.
    """
    vals = [float(v) for col in columns for v in col if v is not None and math.isfinite(float(v))]
    if not vals:
        return 0.0, 1.0
    lo, hi = min(vals), max(vals)
    width = hi - lo or (abs(hi) * 0.1 or 1.0)
    lo, hi = lo - pad * width, hi + pad * width
    if floor is not None and lo < floor <= min(vals):
        lo = floor - 0.02 * width
    return lo, hi


def _label(v) -> str:
    return str(v.item() if hasattr(v, "item") else v)


# --- control charts -----------------------------------------------------------------------------


def control_chart_columns(result, *, full_chart=None, details: dict | None = None) -> dict:
    """Columns of the stability charts.

    Parameters
    ----------
    result : CharacteristicResult
    full_chart : ControlChart, optional
        A chart of the same kind over every subgroup (``StudySession.full_chart``); its points
        place the removed subgroups. Without it only kept subgroups are shown.
    details : dict, optional
        ``{label: {"time", "note", "values"}}`` for the hover (``StudySession.subgroup_details``).

    Returns
    -------
    dict
        ``{"labels": [...all subgroups in order], "location": part, "dispersion": part or None}``;
        a part has ``points`` (x, label, value, status 'kept'/'removed', time, note, values,
        removed_why, rules, kept_why), ``limits`` (x, center, lcl, ucl, lower_warning,
        upper_warning, lower_zone, upper_zone), ``signals`` (x, value, rule), ``kept`` (x, value,
        why: signals kept with a reason) and ``limit_text``.
    """
    chart = result.phase1.chart
    details = details or {}
    kept = [_label(v) for v in chart.labels]
    removal_why = {_label(r.label): f"{r.reason} ({r.who})" for r in result.phase1.removals}
    kept_why = _kept_why(result)
    if full_chart is not None:
        order = [_label(v) for v in full_chart.labels]
        if set(kept) - set(order):
            full_chart, order = None, kept
    else:
        order = kept
    xpos = {lab: i + 1 for i, lab in enumerate(order)}
    out = {"labels": order, "kind": chart.kind}
    # one rule for numbers (names.value_digits): 1/100 of the tolerance on the measured scale;
    # spreads (the lower chart) one decimal more; a model's scale has no tolerance to resolve
    value_digits = names.spec_digits(getattr(result, "spec", None))
    on_model_scale = bool(getattr(result, "chart_scale_text", None))
    for part in ("location", "dispersion"):
        series = getattr(chart, part)
        if series is None:
            out[part] = None
            continue
        full_series = getattr(full_chart, part) if full_chart is not None else None
        digits = None if on_model_scale else value_digits + (part == "dispersion")
        pts: dict[str, list] = {k: [] for k in _POINT_COLUMNS}
        by_label = {lab: float(v) for lab, v in zip(kept, _floats(series.points), strict=False)}
        full_values = {}
        if full_series is not None:
            full_values = {
                lab: float(v) for lab, v in zip(order, _floats(full_series.points), strict=False)
            }
        rules_at: dict[int, list[str]] = {}
        for sig in series.signals:
            for p in sig.triggers if hasattr(sig, "triggers") else sig.points:
                rules_at.setdefault(int(p), []).append(str(sig.number))
        kept_index = {lab: i for i, lab in enumerate(kept)}
        for lab in order:
            is_kept = lab in kept_index
            value = by_label.get(lab) if is_kept else full_values.get(lab, float("nan"))
            d = details.get(lab, {})
            vals = d.get("values") or []
            pts["x"].append(xpos[lab])
            pts["label"].append(lab)
            pts["value"].append(float("nan") if value is None else value)
            pts["value_text"].append(_number_text(value, digits))
            pts["status"].append("kept" if is_kept else "removed")
            pts["time"].append(d.get("time") or "—")
            pts["note"].append(d.get("note") or "—")
            pts["values"].append(
                ", ".join(names.format_value(v, digits=value_digits) for v in vals) or "—"
            )
            pts["removed_why"].append(removal_why.get(lab, "—") if not is_kept else "—")
            rules = sorted(set(rules_at.get(kept_index[lab], []))) if is_kept else []
            pts["rules"].append(", ".join(rules) if rules else "—")
            pts["kept_why"].append(kept_why.get(lab, "—") if is_kept else "—")
        xs = [xpos[lab] for lab in kept]
        limits = {"x": xs}
        for key in _LIMIT_COLUMNS:
            limits[key] = _floats(getattr(series, key))[: len(xs)]
        signals = {"x": [], "value": [], "rule": []}
        for pos, rules in sorted(rules_at.items()):
            if pos < len(kept):
                signals["x"].append(xpos[kept[pos]])
                signals["value"].append(by_label[kept[pos]])
                signals["rule"].append(", ".join(sorted(set(rules))))
        ring = {"x": [], "value": [], "why": []}
        for lab in kept:
            if lab in kept_why and _signals_here(series, kept_index[lab]):
                ring["x"].append(xpos[lab])
                ring["value"].append(by_label[lab])
                ring["why"].append(kept_why[lab])
        band = _class_band(result, part, order, xpos, on_model_scale)
        c = limits["center"]
        text = {
            "center": c[-1] if c else None,
            "lcl": limits["lcl"][-1] if c else None,
            "ucl": limits["ucl"][-1] if c else None,
            "varies": bool(c) and (len(set(limits["ucl"])) > 1),
        }
        text["texts"] = {k: _number_text(text[k], digits) for k in ("center", "lcl", "ucl")}
        out[part] = {
            "points": pts,
            "limits": limits,
            "signals": signals,
            "limit_text": text,
            "kept": ring,
            "class_band": band,
            "name": (LOCATION_NAMES if part == "location" else DISPERSION_NAMES).get(
                chart.kind, part
            ),
        }
    return out


def _class_band(result, part, order, xpos, on_model_scale) -> dict:
    """The time-dependent class model's limits of each subgroup mean (C1, C3, C4), on the
    location chart in measured units: ``{"x", "lower", "upper"}`` (empty otherwise)."""
    band: dict = {"x": [], "lower": [], "upper": []}
    tm = getattr(result, "time_model", None)
    lim = getattr(tm, "location_limits", None) if tm is not None else None
    if part != "location" or not lim or on_model_scale:
        return band
    where = {lab: i for i, lab in enumerate(lim["labels"])}
    for lab in order:
        i = where.get(lab)
        if i is not None:
            band["x"].append(xpos[lab])
            band["lower"].append(lim["centre"][i] - lim["half"][i])
            band["upper"].append(lim["centre"][i] + lim["half"][i])
    return band


def _kept_why(result) -> dict[str, str]:
    """Subgroup label -> 'rule: reason (who)' of the signals kept with a reason there."""
    out: dict[str, list[str]] = {}
    for k in getattr(result, "kept_signals", ()) or ():
        out.setdefault(str(k["subgroup"]), []).append(f"{k['rule']}: {k['reason']} ({k['who']})")
    return {lab: "; ".join(v) for lab, v in out.items()}


def _signals_here(series, pos: int) -> bool:
    return any(pos in {int(p) for p in sig.points} for sig in series.signals)


#: a ring around a signalled point that a person kept with a reason (bluish green, hollow)
_KEPT_RING = {
    "marker": "circle",
    "size": 18,
    "fill_alpha": 0.0,
    "line_color": theme.OKABE_ITO["bluish_green"],
    "line_width": 2.5,
}


#: height of the control limits' line under a control chart's title (12 px text and padding)
_LIMITS_LINE = 20


class ControlChartView:
    """Location and dispersion charts of phase I, with hover and tap selection.

    Attributes
    ----------
    layout : bokeh column
        Give it to :func:`studykit.app.bokeh_assets.chart_widget`.
    sources : dict
        ``{"location": {...}, "dispersion": {...}}`` with the ``points``, ``limits`` and
        ``signals`` ColumnDataSources; ``points.selected.indices`` is the tap selection.
    """

    def __init__(self, *, height: int = 260):
        from bokeh.layouts import column

        self.sources: dict[str, dict] = {}
        self.figures: dict[str, object] = {}
        self.warning_renderers: list = []
        self.limit_titles: dict[str, object] = {}
        self._labels: list[str] = []
        # each figure carries a line of limits under its title (_LIMITS_LINE px more)
        for part, h in (
            ("location", height + _LIMITS_LINE),
            ("dispersion", int(height * 0.8) + _LIMITS_LINE),
        ):
            self.figures[part] = self._figure(part, h)
        self.layout = column(
            self.figures["location"], self.figures["dispersion"], sizing_mode="stretch_width"
        )

    def _figure(self, part: str, height: int):
        from bokeh.models import (
            CDSView,
            ColumnDataSource,
            FixedTicker,
            GroupFilter,
            HoverTool,
            LegendItem,
            TapTool,
            Title,
        )

        pts = ColumnDataSource({k: [] for k in _POINT_COLUMNS}, name=f"{part}_points")
        lim = ColumnDataSource({k: [] for k in ("x", *_LIMIT_COLUMNS)}, name=f"{part}_limits")
        class_src = ColumnDataSource({"x": [], "lower": [], "upper": []}, name=f"{part}_class")
        sig = ColumnDataSource({"x": [], "value": [], "rule": []}, name=f"{part}_signals")
        ring = ColumnDataSource({"x": [], "value": [], "why": []}, name=f"{part}_kept")
        fig = stretch_figure(
            height,
            tools=_TOOLS,
            toolbar_location="above",
            x_axis_label="Subgroup (production order)",
        )
        fig.min_border_right = 16
        # the control limits on a line of their own under the chart's name (two short lines
        # fit a phone; one long title was cut at 390 px)
        limit_title = Title(text="", text_font_size="12px", text_font_style="normal")
        fig.add_layout(limit_title, "above")
        self.limit_titles[part] = limit_title
        zone = fig.varea(
            "x",
            "lower_zone",
            "upper_zone",
            source=lim,
            fill_color=theme.SKY_BLUE_LINE,
            fill_alpha=0.10,
        )
        class_band = fig.varea(
            "x",
            "lower",
            "upper",
            source=class_src,
            fill_color=theme.OKABE_ITO["bluish_green"],
            fill_alpha=0.12,
        )
        for key in ("lower_zone", "upper_zone"):
            fig.step(
                "x",
                key,
                source=lim,
                mode="center",
                line_color=theme.SKY_BLUE_LINE,
                line_alpha=0.45,
                line_width=1,
                line_dash="dotted",
            )
        warn = [
            fig.step(
                "x", key, source=lim, mode="center", **theme.bokeh_line_kwargs("warning_limit")
            )
            for key in ("lower_warning", "upper_warning")
        ]
        for r in warn:
            r.visible = False
        self.warning_renderers.extend(warn)
        centre = fig.step(
            "x", "center", source=lim, mode="center", **theme.bokeh_line_kwargs("centre_line")
        )
        limits = [
            fig.step(
                "x", key, source=lim, mode="center", **theme.bokeh_line_kwargs("control_limit")
            )
            for key in ("lcl", "ucl")
        ]
        kept_view = CDSView(filter=GroupFilter(column_name="status", group="kept"))
        removed_view = CDSView(filter=GroupFilter(column_name="status", group="removed"))
        data_line = theme.bokeh_line_kwargs("data")
        fig.line(
            "x",
            "value",
            source=pts,
            view=kept_view,
            line_alpha=0.6,
            line_color=data_line["line_color"],
            line_width=data_line["line_width"],
        )
        sel = {
            "selection_line_color": theme.INK,
            "selection_line_width": 3.0,
            "nonselection_fill_alpha": 1.0,
            "nonselection_line_alpha": 1.0,
        }
        kept = fig.scatter(
            "x", "value", source=pts, view=kept_view, **theme.bokeh_marker_kwargs("data"), **sel
        )
        removed_kw = theme.bokeh_marker_kwargs("excluded")
        removed = fig.scatter(
            "x",
            "value",
            source=pts,
            view=removed_view,
            **removed_kw,
            selection_line_color=theme.INK,
            nonselection_line_alpha=1.0,
        )
        fig.scatter("x", "value", source=sig, **theme.bokeh_marker_kwargs("signal"))
        fig.scatter("x", "value", source=ring, **_KEPT_RING)
        # legend swatches: bokeh 3.9 draws none for a renderer without data or with a view
        nan = [float("nan")]
        signal_key = fig.scatter(nan, nan, **theme.bokeh_marker_kwargs("signal"))
        removed_key = fig.scatter(nan, nan, **theme.bokeh_marker_kwargs("excluded"))
        kept_key = fig.scatter(nan, nan, **theme.bokeh_marker_kwargs("data"))
        ring_key = fig.scatter(nan, nan, **_KEPT_RING)
        hover = HoverTool(
            renderers=[kept, removed],
            tooltips=[
                ("Subgroup", "@label"),
                ("Time", "@time"),
                ("Statistic", "@value_text"),
                ("Values", "@values"),
                ("Note", "@note"),
                ("Rules broken", "@rules"),
                ("Removed because", "@removed_why"),
                ("Signal kept because", "@kept_why"),
            ],
        )
        fig.add_tools(hover, TapTool(renderers=[kept, removed]))
        if part == "location":
            # shown only when a time-dependent class draws its limits (update)
            self.class_item = LegendItem(
                label="Limits of the time-dependent model", renderers=[class_band], visible=False
            )
            items = [
                ("Subgroup", kept_key),
                ("Centre", centre),
                ("Control limits", limits),
                ("±1σ zone", zone),
                ("2σ warning", warn),
                ("Signal (rule broken)", signal_key),
                ("Removed (reason on file)", removed_key),
                ("Signal kept (reason on file)", ring_key),
                self.class_item,
            ]
            # two rows: eight entries do not fit one row beside the side panel at 1280 px
            legend_above(fig, items, padding=2, margin=4, nrows=2)
        fig.xaxis[0].ticker = FixedTicker(ticks=[])
        theme.style_bokeh_figure(fig)
        fig.toolbar.active_tap = fig.select_one(TapTool)
        self.sources[part] = {
            "points": pts,
            "limits": lim,
            "signals": sig,
            "kept": ring,
            "class": class_src,
        }
        return fig

    def update(self, result, *, full_chart=None, details=None, unit: str | None = None) -> dict:
        """Redraw from ``result``; returns the columns drawn."""
        cols = control_chart_columns(result, full_chart=full_chart, details=details)
        self._labels = list(cols["labels"])
        n = len(self._labels)
        step = max(1, int(math.ceil(n / 30)))
        ticks = list(range(1, n + 1, step))
        unit_text = f" ({unit})" if unit else ""
        if getattr(result, "chart_scale_text", None):  # phase I on the model's scale
            unit_text = f" ({result.chart_scale_axis})"
        for part in ("location", "dispersion"):
            fig = self.figures[part]
            c = cols.get(part)
            fig.visible = c is not None
            if c is None:
                continue
            src = self.sources[part]
            src["points"].selected.indices = []
            src["points"].data = c["points"]
            src["limits"].data = c["limits"]
            src["signals"].data = c["signals"]
            src["kept"].data = c["kept"]
            src["class"].data = c["class_band"]
            if part == "location":
                self.class_item.visible = bool(c["class_band"]["x"])
            t = c["limit_text"]
            if t["varies"]:
                limits_text = "limits vary with the subgroup size"
            else:
                limits_text = " · ".join(
                    f"{name} {t['texts'][key]}"
                    for key, name in (("lcl", "LCL"), ("center", "CL"), ("ucl", "UCL"))
                    if t[key] is not None and math.isfinite(t[key])
                )
            fig.yaxis.axis_label = c["name"] + unit_text
            head = (
                f"{c['name']} chart ({names.chart_kind_label(cols['kind'])})"
                if part == "location"
                else f"{c['name']} chart"
            )
            # two short lines, not one long one: a phone (390 px) shows both uncut
            fig.title.text = head
            self.limit_titles[part].text = limits_text
            # change the ticker's ticks, never swap models: a new model makes bokeh walk the
            # whole document again (about 0.1 s)
            fig.xaxis[0].ticker.ticks = ticks
            fig.xaxis.major_label_overrides = {t_: self._labels[t_ - 1] for t_ in ticks}
            fig.x_range.start, fig.x_range.end = 0.3, n + 0.7
            lim = c["limits"]
            fig.y_range.start, fig.y_range.end = _span(
                c["points"]["value"],
                lim["lcl"],
                lim["ucl"],
                lim["lower_warning"],
                lim["upper_warning"],
                c["class_band"]["lower"],
                c["class_band"]["upper"],
            )
            fig.xaxis.axis_label = (
                "Value (production order)"
                if cols["kind"] == "imr"
                else "Subgroup (production order)"
            )
        return cols

    def show_warning_limits(self, show: bool) -> None:
        for r in self.warning_renderers:
            r.visible = bool(show)

    def label_at(self, part: str, index: int) -> str:
        """Subgroup label of row ``index`` of a points source (a tap selection)."""
        return self.sources[part]["points"].data["label"][index]


# --- shape --------------------------------------------------------------------------------------


def _bins(n: int) -> int:
    """Histogram bin count: sqrt(n) clipped to 6..30 (common practice, no source); the PDF
    figure uses the same rule."""
    return int(np.clip(np.ceil(np.sqrt(max(n, 1))), 6, 30))


def _model_density(result, grid, model=None):
    """Density of a model on ``grid``: the chosen model or a fitted family from the ranking."""
    if model is not None:
        return np.asarray(model.pdf(grid), dtype=float)
    choice = result.model
    if choice is None:
        return None
    if choice.fitted is not None:
        return np.asarray(choice.fitted.pdf(grid), dtype=float)
    ranking = result.ranking
    if choice.name == "normal" and ranking is not None and "normal" in ranking.models:
        return np.asarray(ranking.models["normal"].pdf(grid), dtype=float)
    if choice.transform is not None:
        from scipy import stats

        t = choice.transform
        eps = (grid[1] - grid[0]) * 1e-3
        y = np.asarray(t.transform(grid), dtype=float)
        dy = (
            np.asarray(t.transform(grid + eps), dtype=float)
            - np.asarray(t.transform(grid - eps), dtype=float)
        ) / (2 * eps)
        ty = np.asarray(t.transform(result.values), dtype=float)
        with np.errstate(invalid="ignore", divide="ignore"):
            dens = stats.norm.pdf(y, float(np.mean(ty)), float(np.std(ty, ddof=1))) * np.abs(dy)
        dens[~np.isfinite(dens)] = np.nan
        return dens
    return None


def histogram_columns(result, *, compare: str | None = "normal") -> dict:
    """Columns of the histogram: bars (density scale), the chosen model's density, one
    comparison model's density, and the specification.

    Returns
    -------
    dict
        ``bars`` (left, right, top, count), ``model`` (x, y, name), ``compare`` (x, y, name),
        ``spec`` (lsl, usl, target), ``range`` (lo, hi).
    """
    x = np.asarray(result.values, dtype=float)
    spec = result.spec
    lo, hi = float(x.min()), float(x.max())
    for v in (spec.get("lsl"), spec.get("usl")):
        if v is not None:
            lo, hi = min(lo, v), max(hi, v)
    pad = 0.06 * (hi - lo or 1.0)
    counts, edges = np.histogram(x, bins=_bins(x.size))
    width = np.diff(edges)
    density = counts / (counts.sum() * width)
    grid = np.linspace(lo - pad, hi + pad, 300)
    out = {
        "bars": {
            "left": edges[:-1].tolist(),
            "right": edges[1:].tolist(),
            "top": density.tolist(),
            "count": counts.tolist(),
        },
        "spec": {k: spec.get(k) for k in ("lsl", "usl", "target")},
        "range": (lo - pad, hi + pad),
    }
    dens = _model_density(result, grid)
    name = result.model.label if result.model is not None else ""
    out["model"] = {
        "x": grid.tolist() if dens is not None else [],
        "y": _floats(dens) if dens is not None else [],
        "name": name,
    }
    comp = {"x": [], "y": [], "name": ""}
    if (
        compare
        and result.ranking is not None
        and compare in result.ranking.models
        and (result.model is None or result.model.name != compare)
    ):
        m = result.ranking.models[compare]
        comp = {
            "x": grid.tolist(),
            "y": _floats(_model_density(result, grid, m)),
            "name": names.model_label(compare),
        }
    out["compare"] = comp
    return out


class ShapeView:
    """Histogram with fitted densities and specification, and the normal probability plot."""

    def __init__(self, *, height: int = 300):
        from bokeh.layouts import row
        from bokeh.models import (
            ColumnDataSource,
            FixedTicker,
            LegendItem,
            Span,
        )

        self.bars = ColumnDataSource({"left": [], "right": [], "top": [], "count": []})
        self.model = ColumnDataSource({"x": [], "y": []})
        self.compare = ColumnDataSource({"x": [], "y": []})
        h = stretch_figure(
            height, tools=_TOOLS, title="Distribution of the values used", y_axis_label="Density"
        )
        bars = h.quad(
            left="left",
            right="right",
            top="top",
            bottom=0,
            source=self.bars,
            fill_color=theme.OKABE_ITO["blue"],
            fill_alpha=0.30,
            line_color=theme.OKABE_ITO["blue"],
            line_alpha=0.8,
        )
        hover(h, bars, [("From", "@left{0.0000}"), ("To", "@right{0.0000}"), ("Values", "@count")])
        fit = h.line("x", "y", source=self.model, **theme.bokeh_line_kwargs("fit"))
        comp_kw = theme.bokeh_line_kwargs("secondary")
        comp_kw["line_dash"] = "dashed"
        comp = h.line("x", "y", source=self.compare, **comp_kw)
        self.spans = {}
        for key, role in (("lsl", "spec_limit"), ("usl", "spec_limit"), ("target", "target")):
            s = Span(location=0, dimension="height", **theme.bokeh_line_kwargs(role))
            s.visible = False
            h.add_layout(s)
            self.spans[key] = s
        spec_r, target_r = key_line(h, "spec_limit"), key_line(h, "target")
        self._fit_item = LegendItem(label="Model", renderers=[fit])
        self._comp_item = LegendItem(label="Normal", renderers=[comp])
        keys = [("Values used", bars), self._fit_item, self._comp_item]
        legend_above(h, [*keys, ("Spec limits", spec_r), ("Target", target_r)])
        theme.style_bokeh_figure(h)
        self.points = ColumnDataSource({"value": [], "z": [], "line": [], "lower": [], "upper": []})
        p = stretch_figure(
            height, tools=_TOOLS, title="Normal probability plot", y_axis_label="Cumulative %"
        )
        band = p.harea(
            y="z",
            x1="lower",
            x2="upper",
            source=self.points,
            fill_color=theme.SKY_BLUE_LINE,
            fill_alpha=0.18,
        )
        pline = p.line("line", "z", source=self.points, **theme.bokeh_line_kwargs("fit"))
        mk = theme.bokeh_marker_kwargs("data")
        mk["size"] = 6
        pts = p.scatter("value", "z", source=self.points, **mk)
        hover(p, pts, [("Value", "@value{0.00000}")])
        legend_above(
            p, [("Ordered values", pts), ("Normal line", pline), ("Confidence band", band)]
        )
        p.yaxis[0].ticker = FixedTicker(ticks=[])
        theme.style_bokeh_figure(p)
        self.histogram, self.probability = h, p
        self.layout = row(h, p, sizing_mode="stretch_width")

    def update(self, result) -> dict:
        from scipy import stats

        cols = histogram_columns(result)
        self.bars.data = cols["bars"]
        self.model.data = {"x": cols["model"]["x"], "y": cols["model"]["y"]}
        self.compare.data = {"x": cols["compare"]["x"], "y": cols["compare"]["y"]}
        self._fit_item.label = {"value": f"Model: {cols['model']['name'] or '—'}"}
        self._comp_item.label = {"value": cols["compare"]["name"] or "—"}
        self._comp_item.visible = bool(cols["compare"]["name"])
        for key, span in self.spans.items():
            v = cols["spec"].get(key)
            span.visible = v is not None
            if v is not None:
                span.location = float(v)
        unit = f" ({result.unit})" if result.unit else ""
        self.histogram.xaxis.axis_label = result.characteristic + unit
        self.histogram.x_range.start, self.histogram.x_range.end = cols["range"]
        top = _span(cols["bars"]["top"], cols["model"]["y"], cols["compare"]["y"], [0.0], pad=0.06)[
            1
        ]
        self.histogram.y_range.start, self.histogram.y_range.end = 0.0, top
        pp = result.probability_plot
        if pp is None:
            self.points.data = {"value": [], "z": [], "line": [], "lower": [], "upper": []}
            return cols
        z = np.asarray(pp.normal_scores, dtype=float)
        n = z.size
        lower = _floats(pp.band_lower) if pp.band_lower is not None else [float("nan")] * n
        upper = _floats(pp.band_upper) if pp.band_upper is not None else [float("nan")] * n
        self.points.data = {
            "value": _floats(pp.values),
            "z": z.tolist(),
            "line": (pp.line_mean + pp.line_sigma * z).tolist(),
            "lower": lower,
            "upper": upper,
        }
        probs = [0.001, 0.01, 0.05, 0.2, 0.5, 0.8, 0.95, 0.99, 0.999]
        ticks = [(float(stats.norm.ppf(q)), q) for q in probs]
        ticks = [(t, q) for t, q in ticks if z.min() - 0.6 <= t <= z.max() + 0.6]
        self.probability.yaxis[0].ticker.ticks = [t for t, _ in ticks]
        self.probability.yaxis.major_label_overrides = {t: f"{q * 100:g}" for t, q in ticks}
        self.probability.xaxis.axis_label = result.characteristic + unit
        self.probability.x_range.start, self.probability.x_range.end = _span(
            self.points.data["value"], self.points.data["line"], pad=0.05
        )
        self.probability.y_range.start, self.probability.y_range.end = (
            float(z.min()) - 0.3,
            float(z.max()) + 0.3,
        )
        return cols


# --- capability intervals -------------------------------------------------------------------------

_INDEX_ORDER = ("cp", "cpk", "pp", "ppk", "cpm")


def interval_columns(result) -> dict:
    """Rows of the interval chart: each defined index with its estimate, two-sided interval and
    one-sided lower bound (from ``result.capability.bounds``), plus the model band.

    Returns
    -------
    dict
        ``rows`` (name, estimate, lower, upper, lower_bound, judged), ``threshold``,
        ``level``, ``band`` (low, high) or None.
    """
    cap = result.capability
    crit = result.criteria
    judged = result.verdict.index if result.verdict is not None else crit.get("index")
    rows = {"name": [], "estimate": [], "lower": [], "upper": [], "lower_bound": [], "judged": []}
    if cap is not None:
        for key in _INDEX_ORDER:
            est = getattr(cap, key, None)
            if est is None or not math.isfinite(est):
                continue
            b = (cap.bounds or {}).get(key) or {}
            rows["name"].append(key[0].upper() + key[1:] + (" (judged)" if key == judged else ""))
            rows["estimate"].append(float(est))
            rows["lower"].append(float(b.get("lower", float("nan"))))
            rows["upper"].append(float(b.get("upper", float("nan"))))
            rows["lower_bound"].append(float(b.get("lower_bound", float("nan"))))
            rows["judged"].append(key == judged)
    band = None
    if result.model_band is not None:
        band = (float(result.model_band.low), float(result.model_band.high))
    return {
        "rows": rows,
        "threshold": float(crit.get("threshold", 1.67)),
        "level": float(getattr(cap, "level", 0.95) or 0.95),
        "band": band,
        "judged": judged,
    }


class IntervalView:
    """Capability indices as intervals against the required threshold."""

    def __init__(self, *, height: int = 250):
        from bokeh.models import (
            ColumnDataSource,
            Label,
            LegendItem,
            Span,
        )

        self.rows = ColumnDataSource(
            {"name": [], "estimate": [], "lower": [], "upper": [], "lower_bound": [], "judged": []}
        )
        self.band = ColumnDataSource({"name": [], "low": [], "high": []})
        f = stretch_figure(height, y_range=["—"], tools="save", x_axis_label="Index value")
        band = f.hbar(
            y="name",
            left="low",
            right="high",
            height=0.35,
            source=self.band,
            fill_color=theme.SKY_BLUE_LINE,
            fill_alpha=0.35,
            line_color=theme.SKY_BLUE_LINE,
        )
        seg = row_span(f, "lower", "upper", self.rows, color=theme.OKABE_ITO["blue"], width=4)
        lb = tick_marker(f, "lower_bound", self.rows, size=22, color=theme.INK)
        est = row_dot(
            f,
            "estimate",
            self.rows,
            marker="circle",
            size=11,
            fill=theme.PAPER,
            line=theme.INK,
            width=2.5,
        )
        tips = [
            ("Index", "@name"),
            ("Estimate", "@estimate{0.000}"),
            ("Lower bound", "@lower_bound{0.000}"),
            ("Interval", "@lower{0.000} – @upper{0.000}"),
        ]
        hover(f, est, tips)
        self.threshold = Span(
            location=1.67, dimension="height", **theme.bokeh_line_kwargs("spec_limit")
        )
        f.add_layout(self.threshold)
        self.threshold_label = Label(
            x=1.67,
            y=0,
            x_offset=6,
            y_offset=4,
            y_units="screen",
            text="required",
            text_font_size="12px",
            text_color=theme.ROLES["spec_limit"].color,
        )
        f.add_layout(self.threshold_label)
        req = key_line(f, "spec_limit")
        self._interval_item = LegendItem(label="95% interval", renderers=[seg])
        self._bound_item = LegendItem(label="Lower 95% bound", renderers=[lb])
        legend_above(
            f,
            [
                ("Estimate", est),
                self._interval_item,
                self._bound_item,
                (names.MODEL_BAND, band),
                ("Required", req),
            ],
        )
        theme.style_bokeh_figure(f)
        f.toolbar_location = None
        self.figure = self.layout = f

    def update(self, result) -> dict:
        cols = interval_columns(result)
        rows = cols["rows"]
        names = list(rows["name"])
        band = {"name": [], "low": [], "high": []}
        if cols["band"] is not None:
            label = f"{(cols['judged'] or 'index').capitalize()} across models"
            band = {"name": [label], "low": [cols["band"][0]], "high": [cols["band"][1]]}
            names.append(label)
        self.figure.y_range.factors = list(reversed(names)) or ["—"]
        self.rows.data = rows
        self.band.data = band
        t = cols["threshold"]
        self.threshold.location = t
        self.threshold_label.x = t
        self.threshold_label.text = f"required {t:g}"
        pct = f"{cols['level'] * 100:g}%"
        self._interval_item.label = {"value": f"Two-sided {pct} interval"}
        self._bound_item.label = {"value": f"Lower {pct} bound"}
        values = [
            v
            for key in ("lower", "upper", "estimate", "lower_bound")
            for v in rows[key]
            if math.isfinite(v)
        ] + [t]
        if cols["band"]:
            values += list(cols["band"])
        lo, hi = min(values), max(values)
        pad = 0.08 * (hi - lo or 1.0)
        self.figure.x_range.start, self.figure.x_range.end = max(0.0, lo - pad), hi + pad
        self.figure.height = 90 + 46 * max(len(names), 1)
        return cols


# --- keeping a live chart widget right ----------------------------------------------------------


class LiveChart:
    """A bokeh layout shown through ``jupyter_bokeh.BokehModel``, kept right when re-shown.

    ``BokehModel`` sends later changes to the views that exist *now*; a view made later (the
    step opened again) is drawn from the bundle serialised when the widget was made. So a
    chart is only wrapped after its first update (:meth:`widget`), every later update marks it
    stale (:meth:`changed`), and :meth:`resync` re-serialises it when its step is shown again
    (about 0.1 s, so it is not done on every change).
    """

    def __init__(self, layout):
        self.layout = layout
        self._widget = None
        self.stale = False

    def widget(self, css_class: str = ""):
        from studykit.app.bokeh_assets import chart_widget

        if self._widget is None:
            self._widget = chart_widget(self.layout)
            if css_class:
                self._widget.add_class(css_class)
            self.stale = False
        return self._widget

    def changed(self) -> None:
        if self._widget is not None:
            self.stale = True

    def resync(self) -> bool:
        """Re-serialise the layout into the widget if it changed since; True if it did."""
        if self._widget is None or not self.stale:
            return False
        self._widget.render_bundle = type(self._widget)._model_to_traits(self.layout)
        self.stale = False
        return True
