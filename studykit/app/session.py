"""The workbook's service over one study file: load, analyse, decide, sign, notify.

A :class:`StudySession` is what every workbook panel talks to. It holds the study as last read
from the study file, caches one :class:`~studykit.analysis.CharacteristicResult` per
characteristic, and turns the engineer's actions (exclude or restore a subgroup, change a
specification or criterion, choose a model, comment, sign) into appends to the study file
(:class:`studykit.store.StudyFile`), each with who and why. After every change the study is read
back from the file, the affected results are recomputed on demand and every listener is told.

No statistics are computed here: results come from :mod:`studykit.analysis`; the only other
numbers are a control chart over *every* subgroup (:func:`studykit.stats.charts.control_chart`),
so a removed subgroup can still be drawn where it was.

Results are cached under a fingerprint of everything that decides them (specification,
criterion, exclusions with reasons, settings such as the chosen model, attached gauge study), so
a change made by another person in another browser on the same file is picked up by
:meth:`StudySession.reload` without stale numbers.

Examples
--------
>>> import shutil, tempfile, pathlib
>>> from studykit.app.session import StudySession, demo_study_path
>>> path = pathlib.Path(tempfile.mkdtemp()) / "pilot.study"
>>> _ = shutil.copy(demo_study_path(), path)
>>> session = StudySession(path)
>>> session.names[:3]
('bore_diameter', 'face_runout', 'flange_thickness')
>>> sorted(session.result("flange_thickness").removed_subgroups)
['17', '18']
>>> session.restore("flange_thickness", "17", reason="made before the chip (NCR-0412)",
...                 who="A. Reviewer")
>>> sorted(session.result("flange_thickness").removed_subgroups)
['18']
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from studykit import names
from studykit.analysis import NO_GAUGE, AnalysisOptions, analyze_study, read_study_measurements
from studykit.errors import AnalysisError, StudyFileError, StudyInputError
from studykit.store import ChangeWatch, StaleView, StudyFile, describe_entries
from studykit.study import Criteria

__all__ = [
    "WORKBOOK_OPTIONS",
    "Proposal",
    "RemovalRow",
    "StudySession",
    "demo_study_path",
]

#: How the workbook analyses: only *recorded* exclusions remove subgroups. Automatic phase-I
#: removals are proposals that a person reviews (:meth:`StudySession.propose_removals`), then
#: records; so what the screen shows is exactly what the study file says.
WORKBOOK_OPTIONS = AnalysisOptions(phase1="off")

_MODEL_PAYLOAD = "model"


def demo_study_path() -> Path:
    """The demo study file shipped in ``demo_data/`` (for examples and tests)."""
    return Path(__file__).resolve().parents[2] / "demo_data" / "pump_housing_pilot.study"


@dataclass(frozen=True)
class Proposal:
    """A subgroup that the automatic phase-I run would remove (not yet recorded).

    Attributes
    ----------
    label : str
        Subgroup label.
    rule : str
        The run rule that flagged it (e.g. ``"1"``: beyond the control limits).
    chart : str or None
        ``"location"`` or ``"dispersion"`` part of the chart.
    iteration : int
        Removal round (1 = on the first trial limits).
    reason : str
        studykit's description of the signal, e.g. "point 17 above UCL ...".
    """

    label: str
    rule: str
    chart: str | None
    iteration: int
    reason: str

    def to_dict(self) -> dict:
        return {
            "label": self.label,
            "rule": self.rule,
            "chart": self.chart,
            "iteration": self.iteration,
            "reason": self.reason,
        }


@dataclass(frozen=True)
class RemovalRow:
    """One line of the removal log of a characteristic, read from the study file.

    Attributes
    ----------
    label : str
        Subgroup label.
    action : {"exclude", "restore"}
    who, when, reason : str
    origin : {"person", "rule"}
        ``"rule"`` when the removal was proposed by the automatic phase-I run and accepted by
        ``who``; ``"person"`` when a person picked the subgroup.
    rule : str or None
        The run rule of a rule-proposed removal.
    in_force : bool
        The subgroup is excluded now (this is the latest exclude/restore for it).
    """

    label: str
    action: str
    who: str
    when: str
    reason: str
    origin: str
    rule: str | None
    in_force: bool

    def to_dict(self) -> dict:
        return {
            "label": self.label,
            "action": self.action,
            "who": self.who,
            "when": self.when,
            "reason": self.reason,
            "origin": self.origin,
            "rule": self.rule,
            "in_force": self.in_force,
        }


def _accept(study, name: str, proposal, reason: str, who: str, **lock):
    """``study`` with an accepted removal proposal recorded: an automatic ``exclude`` with the
    rule, chart and signal in its payload (the one form of an accepted proposal)."""
    payload = {
        "rule": proposal.rule,
        "chart": proposal.chart,
        "signal": proposal.reason,
        "accepted_by": who,
    }
    return study.exclude(
        name, proposal.label, reason=reason, who=who, automatic=True, payload=payload, **lock
    )


def _check_name(who: str) -> str:
    who = (who or "").strip()
    if not who:
        raise StudyInputError(
            "`who` is empty: type your name in the 'Your name' field at the top of the panel; "
            "every decision in the study file carries the name of the person who made it"
        )
    return who


def _check_reason(reason: str, *, what: str) -> str:
    reason = (reason or "").strip()
    if not reason:
        raise StudyInputError(
            f"`reason` is empty: {what} needs a reason on record, e.g. 'tool change, logged in "
            "shift book'"
        )
    return reason


class StudySession:
    """One open study file, its cached results and the changes made to it.

    Parameters
    ----------
    path : str or Path
        An existing study file.
    options : AnalysisOptions, optional
        How results are computed (default :data:`WORKBOOK_OPTIONS`: recorded exclusions only).

    Attributes
    ----------
    path : Path
    file : StudyFile
    study : Study
        The study as last read from the file.
    current : str
        The characteristic the panels show.
    timings : dict
        Seconds taken by the last analysis of each characteristic (for the benchmark).
    """

    def __init__(self, path, *, options: AnalysisOptions | None = None):
        self.path = Path(path)
        self.file = StudyFile(self.path)
        #: version of the study file (newest audit id) that ``study`` was read at
        self.view_version = self.file.version()
        self.study = self.file.load()
        #: version the page in the browser has acknowledged showing (None: no page tracking,
        #: e.g. in a script; then ``view_version`` counts)
        self.page_version: int | None = None
        #: audit entries written by others that the last reload brought in (newest last)
        self.external_changes: list = []
        self._watch = ChangeWatch(self.file)
        self.options = options or WORKBOOK_OPTIONS
        self._measurements = None
        self._results: dict[str, tuple[str, object]] = {}
        self._errors: dict[str, tuple[str, str]] = {}
        self._full_charts: dict[tuple, object] = {}
        self._listeners: list[Callable[[StudySession, frozenset], None]] = []
        self.timings: dict[str, float] = {}
        names = self.study.characteristic_names
        self.current = names[0] if names else None

    # --- notification -------------------------------------------------------------------------
    def subscribe(self, listener: Callable[[StudySession, frozenset], None]) -> None:
        """Call ``listener(session, changed_names)`` after every change."""
        self._listeners.append(listener)

    def _notify(self, changed: Iterable[str]) -> None:
        changed = frozenset(changed)
        for listener in list(self._listeners):
            listener(self, changed)

    def select(self, name: str) -> None:
        """Make ``name`` the characteristic the panels show (listeners are told)."""
        self.study.characteristic(name)  # clear error for an unknown name
        if name != self.current:
            self.current = name
            self._notify(())

    # --- reading ------------------------------------------------------------------------------
    @property
    def names(self) -> tuple[str, ...]:
        return self.study.characteristic_names

    @property
    def measurements(self):
        """The study's stored data copy, read once."""
        if self._measurements is None:
            self._measurements = read_study_measurements(self.study)
        return self._measurements

    def data(self, name: str):
        """The :class:`~studykit.data.CharacteristicData` of ``name`` (times, notes, values)."""
        return self.measurements.get(name)

    def gauge(self, name: str) -> dict | None:
        """Payload of the latest gauge R&R result attached for ``name``, if any."""
        try:
            found = self.file.results(names.GAUGE_RR_KIND, name)
        except StudyInputError:
            return None
        return dict(found[-1].payload) if found else None

    def _fingerprint(self, name: str) -> str:
        s = self.study
        excluded = {
            k: [d.reason, d.who, d.automatic] for k, d in s.excluded_subgroups(name).items()
        }
        settings = [
            [d.action, dict(d.payload)]
            for d in s.decisions
            if d.characteristic == name and d.action.startswith("set_")
        ]
        return json.dumps(
            [
                s.data_sha256,
                s.characteristic(name).to_dict(),
                s.criteria_for(name).to_dict(),
                excluded,
                settings,
                self._gauge_key(name),
                self._kept_key(name),
            ],
            sort_keys=True,
            default=str,
        )

    def _gauge_key(self, name: str):
        g = getattr(self, "_gauges", None)
        if g is None:
            g = self._gauges = {}
        if name not in g:
            # no gauge study attached: the analysis says so in its findings, as the CLI and
            # the PDF do (analysis.NO_GAUGE)
            g[name] = self.gauge(name) or dict(NO_GAUGE)
        return g[name]

    def result(self, name: str | None = None):
        """The :class:`~studykit.analysis.CharacteristicResult` of ``name`` (default current).

        Raises the analysis error (a :class:`StudyInputError`) when it cannot be analysed; see
        :meth:`error` for a non-raising check.
        """
        name = name or self.current
        key = self._fingerprint(name)
        cached = self._results.get(name)
        if cached is not None and cached[0] == key:
            return cached[1]
        failed = self._errors.get(name)
        if failed is not None and failed[0] == key:
            raise AnalysisError(failed[1])
        start = time.perf_counter()
        try:
            res = analyze_study(
                self.study,
                name,
                measurements=self.measurements,
                options=self.options,
                gauge=self._gauge_key(name),
            )
        except StudyInputError as exc:
            self._errors[name] = (key, str(exc))
            raise
        finally:
            self.timings[name] = time.perf_counter() - start
        self._results[name] = (key, res)
        self._errors.pop(name, None)
        return res

    def error(self, name: str) -> str | None:
        """Why ``name`` cannot be analysed (None when it can)."""
        try:
            self.result(name)
        except StudyInputError as exc:
            return str(exc)
        return None

    def is_cached(self, name: str) -> bool:
        cached = self._results.get(name)
        return cached is not None and cached[0] == self._fingerprint(name)

    def analyze_all(self, *, progress: Callable[[int, int, str], None] | None = None) -> dict:
        """Analyse every characteristic (cached ones are not recomputed).

        ``progress(done, total, name)`` is called after each. Returns ``{name: result or
        error text}``; one failure never stops the others.
        """
        out = {}
        names = self.names
        for i, name in enumerate(names, 1):
            try:
                out[name] = self.result(name)
            except StudyInputError as exc:
                out[name] = str(exc)
            if progress is not None:
                progress(i, len(names), name)
        return out

    def full_chart(self, name: str | None = None):
        """A control chart of the same kind over every subgroup (no exclusions, no rules).

        Only for drawing removed subgroups where they were; limits come from the result.
        """
        from studykit.stats.charts import control_chart

        name = name or self.current
        res = self.result(name)
        chart = res.chart
        key = (
            name,
            chart.kind,
            self.study.characteristic(name).subgroup_size,
            res.chart_scale,
            repr(getattr(res.model, "parameters", None)),
        )
        if key not in self._full_charts:
            data = self.data(name)
            values = np.asarray(data.values, dtype=float)
            labels = np.asarray(data.subgroups).astype(str)
            keep = ~np.isnan(values)
            sizes = None
            spec = self.study.characteristic(name)
            if spec.size_column:
                sizes = np.asarray(self.data(spec.size_column).values, dtype=float)
                keep &= ~np.isnan(sizes)
                sizes = sizes[keep]
            values, labels = values[keep], labels[keep]
            if spec.subgroup_size and len(set(labels.tolist())) == labels.size:
                labels = np.array(
                    [str(i // int(spec.subgroup_size) + 1) for i in range(labels.size)]
                )
            values = res.to_chart_scale(values)  # a chart on the model's scale (phase I)
            try:
                self._full_charts[key] = control_chart(
                    values, labels, kind=chart.kind, sizes=sizes, evaluate=False
                )
            except StudyInputError:
                self._full_charts[key] = None
        return self._full_charts[key]

    def subgroup_details(self, name: str | None = None) -> dict[str, dict]:
        """Per subgroup label: ``time`` (first value's), ``note`` (joined), ``values`` (list).

        Read from the data file as it is (nothing computed).
        """
        name = name or self.current
        data = self.data(name)
        labels = np.asarray(data.subgroups).astype(str)
        times = data.times
        notes = data.notes
        spec = self.study.characteristic(name)
        if spec.subgroup_size and len(set(labels.tolist())) == labels.size:
            labels = np.array([str(i // int(spec.subgroup_size) + 1) for i in range(labels.size)])
        out: dict[str, dict] = {}
        for i, lab in enumerate(labels.tolist()):
            entry = out.setdefault(lab, {"time": "", "note": [], "values": []})
            v = float(data.values[i])
            entry["values"].append(None if np.isnan(v) else v)
            if times is not None and not entry["time"]:
                t = str(times[i])
                entry["time"] = t[:16].replace("T", " ") if "T" in t else t
            if notes is not None:
                text = str(notes[i] or "").strip()
                if text and text not in entry["note"]:
                    entry["note"].append(text)
        for entry in out.values():
            entry["note"] = "; ".join(entry["note"])
        return out

    def removal_log(self, name: str | None = None) -> list[RemovalRow]:
        """Every exclude/restore decision of ``name`` in the order made (from the study file)."""
        name = name or self.current
        decisions = [
            d
            for d in self.study.decisions
            if d.characteristic == name and d.action in ("exclude", "restore")
        ]
        in_force = self.study.excluded_subgroups(name)
        rows = []
        for d in decisions:
            rule = d.payload.get("rule") if d.payload else None
            rows.append(
                RemovalRow(
                    label=d.subgroup,
                    action=d.action,
                    who=d.who,
                    when=d.when,
                    reason=d.reason,
                    origin="rule" if d.automatic or rule else "person",
                    rule=None if rule is None else str(rule),
                    in_force=d.action == "exclude" and in_force.get(d.subgroup) is d,
                )
            )
        return rows

    # --- sign-off state -----------------------------------------------------------------------
    @property
    def is_locked(self) -> bool:
        return self.study.is_locked

    def signoff_state(self):
        return self.study.signoff_state()

    def state_text(self) -> str:
        """Short state for the header: open / approved and locked / approval voided."""
        cached = getattr(self, "_state_cache", None)
        if cached is not None and cached[0] is self.study:
            return cached[1]
        text = self._state_text()
        self._state_cache = (self.study, text)
        return text

    def _state_text(self) -> str:
        states = self.study.signoff_state()
        if self.study.is_locked:
            return "Approved · locked"
        if any(st.signoff.is_approval and not st.valid for st in states):
            return "Approval voided"
        if any(st.valid for st in states):
            return "Signed in part"
        return "Study open"

    def audit_log(self):
        return self.file.audit_log()

    # --- changes ------------------------------------------------------------------------------
    def _lock(self, override_reason: str | None, what: str = "this change") -> dict:
        """Keyword arguments for the store; a clear refusal while the study is locked."""
        reason = (override_reason or "").strip()
        if reason:
            return {"override_lock": True, "override_reason": reason}
        holder = self.study.lock_holder()
        if holder is not None:
            raise StudyFileError(
                f"the study is approved (by {holder.name} on {holder.when}) and therefore "
                f"locked: {what} would change it. To change it anyway, give the reason in "
                "'Change an approved study because' (`override_reason`); the change then voids "
                "the approval, which stays on record as voided"
            )
        return {}

    def _saved(self, changed: Iterable[str]) -> None:
        """After a write of this session: read the file back; the page counts as up to date
        when it was up to date before the write (the result reaches it in order)."""
        before, after = getattr(self.file, "last_write", (None, None))
        was_current = self.page_version is None or self.page_version == self.view_version
        version = self.file.version()
        self.study = self.file.load()
        self.view_version = version
        # someone may have written right after this write: that is news for this page
        self.external_changes = (
            self.file.entries_since(after) if after is not None and version > after else []
        )
        if was_current and self.page_version is not None and before == self.page_version:
            self.page_version = after  # not `version`: the page has not seen later writes
        self._notify(changed)

    def reload(self, *, changes: Sequence | None = None) -> None:
        """Read the study file again (changes made in another browser show up).

        ``changes`` are the audit entries that brought the reload about (shown as "who changed
        what"); by default those written since this session last read the file.
        """
        if changes is None:
            changes = self.file.entries_since(self.view_version)
        version = self.file.version()
        self._gauges = {}
        self.study = self.file.load()
        self.view_version = version
        self.external_changes = list(changes)
        self._notify(self.names)

    # --- live state ---------------------------------------------------------------------------
    def file_version(self) -> int:
        """The study file's version now (cheap: asks SQLite whether anything was committed)."""
        return self._watch.version()

    def check_for_changes(self) -> bool:
        """Reload when the file moved on since this session read it; True when it did."""
        if self.file_version() == self.view_version:
            return False
        self.reload()
        return True

    @property
    def expected_version(self) -> int:
        """The version a change made now must find in the file: the page's, else the view's."""
        return self.view_version if self.page_version is None else self.page_version

    @property
    def shown_digest(self) -> str:
        """Content digest of the study as this session (and its page) shows it."""
        return self.study.content_digest()

    @contextmanager
    def _acting(self):
        """Refuse a write made on a view older than the file; then show the file as it is."""
        try:
            with self.file.expecting(self.expected_version):
                yield
        except StaleView as exc:
            newer = exc.newer or self.file.entries_since(self.expected_version)
            self.reload(changes=newer)
            what = describe_entries(newer) if newer else "a newer entry"
            raise StaleView(
                f"Nothing was saved: the study changed after this page was drawn ({what}). The "
                "page now shows the study as it is: check it, then do it again if it still "
                "applies",
                newer,
            ) from None

    def attach_result(
        self,
        kind: str,
        name: str,
        payload,
        *,
        who: str,
        reason: str,
        override_reason: str | None = None,
    ) -> int:
        """Keep a result (e.g. a gauge study) beside ``name``; refused, like every other write
        from a page, when the page shows an older state of the study file."""
        lock = (
            {"override_lock": True, "override_reason": override_reason} if override_reason else {}
        )
        with self._acting():
            return self.file.attach_result(kind, name, payload, who=who, reason=reason, **lock)

    def exclude(
        self, name: str, subgroup, *, reason: str, who: str, override_reason: str | None = None
    ) -> None:
        """Record the exclusion of one subgroup (a person's decision)."""
        who = _check_name(who)
        reason = _check_reason(reason, what=f"removing subgroup {subgroup}")
        self._check_subgroup(name, subgroup)
        with self._acting():
            self.file.exclude(
                name,
                str(subgroup),
                reason=reason,
                who=who,
                **self._lock(override_reason, f"removing subgroup {subgroup}"),
            )
        self._saved([name])

    def restore(
        self, name: str, subgroup, *, reason: str, who: str, override_reason: str | None = None
    ) -> None:
        """Bring an excluded subgroup back (recorded with who and why)."""
        who = _check_name(who)
        reason = _check_reason(reason, what=f"restoring subgroup {subgroup}")
        if str(subgroup) not in self.study.excluded_subgroups(name):
            raise StudyInputError(
                f"subgroup {subgroup} of '{name}' is not excluded, so there is nothing to "
                "restore; pick one of: "
                + (", ".join(self.study.excluded_subgroups(name)) or "none")
            )
        with self._acting():
            self.file.restore(
                name,
                str(subgroup),
                reason=reason,
                who=who,
                **self._lock(override_reason, f"restoring subgroup {subgroup}"),
            )
        self._saved([name])

    def _check_subgroup(self, name: str, subgroup) -> None:
        labels = set(np.asarray(self.data(name).subgroups).astype(str).tolist())
        spec = self.study.characteristic(name)
        if spec.subgroup_size:
            n = len(self.data(name).values)
            labels |= {str(i // int(spec.subgroup_size) + 1) for i in range(n)}
        if str(subgroup) not in labels:
            raise StudyInputError(
                f"`subgroup` ({subgroup!r}) is not a subgroup of '{name}'; pick one shown on "
                "the chart"
            )
        if str(subgroup) in self.study.excluded_subgroups(name):
            raise StudyInputError(
                f"subgroup {subgroup} of '{name}' is already excluded; restore it first if the "
                "reason should change"
            )

    def propose_removals(self, name: str | None = None) -> tuple[Proposal, ...]:
        """What the automatic phase-I run would remove on top of the recorded exclusions.

        Nothing is recorded: each proposal is accepted (with a reason) or rejected by a person,
        then :meth:`record_removals` writes the accepted ones.
        """
        name = name or self.current
        res = analyze_study(
            self.study,
            name,
            measurements=self.measurements,
            options=replace(self.options, phase1="auto"),
        )
        manual = set(self.study.excluded_subgroups(name))
        out = []
        for r in res.phase1.removals:
            label = str(r.label.item() if hasattr(r.label, "item") else r.label)
            if r.rule == "manual" or label in manual:
                continue
            out.append(
                Proposal(
                    label=label,
                    rule=str(r.rule),
                    chart=r.chart,
                    iteration=int(r.iteration),
                    reason=str(r.reason),
                )
            )
        return tuple(out)

    def record_removals(
        self,
        name: str,
        accepted: Sequence[tuple[Proposal, str]],
        *,
        who: str,
        override_reason: str | None = None,
    ) -> int:
        """Record accepted proposals in one transaction: ``[(proposal, reason), ...]``.

        Each becomes an ``exclude`` decision marked automatic (proposed by the rule), with the
        person who accepted it as ``who``, their reason, and the rule in the payload. Returns
        how many were recorded.
        """
        who = _check_name(who)
        items = []
        for proposal, reason in accepted:
            reason = _check_reason(
                reason, what=f"accepting the removal of subgroup {proposal.label}"
            )
            items.append((proposal, reason))
        if not items:
            return 0
        lock = self._lock(override_reason, "recording the removals")

        # after the first change voids the approval, later ones need no override
        def change_once(study):
            first = True
            for proposal, reason in items:
                kwargs = lock if first else {}
                study = _accept(study, name, proposal, reason, who, **kwargs)
                first = False
            return study

        with self._acting():
            self.file.apply(change_once)
        self._saved([name])
        return len(items)

    def update_characteristic(
        self,
        name: str,
        *,
        who: str,
        reason: str,
        spec: Mapping | None = None,
        criteria: Criteria | None = None,
        override_reason: str | None = None,
    ) -> bool:
        """Change specification fields and/or the criterion of ``name`` in one transaction.

        Only fields that differ from the current ones are recorded. Returns False when nothing
        changed.
        """
        who = _check_name(who)
        reason = _check_reason(reason, what="a change of specification or criterion")
        current = self.study.characteristic(name)
        changes = {k: v for k, v in dict(spec or {}).items() if getattr(current, k) != v}
        crit_changed = criteria is not None and criteria != self.study.criteria_for(name)
        if not changes and not crit_changed:
            return False
        lock = self._lock(override_reason, "changing the specification")

        def change(study):
            kwargs = dict(lock)
            if changes:
                study = study.with_spec(name, who=who, reason=reason, **kwargs, **changes)
                kwargs = {}
            if crit_changed:
                study = study.with_criteria(name, criteria, who=who, reason=reason, **kwargs)
            return study

        with self._acting():
            self.file.apply(change)
        self._saved([name])
        return True

    def set_model(
        self, name: str, model: str, *, who: str, reason: str, override_reason: str | None = None
    ) -> None:
        """Record the model choice (``auto``, ``normal``, ``boxcox``, ``johnson`` or a family)."""
        self._setting(
            name,
            "set_model",
            {"model": str(model)},
            who=who,
            reason=reason,
            override_reason=override_reason,
        )

    def set_chart(
        self, name: str, chart: str, *, who: str, reason: str, override_reason: str | None = None
    ) -> None:
        """Record the control chart choice (``auto``, ``xbar_r``, ``imr`` ...)."""
        self._setting(
            name,
            "set_chart",
            {"chart": str(chart)},
            who=who,
            reason=reason,
            override_reason=override_reason,
        )

    def _setting(self, name, action, payload, *, who, reason, override_reason):
        from studykit.study import Decision

        who = _check_name(who)
        reason = _check_reason(reason, what=f"the {action.replace('_', ' ')} decision")
        # validates the name through AnalysisOptions before anything is written
        if action == "set_model":
            AnalysisOptions(model=payload["model"])
        else:
            AnalysisOptions(chart=payload["chart"])
        with self._acting():
            self.file.append_decision(
                Decision(name, action, reason=reason, who=who, payload=payload),
                **self._lock(override_reason, f"the {action} decision"),
            )
        self._saved([name])

    def preview(self, name: str, *, model: str | None = None):
        """The result of ``name`` with another model, not recorded (for a before/after view)."""
        return analyze_study(
            self.study,
            name,
            measurements=self.measurements,
            options=replace(self.options, model=model or None),
            gauge=self._gauge_key(name),
        )

    def add_comment(self, text: str, *, who: str, characteristic: str | None = None) -> None:
        """A comment on the study or one characteristic (allowed on an approved study)."""
        who = _check_name(who)
        if not (text or "").strip():
            raise StudyInputError("the comment is empty: write what the team should know")
        with self._acting():
            self.file.add_comment(text.strip(), who=who, characteristic=characteristic)
        self._saved(())

    def comments(self, characteristic: str | None = None, *, all_: bool = False) -> list:
        return [c for c in self.study.comments if all_ or c.characteristic == characteristic]

    def sign(
        self,
        *,
        who: str,
        role: str,
        decision: str,
        comment: str = "",
        seen_digest: str | None = None,
    ):
        """Sign the study as this page shows it; returns the saved SignOff.

        The sign-off records the content digest of the study shown (``seen_digest``, default
        :attr:`shown_digest`) and is refused when the file's content differs from it, when the
        page is older than the file, or when a sign-off rule of the study forbids it
        (:mod:`studykit.signoff_rules`).
        """
        from studykit.signoff_rules import make_check
        from studykit.study import SignOff

        who = _check_name(who)
        if not (role or "").strip():
            raise StudyInputError(
                "the role is empty: choose "
                + ", ".join(names.role_label(r) for r in ("prepared", "reviewed", "approved"))
            )
        seen = seen_digest or self.shown_digest
        role = names.role_id(role)
        probe = SignOff(who, role.strip(), decision, comment=comment, digest=seen)
        missing = {}
        if probe.is_approval and self.study.signoff_rules().get("approval_needs_verdicts"):
            missing = self.open_verdicts()
        with self._acting():
            s = self.file.add_signoff(
                who,
                role=role.strip(),
                decision=decision,
                comment=comment,
                expected_digest=seen,
                check=make_check(missing),
            )
        self._saved(())
        return s

    def open_verdicts(self, *, analyse: bool = True) -> dict[str, str]:
        """Characteristics without a verdict and without a waiver (what blocks an approval).

        ``analyse=False`` uses only results already computed; the others show as "not
        analysed" (cheap, for drawing the page; signing always analyses).
        """
        from studykit.signoff_rules import open_verdicts

        results = {}
        for name in self.names:
            if not analyse and not self.is_cached(name) and name not in self._errors:
                continue
            try:
                results[name] = self.result(name)
            except StudyInputError as exc:
                results[name] = str(exc)
        return open_verdicts(self.study, results)

    def waive(
        self,
        name: str,
        *,
        reason: str,
        who: str,
        withdraw: bool = False,
        override_reason: str | None = None,
    ) -> None:
        """Record (or withdraw) a waiver: ``name`` may be approved without a verdict."""
        from studykit.study import Decision

        who = _check_name(who)
        reason = _check_reason(reason, what="a waiver")
        self.study.characteristic(name)
        waived = name in self.study.waivers()
        if withdraw != waived:
            raise StudyInputError(
                f"'{name}' has no waiver to withdraw"
                if withdraw
                else f"'{name}' already has a waiver; withdraw it first"
            )
        with self._acting():
            self.file.append_decision(
                Decision(
                    name,
                    "waive_verdict",
                    reason=reason,
                    who=who,
                    payload={"waived": not withdraw, "reason": reason},
                ),
                **self._lock(override_reason, f"a waiver for {name}"),
            )
        self._saved([name])

    def set_signoff_rules(
        self,
        rules: Mapping[str, bool],
        *,
        reason: str,
        who: str,
        override_reason: str | None = None,
    ) -> bool:
        """Change sign-off rules of the study (recorded with who and why); False if unchanged."""
        from studykit.study import Decision

        who = _check_name(who)
        reason = _check_reason(reason, what="a change of the sign-off rules")
        current = self.study.signoff_rules()
        changes = {k: bool(v) for k, v in rules.items() if current.get(k) != bool(v)}
        if not changes:
            return False
        with self._acting():
            self.file.append_decision(
                Decision(
                    None, "set_signoff_rules", reason=reason, who=who, payload={"rules": changes}
                ),
                **self._lock(override_reason, "changing the sign-off rules"),
            )
        self._saved(())
        return True

    # --- signals kept with a reason -----------------------------------------------------------
    def _kept_key(self, name: str) -> list:
        """The kept signals of ``name`` as they decide a result (part of the cache key)."""
        return sorted(
            [k[0], k[1], d.reason, d.who, d.payload.get("origin", "person")]
            for k, d in self.study.kept_signals(name).items()
        )

    def kept_signals(self, name: str | None = None) -> dict:
        """``(subgroup, rule)`` -> the ``keep_signal`` decision in force, for ``name``."""
        return self.study.kept_signals(name or self.current)

    def signals_at(self, name: str, subgroup) -> list[str]:
        """Rules that signal at ``subgroup`` on the current final chart of ``name``."""
        chart = self.result(name).chart
        label = str(subgroup)
        found: list[str] = []
        for series in chart.series:
            for sig in series.signals:
                if (
                    label in {str(chart.labels[int(p)]) for p in sig.points}
                    and sig.rule not in found
                ):
                    found.append(sig.rule)
        return found

    def keep_signal(
        self,
        name: str,
        subgroup,
        *,
        reason: str,
        who: str,
        rules: Sequence[str] | None = None,
        override_reason: str | None = None,
    ) -> list[str]:
        """Record "keep, with reason" for the signals at ``subgroup`` of ``name``.

        ``rules`` defaults to every rule signalling there now and not yet kept; each becomes a
        ``keep_signal`` decision (origin ``person``) in one transaction. Returns the rules kept.
        """
        who = _check_name(who)
        label = str(subgroup)
        reason = _check_reason(reason, what=f"keeping the signal at subgroup {label}")
        if label in self.study.excluded_subgroups(name):
            raise StudyInputError(
                f"subgroup {label} of '{name}' is removed; restore it first if it should stay "
                "in the analysis with a reason"
            )
        now = self.signals_at(name, label)
        kept = self.study.kept_signals(name)
        wanted = list(rules) if rules else [r for r in now if (label, r) not in kept]
        if not wanted:
            raise StudyInputError(
                f"subgroup {label} of '{name}' has no open signal to keep"
                + (
                    " (its signals are already kept)"
                    if now
                    else " (no rule signals there on the current limits)"
                )
            )
        unknown = [r for r in wanted if r not in now]
        if unknown:
            raise StudyInputError(
                f"subgroup {label} of '{name}' shows no {', '.join(unknown)} signal on the "
                f"current limits (signals there: {', '.join(now) or 'none'})"
            )
        lock = self._lock(override_reason, f"keeping the signal at subgroup {label}")

        def change(study):
            kwargs = dict(lock)
            for rule in wanted:
                study = study.keep_signal(name, label, rule=rule, reason=reason, who=who, **kwargs)
                kwargs = {}
            return study

        with self._acting():
            self.file.apply(change)
        self._saved([name])
        return wanted

    def reopen_signal(
        self, name: str, subgroup, *, reason: str, who: str, override_reason: str | None = None
    ) -> list[str]:
        """Withdraw every kept signal at ``subgroup`` of ``name`` (they count as open again)."""
        who = _check_name(who)
        label = str(subgroup)
        reason = _check_reason(reason, what=f"reopening the signal at subgroup {label}")
        rules = [r for (lab, r) in self.study.kept_signals(name) if lab == label]
        if not rules:
            raise StudyInputError(f"subgroup {label} of '{name}' has no kept signal to reopen")
        lock = self._lock(override_reason, f"reopening the signal at subgroup {label}")

        def change(study):
            kwargs = dict(lock)
            for rule in rules:
                study = study.reopen_signal(
                    name, label, rule=rule, reason=reason, who=who, **kwargs
                )
                kwargs = {}
            return study

        with self._acting():
            self.file.apply(change)
        self._saved([name])
        return rules

    def open_proposals(self, name: str | None = None) -> tuple[Proposal, ...]:
        """:meth:`propose_removals` without the signals already kept with a reason.

        Proposals of later rounds assume every earlier proposal removed; once a kept one is left
        out, the later rounds are left out too (run the search again after recording).
        """
        name = name or self.current
        kept = self.study.kept_signals(name)
        out: list[Proposal] = []
        skipped_round = None
        for p in self.propose_removals(name):
            if skipped_round is not None and p.iteration > skipped_round:
                break
            if all((p.label, r) in kept for r in p.rule.split(",")):
                skipped_round = p.iteration
                continue
            out.append(p)
        return tuple(out)

    def record_proposal_decisions(
        self,
        name: str,
        accepted: Sequence[tuple[Proposal, str]],
        rejected: Sequence[tuple[Proposal, str]],
        *,
        who: str,
        override_reason: str | None = None,
    ) -> tuple[int, int]:
        """Record accepted proposals (``exclude``) and rejected ones (``keep_signal`` with origin
        ``rejected_proposal``) in one transaction, each with its reason. Returns the counts."""
        who = _check_name(who)
        acc = [
            (p, _check_reason(r, what=f"accepting the removal of subgroup {p.label}"))
            for p, r in accepted
        ]
        rej = [
            (p, _check_reason(r, what=f"rejecting the proposal for subgroup {p.label}"))
            for p, r in rejected
        ]
        if not acc and not rej:
            return 0, 0
        lock = self._lock(override_reason, "recording the proposal decisions")

        def change(study):
            kwargs = dict(lock)
            for proposal, reason in acc:
                study = _accept(study, name, proposal, reason, who, **kwargs)
                kwargs = {}
            for proposal, reason in rej:
                for rule in proposal.rule.split(","):
                    study = study.keep_signal(
                        name,
                        proposal.label,
                        rule=rule,
                        reason=reason,
                        who=who,
                        origin="rejected_proposal",
                        payload={
                            "chart": proposal.chart,
                            "signal": proposal.reason,
                            "round": proposal.iteration,
                        },
                        **kwargs,
                    )
                    kwargs = {}
            return study

        with self._acting():
            self.file.apply(change)
        self._saved([name])
        return len(acc), len(rej)

    # --- export -------------------------------------------------------------------------------
    def results_json(self) -> bytes:
        """Every characteristic's result as JSON (the fields of ``studykit analyze --json``)."""
        out = {
            "study": {
                "title": self.study.title,
                "part": self.study.part,
                "content_digest": self.study.content_digest(),
                "state": self.state_text(),
            },
            "characteristics": {},
        }
        for name in self.names:
            try:
                out["characteristics"][name] = self.result(name).to_dict()
            except StudyInputError as exc:
                out["characteristics"][name] = {"error": str(exc)}
        return json.dumps(out, indent=2, sort_keys=False, allow_nan=False).encode("utf-8")


def open_session(path) -> StudySession:
    """Open ``path`` as a :class:`StudySession` (StudyFileError when it is no study file)."""
    if not Path(path).is_file():
        raise StudyFileError(f"the study file '{Path(path).name}' does not exist")
    return StudySession(path)
