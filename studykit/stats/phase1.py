"""Phase I: trial limits, removal of signalling subgroups with a log, recomputed limits.

The loop: (1) apply the engineer's manual exclusions, each with a reason and a name; (2) compute
trial limits; (3) find the subgroups that signal under the removal rules (default: a point beyond
the control limits on either chart); (4) remove them all, logging one entry per subgroup;
(5) recompute, until nothing signals or the round limit is reached.

What the loop guarantees, and what it does not:

* When ``stopped == "stable"``, no kept subgroup signals under the removal rules against the
  final removal limits (the loop ends only then). Each automatically removed subgroup signalled
  against the removal limits of the round in which it was removed.
* Removal limits (``studykit.stats.chance``): on a variables chart of up to 25 points they are
  the 3-sigma control limits. On a longer chart they are widened so that a stable normal
  process crosses them anywhere on the chart with the probability the 3-sigma limits give 25
  points (6.5 % on the location chart): the per-point probability is Sidak-adjusted for the
  number of points (Chakraborti, Human and Graham 2009, sections 2-3, from memory). Points
  between the control limits and the removal limits stay; ``chance`` says how many points lie
  beyond the control limits and how many a stable process of that length gives by chance.
* Removing points narrows the limits, so a later round can flag subgroups that were inside the
  trial limits; the number of signals is *not* monotone. The round limit (default 10) stops
  runaway trimming, and heavy removal is reported.

On a model's scale: with ``rescale`` the chart of every round is drawn on the scale the function
returns for the values still kept (the analysis refits its distribution model each round and
returns transformed values or normal scores with known standard 0 and 1, i.e. probability
limits), so the model and the removals are decided together.

Choices (common practice, no source): all signalling subgroups of a round are removed together;
for a rule about a pattern (run, trend...) every point that completed it is removed; on the
individuals chart, a moving-range signal at position i removes value i (the later of the pair;
``mr_removal="both"``: values i-1 and i) unless value i-1 or i is already removed in that round
for the individuals chart; after a removal the moving range is taken across the gap. A warning is raised when more than 10 % of the values
(for attribute charts: of the subgroups) were removed or fewer than 20 subgroups remain.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import dataclass

import numpy as np

from studykit.errors import AnalysisError, HeavyRemovalWarning, StudyInputError
from studykit.stats.chance import SeriesChance, series_chance
from studykit.stats.charts import (
    ATTRIBUTE_KINDS,
    DISPERSION_RULES,
    ChartSeries,
    ControlChart,
    SubgroupCodes,
    control_chart,
    evaluate_series,
    plain_label,
    with_signals,
)
from studykit.stats.result import Result
from studykit.stats.rules import collector_paused, parse_rules

__all__ = [
    "Removal",
    "Phase1Result",
    "ChartScale",
    "phase1",
    "MIN_SUBGROUPS",
    "MAX_REMOVED_SHARE",
    "MR_REMOVAL",
]

#: Fewer kept subgroups than this raises a HeavyRemovalWarning (common practice, no source).
MIN_SUBGROUPS = 20
#: A larger removed share of the values raises a HeavyRemovalWarning (common practice, no source).
MAX_REMOVED_SHARE = 0.10

#: Which reading a moving-range signal removes (ours): the later of the pair, or both.
MR_REMOVAL = ("later", "both")

_NAMES = {
    "xbar": "subgroup average",
    "range": "subgroup range",
    "stdev": "subgroup standard deviation",
    "individual": "value",
    "moving_range": "moving range",
    "p": "proportion nonconforming",
    "np": "number nonconforming",
    "c": "count of nonconformities",
    "u": "nonconformities per unit",
}


@dataclass(frozen=True)
class Removal(Result):
    """One subgroup taken out of the phase-I limits.

    Attributes
    ----------
    label : object
        Subgroup label.
    rule : str
        ``"manual"`` or the rule id(s) that flagged it (e.g. ``"beyond_limits"``).
    chart : str or None
        ``"location"``, ``"dispersion"``, ``"location+dispersion"``, or None when manual.
    iteration : int
        0 for manual exclusions, else the round (1 = trial limits).
    reason : str
        Plain-words reason.
    who : str
        ``"auto"`` or the person who excluded it.
    n_values : int
        Values (attribute charts: inspected units) in the subgroup.
    """

    label: object
    rule: str
    chart: str | None
    iteration: int
    reason: str
    who: str
    n_values: int

    def to_dict(self) -> dict:
        """JSON-safe dictionary."""
        return {
            "label": plain_label(self.label),
            "rule": self.rule,
            "chart": self.chart,
            "iteration": self.iteration,
            "reason": self.reason,
            "who": self.who,
            "n_values": int(self.n_values),
        }


@dataclass(frozen=True, eq=False)
class ChartScale(Result):
    """The scale on which phase I charts the values (see ``phase1(..., rescale=...)``).

    Attributes
    ----------
    name : str
        ``"raw"`` (the values as measured), ``"transformed"`` (Box-Cox or Johnson values) or
        ``"normal_score"`` (Phi^-1 of the fitted model's cdf: limits at -3, 0, +3 there are the
        model's 0.135 %, 50 % and 99.865 % points).
    label : str
        What the plotted values are, in words (used in removal reasons and on the charts).
    values : ndarray
        The kept values on this scale, in the order given.
    mu, sigma : float or None
        A known standard for the chart on this scale (normal scores: 0 and 1), else None (the
        chart estimates centre and within sigma as usual).
    model : object
        Whatever the caller attaches (the analysis keeps its model choice here).
    """

    name: str
    label: str
    values: np.ndarray
    mu: float | None = None
    sigma: float | None = None
    model: object = None


@dataclass(frozen=True, eq=False)
class Phase1Result(Result):
    """Outcome of the phase-I loop.

    Attributes
    ----------
    chart : ControlChart
        Final chart on the kept subgroups, with signals under the display rules.
    trial_chart : ControlChart
        The first chart (after manual exclusions), before any automatic removal.
    removals : tuple of Removal
        Manual exclusions first, then automatic removals by round.
    iterations : int
        Automatic removal rounds carried out.
    stopped : str
        ``"stable"`` (nothing signals under the removal rules), ``"iteration_cap"`` or
        ``"too_few"`` (a further removal would leave fewer than 3 subgroups).
    removal_rules, removal_dispersion_rules : str
        Rules that decided removals.
    n_values_total, n_values_kept : int
        Values before and after (attribute charts: subgroups).
    removed_share : float
        1 - kept / total.
    warnings : tuple of str
        Cautions in plain words (heavy removal, round limit reached...).
    scale : ChartScale or None
        The scale of the final chart when a ``rescale`` function was given (None: raw values).
    raw_chart : ControlChart or None
        When the final chart is not on the raw scale: the normal-theory chart of the kept raw
        values (its within sigma is the one reported; the phase-II hand-off freezes it).
    n_removed_manual, n_removed_auto : int
        Values (attribute charts: subgroups) taken out by recorded exclusions and by the rules.
    mr_removal : str
        Which reading a moving-range signal removed: ``"later"`` (default) or ``"both"``.
    chance : dict
        Variables charts: ``{"location": SeriesChance, "dispersion": SeriesChance}`` of the
        final chart: its removal limits, the points beyond its 3-sigma limits and how many a
        stable process of that many points gives by chance (see ``studykit.stats.chance``).
    kept_mask : ndarray of bool or None
        One entry per value given: True where the value is kept.
    """

    @property
    def unexplained_beyond_limits(self) -> bool:
        """A point of the final chart is beyond its removal limits, or the chart has more
        points beyond its 3-sigma limits than a stable process gives by chance. Without a
        chance record (attribute charts), any point beyond the limits."""
        if not self.chance:
            return any(s.rule == "beyond_limits" for s in self.chart.signals)
        return any(c.unexplained for c in self.chance.values())

    chart: ControlChart
    trial_chart: ControlChart
    removals: tuple
    iterations: int
    stopped: str
    removal_rules: str
    removal_dispersion_rules: str
    n_values_total: int
    n_values_kept: int
    removed_share: float
    warnings: tuple = ()
    scale: ChartScale | None = None
    n_removed_manual: int = 0
    n_removed_auto: int = 0
    raw_chart: ControlChart | None = None
    mr_removal: str = "later"
    chance: dict = dataclasses.field(default_factory=dict)
    kept_mask: np.ndarray | None = None

    @property
    def auto_removed_share(self) -> float:
        """Share of the values removed by the rules (recorded exclusions not counted)."""
        return self.n_removed_auto / self.n_values_total if self.n_values_total else 0.0

    @property
    def manual_removed_share(self) -> float:
        """Share of the values removed by exclusions a person recorded."""
        return self.n_removed_manual / self.n_values_total if self.n_values_total else 0.0

    @property
    def signals(self) -> tuple:
        """Signals of the final chart under the display rules."""
        return self.chart.signals

    @property
    def removed_labels(self) -> tuple:
        """Labels of every removed subgroup, in log order."""
        return tuple(r.label for r in self.removals)

    def to_dict(self) -> dict:
        """JSON-safe dictionary (the final and trial charts included)."""
        return {
            "chart": self.chart.to_dict(),
            "trial_chart": self.trial_chart.to_dict(),
            "removals": [r.to_dict() for r in self.removals],
            "iterations": self.iterations,
            "stopped": self.stopped,
            "removal_rules": self.removal_rules,
            "removal_dispersion_rules": self.removal_dispersion_rules,
            "n_values_total": self.n_values_total,
            "n_values_kept": self.n_values_kept,
            "removed_share": float(self.removed_share),
            "warnings": list(self.warnings),
            "scale": None if self.scale is None else self.scale.name,
            "n_removed_manual": int(self.n_removed_manual),
            "n_removed_auto": int(self.n_removed_auto),
            "mr_removal": self.mr_removal,
            "chance_signals": {k: c.to_dict() for k, c in self.chance.items()},
        }


def _fmt(v) -> str:
    return f"{float(v):.6g}"


def _describe(
    series: ChartSeries, pos: int, signal, rnd: int, scale=None, chance: SeriesChance | None = None
) -> str:
    what = _NAMES.get(series.name, series.name)
    if scale is not None and scale.name != "raw":
        what = f"{what} ({scale.label})"
    value = series.points[pos]
    if signal.rule == "beyond_limits":
        if value > series.ucl[pos]:
            side = f"above the upper control limit {_fmt(series.ucl[pos])}"
        else:
            side = f"below the lower control limit {_fmt(series.lcl[pos])}"
        text = f"{what} {_fmt(value)} lies {side} of round {rnd}"
        if chance is not None and chance.adjusted:
            limit = chance.upper[pos] if value > series.ucl[pos] else chance.lower[pos]
            text += (
                f" and beyond the removal limit {_fmt(limit)}, which a stable process "
                f"crosses anywhere on this chart of {chance.points} points with "
                f"probability {chance.fap:.1%}"
            )
        return text
    return f"{what} {_fmt(value)} completes a pattern in round {rnd}: {signal.text}"


def _flagged(
    series: ChartSeries, rules, labels, chance: SeriesChance | None = None
) -> dict[int, list]:
    found: dict[int, list] = {}
    if not np.any(np.asarray(series.sigma) > 0):
        return found  # a chart that is its centre line (no defective at all): nothing signals
    if chance is not None and chance.beyond_removal == 0 and _limits_rules_only(rules):
        # the rules only look for points beyond the removal limits, and series_chance has
        # counted none (the same strict comparisons): no signal to build
        return found
    lcl, ucl = series.lcl, series.ucl
    if chance is not None and chance.adjusted:
        lcl, ucl = chance.lower, chance.upper
    sigs = evaluate_series(
        series.points,
        center=series.center,
        sigma=series.sigma,
        lcl=lcl,
        ucl=ucl,
        rules=rules,
        labels=labels,
    )
    for s in sigs:
        for t in s.triggers:
            found.setdefault(int(t), []).append(s)
    return found


def _limits_rules_only(rules) -> bool:
    """True when every rule switched on is ``beyond_limits`` (the default removal rules): with
    the limits given, such rules flag exactly the points beyond them."""
    return all(r.id == "beyond_limits" for r in parse_rules(rules) if r.enabled)


def _chances(chart: ControlChart, attribute: bool) -> tuple:
    """Removal limits and chance-signal counts of the location and dispersion series."""
    if attribute:
        return None, None
    return (
        series_chance(chart.location, chart.sizes),
        None if chart.dispersion is None else series_chance(chart.dispersion, chart.sizes),
    )


# long: signature and numpydoc docstring take 78 lines; the body is the round loop over named steps
@collector_paused()  # the long charts' signals (studykit.stats.rules.collector_paused)
def phase1(
    values,
    subgroups=None,
    *,
    kind: str = "auto",
    sizes=None,
    exclude: dict | None = None,
    excluded_by: str = "user",
    removal_rules="limits_only",
    removal_dispersion_rules="limits_only",
    max_iterations: int = 10,
    rules="nelson",
    dispersion_rules=DISPERSION_RULES,
    min_subgroups: int = MIN_SUBGROUPS,
    max_removed_share: float = MAX_REMOVED_SHARE,
    rescale=None,
    mr_removal: str = "later",
    **chart_options,
) -> Phase1Result:
    """Iterate trial control limits, removing signalling subgroups with a logged reason.

    Parameters
    ----------
    values, subgroups, kind, sizes
        As for :func:`studykit.stats.charts.control_chart` (for attribute kinds ``values``
        are the counts and ``subgroups`` one label per count). Without ``subgroups`` the
        labels are 1, 2, ... in order.
    exclude : dict, optional
        Manual exclusions applied before the first limits: ``{label: reason}`` or
        ``{label: (reason, who)}``.
    excluded_by : str
        Name logged as ``who`` for exclusions given as a bare reason.
    removal_rules, removal_dispersion_rules : str or tuple
        Rules that decide automatic removal on the location and dispersion charts
        (default: beyond the control limits only).
    max_iterations : int
        Most automatic removal rounds (default 10).
    rules, dispersion_rules
        Display rules for the signals of the returned charts.
    min_subgroups, max_removed_share
        Thresholds of the :class:`~studykit.errors.HeavyRemovalWarning`.
    rescale : callable, optional
        ``rescale(kept_values) -> ChartScale``, called in every round with the values still
        kept (variables charts only): the chart of that round is drawn on the returned scale.
        The analysis passes a function that refits the distribution model to the kept values,
        so model and removals are decided together. None: the raw values.
    mr_removal : {"later", "both"}
        Individuals charts: a moving-range signal (not already explained by an individuals-chart
        signal of either reading) removes the later reading of the pair (default) or both.
    **chart_options
        Passed to ``control_chart`` (``sigma_method``, ``mu``, ``sigma``, ``standard``,
        ``laney``).

    Returns
    -------
    Phase1Result
        Final chart, trial chart, removal log, rounds, stop reason, removed share, warnings.

    Notes
    -----
    Each round recomputes centre, sigma and limits from the kept subgroups only. The chart kind
    chosen for the trial limits is kept in every round. See the module notes for what the loop
    guarantees.

    References
    ----------
    Montgomery, *Introduction to Statistical Quality Control*, ch. 6 (trial control limits and
    their revision in phase I).

    Examples
    --------
    >>> x = [10.0, 10.2, 9.9, 10.1, 14.0, 10.0, 9.8, 10.1, 10.2, 9.9, 10.0, 10.1]
    >>> res = phase1(x, exclude={2: ("probe swapped", "A. Jensen")}, min_subgroups=5,
    ...              max_removed_share=0.2)
    >>> [(r.label, r.rule, r.who) for r in res.removals]
    [(2, 'manual', 'A. Jensen'), (5, 'beyond_limits', 'auto')]
    >>> res.stopped
    'stable'
    """
    _check_options(max_iterations, mr_removal)
    attribute = kind in ATTRIBUTE_KINDS
    data = _prepare(values, subgroups, sizes, attribute)
    removed, removals = _manual_exclusions(exclude, excluded_by, data)
    scales: list = []

    def build(kind_now, evaluate=True):
        return _kept_chart(
            data,
            removed,
            kind_now,
            rescale,
            scales,
            (rules, dispersion_rules, evaluate),
            chart_options,
        )

    chart = build(kind)
    trial = chart
    kind_fixed = chart.kind
    iterations = 0
    stopped = "stable"
    chances_of = None
    while True:
        flags = _round_flags(chart, attribute, removal_rules, removal_dispersion_rules, mr_removal)
        chances_of = (chart, flags.loc_chance, flags.disp_chance)
        positions = flags.positions()
        stopped = _stop_reason(positions, iterations, max_iterations, chart.n_subgroups)
        if stopped:
            break
        iterations += 1
        # chart position -> subgroup code (attribute charts plot one point per count)
        kept_codes = (
            data.groups.codes[np.flatnonzero(~removed[data.groups.codes])]
            if attribute
            else np.flatnonzero(~removed)
        )
        scale = scales[-1] if scales else None
        for pos in positions:
            removals.append(
                _auto_removal(chart, flags, pos, iterations, scale, mr_removal, data, kept_codes)
            )
        removed[kept_codes[positions]] = True
        del flags
        chances_of = None
        chart = None  # the next round's chart replaces this one (one chart in memory)
        # the display rules only on the chart that is kept (see below): a round's chart that
        # is replaced needs the removal rules alone
        chart = build(kind_fixed, evaluate=False)

    # the removal limits and chance counts of the last round's chart (before the copies below)
    chance = _final_chances(chart, attribute, chances_of)
    if chart is not trial:  # the final chart of a loop that removed something
        chart = with_signals(chart, rules, dispersion_rules)
    if chart.reason != trial.reason and kind == "auto":
        # rebuilt with the kind fixed in round 1: keep the reason the automatic choice gave
        chart = dataclasses.replace(chart, reason=trial.reason)
    total = data.n_items
    kept_n = chart.n_values
    share = 1.0 - kept_n / total
    notes = _heavy_removal_notes(share, chart, attribute, max_removed_share, min_subgroups)
    for msg in notes:
        warnings.warn(msg, HeavyRemovalWarning, stacklevel=2)
    notes += _stop_notes(stopped, max_iterations)
    kept_mask = ~removed[data.groups.codes]
    raw_chart = None
    if scales and scales[-1].name != "raw":
        raw_chart = _raw_chart(
            data, kept_mask, kind_fixed, rules, dispersion_rules, chart_options, trial, kind
        )
    n_manual, n_auto = _removed_counts(removals, attribute)
    return Phase1Result(
        chart=chart,
        trial_chart=trial,
        removals=tuple(removals),
        iterations=iterations,
        stopped=stopped,
        removal_rules=_text(removal_rules),
        removal_dispersion_rules=_text(removal_dispersion_rules),
        n_values_total=int(total),
        n_values_kept=int(kept_n),
        removed_share=float(share) if math.isfinite(share) else 0.0,
        warnings=tuple(notes),
        scale=scales[-1] if scales else None,
        n_removed_manual=int(n_manual),
        n_removed_auto=int(n_auto),
        raw_chart=raw_chart,
        mr_removal=mr_removal,
        chance=chance,
        kept_mask=kept_mask,
    )


def _check_options(max_iterations, mr_removal: str) -> None:
    """Reject a round limit that is not a whole number >= 0 and an unknown ``mr_removal``."""
    if isinstance(max_iterations, bool) or not isinstance(max_iterations, int | np.integer):
        raise StudyInputError(
            f"`max_iterations` ({max_iterations!r}) must be a whole number of rounds, e.g. 10."
        )
    if max_iterations < 0:
        raise StudyInputError(f"`max_iterations` ({max_iterations}) must be 0 or more.")
    if mr_removal not in MR_REMOVAL:
        raise StudyInputError(
            f"`mr_removal` ({mr_removal!r}) must be 'later' or 'both' (which reading of a "
            "signalling moving range is removed)."
        )


@dataclass(frozen=True, eq=False)
class _Data:
    """The values, their subgroup codes, sizes and per-subgroup counts, as phase I uses them."""

    x: np.ndarray
    n_items: int
    groups: SubgroupCodes
    size_arr: np.ndarray | None
    counts: np.ndarray
    attribute: bool


def _prepare(values, subgroups, sizes, attribute: bool) -> _Data:
    """Values as an array, subgroup labels as integer codes, and the values per subgroup."""
    x = np.asarray(values, dtype=float).ravel() if not attribute else np.asarray(values)
    n_items = x.shape[0]
    sub: SubgroupCodes | np.ndarray
    if subgroups is None:
        sub = np.arange(1, n_items + 1)
    else:
        sub = subgroups if isinstance(subgroups, SubgroupCodes) else np.asarray(subgroups)
        if len(sub) != n_items:
            raise StudyInputError(
                f"`subgroups` has {len(sub)} labels but `values` has {n_items} entries; give "
                "one label per value."
            )
    size_arr = None
    if attribute and sizes is not None:
        size_arr = np.asarray(sizes, dtype=float).ravel()
        if size_arr.size == 1:
            size_arr = np.full(n_items, size_arr[0])
    # subgroups as integer codes (labels read only for what is logged or shown)
    groups = SubgroupCodes.of(sub)
    n_groups = groups.names.shape[0]
    if attribute and size_arr is not None:
        # items per subgroup, summed in data order
        counts = np.bincount(groups.codes, weights=size_arr, minlength=n_groups)
    else:
        counts = np.bincount(groups.codes, minlength=n_groups)
    return _Data(x, n_items, groups, size_arr, counts, attribute)


def _manual_exclusions(exclude, excluded_by, data: _Data) -> tuple[np.ndarray, list[Removal]]:
    """The removed-subgroup mask and the log entries of the engineer's recorded exclusions."""
    names = data.groups.names
    removals: list[Removal] = []
    removed = np.zeros(names.shape[0], dtype=bool)
    for label, entry in (exclude or {}).items():
        key = plain_label(label)
        code = _find_code(names, key)
        if code is None:
            raise StudyInputError(
                f"`exclude` names subgroup {label!r}, which is not in the data; check the label "
                "(labels are compared exactly, text and numbers differ)."
            )
        if isinstance(entry, tuple | list):
            if len(entry) != 2:
                raise StudyInputError(
                    f"`exclude[{label!r}]` must be a reason or a (reason, who) pair."
                )
            reason, who = str(entry[0]), str(entry[1])
        else:
            reason, who = str(entry), str(excluded_by)
        if not reason.strip():
            raise StudyInputError(
                f"`exclude[{label!r}]` has no reason; say why the subgroup is left out."
            )
        removed[code] = True
        removals.append(Removal(key, "manual", None, 0, reason, who, int(data.counts[code])))
    return removed, removals


def _kept_chart(
    data: _Data, removed, kind_now, rescale, scales: list, rule_specs: tuple, chart_options
) -> ControlChart:
    """The chart of the subgroups not removed, on the ``rescale`` scale (appended to
    ``scales``) when one is given; ``rule_specs`` is (rules, dispersion rules, whether the
    display rules are evaluated)."""
    rules, dispersion_rules, evaluate = rule_specs
    mask = ~removed[data.groups.codes]
    if not mask.any():
        raise AnalysisError("every subgroup has been excluded; nothing is left to chart.")
    x = data.x
    xs, extra = (x if mask.all() else x[mask]), {}
    if rescale is not None and not data.attribute:
        sc = rescale(xs)
        scales.append(sc)
        xs = np.asarray(sc.values, dtype=float)
        if sc.mu is not None:
            extra["mu"] = sc.mu
        if sc.sigma is not None:
            extra["sigma"] = sc.sigma
    return control_chart(
        xs,
        data.groups.select(mask),
        kind=kind_now,
        sizes=None if data.size_arr is None else data.size_arr[mask],
        rules=rules,
        dispersion_rules=dispersion_rules,
        evaluate=evaluate,
        **{**chart_options, **extra},
    )


@dataclass
class _RoundFlags:
    """The removal limits and the flagged chart positions of one round."""

    loc_chance: SeriesChance | None
    disp_chance: SeriesChance | None
    loc: dict[int, list]
    disp: dict[int, list]
    earlier: dict[int, list]  # mr_removal "both": the earlier reading of the pair

    def positions(self) -> list[int]:
        """Every flagged chart position, in order."""
        return sorted(set(self.loc) | set(self.disp) | set(self.earlier))


def _round_flags(
    chart: ControlChart, attribute: bool, removal_rules, removal_dispersion_rules, mr_removal
) -> _RoundFlags:
    """Flag the positions of this round's chart under the removal rules and limits."""
    loc_chance, disp_chance = _chances(chart, attribute)
    loc_flags = _flagged(chart.location, removal_rules, chart.labels, loc_chance)
    disp_flags = (
        {}
        if chart.dispersion is None
        else _flagged(chart.dispersion, removal_dispersion_rules, chart.labels, disp_chance)
    )
    if chart.kind == "imr" and disp_flags:
        kept = {}
        for pos, sigs in disp_flags.items():
            if pos in loc_flags or (pos - 1) in loc_flags:
                continue  # the individuals chart already removes the value behind it
            kept[pos] = sigs
        disp_flags = kept
    earlier: dict[int, list] = {}
    if chart.kind == "imr" and mr_removal == "both":
        for pos, sigs in disp_flags.items():
            if pos >= 1 and (pos - 1) not in disp_flags and (pos - 1) not in loc_flags:
                earlier[pos - 1] = sigs
    return _RoundFlags(loc_chance, disp_chance, loc_flags, disp_flags, earlier)


def _stop_reason(positions, iterations: int, max_iterations: int, n_subgroups: int) -> str:
    """Why the loop stops before this round's removals ("" when it goes on)."""
    if not positions:
        return "stable"
    if iterations >= max_iterations:
        return "iteration_cap"
    if n_subgroups - len(positions) < 3:
        return "too_few"
    return ""


def _auto_removal(
    chart: ControlChart,
    flags: _RoundFlags,
    pos: int,
    iterations: int,
    scale,
    mr_removal: str,
    data: _Data,
    kept_codes,
) -> Removal:
    """The log entry of the subgroup at chart position ``pos``, removed in this round."""
    parts: list[str] = []
    rule_ids: list[str] = []
    where: list[str] = []
    charts = [("location", flags.loc, chart.location, flags.loc_chance)]
    if chart.dispersion is not None:  # without one, nothing is flagged on it
        charts.append(("dispersion", flags.disp, chart.dispersion, flags.disp_chance))
    for name, found, series, chance in charts:
        for s in found.get(pos, []):
            if s.rule not in rule_ids:
                rule_ids.append(s.rule)
            if name not in where:
                where.append(name)
            parts.append(
                _describe(series, pos, s, iterations, scale, chance)
                + _mr_note(name, chart.kind, mr_removal, "later")
            )
    dispersion = chart.dispersion
    earlier = flags.earlier.get(pos, [])
    if dispersion is not None and earlier:  # "both": the earlier reading of a moving range
        for s in earlier:
            if s.rule not in rule_ids:
                rule_ids.append(s.rule)
            if "dispersion" not in where:
                where.append("dispersion")
            parts.append(
                _describe(dispersion, pos + 1, s, iterations, scale, flags.disp_chance)
                + _mr_note("dispersion", chart.kind, mr_removal, "earlier")
            )
    return Removal(
        chart.labels[pos],
        ",".join(rule_ids),
        "+".join(where),
        iterations,
        "; ".join(dict.fromkeys(parts)),
        "auto",
        int(data.counts[kept_codes[pos]]),
    )


def _heavy_removal_notes(
    share: float, chart: ControlChart, attribute: bool, max_removed_share, min_subgroups
) -> list[str]:
    """The cautions raised as HeavyRemovalWarning: too large a removed share, too few left."""
    notes: list[str] = []
    if share > max_removed_share:
        notes.append(
            f"{share:.0%} of the {'values' if not attribute else 'subgroups'} were removed "
            f"(more than {max_removed_share:.0%}); the limits may describe a trimmed process "
            "(common practice, no source)."
        )
    if chart.n_subgroups < min_subgroups:
        notes.append(
            f"only {chart.n_subgroups} subgroups remain (fewer than {min_subgroups}); the limits "
            "are uncertain (common practice, no source)."
        )
    return notes


def _stop_notes(stopped: str, max_iterations: int) -> list[str]:
    """The note on a loop that stopped before the chart was stable."""
    if stopped == "iteration_cap":
        return [
            f"the round limit ({max_iterations}) was reached and subgroups still signal; "
            "investigate the causes rather than trimming further."
        ]
    if stopped == "too_few":
        return ["removing further signalling subgroups would leave fewer than 3 subgroups."]
    return []


def _raw_chart(
    data: _Data, mask, kind_fixed, rules, dispersion_rules, chart_options, trial, kind
) -> ControlChart:
    """The normal-theory chart of the kept raw values (when phase I charted another scale)."""
    raw_chart = control_chart(
        data.x[mask],
        data.groups.select(mask),
        kind=kind_fixed,
        rules=rules,
        dispersion_rules=dispersion_rules,
        **chart_options,
    )
    if raw_chart.reason != trial.reason and kind == "auto":
        raw_chart = dataclasses.replace(raw_chart, reason=trial.reason)
    return raw_chart


def _removed_counts(removals: list[Removal], attribute: bool) -> tuple[int, int]:
    """Values (attribute charts: subgroups) removed by recorded exclusions and by the rules."""
    if attribute:
        n_manual = sum(1 for r in removals if r.rule == "manual")
        n_auto = sum(1 for r in removals if r.rule != "manual")
    else:
        n_manual = sum(r.n_values for r in removals if r.rule == "manual")
        n_auto = sum(r.n_values for r in removals if r.rule != "manual")
    return n_manual, n_auto


def _final_chances(chart: ControlChart, attribute: bool, last=None) -> dict:
    if last is not None and last[0] is chart:  # the loop's last chart: computed already
        loc, disp = last[1], last[2]
    else:
        loc, disp = _chances(chart, attribute)
    out = {}
    if loc is not None:
        out["location"] = loc
    if disp is not None:
        out["dispersion"] = disp
    return out


def _find_code(names: np.ndarray, key):
    """The code of the subgroup labelled ``key`` (compared exactly: text and numbers differ),
    or None."""
    kind = names.dtype.kind
    if (kind in "US" and isinstance(key, str)) or (
        kind in "iu" and isinstance(key, int) and not isinstance(key, bool)
    ):
        hit = np.flatnonzero(names == key)
        return int(hit[0]) if hit.size else None
    if kind in "USiu":
        return None
    for i, v in enumerate(names.tolist()):
        if plain_label(v) == key and type(plain_label(v)) is type(key):
            return i
    return None


def _mr_note(chart_name: str, kind: str, mr_removal: str, which: str) -> str:
    """The removal convention, named in the reason of a moving-range removal."""
    if chart_name != "dispersion" or kind != "imr":
        return ""
    if mr_removal == "later":
        return " (the later reading of the pair is removed: --mr-removal later)"
    return f" (this is the {which} reading of the pair; both are removed: --mr-removal both)"


def _text(rules) -> str:
    if isinstance(rules, str):
        return rules
    return ",".join(str(getattr(r, "id", r)) for r in rules)
