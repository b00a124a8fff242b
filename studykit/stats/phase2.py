"""Phase II hand-off: freeze phase-I limits into a plan, then monitor new data against it.

:func:`freeze` turns a phase-I chart into a :class:`Phase2Plan` (centre, within sigma, limits
for the planned subgroup size, rules, and a digest of the phase-I chart it came from) that can
be written as JSON or CSV and read back with :meth:`Phase2Plan.from_json`. :func:`monitor` plots
new subgroups against the frozen values: it builds the same chart kind with the plan's centre
and sigma as a known standard, so limits for any subgroup size follow the phase-I formulas, and
the same rules give the signals.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
from dataclasses import asdict, dataclass, fields

import numpy as np

from studykit.errors import StudyFileError, StudyInputError
from studykit.stats.charts import ATTRIBUTE_KINDS, ControlChart, control_chart, plain_label
from studykit.stats.result import Result
from studykit.stats.result import json_float as _f

__all__ = ["PLAN_FORMAT", "Phase2Plan", "MonitorResult", "freeze", "monitor", "chart_digest"]

#: Format tag written into every plan file.
PLAN_FORMAT = "studykit.phase2-plan/1"


def chart_digest(chart: ControlChart) -> str:
    """SHA-256 of the chart's canonical JSON (sorted keys, no spaces).

    Examples
    --------
    >>> from studykit.stats.charts import control_chart
    >>> len(chart_digest(control_chart([1.0, 2.0, 4.0, 3.0])))
    64
    """
    text = json.dumps(chart.to_dict(), sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class Phase2Plan(Result):
    """Frozen limits and rules for monitoring one characteristic.

    Attributes
    ----------
    characteristic, unit : str
        What is measured and in which unit.
    kind : str
        Chart kind (``"xbar_r"``, ``"xbar_s"``, ``"imr"``, ``"p"``, ``"np"``, ``"c"``, ``"u"``).
    center : float
        Frozen process centre (grand mean, p-bar or u-bar per unit).
    within_sigma : float or None
        Frozen within-subgroup sigma (variables charts).
    sigma_method : str
        How phase I estimated the sigma.
    laney_sigma_z : float or None
        Frozen Laney factor when phase I used Laney limits.
    subgroup_size : int or None
        Planned subgroup size (None when phase I had varying sizes).
    min_size, max_size : float
        Smallest and largest subgroup size seen in phase I.
    location_center, location_lcl, location_ucl : float or None
        Limits of the location chart for ``subgroup_size`` (None when sizes vary).
    dispersion_center, dispersion_lcl, dispersion_ucl : float or None
        The same for the dispersion chart (variables charts).
    rules, dispersion_rules : str
        Rule specifications used in monitoring.
    phase1_subgroups, phase1_values : int
        Amount of phase-I data behind the limits.
    source_digest : str
        :func:`chart_digest` of the phase-I chart.
    format : str
        :data:`PLAN_FORMAT`.
    """

    characteristic: str
    unit: str
    kind: str
    center: float
    within_sigma: float | None
    sigma_method: str
    laney_sigma_z: float | None
    subgroup_size: int | None
    min_size: float
    max_size: float
    location_center: float | None
    location_lcl: float | None
    location_ucl: float | None
    dispersion_center: float | None
    dispersion_lcl: float | None
    dispersion_ucl: float | None
    rules: str
    dispersion_rules: str
    phase1_subgroups: int
    phase1_values: int
    source_digest: str
    format: str = PLAN_FORMAT

    def to_dict(self) -> dict:
        """JSON-safe dictionary of every field."""
        return asdict(self)

    def to_json(self) -> str:
        """The plan as indented JSON with sorted keys (deterministic)."""
        return json.dumps(self.to_dict(), sort_keys=True, indent=2, allow_nan=False)

    def to_csv(self) -> str:
        """The plan as two-column CSV (``field,value``); text that a spreadsheet would run as
        a formula is prefixed with an apostrophe."""
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["field", "value"])
        for f in fields(self):
            v = getattr(self, f.name)
            if v is None:
                v = ""
            elif isinstance(v, str) and v[:1] in ("=", "+", "-", "@", "\t", "\r"):
                v = "'" + v
            w.writerow([f.name, v])
        return buf.getvalue()

    @classmethod
    def from_json(cls, text: str) -> Phase2Plan:
        """Read a plan written by :meth:`to_json`.

        Raises
        ------
        StudyFileError
            When the text is not a plan of this format.
        """
        try:
            data = json.loads(text)
        except (TypeError, ValueError) as exc:
            raise StudyFileError(f"the phase-II plan is not valid JSON ({exc}).") from None
        if not isinstance(data, dict) or data.get("format") != PLAN_FORMAT:
            found = data.get("format") if isinstance(data, dict) else type(data).__name__
            raise StudyFileError(
                f"the phase-II plan has format {found!r}; expected {PLAN_FORMAT!r}. Export the "
                "plan again with this version of studykit."
            )
        names = [f.name for f in fields(cls)]
        missing = [n for n in names if n not in data]
        if missing:
            raise StudyFileError(
                f"the phase-II plan lacks the field(s) {', '.join(missing)}; the file is "
                "incomplete or was edited by hand."
            )
        return cls(**{n: data[n] for n in names})


@dataclass(frozen=True, eq=False)
class MonitorResult(Result):
    """New subgroups plotted against a frozen plan.

    Attributes
    ----------
    plan : Phase2Plan
    chart : ControlChart
        Chart of the new data with the plan's centre and sigma as a known standard.
    signals : tuple of Signal
        Location then dispersion signals under the plan's rules.
    in_control : bool
        True when nothing signals.
    first_signal_label : object or None
        Label of the earliest subgroup that completed a signal.
    warnings : tuple of str
    """

    plan: Phase2Plan
    chart: ControlChart
    signals: tuple
    in_control: bool
    first_signal_label: object
    warnings: tuple = ()

    def signal_records(self) -> list[dict]:
        """Each signal with the chart it is on; see :func:`signal_records`."""
        return signal_records(self.chart)

    def to_dict(self) -> dict:
        """JSON-safe dictionary."""
        return {
            "plan": self.plan.to_dict(),
            "chart": self.chart.to_dict(),
            "signals": [s.to_dict() for s in self.signals],
            "signal_records": self.signal_records(),
            "in_control": self.in_control,
            "first_signal_label": plain_label(self.first_signal_label),
            "warnings": list(self.warnings),
        }


#: What each plotted statistic is called in a signal's text.
_STATISTIC_WORDS = {
    "xbar": "subgroup average",
    "range": "subgroup range",
    "stdev": "subgroup standard deviation",
    "individual": "reading",
    "moving_range": "moving range",
    "p": "proportion nonconforming",
    "np": "number nonconforming",
    "c": "count of nonconformities",
    "u": "nonconformities per unit",
}
_CHART_WORDS = {
    "xbar": "X-bar chart",
    "range": "range chart",
    "stdev": "S chart",
    "individual": "individuals chart",
    "moving_range": "moving-range chart",
}


def signal_records(chart: ControlChart) -> list[dict]:
    """The signals of a chart with the chart each is on and the readings it points at.

    Each record: ``rule``, ``number`` (Nelson), ``chart`` (``"location"`` or ``"dispersion"``),
    ``statistic`` (what is plotted: ``individual``, ``moving_range``, ``xbar``...),
    ``subgroups`` (labels of the plotted points of the pattern), ``readings`` (labels of every
    reading behind them: a moving range at reading i is |x_i - x_(i-1)|, so it points at
    readings i-1 and i) and ``text`` (one line naming the chart, the statistic and the
    readings).

    Examples
    --------
    >>> from studykit.stats.charts import control_chart
    >>> ch = control_chart([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])
    >>> res = monitor(freeze(ch, characteristic="d"), [50.0, 54.5, 47.0, 50.1], list("abcd"))
    >>> [(r["chart"], r["readings"]) for r in res.signal_records()]
    [('dispersion', ['b', 'c'])]
    >>> res.signal_records()[0]["text"]
    'moving-range chart: moving range of readings b and c (7.5) above the upper control limit 6.134'
    """
    out = []
    labels = chart.labels
    for part, series in (("location", chart.location), ("dispersion", chart.dispersion)):
        if series is None:
            continue
        where = _CHART_WORDS.get(series.name, f"{series.name} chart")
        for sig in series.signals:
            pos = [int(p) for p in sig.points]
            subgroups = [plain_label(labels[p]) for p in pos]
            readings = subgroups
            text = f"{where}: {sig.text}"
            if series.name == "moving_range":
                behind = sorted({q for p in pos for q in (p - 1, p) if q >= 0})
                readings = [plain_label(labels[q]) for q in behind]
                if sig.rule == "beyond_limits" and len(pos) == 1:
                    p = pos[0]
                    value = float(series.points[p])
                    side, lim = (
                        ("above the upper", series.ucl[p])
                        if value > series.ucl[p]
                        else ("below the lower", series.lcl[p])
                    )
                    text = (
                        f"{where}: moving range of readings {labels[p - 1]} and "
                        f"{labels[p]} ({value:.4g}) {side} control limit {float(lim):.4g}"
                    )
                else:
                    text = (
                        f"{where}: {sig.text} (a moving range at a reading is its "
                        "difference from the reading before; readings "
                        + ", ".join(str(r) for r in readings)
                        + ")"
                    )
            elif series.name != "individual" or chart.kind in ("xbar_r", "xbar_s"):
                text = f"{where} ({_STATISTIC_WORDS.get(series.name, series.name)}): {sig.text}"
            out.append(
                {
                    "rule": sig.rule,
                    "number": sig.number,
                    "chart": part,
                    "statistic": series.name,
                    "subgroups": [str(v) for v in subgroups],
                    "readings": [str(v) for v in readings],
                    "text": text,
                }
            )
    return out


def freeze(
    chart,
    *,
    characteristic: str,
    unit: str = "",
    rules=None,
    dispersion_rules=None,
) -> Phase2Plan:
    """Freeze a phase-I chart into a monitoring plan.

    Parameters
    ----------
    chart : ControlChart or Phase1Result
        The phase-I chart (for a Phase1Result, its final chart).
    characteristic : str
        Name of the characteristic (required, non-empty).
    unit : str
        Measurement unit.
    rules, dispersion_rules : str, optional
        Rules for monitoring; default the phase-I chart's display rules.

    Returns
    -------
    Phase2Plan

    Notes
    -----
    Frozen values: the centre and the within sigma (variables) or the centre proportion/rate
    and, when applied, Laney's sigma_z (attributes). Limits for the planned subgroup size are
    stored for people and other programs to read; :func:`monitor` recomputes limits from the
    centre and sigma for each new subgroup's size with the phase-I formulas.

    References
    ----------
    Montgomery, *Introduction to Statistical Quality Control*, ch. 6 (phase I and phase II use
    of control charts).

    Examples
    --------
    >>> from studykit.stats.charts import control_chart
    >>> ch = control_chart([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])
    >>> plan = freeze(ch, characteristic="bore depth", unit="mm")
    >>> round(plan.location_ucl, 4), plan.subgroup_size
    (55.8024, 1)
    """
    chart = _chart_to_freeze(chart, characteristic)
    equal = chart.subgroup_size is not None
    disp = chart.dispersion
    od = chart.overdispersion
    return Phase2Plan(
        characteristic=characteristic.strip(),
        unit=str(unit),
        kind=chart.kind,
        center=float(chart.center_value),
        within_sigma=_f(chart.within_sigma),
        sigma_method=chart.sigma_method,
        laney_sigma_z=_f(od.sigma_z) if od is not None and od.applied else None,
        subgroup_size=chart.subgroup_size,
        min_size=float(np.min(chart.sizes)),
        max_size=float(np.max(chart.sizes)),
        location_center=_f(chart.location.center[0]) if equal else None,
        location_lcl=_f(chart.location.lcl[0]) if equal else None,
        location_ucl=_f(chart.location.ucl[0]) if equal else None,
        dispersion_center=_f(disp.center[-1]) if equal and disp is not None else None,
        dispersion_lcl=_f(disp.lcl[-1]) if equal and disp is not None else None,
        dispersion_ucl=_f(disp.ucl[-1]) if equal and disp is not None else None,
        rules=_text(chart.location.rules if rules is None else rules),
        dispersion_rules=_text(
            (disp.rules if disp is not None else "limits_only")
            if dispersion_rules is None
            else dispersion_rules
        ),
        phase1_subgroups=int(chart.n_subgroups),
        phase1_values=int(chart.n_values),
        source_digest=chart_digest(chart),
    )


def _chart_to_freeze(chart, characteristic) -> ControlChart:
    """The phase-I chart to freeze (its raw-value chart when charted on a model's scale),
    checked, with the characteristic's name."""
    # a phase-I result charted on a model's scale keeps the chart of its raw values for this
    chart = getattr(chart, "raw_chart", None) or getattr(chart, "chart", chart)
    if not isinstance(chart, ControlChart):
        raise StudyInputError(
            f"`chart` must be a ControlChart or a phase-I result; got {type(chart).__name__}."
        )
    if not isinstance(characteristic, str) or not characteristic.strip():
        raise StudyInputError(
            "`characteristic` must name what the plan monitors, e.g. 'bore diameter'."
        )
    if chart.known_standard:
        raise StudyInputError(
            "`chart` was computed from a given standard, not from phase-I data; freeze the "
            "phase-I chart itself."
        )
    return chart


def monitor(plan: Phase2Plan, values, subgroups=None, *, sizes=None) -> MonitorResult:
    """Plot new data against a frozen plan and apply the plan's rules.

    Parameters
    ----------
    plan : Phase2Plan
    values : array_like
        New measurements (flat, time order) or, for attribute plans, counts per subgroup.
    subgroups : array_like, optional
        Subgroup labels (one per value; for attributes one per count).
    sizes : array_like, optional
        Attribute plans: subgroup sizes.

    Returns
    -------
    MonitorResult

    Examples
    --------
    >>> from studykit.stats.charts import control_chart
    >>> ch = control_chart([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])
    >>> plan = freeze(ch, characteristic="bore depth", unit="mm", rules="limits_only")
    >>> res = monitor(plan, [50.1, 51.0, 57.2, 50.4], subgroups=["a", "b", "c", "d"])
    >>> res.in_control, res.first_signal_label
    (False, 'c')
    """
    if not isinstance(plan, Phase2Plan):
        raise StudyInputError(f"`plan` must be a Phase2Plan; got {type(plan).__name__}.")
    notes = []
    if plan.kind in ATTRIBUTE_KINDS:
        chart = control_chart(
            values,
            subgroups,
            kind=plan.kind,
            sizes=sizes,
            standard=plan.center,
            laney=False if plan.laney_sigma_z is None else plan.laney_sigma_z,
            rules=plan.rules,
        )
    else:
        chart = control_chart(
            values,
            subgroups,
            kind=plan.kind,
            mu=plan.center,
            sigma=plan.within_sigma,
            rules=plan.rules,
            dispersion_rules=plan.dispersion_rules,
        )
    lo, hi = float(np.min(chart.sizes)), float(np.max(chart.sizes))
    if lo < plan.min_size or hi > plan.max_size:
        notes.append(
            f"new subgroup sizes ({lo:g} to {hi:g}) differ from phase I ({plan.min_size:g} to "
            f"{plan.max_size:g}); limits are computed per size from the frozen sigma."
        )
    signals = chart.signals
    first = chart.signalling_labels[0] if signals else None
    return MonitorResult(
        plan=plan,
        chart=chart,
        signals=signals,
        in_control=not signals,
        first_signal_label=first,
        warnings=tuple(notes),
    )


def _text(rules) -> str:
    if isinstance(rules, str):
        return rules
    return ",".join(str(getattr(r, "id", r)) for r in rules)
