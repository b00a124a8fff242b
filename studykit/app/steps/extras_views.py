"""Workbook views of the capability step: the tolerance-interval panel and the position view.

:func:`tolerance_interval_html` shows the ``tolerance_interval`` block of a result (present when
the criterion "at least P % of parts within specification with C % confidence" is set): the
interval against the specification, whether the criterion holds, and how many parts it needs.
:class:`PositionView` shows each position study kept in the study file
(:mod:`studykit.positions`): the scatter with the zone and the fitted ellipse (the PDF's
figure), the expected PPM and the equivalent index of the two-dimensional model, and the
one-dimensional shortcut beside them. Neither computes statistics of its own.
"""

from __future__ import annotations

from collections.abc import Mapping

import ipywidgets as widgets

from studykit import names
from studykit.app.overview import fmt, verdict_chip
from studykit.app.widgets import esc, html_box

__all__ = ["PositionView", "position_html", "tolerance_interval_html"]


def _g(v, digits: int = 6) -> str:
    return "—" if v is None else esc(f"{float(v):.{digits}g}")


def tolerance_interval_html(result) -> str:
    """The tolerance-interval panel of a result ('' when its criterion does not ask for one).

    Examples
    --------
    >>> from studykit.analysis import analyze_study
    >>> from studykit.store import StudyFile
    >>> res = analyze_study(StudyFile("demo_data/pump_housing_pilot.study").load(),
    ...                     "bore_diameter")
    >>> html = tolerance_interval_html(res)
    >>> "at least 99% of parts within specification" in html and "473" in html
    True
    """
    from studykit.analysis import SAFETY_SENTENCE

    ti = getattr(result, "tolerance_interval", None)
    if not ti:
        return ""
    meets = ti.get("meets")

    word = names.VERDICT_STATES[{True: "meets", False: "does_not_meet", None: "no_verdict"}[meets]]
    lo, hi = ti.get("lower"), ti.get("upper")
    lsl, usl = ti.get("lsl"), ti.get("usl")
    plan = ti.get("plan") or {}
    free = plan.get("distribution_free")
    normal = plan.get("normal")
    if ti.get("factor") is not None:
        how = (
            f"x̄ ± k·s on the {esc(ti.get('scale'))} scale, k = {fmt(ti.get('factor'), 4)} "
            f"({esc(ti.get('factor_method'))} factor, {esc(ti.get('model'))} model)"
        )
    else:
        ranks = ", ".join("—" if r is None else str(r) for r in ti.get("order_statistics") or [])
        how = (
            f"order statistics {esc(ranks)} (distribution-free; achieved confidence "
            f"{fmt(ti.get('achieved_confidence'), 4)})"
        )
    rows = [
        ("Criterion", esc(ti.get("criterion"))),
        ("Interval", f"{'−∞' if lo is None else _g(lo)} … {'+∞' if hi is None else _g(hi)}"),
        ("Specification", f"{'—' if lsl is None else _g(lsl)} … {'—' if usl is None else _g(usl)}"),
        ("How", how + f"; {ti.get('n')} values"),
        (
            "Parts the criterion needs",
            (
                f"{free} with every part inside (no model assumed)"
                if free is not None
                else "more than 100 000 with no model assumed"
            )
            + (
                f"; {normal} for a process like this one to pass with probability "
                f"{fmt(plan.get('power'), 2)} (normal theory)"
                if normal is not None
                else ""
            ),
        ),
    ]
    notes = "".join(f'<div class="sk-small">{esc(n)}</div>' for n in ti.get("notes") or [])
    caution = (
        f'<div class="sk-msg sk-msg-warning">{esc(SAFETY_SENTENCE)}</div>'
        if result.spec.get("safety_critical")
        else ""
    )
    return (
        '<div class="sk-panel-title">Tolerance interval (ISO 16269-6)</div>'
        f"<div>{verdict_chip(meets, text=word)} {esc(ti.get('statement'))}</div>"
        '<dl class="sk-facts">'
        + "".join(f"<dt>{esc(k)}</dt><dd>{v}</dd>" for k, v in rows)
        + f"</dl>{notes}{caution}"
    )


def position_html(name: str, payload: Mapping, d: Mapping) -> str:
    """Numbers of one position study: the model against the shortcut, and what was observed."""
    from studykit.analysis import SAFETY_SENTENCE
    from studykit.report.extras_sections import comparison_sentence

    sc = d.get("shortcut") or {}
    unit = payload.get("unit") or ""
    u = f" {esc(unit)}" if unit else ""
    body = "".join(
        f'<tr><td>{esc(a)}</td><td class="num">{b}</td><td class="num">{c}</td></tr>'
        for a, b, c in (
            ("Expected PPM outside the zone", _g(d.get("ppm_expected"), 4), _g(sc.get("ppm"), 4)),
            (
                "Equivalent index",
                names.format_index(d.get("index")),
                names.format_index(sc.get("index")),
            ),
            (
                "Mean",
                f"({fmt(d.get('mean_x'), 4)}, {fmt(d.get('mean_y'), 4)}){u}",
                f"{fmt(sc.get('mean'), 4)}{u}",
            ),
            (
                "Spread",
                f"sd {fmt(d.get('sd_x'), 4)} / {fmt(d.get('sd_y'), 4)}{u}, "
                f"r = {fmt(d.get('correlation'), 3)}",
                f"sd {fmt(sc.get('sd'), 4)}{u}",
            ),
        )
    )
    outside = d.get("outside_parts") or []
    return (
        f'<div class="sk-panel-title">Position: {esc(name)}</div>'
        f'<div class="sk-muted">{d.get("n")} parts, zone diameter '
        f"{_g(d.get('tolerance'))}{u}"
        + (f"; {esc(payload.get('description'))}" if payload.get("description") else "")
        + "</div>"
        '<table class="sk-table sk-position"><thead><tr><th></th>'
        "<th>Two-dimensional model</th><th>One-dimensional shortcut</th></tr></thead>"
        f"<tbody>{body}</tbody></table>"
        f"<div>Observed: {d.get('observed_outside')} of {d.get('n')} parts outside the zone"
        + (f" (parts {esc(', '.join(map(str, outside)))})" if outside else "")
        + ". "
        f"{esc(comparison_sentence(d))}</div>"
        '<div class="sk-small">Two-dimensional model: bivariate normal with offset, unequal '
        "spreads and correlation, integrated outside the circular zone; the equivalent "
        "index has the same expected PPM. Shortcut: 2·√(dx² + dy²) as normal against T "
        "(bounded at zero and skewed, so it misjudges the tail).</div>"
        + (
            f'<div class="sk-msg sk-msg-warning">{esc(SAFETY_SENTENCE)}</div>'
            if payload.get("safety_critical")
            else ""
        )
    )


class PositionView:
    """The position studies of the open study (hidden when it keeps none)."""

    def __init__(self):
        self.choose = widgets.Dropdown(options=[], layout=widgets.Layout(width="280px"))
        self.choose.add_class("sk-position-choose")
        self.image = widgets.Image(format="png", layout=widgets.Layout(width="420px"))
        self.numbers = html_box("", "sk-position-numbers")
        self.widget = widgets.VBox(
            [
                html_box(
                    '<div class="sk-panel-title">Position studies kept with this study</div>'
                    '<div class="sk-muted">A true-position zone judged from X and Y deviations '
                    "(for the whole study, whichever characteristic is open above).</div>"
                ),
                self.choose,
                widgets.HBox(
                    [self.image, self.numbers],
                    layout=widgets.Layout(flex_flow="row wrap", align_items="flex-start"),
                ),
            ],
            layout=widgets.Layout(display="none"),
        )
        self.widget.add_class("sk-position-view")
        self._positions: dict = {}
        self._key = None
        self._drawn = None
        self.choose.observe(lambda _c: self._draw(), names="value")

    def refresh(self, path, version=None) -> None:
        """Read the stored position studies of study file ``path`` (again when ``version``
        changed) and draw the chosen one."""
        from studykit.positions import stored_positions

        key = (str(path), version)
        if key != self._key:
            self._key = key
            positions = stored_positions(path) if path is not None else {}
            if positions != self._positions:  # a new version with the same positions: no redraw
                self._positions = positions
                self._drawn = None
            names = list(self._positions)
            self.choose.options = names
            self.choose.layout.display = "" if len(names) > 1 else "none"
            if names and self.choose.value not in names:
                self.choose.value = names[0]
        self.widget.layout.display = "" if self._positions else "none"
        self._draw()

    def _draw(self) -> None:
        from studykit.positions import position_result
        from studykit.report.figures import figure_png
        from studykit.report.position_figures import position_figure

        name = self.choose.value
        if name is None or name not in self._positions or name == self._drawn:
            return
        payload = self._positions[name]
        res = position_result(payload)
        self.image.value = figure_png(
            position_figure(res, unit=payload.get("unit") or None, size=4.2), dpi=110
        )
        self.numbers.value = position_html(name, payload, res.to_dict())
        self._drawn = name
