"""Workbook step 1, "Bring in data": upload a measurement file and confirm what was found.

The file is parsed (never executed) by ``context.read_measurements`` (``studykit.data``); the
engineer sees the detected layout, characteristics, units, subgroups, missing values and
warnings, with a plain chart of the values in file order, and confirms before anything is used.
Files above ``context.max_upload_bytes`` are refused. No widget takes a server path.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit import names
from studykit.app.bokeh_assets import chart_widget, values_in_order_figure
from studykit.app.widgets import esc, guarded, html_box, upload_button
from studykit.errors import DataFileError

ACCEPT = ".csv,.txt,.tsv,.xlsx,.xlsm"


def _mb(n: int) -> str:
    return f"{n / (1024 * 1024):.1f} MB"


def check_upload_size(size: int, *, filename: str, limit: int) -> None:
    """Refuse a file above the size limit with a message that says what to do.

    Examples
    --------
    >>> check_upload_size(10, filename="a.csv", limit=100)
    >>> check_upload_size(200, filename="a.csv", limit=100)
    Traceback (most recent call last):
    ...
    studykit.errors.DataFileError: file 'a.csv': the file is 0.0 MB, above the upload limit of 0.0 MB; split it by characteristic or remove unused columns and upload again
    """
    if size > limit:
        raise DataFileError(
            f"the file is {_mb(size)}, above the upload limit of {_mb(limit)}; split it by "
            "characteristic or remove unused columns and upload again",
            file=filename,
        )


def _sizes_text(sizes) -> str:
    """Subgroup sizes as short text: '5 (all 25 subgroups)' or '3 to 5 (25 subgroups)'."""
    if sizes is None:
        return "—"
    if hasattr(sizes, "values") and callable(sizes.values):
        sizes = list(sizes.values())
    try:
        sizes = [int(s) for s in sizes]
    except TypeError:
        return esc(sizes)
    if not sizes:
        return "—"
    lo, hi = min(sizes), max(sizes)
    if lo == hi:
        return f"{lo} (all {len(sizes)} subgroups)"
    return f"{lo} to {hi} ({len(sizes)} subgroups)"


def _subgroup_text(m) -> str | None:
    source = getattr(m, "subgroup_source", None)
    column = getattr(m, "subgroup_column", None)
    size = getattr(m, "subgroup_size", None)
    if column:
        return f"{source} '{column}'"
    if size:
        return f"{source} of {size} consecutive values"
    return source


def measurements_html(m, *, filename: str = "") -> str:
    """The detection result as HTML, for the engineer to confirm (reads attributes only)."""
    chars = list(getattr(m, "characteristics", []) or [])
    facts = [
        ("File", filename or "—"),
        ("Layout found", getattr(m, "layout", None)),
        ("Subgroups from", _subgroup_text(m)),
        ("Characteristics", len(chars)),
    ]
    out = ['<div class="sk-section">What was found in the file</div><dl class="sk-facts">']
    out += [f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in facts]
    out.append("</dl>")
    rows = []
    for ch in chars:
        values = getattr(ch, "values", None)
        n_total = len(values) if values is not None else None
        n_missing = int(getattr(ch, "n_missing", 0) or 0)
        rows.append(
            f"<tr><td>{esc(getattr(ch, 'name', '?'))}</td><td>{esc(getattr(ch, 'unit', None))}</td>"
            f'<td class="num">{esc(None if n_total is None else n_total - n_missing)}</td>'
            f'<td class="num">{n_missing}</td>'
            f"<td>{_sizes_text(getattr(ch, 'subgroup_sizes', None))}</td></tr>"
        )
    out.append(
        '<table class="sk-table sk-detected"><thead><tr><th>Characteristic</th>'
        "<th>Unit</th><th>Values</th><th>Missing</th><th>Subgroup size</th></tr></thead>"
        f"<tbody>{''.join(rows)}</tbody></table>"
    )
    warnings = [str(w) for w in (getattr(m, "warnings", None) or [])]
    notes = [str(n) for n in (getattr(m, "notes", None) or [])]
    out += [
        f'<div class="sk-msg sk-msg-warning"><span class="sk-msg-kind">Caution</span>{esc(t)}</div>'
        for t in warnings
    ]
    if notes:
        out.append(
            '<div class="sk-muted sk-notes" style="margin-top:8px">How the file was read:'
            '<ul style="margin:4px 0 0 0;padding-left:20px">'
            + "".join(f"<li>{esc(t)}</li>" for t in notes)
            + "</ul></div>"
        )
    return "".join(out)


class IntakeStep:
    """Step "Bring in data" (key ``intake``)."""

    key = "intake"
    title = names.STEP_NAMES[key]
    guidance = (
        "Upload the measurement file (CSV or Excel) and check what was found in it "
        "before confirming."
    )

    def __init__(self):
        self._pending = None  # read but not yet confirmed
        self._pending_name = ""

    def is_done(self, context) -> bool:
        return context.measurements is not None

    def build(self, context) -> widgets.Widget:
        limit = context.max_upload_bytes
        self._upload = upload_button(
            accept=ACCEPT,
            multiple=False,
            description="Choose measurement file",
            button_style="primary",
            icon="upload",
            layout=widgets.Layout(width="auto", align_self="flex-start"),
        )
        self._upload.add_class("sk-upload")
        # the page's upload guard (studykit.app.server_guard) refuses a larger file in the
        # browser, with a message, before any byte is sent
        self._upload.add_class(f"sk-upload-limit-{int(limit)}")
        intro = html_box(
            f'<div class="sk-muted">CSV, TXT or Excel, one file of at most {_mb(limit)}. '
            "Wide tables (one column per characteristic) and long tables (characteristic, "
            "subgroup, value) are both recognised. The file is read, never run.</div>"
        )
        self._result = html_box("", "sk-intake-result")
        self._confirm = widgets.Button(
            description="Use this data", button_style="primary", icon="check", disabled=True
        )
        self._discard = widgets.Button(description="Discard", disabled=True)
        self._confirm.add_class("sk-confirm")
        self._actions = widgets.HBox(
            [self._confirm, self._discard], layout=widgets.Layout(display="none")
        )
        self._pick = widgets.Dropdown(
            description="Look at", options=[], layout=widgets.Layout(width="360px")
        )
        self._chart_box = widgets.VBox([])
        self._chart_area = widgets.VBox(
            [self._pick, self._chart_box], layout=widgets.Layout(display="none")
        )
        self._chart_area.add_class("sk-intake-chart")
        self._figure = None

        messages = context.messages
        self._upload.observe(
            guarded(lambda change: self._on_upload(context, change), messages=messages),
            names="value",
        )
        self._confirm.on_click(guarded(lambda _b: self._on_confirm(context), messages=messages))
        self._discard.on_click(guarded(lambda _b: self._on_discard(context), messages=messages))
        self._pick.observe(
            guarded(lambda change: self._show_chart(change["new"]), messages=messages),
            names="value",
        )
        self._newstudy = _new_study_panel(context)
        self.refresh(context)
        return widgets.VBox(
            [intro, self._upload, self._result, self._actions, self._chart_area, self._newstudy]
        )

    def refresh(self, context) -> None:
        if getattr(self, "_newstudy", None) is not None:
            self._newstudy.refresh()
        if self._pending is None and context.measurements is not None:
            self._result.value = (
                '<div class="sk-msg sk-msg-ok"><span class="sk-msg-kind">In use</span>'
                f"{esc(self._pending_name or 'the confirmed file')} "
                f"({len(context.characteristics)} characteristics). Upload another file to "
                "replace it.</div>"
            )

    # --- callbacks (wrapped in guarded by build) ------------------------------------------------
    def _on_upload(self, context, change) -> None:
        files = change["new"]
        if not files:
            return
        item = files[0]
        name = str(item.get("name", "upload"))
        content = item.get("content", b"")
        size = int(item.get("size") or len(content))
        self._upload.value = ()  # release the bytes held by the widget
        self._set_pending(None, "")
        check_upload_size(max(size, len(content)), filename=name, limit=context.max_upload_bytes)
        if size == 0 or len(content) == 0:
            raise DataFileError(
                "the file is empty; choose the file that holds the measurements", file=name
            )
        m = context.read_measurements(bytes(content), name)
        self._pending_bytes = bytes(content)  # kept for a new study made from this file
        self._set_pending(m, name)
        context.messages.info(f"Read '{name}': check what was found, then press 'Use this data'.")

    def _set_pending(self, m, name: str) -> None:
        self._pending, self._pending_name = m, name
        self._confirm.disabled = self._discard.disabled = m is None
        self._actions.layout.display = "none" if m is None else ""
        if m is None:
            self._result.value = ""
            self._chart_area.layout.display = "none"
            return
        self._result.value = measurements_html(m, filename=name)
        names = [getattr(c, "name", str(i)) for i, c in enumerate(m.characteristics)]
        self._pick.options = names  # ipywidgets 8 selects nothing here
        self._chart_area.layout.display = "" if names else "none"
        if names:
            self._pick.value = names[0]
            self._show_chart(names[0])  # also when the value did not change

    def _show_chart(self, name) -> None:
        m = self._pending
        if m is None or name is None:
            return
        ch = next((c for c in m.characteristics if getattr(c, "name", None) == name), None)
        if ch is None:
            return
        values = [float(v) for v in ch.values]
        unit = getattr(ch, "unit", None)
        title = f"{name}: values in file order"
        if self._figure is None:
            self._figure = values_in_order_figure(values, title=title, unit=unit)
            self._chart_box.children = [chart_widget(self._figure)]
        else:
            source = self._figure.select_one({"name": "values"})
            source.data = {"order": list(range(1, len(values) + 1)), "value": values}
            self._figure.title.text = title
            self._figure.yaxis.axis_label = f"Value ({unit})" if unit else "Value"

    def _on_confirm(self, context) -> None:
        m, name = self._pending, self._pending_name
        if m is None:
            return
        self._pending = None
        self._confirm.disabled = self._discard.disabled = True
        self._actions.layout.display = "none"
        n = len(m.characteristics)
        state = "Data confirmed" if context.study is None else context.state
        updates = {"measurements": m, "state": state}
        if context.study is None and not context.title:
            updates["title"] = f"New study from {name}"
        context.update(**updates)
        _add_to_new_study(self, context, name, m)
        context.messages.ok(f"Using '{name}': {n} characteristic{'s' if n != 1 else ''}.")

    def _on_discard(self, context) -> None:
        self._set_pending(None, "")
        context.messages.info("Discarded the file; choose another one.")
        self.refresh(context)


# --- a new study from the confirmed files (studykit.app.steps.newstudy) -------------------------


def _new_study_panel(context):
    from studykit.app.steps.newstudy import NewStudyPanel

    return NewStudyPanel(context)


def _add_to_new_study(step, context, name: str, m) -> None:
    """A file confirmed while no study is open joins the "New study from these files" table."""
    panel = getattr(step, "_newstudy", None)
    data = getattr(step, "_pending_bytes", None)
    if panel is None or data is None or context.study is not None:
        return
    panel.add_file(name, data, m)
    step._pending_bytes = None


STEP = IntakeStep()
