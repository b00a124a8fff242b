"""The workbook shell: header, step bar, guidance, messages, the current step and the overview.

How a step plugs in
-------------------
A step is any object with the attributes of :class:`Step` (a ``typing.Protocol``)::

    key: str          # stable identifier, e.g. "stability"
    title: str        # what the step bar shows, e.g. "Stability"
    guidance: str     # one line telling the engineer what this step is for
    def build(self, context: WorkbookContext) -> ipywidgets.Widget: ...
    def refresh(self, context: WorkbookContext) -> None: ...

``build`` is called once, the first time the step is opened; ``refresh`` is called on every
built step after anything in the context changes (``context.update(...)``). A step may define
``shown(context)``: it is called each time the built step is opened again (e.g. to bring a chart
widget up to date), before it is put on the page. Steps never compute
statistics: they ask ``studykit.analysis`` for result objects and draw them. Every callback a
step registers is wrapped in :func:`studykit.app.widgets.guarded`; ``build``/``refresh`` are
guarded by the shell. A step may also define ``is_done(context) -> bool`` (a tick in the bar).

The default step list is :func:`default_steps` (one module per step in ``studykit.app.steps``;
fresh instances per workbook, since steps hold widgets).

``context.extra["studykit.open_step"]`` is the workbook's ``select``: a panel opens another
step through it (e.g. the overview opens a characteristic in the stability step).

With a study file open, the card below the steps is the study overview
(:class:`studykit.app.overview.OverviewPanel`), except on a step that shows the overview itself
(a step whose ``overview`` attribute is one), so the page never shows it twice.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol, runtime_checkable

import ipywidgets as widgets

from studykit import names
from studykit.app.widgets import (
    MAX_UPLOAD_BYTES,
    MessageArea,
    caution_banner,
    esc,
    guarded,
    html_box,
    style_sheet,
)
from studykit.errors import StudyFileError

log = logging.getLogger("studykit.app")

ENV_STUDY = "STUDYKIT_STUDY"  # path of the study file, set by `studykit serve`

STATE_NO_STUDY = "No study loaded"


@dataclass(eq=False)
class WorkbookContext:
    """Everything the steps share. Change it only through :meth:`update` so the views follow.

    Attributes
    ----------
    messages : MessageArea
        Where steps report to the engineer (``context.messages.error(...)`` etc.).
    study_path : Path or None
        The study file this workbook was opened on.
    study : object or None
        The loaded study (``studykit.study.Study``) when a study file was read.
    measurements : object or None
        The measurements the engineer confirmed in the first step
        (``studykit.data.Measurements``).
    reader : callable(bytes, filename) -> Measurements
        Reads an uploaded file; defaults to ``studykit.data.read_measurements_bytes``.
    max_upload_bytes : int
        Upload size limit.
    title, part, state : str
        What the header shows.
    extra : dict
        Free slot for later steps (e.g. the current analysis result); use namespaced keys.
    """

    messages: MessageArea
    study_path: Path | None = None
    study: Any = None
    measurements: Any = None
    reader: Callable[[bytes, str], Any] | None = None
    max_upload_bytes: int = MAX_UPLOAD_BYTES
    title: str = ""
    part: str = ""
    state: str = STATE_NO_STUDY
    extra: dict = field(default_factory=dict)
    _listeners: list = field(default_factory=list, repr=False)

    _FIELDS = ("study_path", "study", "measurements", "title", "part", "state")

    def update(self, **changes) -> None:
        """Set fields (``study``, ``measurements``, ``title``, ``part``, ``state``, ...) and
        tell every listener (the shell refreshes the header, the overview and the steps)."""
        for name, value in changes.items():
            if name not in self._FIELDS:
                raise TypeError(f"WorkbookContext.update: unknown field {name!r}")
            setattr(self, name, value)
        for listener in list(self._listeners):
            listener(self)

    def subscribe(self, listener: Callable[[WorkbookContext], None]) -> None:
        self._listeners.append(listener)

    def read_measurements(self, data: bytes, filename: str):
        """Read an uploaded file with the configured reader."""
        if self.reader is not None:
            return self.reader(data, filename)
        from studykit.data import read_measurements_bytes

        return read_measurements_bytes(data, filename, max_bytes=self.max_upload_bytes)

    @property
    def characteristics(self) -> list:
        """Characteristics of the confirmed measurements (empty list when none)."""
        return list(getattr(self.measurements, "characteristics", None) or [])

    @property
    def safety_critical(self) -> list[str]:
        """Names of characteristics the study marks safety-critical."""
        chars = getattr(self.study, "characteristics", None) or {}
        values = chars.values() if hasattr(chars, "values") else chars
        return [c.name for c in values if getattr(c, "safety_critical", False)]


@runtime_checkable
class Step(Protocol):
    """What a workbook step provides (see the module docstring)."""

    key: str
    title: str
    guidance: str

    def build(self, context: WorkbookContext) -> widgets.Widget: ...

    def refresh(self, context: WorkbookContext) -> None: ...


def default_steps() -> list[Step]:
    """Fresh instances of the workbook's steps, in order (one module each in
    ``studykit.app.steps``)."""
    from studykit.app.steps import (
        capability,
        export,
        intake,
        limits,
        measuring,
        shape,
        signoff,
        stability,
    )

    # steps hold widgets: fresh instances for every workbook (two browsers, two workbooks)
    return [
        intake.IntakeStep(),
        limits.LimitsStep(),
        measuring.GaugeStep(),
        stability.StabilityStep(),
        shape.ShapeStep(),
        capability.CapabilityStep(),
        signoff.SignoffStep(),
        export.ExportStep(),
    ]


class Workbook(widgets.VBox):
    """The workbook widget. Build it with :func:`build_workbook`.

    Attributes
    ----------
    context : WorkbookContext
    steps : list of Step
    current : str
        Key of the open step.
    """

    def __init__(
        self, steps: Sequence[Step], context: WorkbookContext, *, start: str | None = None
    ):
        self.context = context
        self.steps = list(steps)
        self._built: dict[str, widgets.Widget] = {}
        self._building = False  # a step is being built: select() draws the overview after it
        self.current = start if start is not None else self.steps[0].key
        self._header = html_box("", "sk-header")
        self._caution = widgets.VBox([])
        self._buttons = {}
        for number, step in enumerate(self.steps, 1):
            b = widgets.Button(
                description=f"{number}  {step.title}",
                tooltip=step.guidance,
                layout=widgets.Layout(width="auto"),
            )
            b.add_class("sk-step")
            b.add_class(f"sk-step-{step.key}")
            b.on_click(
                guarded(lambda _b, key=step.key: self.select(key), messages=context.messages)
            )
            self._buttons[step.key] = b
        self._stepbar = widgets.HBox(
            list(self._buttons.values()), layout=widgets.Layout(flex_flow="row wrap")
        )
        self._stepbar.add_class("sk-stepbar")
        self._guidance = html_box("", "sk-guidance")
        self._body = widgets.VBox([])
        self._body.add_class("sk-body")
        self._overview = html_box("", "sk-overview")
        self._overview_panel = None  # the study overview, made when a study file is open
        self._overview_card = widgets.VBox([self._overview])
        self._overview_card.add_class("sk-body")
        self._overview_card.add_class("sk-overview-card")
        from studykit.app.overview import panel_css  # the panels' rules, needed from the start

        self._live = widgets.VBox([])  # the live note of the open study (studykit.app.live)
        self._live.add_class("sk-live-slot")
        super().__init__(
            [
                style_sheet(),
                panel_css(),
                self._header,
                self._stepbar,
                self._guidance,
                context.messages,
                self._live,
                self._caution,
                self._body,
                self._overview_card,
            ]
        )
        self.add_class("sk-root")
        context.extra["studykit.open_step"] = self.select
        context.extra["studykit.reopen_steps"] = self.reopen_steps
        context.subscribe(self._on_context_change)
        self._render_header()
        # only the opening step is built (the others when first opened); select() draws the
        # overview card, unless the step shows the overview itself
        self.select(self.current)
        if self.current not in self._built:  # the opening step failed to build
            self._render_overview()

    # --- navigation ---------------------------------------------------------------------------
    def step(self, key: str) -> Step:
        for s in self.steps:
            if s.key == key:
                return s
        raise KeyError(f"no workbook step {key!r}; steps: {[s.key for s in self.steps]}")

    def select(self, key: str) -> None:
        """Open a step (building it the first time)."""
        step = self.step(key)
        if key not in self._built:
            self._building = True
            try:
                built = guarded(step.build, messages=self.context.messages)(self.context)
            finally:
                self._building = False
            if built is None:
                return
            self._built[key] = built
        else:
            shown = getattr(step, "shown", None)
            if callable(shown):
                guarded(shown, messages=self.context.messages)(self.context)
        self.current = key
        self._body.children = [self._built[key]]
        self._render_overview()
        number = [s.key for s in self.steps].index(key) + 1
        self._guidance.value = (
            f"<b>Step {number} of {len(self.steps)} · {esc(step.title)}.</b> {esc(step.guidance)}"
        )
        self._render_stepbar()

    def reopen_steps(self) -> None:
        """Build every step again when next opened (the open step at once): after a study file
        was created in the browser, steps built without one show it."""
        current = self.current
        self._built = {k: w for k, w in self._built.items() if k == "intake"}
        self.select(current)

    # --- rendering ----------------------------------------------------------------------------
    def _on_context_change(self, context: WorkbookContext) -> None:
        self._render_header()
        self._render_overview()
        for key, _w in self._built.items():
            guarded(self.step(key).refresh, messages=context.messages)(context)
        self._render_stepbar()

    def _render_stepbar(self) -> None:
        for step in self.steps:
            b = self._buttons[step.key]
            done = bool(getattr(step, "is_done", lambda _c: False)(self.context))
            for cls, on in (("sk-current", step.key == self.current), ("sk-done", done)):
                (b.add_class if on else b.remove_class)(cls)
            number = [s.key for s in self.steps].index(step.key) + 1
            b.description = f"{'✓' if done else number}  {step.title}"

    def _render_header(self) -> None:
        c = self.context
        where = esc(c.study_path.name) if c.study_path else "none yet"
        part = f"Part: {esc(c.part)} · " if c.part else ""
        title = esc(c.title) if c.title else "New capability study"
        self._header.value = (
            '<div style="display:flex;justify-content:space-between;align-items:center;gap:16px">'
            f'<div><div class="sk-brand">studykit workbook</div>'
            f'<div class="sk-title">{title}</div>'
            f'<div class="sk-sub">{part}Study file: {where}</div></div>'
            f'<div><span class="sk-state" title="Study state">{esc(c.state)}</span></div></div>'
        )
        names = c.safety_critical
        self._caution.children = (
            [caution_banner(title="Safety-critical: " + ", ".join(names))] if names else []
        )

    def _render_overview(self) -> None:
        if self._render_study_overview():
            return
        if self._overview_card.children != (self._overview,):
            self._overview_card.children = [self._overview]
        self._overview_card.layout.display = ""
        chars = self.context.characteristics
        head = '<div class="sk-section">Characteristics at a glance</div>'
        study_chars = getattr(self.context.study, "characteristics", None) or {}
        if not chars and study_chars:
            values = study_chars.values() if hasattr(study_chars, "values") else study_chars
            rows = "".join(
                f"<tr><td>{esc(getattr(c, 'name', '?'))}</td><td>{esc(getattr(c, 'unit', None))}"
                f"</td><td>{'Yes' if getattr(c, 'safety_critical', False) else 'No'}</td></tr>"
                for c in values
            )
            self._overview.value = head + (
                '<table class="sk-table"><thead><tr><th>Characteristic</th><th>Unit</th>'
                f"<th>Safety-critical</th></tr></thead><tbody>{rows}</tbody></table>"
                '<div class="sk-muted">Each step shows its own status for every '
                "characteristic of the study.</div>"
            )
            return
        if not chars:
            self._overview.value = head + (
                '<div class="sk-muted">No measurements confirmed yet. Bring in a data file '
                "in step 1; each characteristic then gets a row here with its stability, "
                "shape and capability status.</div>"
            )
            return
        pending = f'<span class="sk-muted">{names.VERDICT_STATES["not_analysed"]}</span>'
        rows = "".join(
            f"<tr><td>{esc(getattr(ch, 'name', '?'))}</td><td>{esc(getattr(ch, 'unit', None))}</td>"
            f'<td class="num">{_count_values(ch)}</td>'
            f"<td>{pending}</td><td>{pending}</td><td>{pending}</td></tr>"
            for ch in chars
        )
        self._overview.value = head + (
            '<table class="sk-table"><thead><tr><th>Characteristic</th><th>Unit</th>'
            "<th>Values</th><th>Stability</th><th>Shape</th><th>Capability</th></tr></thead>"
            f"<tbody>{rows}</tbody></table>"
        )

    def _render_study_overview(self) -> bool:
        """The study overview in the card below the steps; False when no study file is open."""
        from studykit.app.overview import OverviewPanel, workspace

        ws = workspace(self.context)
        if ws is None:
            self._overview_panel = None
            return False
        live = getattr(ws, "live", None)
        if live is not None and self._live.children != (live.widget,):
            self._live.children = [live.widget]
        if self._building:
            return True  # select() draws the overview once the step is built
        current = self.step(self.current) if self.current in self._built else None
        if isinstance(getattr(current, "overview", None), OverviewPanel):
            # the open step shows the overview itself: no second copy below it
            self._overview_card.children = []
            self._overview_card.layout.display = "none"
            return True
        if self._overview_panel is None or self._overview_panel.ws is not ws:
            self._overview_panel = OverviewPanel(ws)  # made when first shown
        self._overview_panel.render(force=False)
        if self._overview_card.children != (self._overview_panel,):
            self._overview_card.children = [self._overview_panel]
        self._overview_card.layout.display = ""
        return True


def study_state(study) -> str:
    """Short state of a loaded study for the header (the words of the study session).

    "Approved · locked" while an approval is valid, "Approval voided" when one was voided,
    "Signed in part" when some sign-off is valid, else "Study open".

    Examples
    --------
    >>> study_state(None)
    'No study loaded'
    """
    if study is None:
        return STATE_NO_STUDY
    if getattr(study, "is_locked", False):
        return "Approved · locked"
    signoff_state = getattr(study, "signoff_state", None)
    states = signoff_state() if callable(signoff_state) else []
    if any(st.signoff.is_approval and not st.valid for st in states):
        return "Approval voided"
    if any(st.valid for st in states):
        return "Signed in part"
    return "Study open"


def _count_values(ch) -> str:
    values = getattr(ch, "values", None)
    if values is None:
        return "—"
    return str(len(values) - int(getattr(ch, "n_missing", 0) or 0))


def load_study_into(context: WorkbookContext, path: str | os.PathLike) -> None:
    """Open a study file and put it into the context (errors become messages, not crashes)."""
    path = Path(path)
    if not path.is_file():
        context.update(study_path=path, state="Study file not found")
        raise StudyFileError(
            f"the study file '{path.name}' does not exist yet: create it in 'Bring in data' "
            "(confirm your measurement files, fill the specification table, 'Create study'), "
            "or start the workbook with an existing study file"
        )
    opener = _study_opener()
    if opener is None:
        context.update(study_path=path, title=path.stem, state="Study file found")
        context.messages.info(
            f"Study file '{path.name}' found; reading saved studies arrives with the study-file "
            "module. You can bring in a data file meanwhile."
        )
        return
    study = opener(path)
    context.update(
        study_path=path,
        study=study,
        title=getattr(study, "title", "") or path.stem,
        part=getattr(study, "part", "") or "",
        state=study_state(study),
    )


def _study_opener():
    """``studykit.store``'s open function if that module is present (written in parallel)."""
    try:
        from studykit import store
    except ImportError:
        return None
    for name in ("load_study", "open_study", "read_study"):
        fn = getattr(store, name, None)
        if callable(fn):
            return fn
    return None


def build_workbook(
    study_path: str | os.PathLike | None = None,
    *,
    steps: Sequence[Step] | None = None,
    reader: Callable[[bytes, str], Any] | None = None,
    max_upload_bytes: int = MAX_UPLOAD_BYTES,
) -> Workbook:
    """Build the workbook widget.

    Parameters
    ----------
    study_path : path, optional
        Study file to open. ``None`` starts in the "no study loaded" state.
    steps : sequence of Step, optional
        Steps to show (default :func:`default_steps`).
    reader : callable(bytes, filename) -> Measurements, optional
        Measurement reader for uploads (default ``studykit.data.read_measurements_bytes``).
    max_upload_bytes : int
        Upload size limit (default 50 MB).

    Returns
    -------
    Workbook
        An ``ipywidgets.VBox``; ``.context`` holds the shared state, ``.select(key)`` opens a
        step.

    Examples
    --------
    >>> wb = build_workbook()
    >>> [s.key for s in wb.steps][:2], wb.context.state
    (['intake', 'limits'], 'No study loaded')
    """
    messages = MessageArea()
    context = WorkbookContext(messages=messages, reader=reader, max_upload_bytes=max_upload_bytes)
    steps = list(steps if steps is not None else default_steps())
    start = None
    if study_path is not None and str(study_path) != "":
        # the study first, so only the step the page opens on is built (and drawn once)
        guarded(load_study_into, messages=messages)(context, study_path)
        if context.study is not None and any(s.key == "limits" for s in steps):
            start = "limits"  # a study with data: open on its overview, not on the upload
    return Workbook(steps, context, start=start)


def workbook_from_environment() -> Workbook:
    """What the notebook calls: load BokehJS, build the workbook on ``$STUDYKIT_STUDY``.

    ``studykit serve`` sets ``STUDYKIT_STUDY`` (empty or unset: no study loaded).
    """
    from studykit.app.bokeh_assets import import_bokeh_models, load_bokehjs

    logging.basicConfig(level=logging.INFO, format="%(levelname)s %(name)s: %(message)s")
    import_bokeh_models()  # (without the classes' documentation: its docstring)
    load_bokehjs()
    wb = build_workbook(os.environ.get(ENV_STUDY) or None)
    release_free_memory()
    return wb


def release_free_memory() -> bool:
    """Hand the heap's free pages back to the system (glibc ``malloc_trim``); False elsewhere.

    Building the landing view frees much of what the analyses allocated; without this the
    kernel keeps it resident (about 7 MB on the demo study)."""
    import ctypes
    import ctypes.util

    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        trim = libc.malloc_trim
    except (OSError, AttributeError):
        return False
    trim(0)
    return True
