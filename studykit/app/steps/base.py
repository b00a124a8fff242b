"""What the workbook's steps on a study file share (no statistics here).

:class:`StudyStep` opens the study file's workspace once and shows the "no study file open"
panel without one; :class:`ChartStep` adds a bokeh view kept live in the page and draws it
again only when the shown characteristic or its result changed.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit.app.charts import LiveChart
from studykit.app.overview import WORKSPACE_KEY, no_study_panel, workspace
from studykit.errors import StudyInputError

__all__ = ["StudyStep", "ChartStep"]


class StudyStep:
    """A workbook step that works on the open study file.

    A subclass sets ``key``, ``title``, ``guidance`` and ``what`` (how the "no study file open"
    panel names it) and builds its panel in ``_build(ws, context)``. ``ws`` is the workspace
    once built; ``_drawn`` the key of what was drawn last (None: nothing yet).
    """

    key = ""
    what = "This step"
    ws = None
    _drawn: tuple | None = None

    def build(self, context) -> widgets.Widget:
        ws = self.ws = workspace(context)
        if ws is None:
            return no_study_panel(self.what)
        return self._build(ws, context)

    def _build(self, ws, context) -> widgets.Widget:
        raise NotImplementedError

    @staticmethod
    def opened(context):
        """The workspace if some step has opened it already (None otherwise; opens nothing)."""
        return context.extra.get(WORKSPACE_KEY)


class ChartStep(StudyStep):
    """A step around a bokeh view of the shown characteristic's analysis result.

    ``_build`` calls :meth:`_chart` first; ``refresh`` reads the result of the characteristic
    shown and calls ``_draw(result, new_name)`` when the characteristic or its result changed
    (with ``follows_study`` also when the study changed), ``_show_error(name, exc)`` when it
    cannot be analysed.
    """

    view = None
    follows_study = False

    def _chart(self, view) -> None:
        """Keep ``view`` live in the page; an empty box for the safety caution above it."""
        self.view = view
        self.live = LiveChart(view.layout)
        self.caution = widgets.VBox([])

    def shown(self, context) -> None:
        """The step is open again: bring its chart widget up to date."""
        if self.view is not None:
            self.live.resync()

    def refresh(self, context) -> None:
        ws = self.ws
        if ws is None or self.view is None:
            return
        s = ws.session
        name = s.current
        try:
            res = s.result(name)
        except StudyInputError as exc:
            self._show_error(name, exc)
            return
        key = (name, id(res), id(s.study)) if self.follows_study else (name, id(res))
        if key == self._drawn:
            return
        new_name = self._drawn is None or self._drawn[0] != name
        self._drawn = key
        self._draw(res, new_name)

    def _show_error(self, name: str, exc: StudyInputError) -> None:
        raise NotImplementedError

    def _draw(self, res, new_name: bool) -> None:
        raise NotImplementedError
