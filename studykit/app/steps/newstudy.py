"""A new study from the browser: the "New study from these files" panel of step 1.

Every measurement file the engineer confirmed in "Bring in data" (one or more, uploaded one after
another) is listed here with how it was read. Below, the specification table in the page: one row
per characteristic found (limits, target, unit, safety-critical, criterion index, threshold and
basis, and whether it belongs to the study). The engineer names the study file and presses
"Create study": the table goes through the same reader as ``studykit study new --specs`` (so a
bad cell gives the same message naming the row and column), each characteristic is matched to
the file that holds it, and the study file is written (with a copy of every file and its
SHA-256). The workbook then opens the new study: every step works on it.

The study file is written in the folder ``studykit serve`` was started from
(``$STUDYKIT_NEW_DIR``), or at the path given to ``studykit serve NEW.study``; the page only
takes a file *name*, never a path.
"""

from __future__ import annotations

import csv
import io
import os
import re
from pathlib import Path

import ipywidgets as widgets

from studykit.app.widgets import button, esc, guarded, html_box, labelled, text_field
from studykit.errors import StudyFileError, StudyInputError
from studykit.specs import CORE_SPEC_COLUMNS, match_to_files
from studykit.study import BASES, INDICES, Criteria, read_specs_bytes

__all__ = [
    "ENV_NEW_DIR",
    "NewStudyPanel",
    "create_study_from_files",
    "specs_csv",
    "study_file_name",
]

#: folder for a study made in the browser (set by ``studykit serve`` to its working folder)
ENV_NEW_DIR = "STUDYKIT_NEW_DIR"
#: how the page's table is named in messages (as the CLI names the --specs file)
TABLE_NAME = "specification table (in the page)"
SPEC_COLUMNS = CORE_SPEC_COLUMNS

_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9 _.\-]{0,99}$")


def study_file_name(text: str) -> str:
    """The study file name typed in the page, checked: a plain name, ``.study`` added.

    Examples
    --------
    >>> study_file_name("pilot run 3")
    'pilot run 3.study'
    >>> study_file_name("../etc/passwd")
    Traceback (most recent call last):
    ...
    studykit.errors.StudyInputError: the study file name ('../etc/passwd') must be a plain file name (letters, digits, space, '_', '-', '.'; no folder), e.g. 'pilot-run-3'
    """
    name = (text or "").strip()
    if name.lower().endswith(".study"):
        name = name[: -len(".study")].rstrip()
    if not name:
        raise StudyInputError("the study file name is empty: type a name, e.g. 'pilot-run-3'")
    if not _NAME_RE.match(name) or ".." in name:
        raise StudyInputError(
            f"the study file name ({text!r}) must be a plain file name (letters, digits, space, "
            "'_', '-', '.'; no folder), e.g. 'pilot-run-3'"
        )
    return name + ".study"


def specs_csv(rows) -> bytes:
    """The page's specification rows as the CSV table ``study new --specs`` reads.

    ``rows``: dicts with the keys of :data:`SPEC_COLUMNS` (text or numbers; booleans for
    ``safety_critical``).

    Examples
    --------
    >>> specs_csv([{"characteristic": "bore", "unit": "mm", "lsl": "11.97", "usl": 12.03,
    ...             "safety_critical": True, "criterion": "cpk", "threshold": 1.33,
    ...             "basis": "lower_bound"}]).decode().splitlines()[1]
    'bore,mm,11.97,12.03,,yes,cpk,1.33,lower_bound'
    """
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(SPEC_COLUMNS)
    for r in rows:
        out = []
        for col in SPEC_COLUMNS:
            v = r.get(col, "")
            if col == "safety_critical":
                v = "yes" if v is True else ("no" if v is False else v)
            out.append("" if v is None else str(v).strip())
        w.writerow(out)
    return buf.getvalue().encode("utf-8")


def create_study_from_files(path, files, rows, *, title: str, who: str, part: str = ""):
    """Write a new study file from confirmed measurement files and specification rows.

    Parameters
    ----------
    path : path
        The study file to create (an existing file is refused).
    files : list of (filename, bytes, Measurements)
        The files in the order confirmed; the first is the study's main data file.
    rows : list of dict
        One row per characteristic of the study (see :func:`specs_csv`).
    title, who, part : str

    Returns
    -------
    studykit.store.StudyFile

    Raises
    ------
    SpecError
        A bad cell, named by row (header = row 1) and column of the table, as the CLI does.
    StudyInputError
        No file, no characteristic, two files of the same name, an existing study file.
    """
    from studykit.store import StudyFile

    if not files:
        raise StudyInputError(
            "no measurement file confirmed yet: upload one in 'Bring in data' "
            "and press 'Use this data'"
        )
    names = [Path(str(f[0])).name for f in files]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise StudyInputError(f"two data files are named '{dup[0]}': rename one of them")
    if not rows:
        raise StudyInputError(
            "the specification table has no characteristic ticked 'In study': "
            "a study needs at least one"
        )
    who = (who or "").strip()
    if not who:
        raise StudyInputError(
            "`who` is empty: type your name; the study file records who created it"
        )
    specs, spec_criteria = read_specs_bytes(specs_csv(rows), TABLE_NAME)
    readings = [f[2] for f in files]
    chars, criteria = match_to_files(specs, spec_criteria, readings, names, source=TABLE_NAME)
    path = Path(path)
    if path.exists():
        raise StudyFileError(f"the study file '{path.name}' already exists: choose another name")
    return StudyFile.create(
        path,
        data=bytes(files[0][1]),
        filename=names[0],
        title=(title or "").strip() or Path(names[0]).stem,
        part=part,
        characteristics=chars,
        criteria=criteria,
        who=who,
        extra_files=[(n, bytes(f[1])) for n, f in zip(names[1:], files[1:], strict=True)],
    )


def _num(v) -> str:
    if v is None:
        return ""
    return f"{v:g}" if isinstance(v, float) else str(v)


class _SpecRow:
    """The widgets of one characteristic in the page's specification table."""

    def __init__(self, name: str, unit: str | None, filename: str, on_change):
        small = widgets.Layout(width="92px")
        self.name = name
        self.filename = filename
        self.include = widgets.Checkbox(
            value=True, indent=False, layout=widgets.Layout(width="28px")
        )
        self.label = html_box(
            f"<b>{esc(name)}</b><br><span class='sk-small'>{esc(filename)}</span>"
        )
        self.unit = widgets.Text(value=unit or "", layout=widgets.Layout(width="70px"))
        self.lsl = widgets.Text(placeholder="none", layout=small)
        self.usl = widgets.Text(placeholder="none", layout=small)
        self.target = widgets.Text(placeholder="none", layout=small)
        self.safety = widgets.Checkbox(
            value=False, indent=False, layout=widgets.Layout(width="28px")
        )
        d = Criteria()
        self.index = widgets.Dropdown(
            options=[(i[0].upper() + i[1:], i) for i in INDICES],
            value=d.index,
            layout=widgets.Layout(width="80px"),
        )
        self.threshold = widgets.Text(value=_num(d.threshold), layout=widgets.Layout(width="64px"))
        self.basis = widgets.Dropdown(
            options=[("lower bound", "lower_bound"), ("estimate", "estimate")],
            value=d.basis if d.basis in BASES else "lower_bound",
            layout=widgets.Layout(width="116px"),
        )
        for w in self.cells():
            w.add_class("sk-spec-cell")
        for w, key in (
            (self.lsl, "lsl"),
            (self.usl, "usl"),
            (self.target, "target"),
            (self.unit, "unit"),
            (self.threshold, "threshold"),
        ):
            w.add_class(f"sk-new-{key}")
        self.include.add_class("sk-new-include")
        self.safety.add_class("sk-new-safety")
        for w in (self.include, self.lsl, self.usl):
            w.observe(on_change, names="value")

    def cells(self) -> list:
        return [
            self.include,
            self.label,
            self.unit,
            self.lsl,
            self.usl,
            self.target,
            self.safety,
            self.index,
            self.threshold,
            self.basis,
        ]

    def row(self) -> dict:
        return {
            "characteristic": self.name,
            "unit": self.unit.value,
            "lsl": self.lsl.value,
            "usl": self.usl.value,
            "target": self.target.value,
            "safety_critical": bool(self.safety.value),
            "criterion": self.index.value,
            "threshold": self.threshold.value,
            "basis": self.basis.value,
        }


class NewStudyPanel(widgets.VBox):
    """The "New study from these files" panel (shown while no study file is open)."""

    def __init__(self, context):
        self.context = context
        self.files: list[tuple[str, bytes, object]] = []
        self.rows: list[_SpecRow] = []
        m = context.messages
        self.head = html_box("", "sk-new-head")
        self.file_list = html_box("", "sk-new-files")
        self.table = widgets.GridBox(
            [],
            layout=widgets.Layout(
                grid_template_columns="60px minmax(140px, 1.4fr) 70px 92px 92px 92px 76px 80px "
                "64px 116px",
                grid_gap="4px 8px",
                align_items="center",
                width="100%",
                overflow="auto",
            ),
        )
        self.table.add_class("sk-new-spec-table")
        self.study_name = widgets.Text(
            placeholder="e.g. pilot-run-3", layout=widgets.Layout(width="260px")
        )
        self.study_name.add_class("sk-new-name")
        self.title = widgets.Text(
            placeholder="e.g. QV-4410 pre-launch capability study",
            layout=widgets.Layout(width="380px"),
        )
        self.title.add_class("sk-new-title")
        self.who = text_field("sk-new-who", placeholder="e.g. R. Okonkwo", width="220px")
        self.create = button(
            "Create study",
            "sk-create-study",
            icon="plus",
            primary=True,
            disabled=True,
            width="auto",
        )
        self.hint = html_box("", "sk-small sk-new-hint")
        for w in (self.study_name, self.who):
            w.observe(guarded(lambda _c: self._update(), messages=m), names="value")
        self.create.on_click(guarded(lambda _b: self._on_create(), messages=m))

        self.form = widgets.VBox(
            [
                html_box(
                    '<div class="sk-panel-title">Specification table</div>'
                    '<div class="sk-muted">One row per characteristic found. Leave a limit '
                    "empty for a one-sided specification; untick 'In study' to leave a column "
                    "out. Changes after creation are recorded with a reason in 'Limits & "
                    "targets'.</div>"
                ),
                self.table,
                widgets.HBox(
                    [
                        labelled("Study file name", self.study_name),
                        labelled("Title", self.title),
                        labelled("Your name (recorded as creator)", self.who),
                    ],
                    layout=widgets.Layout(flex_flow="row wrap", grid_gap="12px"),
                ),
                widgets.HBox([self.create, self.hint], layout=widgets.Layout(align_items="center")),
            ]
        )
        super().__init__([self.head, self.file_list, self.form])
        self.add_class("sk-new-study")
        self.refresh()

    # --- where the file goes --------------------------------------------------------------------
    def target_folder(self) -> Path:
        path = getattr(self.context, "study_path", None)
        if path is not None and not Path(path).exists():
            return Path(path).parent
        return Path(os.environ.get(ENV_NEW_DIR) or os.getcwd())

    def _named_path(self) -> Path | None:
        """The path given to ``studykit serve NEW.study`` (a study file not made yet)."""
        path = getattr(self.context, "study_path", None)
        if path is not None and not Path(path).exists():
            return Path(path)
        return None

    # --- files ---------------------------------------------------------------------------------
    def add_file(self, filename: str, data: bytes, measurements) -> None:
        """A confirmed measurement file joins the new study (same name: replaced)."""
        filename = Path(str(filename)).name
        self.files = [f for f in self.files if f[0] != filename]
        self.files.append((filename, bytes(data), measurements))
        self._rebuild_rows()
        self.refresh()

    def remove_file(self, filename: str) -> None:
        self.files = [f for f in self.files if f[0] != filename]
        self._rebuild_rows()
        self.refresh()

    def _rebuild_rows(self) -> None:
        old = {r.name: r for r in self.rows}
        rows, seen = [], set()
        for filename, _data, m in self.files:
            for ch in getattr(m, "characteristics", []) or []:
                name = getattr(ch, "name", None)
                if not name or name in seen:
                    continue
                seen.add(name)
                keep = old.get(name)
                if keep is not None and keep.filename == filename:
                    rows.append(keep)
                else:
                    rows.append(
                        _SpecRow(
                            name,
                            getattr(ch, "unit", None),
                            filename,
                            guarded(lambda _c: self._update(), messages=self.context.messages),
                        )
                    )
        self.rows = rows
        header = [
            html_box(f'<div class="sk-field-label">{esc(t)}</div>')
            for t in (
                "In study",
                "Characteristic",
                "Unit",
                "LSL",
                "USL",
                "Target",
                "Safety-critical",
                "Index",
                "At least",
                "Judged on",
            )
        ]
        cells = list(header)
        for r in rows:
            cells.extend(r.cells())
        self.table.children = cells

    # --- state ---------------------------------------------------------------------------------
    def refresh(self) -> None:
        has_study = getattr(self.context, "study", None) is not None
        self.layout.display = "none" if has_study else ""
        named = self._named_path()
        if named is not None and not self.study_name.value:
            self.study_name.value = named.stem
        self.study_name.disabled = named is not None
        where = (
            f"The study file <b>{esc(named.name)}</b> does not exist yet: it is created here."
            if named is not None
            else "The study file is written in the folder the workbook was started from."
        )
        self.head.value = (
            '<div class="sk-panel-title">New study from these files</div>'
            "<div class=\"sk-muted\">Confirm each measurement file with 'Use this data' (one "
            "after another for a study over several files), fill the specification table, "
            f"name the study file and create it. {where}</div>"
        )
        if not self.files:
            self.file_list.value = (
                '<div class="sk-muted">No file confirmed for the new study yet.</div>'
            )
            self.form.layout.display = "none"
        else:
            items = "".join(
                f"<li><b>{esc(n)}</b>: {len(getattr(m, 'characteristics', []) or [])} "
                f"characteristic(s), layout {esc(getattr(m, 'layout', '?'))}"
                + ("" if i else " (main data file)")
                + "</li>"
                for i, (n, _d, m) in enumerate(self.files)
            )
            self.file_list.value = (
                f'<div class="sk-field-label">Files in the new study</div>'
                f'<ul class="sk-new-file-list">{items}</ul>'
            )
            self.form.layout.display = ""
        self._update()

    def _update(self) -> None:
        missing = []
        if not self.files:
            missing.append("confirm a measurement file")
        if not any(r.include.value for r in self.rows):
            missing.append("tick at least one characteristic")
        elif not any(
            r.include.value and (r.lsl.value.strip() or r.usl.value.strip()) for r in self.rows
        ):
            missing.append("give at least one specification limit")
        if not self.study_name.value.strip():
            missing.append("name the study file")
        if not self.who.value.strip():
            missing.append("type your name")
        self.create.disabled = bool(missing)
        self.hint.value = ("To create: " + ", ".join(missing) + ".") if missing else ""

    def _on_create(self) -> None:
        from studykit.app.shell import load_study_into

        named = self._named_path()
        path = (
            named
            if named is not None
            else self.target_folder() / study_file_name(self.study_name.value)
        )
        rows = [r.row() for r in self.rows if r.include.value]
        sf = create_study_from_files(
            path, self.files, rows, title=self.title.value, who=self.who.value
        )
        study = sf.load()
        who = self.who.value.strip()
        ctx = self.context
        self.files, self.rows = [], []
        self.table.children = []
        load_study_into(ctx, path)
        reopen = ctx.extra.get("studykit.reopen_steps")
        if callable(reopen):
            reopen()
        from studykit.app.overview import workspace

        ws = workspace(ctx)
        if ws is not None and not ws.who.value:
            ws.who.value = who
        ctx.messages.ok(
            f"Created the study file '{path.name}' with "
            f"{len(study.characteristics)} characteristic(s) from "
            f"{', '.join(n for n, _data in study.files)}. Every step now works "
            "on it."
        )
        opener = ctx.extra.get("studykit.open_step")
        if callable(opener):
            opener("limits")
