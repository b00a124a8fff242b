"""Workbook step "Stability": phase-I control charts, removals with reasons, the removal log.

The engineer looks at the location and dispersion charts of the chosen characteristic (centre,
control limits, faint 1-sigma zone, optional 2-sigma warning limits, rule signals as diamonds,
removed subgroups as grey crosses where they were). Hovering shows the subgroup, its time,
statistic, values and note. Clicking a subgroup (or picking it in the list beside the chart)
proposes its removal; a reason is required, the name comes from the "Your name" field, and the
decision goes into the study file. A removed subgroup can be restored the same way.

"Find rule-breaking subgroups" runs the automatic phase-I loop without recording anything; each
proposal is then accepted or rejected, each with a reason: an accepted one is recorded as a
removal, a rejected one as a signal kept with its reason (``keep_signal``, origin
``rejected_proposal``).

"Keep, with reason" records that the signal at the selected subgroup is reviewed and is not a
special cause (or has a known common cause): the subgroup stays, the chart rings it in green,
the verdict is no longer withheld by it, and the signal is listed as reviewed with the reason.
"Reopen signal" withdraws that decision.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit import names
from studykit.app.charts import ControlChartView
from studykit.app.overview import panel, panel_css, when_shown
from studykit.app.steps.base import ChartStep
from studykit.app.widgets import esc, guarded, html_box
from studykit.errors import StudyInputError

_NONE = "—"


def open_signal_count(res) -> int:
    """Signals on the final chart not covered by a signal kept with a reason."""
    chart = res.chart
    kept = {(k["subgroup"], k["rule"]) for k in getattr(res, "kept_signals", ()) or ()}
    n = 0
    for series in chart.series:
        for sig in series.signals:
            labels = {str(chart.labels[int(p)]) for p in sig.points}
            if not any((lab, sig.rule) in kept for lab in labels):
                n += 1
    return n


class StabilityStep(ChartStep):
    """Step "Stability" (key ``stability``)."""

    key = "stability"
    title = names.STEP_NAMES[key]
    guidance = (
        "Confirm the process runs in statistical control; every removed subgroup needs "
        "a recorded reason."
    )
    what = "The stability step"
    follows_study = True  # a removal changes the study, not always the result object

    def __init__(self):
        self._proposals = []
        self.tap_events = 0  # how many tap selections reached Python (checked by tests)

    def is_done(self, context) -> bool:
        """Every characteristic analysed, and no rule signal left on any final chart."""
        ws = context.extra.get("studykit.workspace")
        if ws is None:
            return False
        s = ws.session
        if not all(s.is_cached(n) for n in s.names):
            return False
        return all(open_signal_count(s.result(n)) == 0 for n in s.names)

    # --- building -------------------------------------------------------------------------------
    def _build(self, ws, context) -> widgets.Widget:
        m = context.messages
        self._chart(ControlChartView())
        self.chart_box = widgets.VBox([])
        for part in ("location", "dispersion"):
            src = self.view.sources[part]["points"]
            src.selected.on_change(
                "indices",
                guarded(lambda _attr, _old, new, part=part: self._on_tap(part, new), messages=m),
            )
        self.summary = html_box("", "sk-stability-summary")
        self.warning_toggle = widgets.Checkbox(
            value=False, description="Show warning limits (2σ)", indent=False
        )
        self.warning_toggle.observe(
            guarded(lambda c: self.view.show_warning_limits(c["new"]), messages=m), names="value"
        )
        # the selected subgroup (tap on the chart, or this list as the fallback)
        self.subgroup = widgets.Dropdown(
            options=[(_NONE, "")], value="", layout=widgets.Layout(width="200px")
        )
        self.subgroup.add_class("sk-subgroup-pick")
        self.subgroup.observe(guarded(lambda _c: self._show_selected(), messages=m), names="value")
        self.selected_info = html_box("", "sk-selected-info")
        self.reason = widgets.Textarea(
            placeholder="Why? e.g. 'tool change at 10:40, logged in shift book'",
            layout=widgets.Layout(width="100%", height="64px"),
        )
        self.reason.add_class("sk-removal-reason")
        self.reason.observe(guarded(lambda _c: self._update_buttons(), messages=m), names="value")
        ws.who.observe(guarded(lambda _c: self._update_buttons(), messages=m), names="value")
        self.act = widgets.Button(
            description="Remove subgroup",
            disabled=True,
            button_style="danger",
            icon="times",
            layout=widgets.Layout(width="auto"),
        )
        self.act.add_class("sk-remove")
        self.act.on_click(guarded(lambda _b: self._on_act(), messages=m))
        self.keep = widgets.Button(
            description="Keep, with reason",
            disabled=True,
            icon="check-circle",
            layout=widgets.Layout(width="auto"),
        )
        self.keep.add_class("sk-keep")
        self.keep.tooltip = (
            "The signal here is not a special cause (or has a known common "
            "cause): keep the subgroup and record why"
        )
        self.keep.on_click(guarded(lambda _b: self._on_keep(), messages=m))
        self.act_hint = html_box("", "sk-small")
        side = widgets.VBox(
            [
                html_box(
                    '<div class="sk-panel-title" style="margin-top:0">Selected subgroup</div>'
                    '<div class="sk-small">Click a point on the chart, or pick it here.</div>'
                ),
                self.subgroup,
                self.selected_info,
                html_box('<div class="sk-field-label" style="margin-top:8px">Reason</div>'),
                self.reason,
                widgets.HBox([self.act, self.keep], layout=widgets.Layout(flex_flow="row wrap")),
                self.act_hint,
            ],
            layout=widgets.Layout(width="330px", min_width="280px"),
        )
        side.add_class("sk-side")
        chart_col = widgets.VBox(
            [self.chart_box, self.warning_toggle],
            layout=widgets.Layout(flex="1 1 600px", min_width="0"),
        )
        main = widgets.HBox(
            [chart_col, side],
            layout=widgets.Layout(width="100%", flex_flow="row wrap", align_items="flex-start"),
        )
        # automatic phase-I proposals
        self.find = widgets.Button(
            description="Find rule-breaking subgroups",
            icon="search",
            layout=widgets.Layout(width="auto"),
        )
        self.find.add_class("sk-find-proposals")
        self.find.on_click(guarded(lambda _b: self._on_find(), messages=m))
        self.proposal_box = widgets.VBox([])
        self.record = widgets.Button(
            description="Record decisions on proposals",
            button_style="primary",
            disabled=True,
            layout=widgets.Layout(width="auto", display="none"),
        )
        self.record.add_class("sk-record-proposals")
        self.record.on_click(guarded(lambda _b: self._on_record(), messages=m))
        auto = widgets.VBox(
            [
                html_box(
                    '<div class="sk-panel-title">Automatic phase-I removal</div>'
                    '<div class="sk-muted">studykit recomputes the limits round by round and '
                    "proposes every subgroup that breaks the removal rule. Nothing is recorded "
                    "until each proposal is accepted or rejected with a reason: an accepted one "
                    "is removed, a rejected one stays and its signal is kept with the reason."
                    "</div>"
                ),
                self.find,
                self.proposal_box,
                self.record,
            ]
        )
        self.log = html_box("", "sk-removal-log")
        self.kept_log = html_box("", "sk-kept-log")
        self.refresh(context)
        self.chart_box.children = [self.live.widget("sk-stability-chart")]
        when_shown(context, self.key, self.live.resync)
        return panel(
            [
                panel_css(),
                ws.toolbar(),
                self.caution,
                self.summary,
                main,
                auto,
                self.log,
                self.kept_log,
            ]
        )

    # --- drawing --------------------------------------------------------------------------------
    def _show_error(self, name: str, exc: StudyInputError) -> None:
        self.summary.value = (
            f'<div class="sk-msg sk-msg-error">{esc(name)} cannot be analysed: {esc(exc)}</div>'
        )

    def _draw(self, res, new_char: bool) -> None:
        s = self.ws.session
        name = s.current
        self.view.update(
            res, full_chart=s.full_chart(name), details=s.subgroup_details(name), unit=res.unit
        )
        self.live.changed()
        chart = res.chart
        signals = sum(
            len(getattr(chart, p).signals)
            for p in ("location", "dispersion")
            if getattr(chart, p) is not None
        )
        n_open = open_signal_count(res)
        removed = len(res.phase1.removals)
        labels = self.view._labels
        facts = [
            ("Chart", f"{names.chart_kind_label(chart.kind)} ({chart.reason})"),
            (
                "Subgroups used",
                f"{chart.n_subgroups} of {len(labels)}"
                + (f", {removed} removed" if removed else ""),
            ),
            (
                "Within sigma",
                f"{names.format_spread(res.within_sigma, digits=names.spec_digits(res.spec))} "
                f"({(res.phase1.raw_chart or chart).sigma_method_text})"
                if res.within_sigma is not None
                else _NONE,
            ),
            (
                "Rule signals",
                (
                    f"{signals} on the current limits"
                    + (f", {signals - n_open} kept with a reason" if n_open != signals else "")
                )
                if signals
                else "none on the current limits",
            ),
        ]
        notes = list(res.phase1.warnings)
        if res.options.phase1 == "off" and res.phase1.stopped == "iteration_cap" and n_open:
            # the workbook never removes on its own: "round limit reached" is by design here
            notes = [w for w in notes if "round limit" not in w]
            notes.append(
                f"{n_open} open rule signal{'s' if n_open != 1 else ''} on the current "
                "limits: look at the marked subgroups, and use 'Find rule-breaking "
                "subgroups' or remove a subgroup with its reason where the cause is "
                "known, or keep it with the reason it is not a special cause."
            )
        elif res.options.phase1 == "off" and res.phase1.stopped == "iteration_cap":
            notes = [w for w in notes if "round limit" not in w]
        warn = "".join(
            f'<div class="sk-msg sk-msg-warning"><span class="sk-msg-kind">Caution'
            f"</span>{esc(w)}</div>"
            for w in notes
        )
        self.summary.value = (
            '<div class="sk-summary">'
            + " · ".join(
                f'<span class="sk-muted">{esc(k)}</span> <b>{esc(v)}</b>' for k, v in facts
            )
            + "</div>"
            + warn
        )
        status = dict(
            zip(
                self.view.sources["location"]["points"].data["label"],
                self.view.sources["location"]["points"].data["status"],
                strict=False,
            )
        )
        keep = self.subgroup.value if self.subgroup.value in status and not new_char else ""
        self.subgroup.options = [(_NONE, "")] + [
            (f"{lab}{'  (removed)' if status[lab] == 'removed' else ''}", lab) for lab in labels
        ]
        self.subgroup.value = keep
        if new_char:
            self._proposals = []
            self._render_proposals()
        self._show_selected()
        self._render_log()
        self._render_kept_log()

    def _row(self, label):
        data = self.view.sources["location"]["points"].data
        if label not in data["label"]:
            return None
        i = data["label"].index(label)
        return {k: data[k][i] for k in data}

    def _show_selected(self) -> None:
        label = self.subgroup.value
        row = self._row(label) if label else None
        if row is None:
            self.selected_info.value = '<div class="sk-small">No subgroup selected.</div>'
        else:
            removed = row["status"] == "removed"
            facts = [
                ("Subgroup", row["label"]),
                ("Time", row["time"]),
                ("Statistic", row["value_text"]),
                ("Values", row["values"]),
                ("Note", row["note"]),
                ("Rules broken", row["rules"]),
                ("Status", "removed — " + row["removed_why"] if removed else "in use"),
            ]
            if row.get("kept_why", _NONE) != _NONE:
                facts.append(("Signal kept", row["kept_why"]))
            self.selected_info.value = (
                '<table class="sk-kvtable">'
                + "".join(f"<tr><td>{esc(k)}</td><td>{esc(v)}</td></tr>" for k, v in facts)
                + "</table>"
            )
        self._update_buttons()

    def _update_buttons(self) -> None:
        if self.view is None:
            return
        row = self._row(self.subgroup.value) if self.subgroup.value else None
        removed = row is not None and row["status"] == "removed"
        self.act.description = "Restore subgroup" if removed else "Remove subgroup"
        self.act.icon = "undo" if removed else "times"
        self.act.button_style = "" if removed else "danger"
        missing = []
        if row is None:
            missing.append("select a subgroup")
        if not self.reason.value.strip():
            missing.append("give a reason")
        if not self.ws.who_name:
            missing.append("type your name at the top")
        self.act.disabled = bool(missing)
        self._update_keep(row, missing)
        self.act_hint.value = ("To record: " + ", ".join(missing) + ".") if missing else ""
        ok = (
            self._proposals
            and all(
                (not state.value or reason.value.strip()) for _p, state, reason in self._proposals
            )
            and any(state.value for _p, state, _r in self._proposals)
        )
        self.record.disabled = not (ok and self.ws.who_name)

    def _keep_state(self, label: str) -> tuple[list[str], list[str]]:
        """(open rules, kept rules) at subgroup ``label`` of the current characteristic."""
        s = self.ws.session
        try:
            here = s.signals_at(s.current, label)
        except StudyInputError:
            return [], []
        kept_rules = [r for (lab, r) in s.kept_signals(s.current) if lab == label]
        return [r for r in here if r not in kept_rules], kept_rules

    def _update_keep(self, row, missing) -> None:
        if row is None or row["status"] == "removed":
            self.keep.description = "Keep, with reason"
            self.keep.disabled = True
            return
        open_rules, kept_rules = self._keep_state(row["label"])
        reopen = not open_rules and bool(kept_rules)
        self.keep.description = "Reopen signal" if reopen else "Keep, with reason"
        self.keep.icon = "undo" if reopen else "check-circle"
        self.keep.disabled = bool(missing) or not (open_rules or kept_rules)

    # --- callbacks ------------------------------------------------------------------------------
    def _on_tap(self, part: str, indices) -> None:
        self.tap_events += 1
        if not indices:
            return
        label = self.view.label_at(part, int(indices[-1]))
        if label != self.subgroup.value:
            self.subgroup.value = label

    def _selected(self) -> tuple[str, dict]:
        """The subgroup picked on the chart or in the list, and its row."""
        label = self.subgroup.value
        row = self._row(label)
        if row is None:
            raise StudyInputError("select a subgroup on the chart or in the list first")
        return label, row

    def _record(self, action, label: str):
        """Record ``action`` (a session method: exclude, restore, keep_signal, reopen_signal)
        for subgroup ``label`` of the shown characteristic with the reason and name given."""
        ws = self.ws
        out = action(
            ws.session.current,
            label,
            reason=self.reason.value,
            who=ws.who_name,
            override_reason=ws.override_reason,
        )
        self.reason.value = ""
        return out

    def _on_act(self) -> None:
        s = self.ws.session
        label, row = self._selected()
        name = s.current
        if row["status"] == "removed":
            self._record(s.restore, label)
            msg = f"Subgroup {label} of {name} restored; the limits were recomputed."
        else:
            self._record(s.exclude, label)
            msg = f"Subgroup {label} of {name} removed and recorded; the limits were recomputed."
        self.ws.context.messages.ok(msg)

    def _on_keep(self) -> None:
        s = self.ws.session
        label, _row = self._selected()
        name = s.current
        open_rules, kept_rules = self._keep_state(label)
        if open_rules:
            rules = self._record(s.keep_signal, label)
            msg = (
                f"Signal{'s' if len(rules) != 1 else ''} {', '.join(rules)} at subgroup "
                f"{label} of {name} kept with your reason; the subgroup stays in the "
                "analysis and the signal is listed as reviewed."
            )
        elif kept_rules:
            rules = self._record(s.reopen_signal, label)
            msg = f"Signal at subgroup {label} of {name} reopened: {', '.join(rules)}."
        else:
            raise StudyInputError(f"subgroup {label} of '{name}' has no rule signal to keep")
        self.ws.context.messages.ok(msg)

    def _on_find(self) -> None:
        s = self.ws.session
        proposals = s.open_proposals(s.current)
        m = self.ws.context.messages
        self._proposals = []
        for p in proposals:
            state = widgets.ToggleButtons(
                options=[("Undecided", ""), ("Accept", "accept"), ("Reject", "reject")], value=""
            )
            state.add_class(f"sk-proposal-{p.label}")
            reason = widgets.Text(
                placeholder="reason for accepting or rejecting (required)",
                layout=widgets.Layout(width="380px"),
            )
            state.observe(guarded(lambda _c: self._update_buttons(), messages=m), names="value")
            reason.observe(guarded(lambda _c: self._update_buttons(), messages=m), names="value")
            self._proposals.append((p, state, reason))
        self._render_proposals(found=True)
        self._update_buttons()

    def _render_proposals(self, *, found: bool = False) -> None:
        rows = []
        for p, state, reason in self._proposals:
            head = html_box(
                f"<b>Subgroup {esc(p.label)}</b> · rule {esc(p.rule)} · "
                f"{esc(p.chart or '')} chart, round {p.iteration}<br>"
                f'<span class="sk-small">{esc(p.reason)}</span>'
            )
            box = widgets.VBox(
                [head, widgets.HBox([state, reason], layout=widgets.Layout(flex_flow="row wrap"))]
            )
            box.add_class("sk-proposal")
            rows.append(box)
        if found and not rows:
            rows = [
                html_box(
                    '<div class="sk-msg sk-msg-ok"><span class="sk-msg-kind">Stable'
                    "</span>No subgroup breaks the removal rule on the current limits; "
                    "nothing to propose.</div>"
                )
            ]
        self.proposal_box.children = rows
        self.record.layout.display = "" if self._proposals else "none"

    def _on_record(self) -> None:
        ws, s = self.ws, self.ws.session
        accepted = [
            (p, reason.value) for p, state, reason in self._proposals if state.value == "accept"
        ]
        rejected = [
            (p, reason.value) for p, state, reason in self._proposals if state.value == "reject"
        ]
        n, k = s.record_proposal_decisions(
            s.current, accepted, rejected, who=ws.who_name, override_reason=ws.override_reason
        )
        self._proposals = []
        self._render_proposals()
        parts = [f"recorded {n} removal{'s' if n != 1 else ''}"] if n else []
        if k:
            parts.append(
                "rejected and kept with the reason: " + ", ".join(p.label for p, _r in rejected)
            )
        text = "; ".join(parts)
        ws.context.messages.ok(
            text[:1].upper()
            + text[1:]
            + ". Run the search again: new limits can reveal further signals."
        )

    def _render_log(self) -> None:
        rows = self.ws.session.removal_log()
        head = '<div class="sk-panel-title">Removal log (from the study file)</div>'
        if not rows:
            self.log.value = head + '<div class="sk-muted">No subgroup removed.</div>'
            return
        body = "".join(
            f"<tr><td>{esc(r.label)}</td><td>{'removed' if r.action == 'exclude' else 'restored'}"
            f"{'' if r.in_force or r.action != 'exclude' else ' (later restored)'}</td>"
            f"<td>{'rule ' + esc(r.rule) + ', accepted by a person' if r.origin == 'rule' else 'person'}"
            f"</td><td>{esc(r.who)}</td><td>{esc(r.when.replace('T', ' ').rstrip('Z'))}</td>"
            f"<td>{esc(r.reason)}</td></tr>"
            for r in rows
        )
        self.log.value = head + (
            '<table class="sk-table sk-removal-table"><thead><tr><th>Subgroup</th><th>Action</th>'
            "<th>Proposed by</th><th>Who</th><th>When (UTC)</th><th>Reason</th></tr></thead>"
            f"<tbody>{body}</tbody></table>"
        )

    def _render_kept_log(self) -> None:
        s = self.ws.session
        name = s.current
        rows = [
            d
            for d in s.study.decisions
            if d.characteristic == name and d.action in ("keep_signal", "reopen_signal")
        ]
        head = '<div class="sk-panel-title">Signals kept with a reason (from the study file)</div>'
        if not rows:
            self.kept_log.value = head + (
                '<div class="sk-muted">No signal kept. Select a '
                "signalled subgroup and use 'Keep, with reason' when "
                "it is not a special cause.</div>"
            )
            return
        in_force = s.kept_signals(name)
        body = "".join(
            f"<tr><td>{esc(d.subgroup)}</td><td>{esc(d.payload.get('rule', ''))}</td>"
            f"<td>{'kept' if d.action == 'keep_signal' else 'reopened'}"
            f"{' (later reopened)' if d.action == 'keep_signal' and in_force.get((d.subgroup, str(d.payload.get('rule')))) is not d else ''}"  # noqa: E501
            f"</td><td>{'rejected proposal' if d.payload.get('origin') == 'rejected_proposal' else 'person'}"  # noqa: E501
            f"</td><td>{esc(d.who)}</td><td>{esc(d.when.replace('T', ' ').rstrip('Z'))}</td>"
            f"<td>{esc(d.reason)}</td></tr>"
            for d in rows
        )
        self.kept_log.value = head + (
            '<table class="sk-table sk-kept-table"><thead><tr><th>Subgroup</th><th>Rule</th>'
            "<th>Decision</th><th>From</th><th>Who</th><th>When (UTC)</th><th>Reason</th></tr>"
            f"</thead><tbody>{body}</tbody></table>"
        )


STEP = StabilityStep()
