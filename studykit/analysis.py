"""One characteristic in, one frozen result tree out.

:func:`analyze_characteristic` runs the whole capability study for one characteristic:
missing values dropped (and counted), phase-I control limits with logged removals, normality,
the distribution model (normal, Box-Cox, Johnson or a fitted family), capability indices with
confidence bounds, the verdict against the acceptance criterion, findings in plain words, the
model-uncertainty band and the demonstration plan. :func:`analyze_study` does the same from a
saved :class:`~studykit.study.Study` (its exclusions, settings and criteria), and
:func:`analyze_all` runs every characteristic of a study.

The workbook, the PDF, the JSON of ``studykit analyze`` and the phase-II hand-off all draw from
the :class:`CharacteristicResult` built here, so they cannot disagree. Field names of the JSON are
defined once, in :meth:`CharacteristicResult.to_dict`.
"""

from __future__ import annotations

import math
import sys
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
from scipy import special

from studykit import names
from studykit.errors import AnalysisError, StudyInputError, StudyWarning, printable
from studykit.stats import attribute as attribute_module
from studykit.stats import fit as fit_module
from studykit.stats import normality as normality_module
from studykit.stats import order as order_module
from studykit.stats import planning as planning_module
from studykit.stats import transform as transform_module
from studykit.stats._checks import check_resolution
from studykit.stats.capability import (
    Finding,
    capability,
    diagnose,
    effective_df_moving_range,
    effective_df_range,
    effective_df_stdev,
    judge,
    model_band,
    percentile_indices,
)
from studykit.stats.charts import (
    ATTRIBUTE_KINDS,
    DISPERSION_RULES,
    ControlChart,
    SubgroupCodes,
    control_chart,
    listed_signals,
    signal_counts,
)
from studykit.stats.phase1 import MR_REMOVAL, ChartScale, Phase1Result, phase1
from studykit.stats.result import json_float as _f

__all__ = [
    "AnalysisOptions",
    "CharacteristicResult",
    "StudyResult",
    "analyze_characteristic",
    "analyze_study",
    "analyze_all",
    "NORMALITY_ALPHA",
    "NO_GAUGE",
    "gauge_results",
    "read_study_measurements",
    "SAFETY_CAUTION",
    "MAX_AUTO_REMOVED_SHARE",
    "MIN_KEPT_VALUES",
]

#: Significance level at which a model is taken as rejected by its Anderson-Darling test
#: (common practice, no source).
NORMALITY_ALPHA = 0.05

#: How a saved study is analysed unless the caller says otherwise: the removals recorded in the
#: study file (by a person, or accepted from a rule's proposal) govern, and nothing is removed
#: silently. The workbook, the PDF, ``verify`` and ``analyze --study`` all use it, so they agree.
STUDY_OPTIONS_PHASE1 = "off"

#: Above this many values the Shapiro-Wilk p-value is flagged as unreliable (scipy documents
#: its approximation for N <= 5000) and the probability plot has no band (it would cost seconds).
LARGE_SAMPLE = 5000

#: AIC distance within which a model without an AD p-value still counts as supported.
BAND_DELTA_AIC = 2.0

#: Automatic phase-I removal of a larger share of the values withholds the verdict (the README's
#: "heavy" line, common practice, no source). Removals a person recorded are not counted here.
MAX_AUTO_REMOVED_SHARE = 0.10

#: Automatic phase-I removal that leaves fewer values than this withholds the verdict (common
#: practice, no source).
MIN_KEPT_VALUES = 20

#: The caution, word for word the same on every surface (workbook, PDF, terminal, JSON).
SAFETY_SENTENCE = (
    "These statistics support, but do not replace, product validation. Customer requirements, "
    "local codes and licensed engineering practice govern acceptance."
)
#: The caution shown wherever a characteristic is marked safety-critical.
SAFETY_CAUTION = "Safety-critical characteristic: t" + SAFETY_SENTENCE[1:]

_CHART_ALIASES = {
    "auto": "auto",
    "xbar-r": "xbar_r",
    "xbar_r": "xbar_r",
    "xbar-s": "xbar_s",
    "xbar_s": "xbar_s",
    "imr": "imr",
    "i-mr": "imr",
    "p": "p",
    "np": "np",
    "c": "c",
    "u": "u",
}
_TRANSFORMS = ("boxcox", "johnson")


@dataclass(frozen=True)
class AnalysisOptions:
    """How to analyse one characteristic. Every field has a documented default.

    Attributes
    ----------
    chart : str
        ``"auto"``, ``"xbar_r"``, ``"xbar_s"``, ``"imr"``, ``"p"``, ``"np"``, ``"c"``, ``"u"``
        (``xbar-r`` style spellings accepted). ``None`` takes the characteristic's setting.
    subgroup_size : int or None
        Form subgroups of this many consecutive values (when the data have no subgroup column).
    phase1 : {"auto", "off"}
        ``"auto"`` removes subgroups that signal under ``removal_rules``, round by round;
        ``"off"`` applies only the recorded manual exclusions.
    rules : str
        Run rules shown on the charts (default: the eight Nelson tests).
    removal_rules : str
        Rules that remove subgroups automatically in phase I (default: beyond the limits).
    model : str or None
        ``"auto"``, ``"normal"``, ``"boxcox"``, ``"johnson"`` or a family id of
        :data:`studykit.stats.fit.FAMILIES`. ``None`` takes the characteristic's setting.
    confidence : float or None
        Level of the confidence bounds. ``None`` (not given) takes the level of the
        characteristic's acceptance criterion, or 0.95 when there is none; a level given here
        always wins, 0.95 included.
    n_boot : int
        Parametric bootstrap resamples for the bounds of a fitted non-normal model.
    random_state : int
        Seed of that bootstrap: the same study always gives the same numbers.
    laney : {"auto", True, False}
        Laney's adjustment for attribute charts (``"auto"`` only suggests it).
    max_auto_removed_share : float
        Automatic phase-I removal of more than this share of the values withholds the verdict
        (default :data:`MAX_AUTO_REMOVED_SHARE`, 0.10).
    min_kept_values : int
        Automatic phase-I removal that leaves fewer values withholds the verdict (default
        :data:`MIN_KEPT_VALUES`, 20).
    sigma_method : str or None
        Within sigma of subgrouped charts: ``None`` (the chart's default: R-bar/d2 for X-bar/R,
        S-bar/c4 for X-bar/S; with unequal sizes the mean of R_i/d2(n_i) or s_i/c4(n_i)),
        ``"rbar"``, ``"sbar"`` or ``"pooled"`` (pooled standard deviation / c4(d + 1)).
    transform_indices : {"transformed", "percentile"}
        Capability of a Box-Cox / Johnson model: ``"transformed"`` (default) applies the
        transformation to the limits and the values and computes normal-theory indices on that
        scale; ``"percentile"`` computes Pp/Ppk/PPU/PPL by the ISO 22514-2 percentile method on
        the original scale from the back-transformed 0.135 %, 50 % and 99.865 % points of the
        transformed normal model (as for a fitted family; Cp/Cpk are then not given).
    mr_removal : {"later", "both"}
        Automatic phase I on an individuals chart: a moving-range signal removes the later
        reading of the pair (default) or both readings.
    rank_models : bool or None
        Fit and rank every distribution family (``ranking`` and ``model_band`` of the result)
        even when the normal model is not rejected. ``None`` (not given): no for
        :func:`analyze_characteristic` (the ranking is computed only when model ``auto``
        rejects the normal model or a family is requested: faster), yes for
        :func:`analyze_study` (the workbook and the report show it).
    """

    chart: str | None = None
    subgroup_size: int | None = None
    phase1: str = "auto"
    rules: str = "nelson"
    removal_rules: str = "limits_only"
    model: str | None = None
    confidence: float | None = None
    n_boot: int = 500
    random_state: int = 0
    laney: object = "auto"
    max_auto_removed_share: float = MAX_AUTO_REMOVED_SHARE
    min_kept_values: int = MIN_KEPT_VALUES
    sigma_method: str | None = None
    transform_indices: str = "transformed"
    mr_removal: str = "later"
    rank_models: bool | None = None

    def __post_init__(self):
        if self.transform_indices not in TRANSFORM_INDICES:
            raise StudyInputError(
                f"`transform_indices` ({self.transform_indices!r}) must be 'transformed' or "
                "'percentile'."
            )
        if self.mr_removal not in MR_REMOVAL:
            raise StudyInputError(f"`mr_removal` ({self.mr_removal!r}) must be 'later' or 'both'.")
        share = self.max_auto_removed_share
        if isinstance(share, bool) or not isinstance(share, int | float) or not 0 <= share < 1:
            raise StudyInputError(
                f"`max_auto_removed_share` ({share!r}) must be a share between 0 and 1, e.g. 0.10."
            )
        keep = self.min_kept_values
        if isinstance(keep, bool) or not isinstance(keep, int | np.integer) or keep < 0:
            raise StudyInputError(
                f"`min_kept_values` ({keep!r}) must be a whole number of 0 or more, e.g. 20."
            )
        if self.sigma_method is not None:
            method = str(self.sigma_method).strip().lower().replace("-", "_")
            method = {"auto": None, "default": None, "mean": None}.get(method, method)
            if method not in (None, "rbar", "sbar", "pooled"):
                raise StudyInputError(
                    f"`sigma_method` ({self.sigma_method!r}) must be one of auto, rbar, sbar, "
                    "pooled."
                )
            object.__setattr__(self, "sigma_method", method)
        if self.chart is not None:
            key = str(self.chart).strip().lower()
            if key not in _CHART_ALIASES:
                raise StudyInputError(
                    f"`chart` ({self.chart!r}) is not a chart we know; use one of "
                    "auto, xbar-r, xbar-s, imr, p, np, c, u."
                )
            object.__setattr__(self, "chart", _CHART_ALIASES[key])
        if self.phase1 not in ("auto", "off"):
            raise StudyInputError(f"`phase1` ({self.phase1!r}) must be 'auto' or 'off'.")
        if self.confidence is not None and not 0.5 <= float(self.confidence) < 1:
            raise StudyInputError(
                f"`confidence` ({self.confidence!r}) must lie between 0.5 and 1, e.g. 0.95."
            )
        if self.model is not None:
            model = str(self.model).strip().lower()
            known = tuple(dict.fromkeys(("auto", "normal", *_TRANSFORMS, *fit_module.FAMILIES)))
            if model not in known:
                raise StudyInputError(
                    f"`model` ({self.model!r}) is not a model we know; use one of "
                    + ", ".join(known)
                    + "."
                )
            object.__setattr__(self, "model", model)
        if self.subgroup_size is not None and (
            isinstance(self.subgroup_size, bool) or int(self.subgroup_size) < 1
        ):
            raise StudyInputError(
                f"`subgroup_size` ({self.subgroup_size!r}) must be a whole number of at least 1."
            )


def _label(v):
    try:
        return v.item()
    except AttributeError:
        return v


class _LazyProbabilityPlot:
    """The probability plot of a long series (no band), computed on first use: the command line
    never draws it, and its coordinates are three lists of n numbers."""

    def __init__(self, x):
        self._x = x
        self._plot = None

    def __getattr__(self, name):
        if name.startswith("__"):
            raise AttributeError(name)
        if self._plot is None:
            self._plot = normality_module.probability_plot(self._x, band=None)
        return getattr(self._plot, name)


def _labels_at(labels, groups: list) -> list:
    """``[[labels[p] for p in g] for g in groups]`` as plain values, read in one step."""
    if not groups:
        return []
    sizes = [len(g) for g in groups]
    flat = np.fromiter((p for g in groups for p in g), dtype=np.int64, count=sum(sizes))
    arr = getattr(labels, "array", None)
    if arr is not None:
        values = arr[flat].tolist()
    else:
        values = [_label(labels[int(p)]) for p in flat.tolist()]
    out, start = [], 0
    for k in sizes:
        out.append(values[start : start + k])
        start += k
    return out


@dataclass(frozen=True, eq=False)
class ModelChoice:
    """The distribution model the capability indices rest on, and why.

    Attributes
    ----------
    name : str
        ``"normal"``, ``"boxcox"``, ``"johnson"`` or a fitted family id.
    label : str
        Display name.
    parameters : dict
        Parameters of the model (lambda and shift for Box-Cox, the Johnson parameters, or the
        fitted family's parameters).
    reason : str
        Why this model was used, in plain words.
    fitted : FittedModel or None
        The fitted family (non-normal families only).
    transform : BoxCoxResult or JohnsonResult or None
        The transformation (Box-Cox / Johnson only).
    """

    name: str
    label: str
    parameters: dict
    reason: str
    fitted: object = None
    transform: object = None

    def to_dict(self) -> dict:
        return {
            "name": self.name,
            "label": self.label,
            "parameters": {k: _f(v) for k, v in self.parameters.items()},
            "reason": self.reason,
        }


@dataclass(frozen=True, eq=False)
class CharacteristicResult:
    """Everything studykit concludes about one characteristic. Immutable.

    Attributes
    ----------
    characteristic, unit : str
    spec : dict
        lsl, usl, target, safety_critical as used.
    attribute : bool
        Counted data (p, np, c, u charts).
    n : int
        Values used after missing values and phase-I removals (attribute data: subgroups).
    n_missing : int
        Empty cells dropped before the analysis.
    subgroups : int
        Subgroups used.
    subgroup_size : int or None
        Nominal subgroup size (None when sizes vary).
    mean, within_sigma, overall_sigma : float or None
        Of the values used; overall_sigma is the sample standard deviation (n - 1).
    values, labels : ndarray
        The values used and the subgroup label of each.
    phase1 : Phase1Result
        Final chart, trial chart, removal log.
    normality : dict or None
        ``anderson_darling`` and ``shapiro_wilk`` results (variables data).
    probability_plot : ProbabilityPlot or None
    ranking : Ranking or None
        Every fitted family, best first.
    model : ModelChoice or None
    capability : CapabilityResult or None
    attribute_capability : AttributeCapability or DefectsPerUnit or None
    verdict : Verdict or None
    findings : tuple of Finding
    model_band : ModelBand or None
    plan : DemonstrationPlan or None
    criteria : dict
        index, threshold, basis, confidence.
    warnings : tuple of str
    cautions : tuple of str
        The safety caution where the characteristic is safety-critical.
    options : AnalysisOptions
    order : OrderCheck or None
    excluded_points : dict
        Chart-scale points of each removed subgroup that is not on the trial chart (the
        recorded exclusions), ``{label: (location, dispersion or None)}``, so a view draws
        them where they belong without computing them (X-bar/R, X-bar/S, I-MR charts).
        Whether the values are in production order (variables data; see
        :mod:`studykit.stats.order`).
    """

    characteristic: str
    unit: str | None
    spec: dict
    attribute: bool
    n: int
    n_missing: int
    subgroups: int
    subgroup_size: int | None
    mean: float | None
    within_sigma: float | None
    overall_sigma: float | None
    values: np.ndarray
    labels: np.ndarray
    phase1: Phase1Result
    criteria: dict
    options: AnalysisOptions
    normality: dict | None = None
    probability_plot: object = None
    ranking: object = None
    model: ModelChoice | None = None
    capability: object = None
    attribute_capability: object = None
    verdict: object = None
    findings: tuple = ()
    model_band: object = None
    plan: object = None
    warnings: tuple = ()
    cautions: tuple = ()
    times: dict = field(default_factory=dict)
    notes: dict = field(default_factory=dict)
    order: object = None
    excluded_points: dict = field(default_factory=dict)
    #: observed vs process-only indices when a gauge R&R is stored (see _measurement_error)
    measurement_error: dict | None = None
    kept_signals: tuple = ()
    #: several streams (cavities, spindles...): studykit.stream_analysis.StreamsResult
    streams: object = None
    #: ISO 22514-2 time-dependent model: studykit.stats.timedep.TimeModel
    time_model: object = None
    #: the ISO 16269-6 interval judged by the tolerance-interval criterion, when it is set
    #: (see studykit.intervals)
    tolerance_interval: dict | None = None

    @property
    def chart(self) -> ControlChart:
        """The final phase-I chart."""
        return self.phase1.chart

    @property
    def chart_scale(self) -> str:
        """``"raw"``, ``"transformed"`` (Box-Cox/Johnson) or ``"normal_score"`` (fitted model):
        the scale of the phase-I chart."""
        scale = self.phase1.scale
        return "raw" if scale is None else scale.name

    @cached_property
    def probability_limits(self) -> dict | None:
        """For a chart of normal scores: its limits in measured units, the fitted model's
        0.135 %, 50 % and 99.865 % points (``lcl``, ``center``, ``ucl``, ``model``), else None.
        Kept once computed (a pickled copy carries it: the report's layout process then needs
        no scipy.stats)."""
        scale = self.phase1.scale
        fitted = getattr(getattr(scale, "model", None), "fitted", None)
        if scale is None or scale.name != "normal_score" or fitted is None:
            return None
        q = fitted.ppf(np.array([0.00135, 0.5, 0.99865]))
        return {"lcl": _f(q[0]), "center": _f(q[1]), "ucl": _f(q[2]), "model": scale.model.name}

    @property
    def chart_scale_axis(self) -> str | None:
        """A short axis label for a chart on the model's scale (e.g. "normal score, Weibull"),
        else None."""
        scale = self.phase1.scale
        if scale is None or scale.name == "raw":
            return None
        label = getattr(scale.model, "label", "model")
        return (
            f"normal score, {label}"
            if scale.name == "normal_score"
            else f"{label.split(' ')[0]} scale"
        )

    @property
    def chart_scale_text(self) -> str | None:
        """What the chart plots when it is not the raw values (for axis labels), else None."""
        scale = self.phase1.scale
        return None if scale is None or scale.name == "raw" else scale.label

    def to_chart_scale(self, values) -> np.ndarray:
        """Raw values mapped onto the phase-I chart's scale (to draw removed subgroups where
        they belong); the identity when the chart plots the raw values."""
        return _on_chart_scale(self.phase1.scale, values)

    @property
    def withheld_codes(self) -> tuple:
        """Codes of the findings that withhold the verdict (heavy automatic removal, too few
        values left by it, data not in production order); empty when none does."""
        return tuple(
            f.code
            for f in self.findings
            if f.code in _WITHHOLDING_CODES or f.code.startswith("order_")
        )

    @property
    def open_signals(self) -> tuple:
        """Signals of the final chart that no "keep, with reason" decision covers."""
        kept = {(str(k["subgroup"]), k["rule"]) for k in self.kept_signals}
        chart = self.phase1.chart
        return tuple(
            sg
            for sg in chart.signals
            if not any((lab, sg.rule) in kept for lab in _signal_labels(chart, sg))
        )

    @property
    def removed_subgroups(self) -> tuple:
        return tuple(_label(r.label) for r in self.phase1.removals)

    def headline(self) -> dict:
        """The numbers an overview row shows: index, its lower bound, verdict, removals."""
        index = self.criteria.get("index", "ppk")
        estimate = lower = None
        if self.verdict is not None:
            estimate, lower = self.verdict.estimate, self.verdict.lower_bound
        return {
            "characteristic": self.characteristic,
            "index": index,
            "estimate": _f(estimate),
            "lower_bound": _f(lower),
            "meets": None if self.verdict is None else self.verdict.meets,
            "withheld": ",".join(self.withheld_codes) or None,
            "verdict": None if self.verdict is None else self.verdict.text,
            "removed": len(self.phase1.removals),
            "model": None if self.model is None else self.model.name,
            "warnings": len(self.warnings),
        }

    def to_dict(self) -> dict:
        """The JSON of ``studykit analyze --json`` (every field documented in the README)."""
        out = {
            "characteristic": self.characteristic,
            "unit": self.unit,
            "spec": dict(self.spec),
            "n": self.n,
            "n_missing": self.n_missing,
            "subgroups": self.subgroups,
            "subgroup_size": self.subgroup_size,
            "mean": _f(self.mean),
            "within_sigma": _f(self.within_sigma),
            "overall_sigma": _f(self.overall_sigma),
            "chart": self._chart_dict(),
            "phase1": self._phase1_dict(),
            "order": None if self.order is None else self.order.to_dict(),
            "normality": self._normality_dict(),
            "model": None if self.model is None else self.model.to_dict(),
            "capability": None,
            "verdict": self._verdict_dict(),
            "criteria": dict(self.criteria),
            "findings": [f.to_dict() for f in self.findings],
            "model_band": None if self.model_band is None else self.model_band.to_dict(),
            "plan": None if self.plan is None else self.plan.to_dict(),
            "warnings": list(self.warnings),
            "cautions": list(self.cautions),
        }
        if self.kept_signals:  # only when a signal was kept with a reason (key absent otherwise)
            out["kept_signals"] = [dict(k) for k in self.kept_signals]
        if self.capability is not None:
            out["capability"] = self.capability.to_dict()
        if self.ranking is not None:
            out["ranking"] = [row.to_dict() for row in self.ranking.rows]
        ac = self.attribute_capability
        if ac is not None:
            out.update(ac.to_dict())
        if self.measurement_error is not None:
            out["measurement_error"] = self.measurement_error
        if self.streams is not None:  # only with a stream column (key absent otherwise)
            out["streams"] = self.streams.to_dict()
        if self.time_model is not None:
            out["time_model"] = self.time_model.to_dict()
        if self.tolerance_interval is not None:
            out["tolerance_interval"] = self.tolerance_interval
        return out

    def _chart_dict(self) -> dict:
        """The ``chart`` block of :meth:`to_dict`: limits, signals, scale, attribute limits."""
        chart = self.phase1.chart
        labels = chart.labels
        signals = _signal_dicts(chart)
        scale = self.phase1.scale
        stat_chart = self.phase1.raw_chart or chart
        chart_d = {
            "kind": chart.kind,
            "reason": chart.reason,
            "sigma_method": stat_chart.sigma_method_text,
            "location": _series_dict(chart.location),
            "dispersion": _series_dict(chart.dispersion),
            "signals": signals,
            **signal_counts(chart),  # only when the list is cut (charts.LISTED_SIGNALS)
        }
        if scale is not None and scale.name != "raw":
            chart_d["scale"] = scale.name
            chart_d["scale_text"] = scale.label
            if self.probability_limits is not None:
                chart_d["probability_limits"] = self.probability_limits
        if self.attribute:
            chart_d.update(self._attribute_limits(chart, labels))
        return chart_d

    def _attribute_limits(self, chart, labels) -> dict:
        """Attribute chart: the limits at the nominal size and per subgroup."""
        chart_d: dict = {}
        nominal = self.subgroup_size
        loc = chart.location
        if nominal is not None and np.allclose(chart.sizes, nominal):
            chart_d["location"] = _series_dict(loc)
        else:
            # centre and limits of the nominal (median) subgroup size
            center, lcl, ucl = _attribute_nominal(chart)
            chart_d["location"] = {"center": center, "lcl": lcl, "ucl": ucl}
        chart_d["limits"] = [
            {
                "subgroup": _label(labels[i]),
                "size": _f(chart.sizes[i]),
                "center": _f(loc.center[i]),
                "lcl": _f(loc.lcl[i]),
                "ucl": _f(loc.ucl[i]),
            }
            for i in range(len(labels))
        ]
        if chart.overdispersion is not None:
            chart_d["overdispersion"] = chart.overdispersion.to_dict()
        return chart_d

    def _phase1_dict(self) -> dict:
        """The ``phase1`` block of :meth:`to_dict`."""
        return {
            "removed_subgroups": list(self.removed_subgroups),
            "iterations": self.phase1.iterations,
            "stopped": self.phase1.stopped,
            "removed_share": _f(self.phase1.removed_share),
            "removed_auto": int(self.phase1.n_removed_auto),
            "removed_recorded": int(self.phase1.n_removed_manual),
            "removed_share_auto": _f(self.phase1.auto_removed_share),
            "removed_share_recorded": _f(self.phase1.manual_removed_share),
            "removals": [r.to_dict() for r in self.phase1.removals],
            "scale": "raw" if self.phase1.scale is None else self.phase1.scale.name,
            "mr_removal": self.phase1.mr_removal,
            "verdict_withheld": list(self.withheld_codes),
            "chance_signals": {k: c.to_dict() for k, c in self.phase1.chance.items()},
        }

    def _normality_dict(self) -> dict | None:
        """The ``normality`` block of :meth:`to_dict` (None without the tests)."""
        if self.normality is None:
            return None
        ad, sw = self.normality["anderson_darling"], self.normality["shapiro_wilk"]
        return {
            "anderson_darling": {
                "statistic": _f(ad.a2),
                "adjusted_statistic": _f(ad.a2_star),
                "p_value": _f(ad.p_value),
            },
            "shapiro_wilk": {"statistic": _f(sw.w), "p_value": _f(sw.p_value)},
        }

    def _verdict_dict(self) -> dict | None:
        """The ``verdict`` block of :meth:`to_dict` (None without a verdict)."""
        if self.verdict is None:
            return None
        v = self.verdict
        return {
            "criterion": v.criterion,
            "index": v.index,
            "threshold": _f(v.threshold),
            "basis": v.basis,
            "estimate": _f(v.estimate),
            "lower_bound": _f(v.lower_bound),
            "level": _f(v.level),
            "meets": v.meets,
            "text": v.text,
        }


def _series_dict(s):
    """Centre line and limits of a chart series at its first point (None without a series)."""
    if s is None:
        return None
    return {"center": _f(s.center[0]), "lcl": _f(s.lcl[0]), "ucl": _f(s.ucl[0])}


def _signal_dicts(chart) -> list:
    """The listed run-rule signals of ``chart`` with their subgroup and reading labels."""
    labels = chart.labels
    signals = []
    for part, s in (("location", chart.location), ("dispersion", chart.dispersion)):
        if s is None:
            continue
        # every label of every signal read in one step (10^4 signals on 10^6 readings)
        shown = listed_signals(s)  # the first charts.LISTED_SIGNALS of a long chart
        points = [list(sig.points) for sig in shown]
        if s.name == "moving_range":  # a moving range is the difference of two readings
            readings = [sorted({q for p in pos for q in (p - 1, p) if q >= 0}) for pos in points]
        else:
            readings = points
        sub_text = _labels_at(labels, points)
        read_text = sub_text if readings is points else _labels_at(labels, readings)
        for sig, subs, reads in zip(shown, sub_text, read_text, strict=True):
            signals.append(
                {
                    "rule": sig.rule,
                    "number": sig.number,
                    "chart": part,
                    "subgroups": subs,
                    "readings": reads,
                    "text": sig.text,
                }
            )
    return signals


def _on_chart_scale(scale, values) -> np.ndarray:
    """Raw values mapped onto a phase-I chart scale (identity for the raw scale)."""
    v = np.asarray(values, dtype=float)
    if scale is None or scale.name == "raw":
        return v
    choice = scale.model
    if scale.name == "transformed" and getattr(choice, "transform", None) is not None:
        return np.asarray(choice.transform.transform(v), dtype=float)
    if scale.name == "normal_score" and getattr(choice, "fitted", None) is not None:
        return _normal_scores(choice.fitted, v)
    return v


def _excluded_points(values, labels, p1) -> dict:
    """Chart-scale location (subgroup mean, or the reading of an I-MR chart) and dispersion
    (range or standard deviation, n - 1) of each removed subgroup absent from the trial chart:
    the recorded exclusions, which phase I never charted. For display only."""
    kind = p1.chart.kind
    if kind not in ("xbar_r", "xbar_s", "imr"):
        return {}
    removed = [str(r.label) for r in p1.removals]
    if not removed:  # nothing removed: no label of a long chart is read
        return {}
    trial_labels = p1.trial_chart.labels
    arr = getattr(trial_labels, "array", None)  # charts.Labels: one array, no Python objects
    if arr is None:
        arr = np.asarray([str(v) for v in trial_labels], dtype=str)
    trial = set(np.asarray(arr)[np.isin(np.asarray(arr).astype(str), removed)].astype(str))
    wanted = [lab for lab in removed if lab not in trial]
    out: dict = {}
    for lab in wanted:
        v = values[(labels == lab) & np.isfinite(values)]
        if v.size == 0:
            continue
        v = _on_chart_scale(p1.scale, v)
        loc = float(v.mean()) if kind != "imr" else float(v[0])
        disp = None
        if kind == "xbar_r" and v.size > 1:
            disp = float(v.max() - v.min())
        elif kind == "xbar_s" and v.size > 1:
            disp = float(v.std(ddof=1))
        out[lab] = (loc, disp)
    return out


def _attribute_nominal(chart: ControlChart):
    """Centre and limits at the median subgroup size (from the chart's per-subgroup arrays)."""
    sizes = np.asarray(chart.sizes, dtype=float)
    i = int(np.argmin(np.abs(sizes - np.median(sizes))))
    loc = chart.location
    return _f(loc.center[i]), _f(loc.lcl[i]), _f(loc.ucl[i])


@dataclass(frozen=True, eq=False)
class StudyResult:
    """Every characteristic of a study, in the study's order.

    Attributes
    ----------
    results : dict
        name -> CharacteristicResult.
    errors : dict
        name -> message for characteristics that could not be analysed (never stops the batch).
    digest : str
        Content digest of the study analysed.
    """

    results: dict
    errors: dict
    digest: str = ""

    def rows(self) -> list[dict]:
        out = []
        for res in self.results.values():
            out.append(res.headline())
        for name, msg in self.errors.items():
            out.append({"characteristic": name, "error": msg})
        return out


# ----------------------------------------------------------------------------- the pipeline


def _regroup(labels: np.ndarray, size: int) -> np.ndarray:
    return (np.arange(labels.size) // size + 1).astype(str)


def _df_within(chart: ControlChart) -> float | None:
    """Effective degrees of freedom of the chart's within-sigma estimator."""
    k, n = chart.n_subgroups, chart.subgroup_size
    method = chart.sigma_method
    try:
        if method == "mrbar":
            return effective_df_moving_range(chart.n_values)
        if n is None:
            return None
        if method == "rbar":
            return effective_df_range(k, n)
        if method in ("sbar",):
            return effective_df_stdev(k, n)
        if method == "pooled":
            return float(chart.n_values - k)
    except StudyInputError:
        return None
    return None


def _criteria_dict(criteria) -> dict:
    if criteria is None:
        return dict(names.DEFAULT_CRITERION)
    return {
        "index": criteria.index,
        "threshold": float(criteria.threshold),
        "basis": criteria.basis,
        "confidence": float(criteria.confidence),
        # the tolerance-interval criterion only when set (JSON of other studies unchanged)
        **(
            {
                "interval_coverage": float(criteria.interval_coverage),
                "interval_confidence": float(criteria.interval_confidence),
            }
            if getattr(criteria, "interval_coverage", None) is not None
            else {}
        ),
    }


def _choose_model(x, requested: str, ad_normal, lsl, usl, rank=False):
    """Pick the distribution model; returns (ModelChoice, Ranking or None, notes).

    The families are fitted and ranked when a family is requested, when ``auto`` finds the
    normal model rejected, or when ``rank`` asks for the ranking anyway."""
    ranking = None
    notes: list[str] = []
    normal_kept = ad_normal.p_value is not None and ad_normal.p_value >= NORMALITY_ALPHA
    need_ranking = requested not in ("normal", "auto", *_TRANSFORMS)
    if need_ranking or (requested == "auto" and (rank or not normal_kept)):
        ranking = fit_module.fit_all(x)
    if requested == "auto":
        choice = _auto_choice(x, ad_normal, normal_kept, ranking, notes)
    else:
        choice = _requested_choice(x, requested, ranking, notes)
    return choice, ranking, notes


def _auto_choice(x, ad_normal, normal_kept, ranking, notes) -> ModelChoice:
    """Model ``auto``: normal unless rejected, else the best-ranked fitted family."""
    if normal_kept:
        return ModelChoice(
            "normal",
            "Normal",
            {"mean": float(np.mean(x)), "sd": float(np.std(x, ddof=1))},
            f"the normal model is not rejected (Anderson-Darling p = "
            f"{ad_normal.p_value:.3f} >= {NORMALITY_ALPHA}, common practice)",
        )
    best = None
    for row in ranking.rows:
        if row.id == "normal" or not row.converged or row.error:
            continue
        best = ranking.models.get(row.id)
        if best is not None:
            break
    if best is None:
        notes.append("no non-normal model could be fitted; the normal model is used")
        return ModelChoice("normal", "Normal", {}, "fallback: no other model fitted")
    return ModelChoice(
        best.name,
        names.model_label(best.name),
        dict(best.parameters),
        f"the normal model is rejected (Anderson-Darling p = {ad_normal.p_value:.3g}); "
        f"{names.model_label(best.name)} ranks best of the fitted models ({ranking.rule})",
        fitted=best,
    )


def _requested_choice(x, requested, ranking, notes) -> ModelChoice:
    """The model the user asked for (normal, a transform, or a fitted family)."""
    positive = bool(np.all(x > 0))
    if requested == "normal":
        return ModelChoice(
            "normal",
            "Normal",
            {"mean": float(np.mean(x)), "sd": float(np.std(x, ddof=1))},
            "chosen by the user",
        )
    if requested == "boxcox":
        bc = transform_module.box_cox(x)
        return ModelChoice(
            "boxcox",
            "Box-Cox transformed normal",
            {"lambda": bc.lam_used, "shift": bc.shift},
            "chosen by the user" + (f"; {bc.note}" if getattr(bc, "note", "") else ""),
            transform=bc,
        )
    if requested == "johnson":
        jr = transform_module.johnson(x)
        params = {k: v for k, v in jr.to_dict().items() if isinstance(v, int | float)}
        return ModelChoice(
            "johnson",
            f"Johnson {jr.kind}",
            params,
            "chosen by the user",
            transform=jr,
        )
    model = ranking.models.get(requested)
    if model is None:
        row = next((r for r in ranking.rows if r.id == requested), None)
        why = row.error if row is not None and row.error else "the fit did not converge"
        raise AnalysisError(
            f"the model '{requested}' cannot be fitted to these data: {str(why).rstrip('.')}."
        )
    if not positive and requested != "normal":
        notes.append("the data contain values <= 0")
    return ModelChoice(
        model.name,
        names.model_label(model.name),
        dict(model.parameters),
        "chosen by the user",
        fitted=model,
    )


#: What the phase-I chart plots on each scale, in words.
_SCALE_TEXT = {
    "raw": "values as measured",
    "transformed": "{label} values",
    "normal_score": "normal scores under the fitted {label} model (limits at its 0.135 %, 50 % "
    "and 99.865 % points)",
}


def _normal_scores(model, x) -> np.ndarray:
    """Phi^-1(F(x)) of a fitted model, from the upper tail where that is more accurate."""
    from studykit.stats.lazy import norm_isf_values, norm_ppf_values  # scipy.stats' numbers

    x = np.asarray(x, dtype=float)
    cdf = np.asarray(model.cdf(x), dtype=float)
    sf = np.asarray(model.sf(x), dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(cdf < 0.5, norm_ppf_values(cdf), norm_isf_values(sf))
    # outside the fitted support (or beyond double precision): far beyond any limit
    return np.clip(np.nan_to_num(z, nan=0.0, posinf=38.0, neginf=-38.0), -38.0, 38.0)


def _model_scale(requested: str, rank: bool = False):
    """The ``rescale`` function phase I calls each round: the distribution model is refitted
    to the values still kept and the chart is drawn on that model's scale.

    * normal (chosen, or ``auto`` where Anderson-Darling does not reject it): the raw values;
    * Box-Cox / Johnson: the transformed values, charted with the usual estimated limits;
    * a fitted family: normal scores z = Phi^-1(F(x)) with the known standard 0 and 1, so the
      limits -3, 0, +3 are the model's 0.135 %, 50 % and 99.865 % points (probability limits)
      and the moving-range / range / S chart is on the same scale.

    Where the model cannot be fitted to a round's values the raw values are charted (the
    capability step then reports the fit error in words).
    """

    def rescale(xs):
        xs = np.asarray(xs, dtype=float)
        rescale.last = None
        raw = ChartScale("raw", _SCALE_TEXT["raw"], xs)
        if xs.size < 3 or not np.ptp(xs) > 0:
            return raw
        shared = getattr(rescale, "shared", None)
        try:
            ad = normality_module.anderson_darling(
                xs, ordered=shared.ordered(xs) if shared is not None else None
            )
            choice, ranking, notes = _choose_model(xs, requested, ad, None, None, rank=rank)
        except (StudyInputError, ValueError, FloatingPointError):
            return raw
        # kept for the analysis: the same values after phase I need no second fit
        rescale.last = {
            "values": xs,
            "ad": ad,
            "choice": choice,
            "ranking": ranking,
            "notes": tuple(notes),
        }
        if choice.name == "normal":
            return ChartScale("raw", _SCALE_TEXT["raw"], xs, model=choice)
        if choice.transform is not None:
            # Box-Cox charts the unit-free transform (an increasing affine map of the plain
            # one, so limits and signals are the same; its digits survive any unit)
            forward = getattr(choice.transform, "scaled_transform", choice.transform.transform)
            y = np.asarray(forward(xs), dtype=float)
            if not np.all(np.isfinite(y)):
                return raw
            return ChartScale(
                "transformed",
                _SCALE_TEXT["transformed"].format(label=choice.label),
                y,
                model=choice,
            )
        if choice.fitted is None:
            return raw
        z = _normal_scores(choice.fitted, xs)
        return ChartScale(
            "normal_score",
            _SCALE_TEXT["normal_score"].format(label=choice.label),
            z,
            mu=0.0,
            sigma=1.0,
            model=choice,
        )

    return rescale


def _pct(v: float) -> str:
    return f"{100 * v:.0f} %" if abs(100 * v - round(100 * v)) < 1e-9 else f"{100 * v:.1f} %"


def _withheld_findings(p1: Phase1Result, order, options: AnalysisOptions) -> tuple:
    """Findings that withhold the verdict: heavy automatic trimming, too few values left by it,
    or values not in production order. Removals a person recorded are not counted as trimming.
    """
    out = []
    if order is not None and order.flagged:
        out.append(
            Finding(
                code="order_" + order.status,
                severity="warning",
                text="Stability could not be judged from the order of the data: "
                + order.text
                + " No run rule was applied and nothing was removed automatically.",
            )
        )
    total = p1.n_values_total
    n_auto = p1.n_removed_auto
    if n_auto and total:
        share = n_auto / total
        kept = p1.n_values_kept
        manual = ""
        if p1.n_removed_manual:
            manual = (
                f" ({p1.n_removed_manual} further value(s) were removed by recorded "
                "decisions and are not counted here)"
            )
        if share > options.max_auto_removed_share:
            out.append(
                Finding(
                    code="heavy_auto_removal",
                    severity="warning",
                    text=(
                        f"Automatic phase I removed {n_auto} of {total} values ({_pct(share)}, "
                        f"more than {_pct(options.max_auto_removed_share)}){manual}. A sample "
                        "trimmed this much describes the kept values, not the process: the removed "
                        "values may be the tail of the distribution rather than special causes. "
                        "Find the cause of each removal and record it with a reason, or analyse "
                        "with --phase1 off."
                    ),
                )
            )
        if kept < options.min_kept_values:
            out.append(
                Finding(
                    code="too_few_after_removal",
                    severity="warning",
                    text=(
                        f"Automatic phase I left {kept} values (fewer than "
                        f"{options.min_kept_values}){manual}: too few to judge capability from."
                    ),
                )
            )
    return tuple(out)


def _withhold(verdict, withheld: tuple):
    """The verdict with ``meets`` None and the reasons in its text (numbers kept for
    information)."""
    if verdict is None or not withheld:
        return verdict
    est = "-" if verdict.estimate is None else f"{verdict.estimate:.2f}"
    low = "-" if verdict.lower_bound is None else f"{verdict.lower_bound:.2f}"
    name = _PRETTY_INDEX.get(verdict.index, verdict.index)
    reasons = []
    for f in withheld:
        if f.code.startswith("order_"):
            reasons.append(
                "stability could not be judged from the order of the data (the "
                "values are not in production order)"
            )
        elif f.code == "heavy_auto_removal":
            reasons.append("automatic phase I removed more of the values than the stated share")
        elif f.code == "too_few_after_removal":
            reasons.append("automatic phase I left too few values")
    if verdict.meets is None and verdict.text.startswith("No verdict"):
        text = verdict.text + f" No verdict either because {'; '.join(reasons)}."
    else:
        text = (
            f"No verdict: {'; '.join(reasons)} (see the findings). For information only, "
            f"{name} would be {est} with lower {verdict.level:.0%} bound {low} against the "
            f"required {verdict.threshold:g}."
        )
    return replace(verdict, meets=None, text=text)


def _transformed_capability(
    x, labels, chart: ControlChart, choice: ModelChoice, *, lsl, usl, target, level, df_within
):
    """Normal-theory capability on the transformed scale (Box-Cox, Johnson)."""
    t = choice.transform
    # Box-Cox: the unit-free form (an increasing affine map of the plain one: the same indices)
    forward = getattr(t, "scaled_transform", t.transform)

    def tr(v):
        if v is None:
            return None
        out = np.asarray(forward(np.asarray([v], dtype=float)), dtype=float)[0]
        if not math.isfinite(out):
            raise AnalysisError(
                f"the specification limit {v:g} lies outside the range of the {choice.label} "
                "transformation; choose another model."
            )
        return float(out)

    y = np.asarray(forward(x), dtype=float)
    within = None
    if chart.kind != "imr" and chart.subgroup_size is not None:
        tchart = control_chart(y, labels, kind=chart.kind, evaluate=False)
        within = tchart.within_sigma
    result = capability(
        y,
        lsl=tr(lsl),
        usl=tr(usl),
        target=tr(target),
        within_sigma=within,
        df_within=df_within if within is not None else None,
        level=level,
    )
    return result


#: Capability conventions of a Box-Cox / Johnson model (option ``transform_indices``, ours).
TRANSFORM_INDICES = ("transformed", "percentile")


class _TransformedNormal:
    """A Box-Cox / Johnson model seen on the original scale: the transformed values are normal
    with their sample mean and standard deviation (n - 1); quantiles and probabilities are those
    of that normal model carried back through the inverse transformation. It has the model
    protocol :func:`studykit.stats.capability.capability` uses (ppf, cdf, sf, rvs, family.fit),
    so the percentile indices and their parametric-bootstrap bounds come out as for a fitted
    family; the bootstrap refits the transformation to every sample."""

    def __init__(self, choice, transform, mean, sd, sides=(True, True)):
        self.choice, self.transform, self.sides = choice, transform, tuple(sides)
        # Box-Cox: the unit-free form (an increasing affine map of the plain one, so the same
        # quantiles on the original scale) keeps its digits for a large lambda
        self._forward = getattr(transform, "scaled_transform", transform.transform)
        self._inverse = getattr(transform, "scaled_inverse", transform.inverse)
        self.mean, self.sd = float(mean), float(sd)
        self.name = choice.name
        self.parameters = {
            **{
                k: v
                for k, v in choice.parameters.items()
                if isinstance(v, int | float) and not isinstance(v, bool)
            },
            "transformed_mean": self.mean,
            "transformed_sd": self.sd,
        }
        self.family = self

    @classmethod
    def of(cls, choice, x, sides=(True, True)):
        """``sides``: whether the lower and the upper point are needed (a specification limit
        on that side)."""
        t = choice.transform
        forward = getattr(t, "scaled_transform", t.transform)
        y = np.asarray(forward(np.asarray(x, dtype=float)), dtype=float)
        if not np.all(np.isfinite(y)):
            raise AnalysisError(
                f"some values lie outside the range of the {choice.label} transformation; "
                "choose another model."
            )
        return cls(choice, choice.transform, float(np.mean(y)), float(np.std(y, ddof=1)), sides)

    def fit(self, sample):
        """Refit the transformation (as the analysis does) and the normal model to ``sample``."""
        try:
            if self.choice.name == "boxcox":
                t = transform_module.box_cox(sample)
            else:
                t = transform_module.johnson(sample)
            choice = replace(self.choice, transform=t)
            return _TransformedNormal.of(choice, sample, self.sides)
        except (StudyInputError, ArithmeticError) as exc:  # counted as a failed refit
            raise ValueError(str(exc)) from exc

    def ppf(self, q):
        z = special.ndtri(np.asarray(q, dtype=float))  # scipy.stats.norm.ppf
        y = self.mean + self.sd * z
        lam = getattr(self.transform, "lam_used", None)
        outside = (1.0 + lam * y <= 0) if lam is not None and lam != 0 else np.zeros(y.shape, bool)
        needed = np.where(
            np.asarray(q) < 0.5, self.sides[0], np.where(np.asarray(q) > 0.5, self.sides[1], True)
        )
        if np.any(outside & needed):
            # Box-Cox: the transformed normal model puts a point that a specification limit
            # needs beyond the range of the transformation; the original scale has no such
            # quantile (a point on a side without a limit maps to the range's end, unused)
            raise AnalysisError(
                f"the {self.choice.label} model (lambda {lam:.4g}) puts its 0.135 % or 99.865 % "
                "point beyond the range of the transformation, so the percentile convention "
                "has no quantile there; use --transform-indices transformed or another model."
            )
        return np.asarray(self._inverse(y), dtype=float)

    def cdf(self, v):
        y = np.asarray(self._forward(np.asarray(v, dtype=float)), dtype=float)
        return special.ndtr((y - self.mean) / self.sd)

    def sf(self, v):
        y = np.asarray(self._forward(np.asarray(v, dtype=float)), dtype=float)
        return special.ndtr((self.mean - y) / self.sd)

    def rvs(self, n, random_state=None):
        rng = np.random.default_rng(random_state)
        return np.asarray(self._inverse(rng.normal(self.mean, self.sd, int(n))), dtype=float)


def capability_method_text(capability: Mapping | None, model: Mapping | None) -> str | None:
    """The capability convention used, in words (terminal and PDF), from the JSON parts."""
    if not capability:
        return None
    name = (model or {}).get("name")
    label = (model or {}).get("label") or name
    transformed = name in _TRANSFORMS
    if capability.get("method") == "normal" and transformed:
        return (
            f"indices of the transformed values ({label}): limits and values transformed, "
            "normal theory on that scale (--transform-indices transformed)"
        )
    if capability.get("method") == "percentile" and transformed:
        return (
            f"ISO 22514-2 percentile method on the original scale: the back-transformed "
            f"0.135 %, 50 % and 99.865 % points of the {label} model "
            "(--transform-indices percentile)"
        )
    if capability.get("method") == "percentile":
        return (
            "ISO 22514-2 percentile method on the original scale: the fitted model's "
            "0.135 %, 50 % and 99.865 % points"
        )
    if capability.get("method") == "equivalent_ppm":
        return "equivalent-PPM method: the fitted model's tail shares as z values"
    return "normal theory: the mean with the within and overall standard deviations"


# long: a 55-line numpydoc docstring; the code is the sequence of named steps below it
def analyze_characteristic(
    data,
    spec=None,
    *,
    criteria=None,
    sizes=None,
    exclusions: Mapping | None = None,
    options: AnalysisOptions | None = None,
    gauge: Mapping | None = None,
    kept: Mapping | None = None,
) -> CharacteristicResult:
    """Run the capability study for one characteristic.

    Parameters
    ----------
    data : studykit.data.CharacteristicData
        The values in production order with their subgroup labels (attribute data: one count per
        subgroup).
    spec : studykit.study.Characteristic, optional
        Limits, target, chart and model settings; without it only the stability part is done.
    criteria : studykit.study.Criteria, optional
        Acceptance criterion (default: Ppk lower 95% bound >= 1.67, common practice).
    sizes : array_like or CharacteristicData, optional
        Attribute data: subgroup sizes (items inspected or inspection units), one per count.
    exclusions : mapping, optional
        Manual exclusions ``{subgroup label: (reason, who)}`` applied before phase I.
    options : AnalysisOptions, optional
    gauge : mapping, optional
        A stored gauge R&R result for this characteristic (its verdict is mentioned).
    kept : mapping, optional
        Signals kept with a reason ``{(subgroup label, rule id): {"reason", "who", "when",
        "origin"}}``: a signal of that rule whose pattern includes that subgroup counts as
        reviewed; it stays on the chart, is listed with its reason, and no longer withholds the
        verdict.

    Returns
    -------
    CharacteristicResult

    Notes
    -----
    Model choice ``"auto"``: the normal model unless its Anderson-Darling test rejects it at
    :data:`NORMALITY_ALPHA`; then the best-ranked fitted family, with the ISO 22514-2
    percentile method for the indices. Within sigma comes from the final phase-I chart
    (R-bar/d2, S-bar/c4 or MR-bar/d2) with the effective degrees of freedom of that estimator.

    Examples
    --------
    >>> from studykit.data import CharacteristicData
    >>> from studykit.study import Characteristic
    >>> x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
    >>> res = analyze_characteristic(CharacteristicData("x", None, x),
    ...                              Characteristic("x", lsl=40, usl=60))
    >>> res.chart.kind, res.n, round(res.mean, 2)
    ('imr', 10, 50.81)
    """
    options = options or AnalysisOptions()
    streams = getattr(data, "streams", None)
    if streams is not None and len(set(np.asarray(streams).tolist())) > 1:
        from studykit.stream_analysis import analyze_streams  # the whole and each stream

        return analyze_streams(
            data,
            spec,
            analyze=analyze_characteristic,
            criteria=criteria,
            sizes=sizes,
            exclusions=exclusions,
            options=options,
            gauge=gauge,
            kept=kept,
        )
    warn: list[str] = []
    kind = options.chart or (spec.chart if spec is not None else "auto")
    attribute = kind in ATTRIBUTE_KINDS
    values, labels, size_arr, groups, n_missing = _prepare_values(
        data, spec, sizes, options, kind, attribute, warn
    )
    excl, manual, order, shared = _apply_exclusions(
        data, spec, values, labels, groups, exclusions, attribute, warn
    )
    requested = options.model or (spec.model if spec is not None else None) or "auto"
    has_limits = spec is not None and (spec.lsl is not None or spec.usl is not None)
    rescale = (
        _model_scale(requested, bool(options.rank_models))
        if has_limits and not attribute and requested != "normal"
        else None
    )
    if rescale is not None:
        rescale.shared = shared
    p1 = _run_phase1(
        values, labels, groups, kind, size_arr, excl, order, rescale, attribute, options, warn
    )
    chart = p1.chart
    kept_mask = p1.kept_mask
    x = values[kept_mask]
    kept_labels = labels if kept_mask.all() else labels[kept_mask]
    withheld = _withheld_findings(p1, order, options)
    crit = _criteria_dict(criteria)
    level = _confidence_level(options, criteria, crit)
    kept_rows, kept_keys = _kept_rows(chart, kept)
    common = _common_fields(
        data, spec, p1, crit, options, order, kept_rows, attribute=attribute, n_missing=n_missing
    )
    if not attribute:
        common["excluded_points"] = _excluded_points(values, labels, p1)

    if attribute:
        if not np.any(np.asarray(chart.location.sigma) > 0):
            warn.extend(w for w in chart.warnings if w not in warn)  # the centre-line chart
        return _attribute_result(
            common,
            chart,
            x,
            size_arr[kept_mask] if size_arr is not None else None,
            kept_labels,
            warn,
            level,
            crit,
            withheld,
        )

    # the within sigma of the raw values (the chart itself may be on the model's scale)
    stat_chart = p1.raw_chart or chart
    result_kw = _variable_fields(common, chart, stat_chart, x, kept_labels, withheld)
    if _too_few_for_shape(x, result_kw["overall_sigma"], warn):
        return CharacteristicResult(**result_kw, warnings=tuple(warn))
    ad, last = _shape(x, rescale, result_kw, warn, shared)
    if spec is None or (spec.lsl is None and spec.usl is None):
        return CharacteristicResult(**result_kw, warnings=tuple(warn))

    choice, ranking, cap = _fit_capability(
        x, kept_labels, stat_chart, spec, requested, ad, last, options, level, warn
    )
    judged_index = _judged_index(cap, choice, crit["index"], warn)
    band = _model_band(x, spec, ranking, ad, judged_index, crit, cap, choice.name)
    verdict, findings, interval, time_model, time_findings = _verdict_and_findings(
        x,
        cap,
        chart,
        p1,
        spec,
        choice,
        crit,
        judged_index,
        kept_keys,
        kept_rows,
        withheld,
        band,
        _time_readings(values, labels, groups, manual),
    )
    judged_index = verdict.index
    measurement_error = _gauge_findings(gauge, result_kw, stat_chart, spec, level, choice, findings)
    plan = _plan(verdict, judged_index, crit, level)
    result_kw.pop("findings", None)
    findings.extend(time_findings)
    return CharacteristicResult(
        **result_kw,
        time_model=time_model,
        ranking=ranking,
        model=choice,
        capability=cap,
        verdict=verdict,
        findings=tuple(findings),
        model_band=band,
        plan=plan,
        warnings=tuple(warn),
        measurement_error=measurement_error,
        tolerance_interval=interval,
    )


def _time_readings(values, labels, groups, manual):
    """The readings and labels the time model reads: every reading but the recorded removals.
    Individuals (one reading per subgroup) give their positions 0..n-1 as labels: the time
    model only groups by label, and a string label per reading costs a sort of 10^6 strings."""
    if not manual.any():
        if groups.names.size == labels.size:
            return values, np.arange(labels.size)
        return values, labels
    return values[~manual], labels[~manual]


def _prepare_values(data, spec, sizes, options, kind, attribute, warn):
    """Step 1: the readings, subgroup labels and sizes, empty cells left out (``warn`` told),
    the rows regrouped by ``subgroup_size``; returns values, labels, sizes, the subgroup codes
    and the number of empty cells."""
    name = data.name
    values = np.asarray(data.values, dtype=float)
    labels = np.asarray(data.subgroups)
    if labels.dtype.kind != "U":
        labels = labels.astype(str)
    # every row its own subgroup (individuals): known from the reader's count of labels
    distinct = getattr(data, "subgroup_labels", None)
    all_distinct = distinct is not None and len(distinct) == labels.size
    size_arr = None
    if sizes is not None:
        size_arr = np.asarray(getattr(sizes, "values", sizes), dtype=float)
        if size_arr.shape != values.shape:
            raise StudyInputError(
                f"the size column has {size_arr.size} entries but '{name}' has {values.size}; "
                "give one lot size per count."
            )
    subgroup_size = options.subgroup_size or (spec.subgroup_size if spec is not None else None)
    if (
        subgroup_size
        and not attribute
        and (all_distinct or SubgroupCodes.of(labels).names.size == labels.size)
    ):
        # group consecutive rows, as `studykit check` does: an empty cell stays in its subgroup
        labels = _regroup(labels, int(subgroup_size))
        all_distinct = False
    if attribute:
        _check_counts(data, values, size_arr, kind)
    missing = np.isnan(values)
    if size_arr is not None:
        missing |= np.isnan(size_arr)
    n_missing = int(missing.sum())
    if n_missing:
        warn.append(f"{n_missing} empty cell(s) left out of the analysis")
    if n_missing:  # (no copy of 10^6 values and labels when nothing is missing)
        keep = ~missing
        values, labels = values[keep], labels[keep]
        if size_arr is not None:
            size_arr = size_arr[keep]
    if attribute and kind in ("p", "np", "u") and size_arr is None:
        raise StudyInputError(
            f"the {kind} chart of '{name}' needs the subgroup sizes: name the column that holds "
            "them (size column / --size-column)."
        )
    if values.size < 2:
        raise AnalysisError(
            f"'{name}' has {values.size} usable value(s); a study needs at least 2 (better 100 "
            "or more)."
        )
    if not attribute:  # overflow, rounding-noise spread, precision collapse: refused here
        check_resolution(values, name=f"'{printable(name)}'")

    # subgroups as integer codes from here on (labels are read only for what is shown)
    groups = (
        SubgroupCodes(np.arange(labels.size), labels) if all_distinct else SubgroupCodes.of(labels)
    )
    return values, labels, size_arr, groups, n_missing


def _apply_exclusions(data, spec, values, labels, groups, exclusions, attribute, warn):
    """Step 2: the recorded exclusions of subgroups in the data (others named in ``warn``),
    the mask of their rows and the production-order check of the rest."""
    excl = {}
    for label, why in (exclusions or {}).items():
        excl[str(label)] = why
    present = (
        set(np.asarray(list(excl), dtype=str)[np.isin(list(excl), groups.names)].tolist())
        if excl
        else set()
    )
    unknown = [k for k in excl if k not in present]
    if unknown:
        warn.append("recorded exclusion(s) for subgroup(s) not in the data: " + ", ".join(unknown))
        excl = {k: v for k, v in excl.items() if k not in unknown}

    order = None
    manual = None
    shared = None
    if not attribute:
        manual = np.isin(labels, list(excl)) if excl else np.zeros(labels.size, dtype=bool)
        shared = _SharedSort(values[~manual])
        order = order_module.check_order(
            shared.values,
            name=data.name,
            unit=data.unit or (spec.unit if spec is not None else None),
            has_times=getattr(data, "times", None) is not None,
            perm=shared.perm,
            ranks=shared.ranks,
        )
    return excl, manual, order, shared


class _SharedSort:
    """The sort of the values the production-order check reads, made once and reused by the
    normality tests when they test exactly these values (phase I removed nothing): the order
    check, Anderson-Darling and Shapiro-Wilk each sorted the same values (about 0.05-0.08 s
    each at 10^6 values). Short series (the order check's pairwise route) sort nothing here.

    From :data:`HASHED_MIN_N` values on, when pandas is loaded already (a large file was read
    with it), the values are not argsorted: pandas' hash factorization gives each distinct
    value a code in one pass, only the distinct values are sorted, and the dense ranks in
    position order, the count of each rank and the sorted values (each distinct value repeated
    by its count) follow from those (:func:`_hashed_ranks`): the same ranks, counts and sorted
    array as the argsort gives, about 0.1 s sooner at 10^6 values."""

    __slots__ = ("values", "perm", "ranks", "_sorted_distinct", "_ordered")

    def __init__(self, values: np.ndarray):
        self.values = values
        self.perm: np.ndarray | None = None
        self.ranks: tuple[np.ndarray, np.ndarray] | None = None
        self._sorted_distinct: np.ndarray | None = None
        self._ordered: np.ndarray | None = None
        if values.size <= order_module.PAIRWISE_MAX_N or not np.isfinite(values).all():
            return
        if values.size >= HASHED_MIN_N and "pandas" in sys.modules:
            ranks, counts, self._sorted_distinct = _hashed_ranks(values)
            self.ranks = (ranks, counts)
        else:
            self.perm = np.argsort(values)

    def ordered(self, xs) -> np.ndarray | None:
        """``np.sort(xs)`` when ``xs`` are the values held here, else None."""
        v = self.values
        if self.perm is None and self.ranks is None:
            return None
        if xs.shape != v.shape or not (xs is v or np.array_equal(xs, v)):
            return None
        if self._ordered is None:
            distinct, ranks = self._sorted_distinct, self.ranks
            if self.perm is not None:
                self._ordered = v[self.perm]
            elif distinct is None or ranks is None or np.any(distinct == 0.0):
                # 0.0 and -0.0 are one distinct value: np.sort keeps each zero's sign
                self._ordered = np.sort(v)
            else:
                self._ordered = np.repeat(distinct, ranks[1])
        return self._ordered


#: From this many values on, :class:`_SharedSort` ranks by hashing when pandas is loaded.
HASHED_MIN_N = 100_000


def _hashed_ranks(values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(dense ranks 0..m-1 of ``values`` in their order, the count of each rank, the m distinct
    values in increasing order) of finite ``values``, through ``pandas.factorize`` (a hash
    table: codes in order of first appearance) and a sort of the m distinct values only.
    Equal values (0.0 and -0.0 too) share one rank, as in the argsort route.

    >>> _hashed_ranks(np.array([2.5, 1.0, 2.5, 7.0]))
    (array([1, 0, 1, 2], dtype=int32), array([1, 2, 1]), array([1. , 2.5, 7. ]))
    """
    import pandas as pd

    codes, distinct = pd.factorize(values)
    by_value = np.argsort(distinct)
    rank_of = np.empty(by_value.size, dtype=np.int32)
    rank_of[by_value] = np.arange(by_value.size, dtype=np.int32)
    ranks = rank_of[codes]
    counts = np.bincount(ranks, minlength=by_value.size)
    return ranks, counts, distinct[by_value]


def _run_phase1(
    values, labels, groups, kind, size_arr, excl, order, rescale, attribute, options, warn
):
    """Step 3: phase I (control chart, run rules, removal rounds); its warnings go to ``warn``."""
    order_flagged = order is not None and order.flagged
    chart_kw = {}
    if attribute:
        chart_kw["laney"] = options.laney
    elif options.sigma_method is not None and groups.names.size < labels.size:
        chart_kw["sigma_method"] = options.sigma_method
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", StudyWarning)
        p1 = phase1(
            values,
            groups,
            kind=kind,
            sizes=size_arr,
            exclude=excl or None,
            removal_rules=options.removal_rules,
            max_iterations=10 if options.phase1 == "auto" and not order_flagged else 0,
            rules=() if order_flagged else options.rules,
            dispersion_rules=() if order_flagged else DISPERSION_RULES,
            rescale=rescale,
            mr_removal=options.mr_removal,
            **chart_kw,
        )
    for w in caught:
        msg = str(w.message)
        if msg not in warn:
            warn.append(msg)
    for msg in p1.warnings:
        if msg.startswith("the round limit (0)"):
            continue  # no automatic rounds were asked for; the signals are reported as findings
        if msg not in warn:
            warn.append(msg)
    return p1


def _confidence_level(options, criteria, crit) -> float:
    """The confidence level of the bounds: the option, else the criterion's, else the default."""
    if options.confidence is not None:
        return float(options.confidence)
    return float(names.DEFAULT_CONFIDENCE if criteria is None else crit["confidence"])


def _common_fields(data, spec, p1, crit, options, order, kept_rows, *, attribute, n_missing):
    """The result fields shared by attribute and variable data."""
    spec_d = {
        "lsl": None if spec is None else spec.lsl,
        "usl": None if spec is None else spec.usl,
        "target": None if spec is None else spec.target,
        "safety_critical": bool(spec is not None and spec.safety_critical),
    }
    cautions = (SAFETY_CAUTION,) if spec_d["safety_critical"] else ()
    unit = data.unit if data.unit else (spec.unit if spec is not None else None)
    return dict(
        kept_signals=kept_rows,
        characteristic=data.name,
        unit=unit,
        spec=spec_d,
        attribute=attribute,
        n_missing=n_missing,
        subgroups=int(p1.chart.n_subgroups),
        phase1=p1,
        criteria=crit,
        options=options,
        cautions=cautions,
        order=order,
    )


def _variable_fields(common, chart, stat_chart, x, kept_labels, withheld) -> dict:
    """The result fields of variable data after phase I (mean, sigmas, retained values)."""
    within = None if stat_chart.within_sigma is None else float(stat_chart.within_sigma)
    return dict(
        common,
        findings=withheld,
        n=int(x.size),
        subgroup_size=chart.subgroup_size,
        mean=float(np.mean(x)),
        within_sigma=within,
        overall_sigma=float(np.std(x, ddof=1)) if x.size > 1 else None,
        values=x,
        labels=kept_labels,
    )


def _too_few_for_shape(x, overall, warn) -> bool:
    """True (and ``warn`` says why) when fewer than 3 values or zero spread are left."""
    if not (x.size < 3 or overall is None or overall == 0):
        return False
    if x.size < 3:
        warn.append(
            f"only {x.size} value(s) are left: no normality test, model or capability index "
            "can be computed from so few (a capability study needs about 100 or more)"
        )
    if overall == 0:
        warn.append(
            "every value used is the same: the spread is zero, so no capability index can "
            "be computed (check the gauge resolution)"
        )
    return True


def _shape(x, rescale, result_kw, warn, shared=None):
    """Step 4: normality tests and probability plot (into ``result_kw``); returns the
    Anderson-Darling result and phase I's last model round when it is for exactly ``x``
    (``shared``: the order check's sort, a :class:`_SharedSort`)."""
    ordered = shared.ordered(x) if shared is not None else None
    # the model phase I settled on for exactly these values (its last round), when there is one
    last = getattr(rescale, "last", None)
    reuse = (
        last is not None and last["values"].shape == x.shape and np.array_equal(last["values"], x)
    )
    ad = last["ad"] if reuse else normality_module.anderson_darling(x, ordered=ordered)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # scipy: p-value may be inaccurate, N > 5000
        sw = normality_module.shapiro_wilk(x, ordered=ordered)
    if x.size > LARGE_SAMPLE:
        warn.append(
            f"{x.size} values: the Shapiro-Wilk p-value is not reliable above {LARGE_SAMPLE} "
            "values (scipy's note); read Anderson-Darling instead. The probability plot is "
            "drawn without its confidence band."
        )
    if x.size > LARGE_SAMPLE:  # drawn when a view or report asks for it (3 lists of n floats)
        pplot = _LazyProbabilityPlot(x)
    else:
        pplot = normality_module.probability_plot(x, band="beta_pointwise")
    normality = {"anderson_darling": ad, "shapiro_wilk": sw}
    result_kw.update(normality=normality, probability_plot=pplot)
    return ad, (last if reuse else None)


def _fit_capability(x, kept_labels, stat_chart, spec, requested, ad, last, options, level, warn):
    """Step 5: the model (phase I's last round, else chosen here) and the capability under it."""
    if last is not None:
        choice, ranking, notes = last["choice"], last["ranking"], list(last["notes"])
    else:
        choice, ranking, notes = _choose_model(
            x, requested, ad, spec.lsl, spec.usl, rank=bool(options.rank_models)
        )
    warn.extend(notes)
    df_within = _df_within(stat_chart)
    if choice.transform is not None and options.transform_indices == "percentile":
        cap = capability(
            x,
            lsl=spec.lsl,
            usl=spec.usl,
            target=spec.target,
            model=_TransformedNormal.of(choice, x, (spec.lsl is not None, spec.usl is not None)),
            method="percentile",
            level=level,
            n_boot=options.n_boot,
            random_state=options.random_state,
        )
    elif choice.transform is not None:
        cap = _transformed_capability(
            x,
            kept_labels,
            stat_chart,
            choice,
            lsl=spec.lsl,
            usl=spec.usl,
            target=spec.target,
            level=level,
            df_within=df_within,
        )
    else:
        within = None if stat_chart.within_sigma is None else float(stat_chart.within_sigma)
        cap = capability(
            x,
            lsl=spec.lsl,
            usl=spec.usl,
            target=spec.target,
            within_sigma=within,
            df_within=df_within,
            model=choice.fitted,
            level=level,
            n_boot=options.n_boot,
            random_state=options.random_state,
        )
    return choice, ranking, cap


def _judged_index(cap, choice, index, warn) -> str:
    """The index the verdict judges: Ppk / Pp in place of a Cpk / Cp the model does not give."""
    if (
        getattr(cap, index) is None
        and index in ("cpk", "cp")
        and (choice.fitted is not None or cap.method != "normal")
    ):
        judged_index = {"cpk": "ppk", "cp": "pp"}[index]
        warn.append(
            f"{index.capitalize()} is not defined for the fitted {choice.label} model; the "
            f"verdict uses {judged_index.capitalize()} by the percentile method"
        )
        return judged_index
    return index


def _verdict_and_findings(
    x,
    cap,
    chart,
    p1,
    spec,
    choice,
    crit,
    judged_index,
    kept_keys,
    kept_rows,
    withheld,
    band,
    time_readings,
):
    """Step 6: the verdict (judged on the ISO 22514-2 class's own index where the location or
    spread moves; withheld by open signals or other reasons, joined by a tolerance interval
    criterion), the findings list, the interval block, the time model and its findings.

    ``time_readings`` are the readings and labels of every reading but the recorded removals
    (an automatic phase I would trim a trend as special causes; studykit/time_model.py)."""
    from studykit.time_model import time_model_verdict

    verdict = judge(cap, index=judged_index, threshold=crit["threshold"], basis=crit["basis"])
    time_model, time_findings, verdict = time_model_verdict(*time_readings, spec, verdict, cap)
    judged_index = verdict.index
    findings = list(
        diagnose(
            cap,
            n_subgroups=int(chart.n_subgroups) if chart.subgroup_size else None,
            threshold=crit["threshold"],
            index=judged_index,
            band_decides=band is not None,
        )
    )
    if kept_keys:
        finding, verdict = _signals_with_kept(chart, verdict, kept_keys, kept_rows, p1.chance)
        findings[:0] = finding
    elif chart.signals:
        by_class, explained, beyond = _explained_by_class(chart, time_model, time_readings)
        if not explained:
            finding, verdict = _not_in_control(chart, verdict, p1.chance)
            findings.insert(0, finding)
        if by_class is not None:
            findings.insert(0 if explained else 1, by_class)
            if not explained and verdict is not None:  # say which signals are left
                verdict = replace(
                    verdict,
                    text=verdict.text
                    + f" The {len(beyond['location'])} subgroup mean(s) beyond the limits lie "
                    f"within those of the time-dependent model {time_model.cls}; the "
                    f"{names.chart_part_label(chart.kind, 'dispersion')}'s point(s) at "
                    f"subgroup(s) {', '.join(beyond['dispersion'])} are left to explain.",
                )
    if withheld:
        verdict = _withhold(verdict, withheld)
        findings[:0] = list(withheld)
    interval = None
    if "interval_coverage" in crit:  # the tolerance-interval criterion, beside the index
        from studykit import intervals

        ti = intervals.criterion_interval(
            x,
            lsl=spec.lsl,
            usl=spec.usl,
            model_name=choice.name,
            coverage=crit["interval_coverage"],
            confidence=crit["interval_confidence"],
        )
        verdict = intervals.judge_with_interval(verdict, ti)
        interval = intervals.interval_block(ti)
    return verdict, findings, interval, time_model, time_findings


def _explained_by_class(chart, time_model, time_readings):
    """``(finding or None, explained, beyond)``: whether the time-dependent class explains every
    point beyond the control limits (studykit/time_model.py); ``beyond`` holds the subgroup
    labels of the points beyond the limits per chart part."""
    from studykit.time_model import signals_explained

    if time_model is None or time_model.cls not in ("C1", "C3", "C4"):
        return None, False, {}
    beyond = {}
    for part, series in (("location", chart.location), ("dispersion", chart.dispersion)):
        labels = []
        for sig in series.signals if series is not None else ():
            if sig.rule == "beyond_limits":
                labels += _signal_labels(chart, sig)
        beyond[part] = list(dict.fromkeys(labels))
    finding, explained = signals_explained(
        time_model,
        *time_readings,
        beyond["location"],
        beyond["dispersion"],
        names.chart_part_label(chart.kind, "dispersion"),
    )
    return finding, explained, beyond


def _gauge_findings(gauge, result_kw, stat_chart, spec, level, choice, findings):
    """The gauge finding and the measurement-error block (its warnings join ``findings``)."""
    if gauge is not None:
        findings.append(_gauge_finding(gauge))
    measurement_error = _measurement_error(
        gauge,
        mean=result_kw["mean"],
        within=result_kw["within_sigma"],
        df_within=_df_within(stat_chart),
        overall=result_kw["overall_sigma"],
        n=result_kw["n"],
        spec=spec,
        level=level,
        model=choice.name,
    )
    if measurement_error is not None and measurement_error["warnings"]:
        findings.append(
            Finding(
                code="gauge_error_large",
                severity="warning",
                text=" ".join(measurement_error["warnings"]),
            )
        )
    return measurement_error


def _plan(verdict, judged_index, crit, level):
    """Parts needed to demonstrate the requirement, when the estimate passes but the bound not."""
    if (
        verdict.estimate is not None
        and verdict.meets is False
        and judged_index in ("cp", "cpk", "pp", "ppk")
        and verdict.estimate > crit["threshold"]
    ):
        try:
            return planning_module.parts_needed(
                verdict.estimate, crit["threshold"], index=judged_index, level=level
            )
        except StudyInputError:
            return None
    return None


def _signal_summary(chart: ControlChart) -> str:
    parts = []
    for name, series in (("location", chart.location), ("dispersion", chart.dispersion)):
        if series is None:
            continue
        for sig in series.signals:
            labels = [str(_label(chart.labels[int(p)])) for p in sig.triggers or (sig.trigger,)]
            parts.append(
                f"{names.rule_label(sig.rule)} on the "
                f"{names.chart_part_label(chart.kind, name)} at subgroup(s) "
                f"{', '.join(labels[:6])}" + (" ..." if len(labels) > 6 else "")
            )
    return "; ".join(parts[:5]) + (f"; and {len(parts) - 5} more" if len(parts) > 5 else "")


def _chance_signals(chart: ControlChart, verdict, beyond, chance: Mapping):
    """Points beyond the 3-sigma limits of a long chart that are as many as a stable process
    gives by chance and none beyond the removal limits (``studykit.stats.chance``): reported
    with the expected count, not treated as special causes."""
    n = len(chart.signals)
    parts = []
    for name, c in chance.items():
        if c.beyond_limits:
            parts.append(
                f"{c.beyond_limits} on the {name} chart of {c.points} points, about "
                f"{c.expected:.1f} expected by chance (P(at least that many) = "
                f"{c.p_value:.2g}; its removal limits are crossed by a stable process "
                f"with probability {c.fap:.1%} over the whole chart)"
            )
    others = n - len(beyond)
    finding = Finding(
        code="chance_signals",
        severity="info",
        text=(
            f"{len(beyond)} point(s) lie beyond the 3-sigma control limits of the final chart: "
            + "; ".join(parts)
            + ". None lies beyond the removal limits and no count is more "
            "than chance gives: they are not treated as special causes and stay in the "
            "analysis."
            + (
                f" The chart also has {others} run-rule signal(s); with every run rule on, a "
                "long stable series raises such signals now and then."
                if others
                else ""
            )
        ),
    )
    if verdict is None:
        return finding, None
    return finding, replace(
        verdict,
        text=verdict.text + f" Read it with the {n} signal(s) on the final chart in "
        f"mind ({len(beyond)} beyond the control limits, as many "
        "as chance gives; see the findings).",
    )


def _not_in_control(chart: ControlChart, verdict, chance: Mapping | None = None):
    """What the signals left on the final chart mean for the verdict.

    A point still beyond the control limits is an unexplained special cause: the capability is
    then not judged (``meets`` None; the numbers stay, for information). Other run-rule signals
    (runs, trends, zone patterns) give a warning finding and a note in the verdict text but do
    not withhold it: with every Nelson test on, in-control data raise such a signal now and then
    (each rule has its own false-alarm rate), so the engineer weighs them.
    """
    n = len(chart.signals)
    beyond = [s for s in chart.signals if s.rule == "beyond_limits"]
    if beyond and chance and not any(c.unexplained for c in chance.values()):
        return _chance_signals(chart, verdict, beyond, chance)
    where = _signal_summary(chart)
    finding = Finding(
        code="not_in_control" if beyond else "run_rule_signals",
        severity="warning",
        text=(
            f"The process is not shown to be in statistical control: the final chart has {n} "
            f"signal(s) ({where}). Capability indices describe a stable process only; find "
            "the special causes and record each removal with its reason, or record why the "
            "signals are not special causes, before relying on the indices."
        ),
    )
    if verdict is None:
        return finding, None
    if not beyond:
        return finding, replace(
            verdict,
            text=verdict.text + f" Read it with the {n} run-rule signal(s) on the final "
            "chart in mind (see the findings).",
        )
    est = "-" if verdict.estimate is None else f"{verdict.estimate:.2f}"
    low = "-" if verdict.lower_bound is None else f"{verdict.lower_bound:.2f}"
    name = _PRETTY_INDEX.get(verdict.index, verdict.index)
    text = (
        f"No verdict: {len(beyond)} point(s) still lie beyond the control limits of the "
        f"final chart, so the process is not shown to be in statistical control. For "
        f"information only, {name} would be {est} with lower {verdict.level:.0%} bound {low} "
        f"against the required {verdict.threshold:g}."
    )
    return finding, replace(verdict, meets=None, text=text)


def _signal_labels(chart: ControlChart, sig) -> list[str]:
    return [str(_label(chart.labels[int(p)])) for p in sig.points]


def _kept_rows(chart: ControlChart, kept: Mapping | None):
    """The kept-signal decisions as rows for the result, each with ``on_chart`` (a signal of the
    final chart is covered by it), and the set of keys ``(label, rule)`` in force."""
    if not kept:
        return (), set()
    covered = set()
    for series in (chart.location, chart.dispersion):
        if series is None:
            continue
        for sig in series.signals:
            for lab in _signal_labels(chart, sig):
                covered.add((lab, sig.rule))
    rows = []
    for (label, rule), info in sorted(
        kept.items(), key=lambda kv: (_label_sort(kv[0][0]), kv[0][1])
    ):
        info = dict(info or {})
        rows.append(
            {
                "subgroup": str(label),
                "rule": str(rule),
                "reason": str(info.get("reason", "")),
                "who": str(info.get("who", "")),
                "when": str(info.get("when", "")),
                "origin": str(info.get("origin", "person")),
                "on_chart": (str(label), str(rule)) in covered,
            }
        )
    return tuple(rows), {(r["subgroup"], r["rule"]) for r in rows}


def _label_sort(label: str):
    try:
        return (0, float(label), label)
    except ValueError:
        return (1, 0.0, label)


def _signals_with_kept(chart: ControlChart, verdict, kept_keys, kept_rows, chance=None):
    """Findings and verdict when some signals are kept with a reason.

    A signal is reviewed when a keep decision names its rule at one of the subgroups of its
    pattern. Reviewed signals are listed with their reasons (an ``info`` finding) and do not
    withhold the verdict; the signals still open are judged as in :func:`_not_in_control`.
    """
    open_loc, open_disp, reviewed = [], [], []
    for series, bucket in ((chart.location, open_loc), (chart.dispersion, open_disp)):
        if series is None:
            continue
        for sig in series.signals:
            labels = _signal_labels(chart, sig)
            if any((lab, sig.rule) in kept_keys for lab in labels):
                reviewed.append(sig)
            else:
                bucket.append(sig)
    findings = []
    if open_loc or open_disp:
        open_chart = replace(
            chart,
            location=None
            if chart.location is None
            else replace(chart.location, signals=tuple(open_loc)),
            dispersion=None
            if chart.dispersion is None
            else replace(chart.dispersion, signals=tuple(open_disp)),
        )
        finding, verdict = _not_in_control(open_chart, verdict, chance)
        findings.append(finding)
    on_chart = [r for r in kept_rows if r["on_chart"]]
    if on_chart:
        listed = "; ".join(
            f"{r['rule']} at subgroup {r['subgroup']} ({r['reason']}, {r['who'] or 'unknown'})"
            for r in on_chart[:8]
        )
        more = f"; and {len(on_chart) - 8} more" if len(on_chart) > 8 else ""
        findings.append(
            Finding(
                code="signals_kept",
                severity="info",
                text=(
                    f"{len(reviewed)} signal(s) on the final chart were reviewed and kept with a "
                    f"recorded reason (not a special cause, or a known common cause): {listed}"
                    f"{more}. The subgroups stay in the analysis."
                ),
            )
        )
        if verdict is not None and not (open_loc or open_disp):
            verdict = replace(
                verdict,
                text=verdict.text
                + (
                    f" {len(reviewed)} signal(s) on the final chart were reviewed and kept with a "
                    "reason (see the findings)."
                ),
            )
    return findings, verdict


_PRETTY_INDEX = names.INDEX_LABELS

#: Finding codes that withhold the verdict besides ``order_*`` (see ``_withheld_findings``).
_WITHHOLDING_CODES = ("heavy_auto_removal", "too_few_after_removal")


def _check_counts(data, values, sizes, kind):
    """Counts (and sizes) of an attribute chart: whole, non-negative, count <= size for p/np."""
    rows = getattr(data, "rows", None)
    name = data.name

    def row_of(i):
        return None if rows is None else int(rows[i])

    for i, v in enumerate(values):
        if np.isnan(v):
            continue
        if v < 0 or v != np.floor(v):
            raise AnalysisError(
                f"'{_fmt_num(v)}' is not a count: a {kind} chart needs whole numbers of defectives "
                "or defects, 0 or more; check that this is the count column",
                row=row_of(i),
                column=name,
                value=_fmt_num(v),
            )
        if sizes is None:
            continue
        n = sizes[i]
        if np.isnan(n):
            continue
        if n <= 0:
            raise AnalysisError(
                f"the subgroup size is '{_fmt_num(n)}'; sizes must be greater than 0",
                row=row_of(i),
                column="size column",
                value=_fmt_num(n),
            )
        if kind in ("p", "np") and v > n:
            raise AnalysisError(
                f"{_fmt_num(v)} defectives in a subgroup of {_fmt_num(n)}: a count cannot exceed "
                "its subgroup size; check the count and size columns",
                row=row_of(i),
                column=name,
                value=_fmt_num(v),
            )


def _fmt_num(v) -> str:
    v = float(v)
    return str(int(v)) if v.is_integer() else f"{v:g}"


#: Marker for "the study was searched for a gauge study and none is attached".
NO_GAUGE: Mapping = {"status": "not_checked"}


def _gauge_finding(gauge: Mapping):
    """A plain-word finding about the gauge study behind a characteristic."""
    verdict = gauge.get("verdict") if isinstance(gauge.get("verdict"), Mapping) else {}
    status = verdict.get("status", gauge.get("status"))
    message = verdict.get("message", "")
    if status == "not_checked":
        return Finding(
            code="gauge_not_checked",
            severity="warning",
            text="No gauge study is attached for this characteristic: the measurement system "
            "was not checked, so part of the spread may be measurement error.",
        )
    if status in ("unacceptable", "not_acceptable", "fail", "failed"):
        return Finding(
            code="gauge_failed",
            severity="warning",
            text="The gauge study for this characteristic failed: " + message,
        )
    if status in ("conditional", "conditionally_acceptable", "marginal"):
        return Finding(
            code="gauge_conditional",
            severity="caution",
            text="The gauge study for this characteristic is only conditionally "
            "acceptable: " + message,
        )
    return Finding(
        code="gauge_checked",
        severity="info",
        text="Gauge study for this characteristic: " + message,
    )


def _measurement_error(gauge, *, mean, within, df_within, overall, n, spec, level, model):
    """The ``measurement_error`` block (observed vs process-only indices) or None.

    Given only when ``gauge`` is a stored gauge R&R payload with a total gauge R&R sigma; built
    by :func:`studykit.stats.measurement_error.remove_gauge_variance` at the study's level.
    """
    from studykit.stats import measurement_error as me_module

    found = me_module.gauge_sigma_from_stored(gauge) if gauge is not None else None
    if found is None:
        return None
    try:
        res = me_module.remove_gauge_variance(
            gauge_sigma=found[0],
            gauge_df=found[1],
            mean=mean,
            lsl=spec.lsl,
            usl=spec.usl,
            within_sigma=within,
            within_df=df_within,
            overall_sigma=overall,
            n=n,
            confidence=level,
        )
    except StudyInputError:
        return None
    out = res.to_dict()
    out["model_note"] = (
        None
        if model == "normal"
        else f"The study's indices use the {model} model; the observed and "
        "process-only indices here are normal-theory figures from the sigmas."
    )
    return out


def gauge_results(study_file) -> dict:
    """Latest stored gauge R&R payload per characteristic of a study file (kind "gauge_rr")."""
    out: dict = {}
    for r in study_file.results(names.GAUGE_RR_KIND):
        if r.characteristic:
            out[r.characteristic] = r.payload
    return out


def _model_band(x, spec, ranking, ad_normal, index, crit, cap, chosen):
    """The judged index under every model the data do not reject (ISO 22514-2 percentiles),
    on the verdict's basis: the estimates, or (basis ``lower_bound``) the lower bounds.

    A model counts as "not rejected" when its Anderson-Darling p-value is at least
    :data:`NORMALITY_ALPHA`; a model for which no published p-value exists counts when its AIC
    is within :data:`BAND_DELTA_AIC` of the best (Burnham & Anderson 2002, "Model Selection and
    Multimodel Inference", section 2.6: Delta AIC <= 2 means substantial support; from memory).
    The lower bounds are those of :func:`_band_bounds`.
    """
    if index not in ("pp", "ppk", "cp", "cpk") or ranking is None:
        return None
    key = {"cp": "pp", "cpk": "ppk"}.get(index, index)
    estimates, normal = _band_estimates(x, spec, ranking, ad_normal, key, cap.level)
    if not estimates:
        return None
    if crit["basis"] == "lower_bound":
        bounds = _band_bounds(estimates, key, cap, chosen, normal)
        if bounds:
            return model_band(bounds, crit["threshold"], basis="lower_bound", level=cap.level)
    return model_band(estimates, crit["threshold"])


def _band_estimates(x, spec, ranking, ad_normal, key, level):
    """Index ``key`` under each model the data do not reject (see :func:`_model_band`), and
    the normal-theory capability (None when the normal model is rejected)."""
    values: dict[str, float] = {}
    aics = [r.aic for r in ranking.rows if r.aic is not None and not r.error and r.converged]
    best_aic = min(aics) if aics else None
    normal = None
    if ad_normal.p_value is not None and ad_normal.p_value >= NORMALITY_ALPHA:
        normal = capability(x, lsl=spec.lsl, usl=spec.usl, level=level)
        if getattr(normal, key) is not None:
            values["normal"] = float(getattr(normal, key))
    for row in ranking.rows:
        if row.id == "normal" or row.error or not row.converged:
            continue
        if row.ad_p_value is not None:
            if row.ad_p_value < NORMALITY_ALPHA:
                continue
        elif best_aic is None or row.aic is None or row.aic - best_aic > BAND_DELTA_AIC:
            continue
        model = ranking.models.get(row.id)
        if model is None:
            continue
        try:
            indices, _ = percentile_indices(model, spec.lsl, spec.usl)
        except StudyInputError:
            continue
        v = indices.get(key)
        if v is not None and math.isfinite(v):
            values[row.id] = float(v)
    return values, normal


def _band_bounds(estimates, key, cap, chosen, normal):
    """Lower confidence bound of index ``key`` under each model of the band.

    * the chosen model: the verdict's own bound (``cap``: Bissell for normal theory, the
      parametric bootstrap for a fitted model);
    * the normal model: its Bissell bound (the normal-theory capability ``normal``);
    * every other fitted model: its estimate less the chosen model's margin below its estimate,
      scaled to the model's estimate, ``T_m - (T_c - L_c) |T_m / T_c|``.

    The last is an approximation, chosen for time: a parametric bootstrap per model (the method
    of the chosen model's bound) costs 50-400 ms for 125 readings and 500 samples per family,
    against a few microseconds; Bissell's margin grows about in proportion to the index
    (A. F. Bissell, Applied Statistics 39 (1990) 331-340), and the chosen model's bootstrap
    margin carries the data's own sampling spread. Models without a bound are left out.
    """
    est_c, lb_c = getattr(cap, key), cap.lower_bound(key)
    scale = None
    if est_c is not None and lb_c is not None and est_c != 0:
        scale = (est_c - lb_c) / abs(est_c)
    bounds: dict[str, float] = {}
    for model, est in estimates.items():
        if model == chosen and lb_c is not None:
            bounds[model] = float(lb_c)
        elif model == "normal":
            lb = normal.lower_bound(key)
            if lb is not None:
                bounds[model] = float(lb)
        elif scale is not None:
            bounds[model] = est - scale * abs(est)
    return bounds


def _attribute_result(common, chart, counts, sizes, labels, warn, level, crit=None, withheld=()):
    kind = chart.kind
    verdict = None
    if kind in ("p", "np"):
        ac = attribute_module.attribute_capability(counts, sizes, level=level)
        crit = crit or _criteria_dict(None)
        # pass/fail data are judged by the exact bound on the defective rate (process Z / 3)
        verdict = attribute_module.attribute_verdict(
            ac,
            threshold=crit["threshold"],
            basis=crit["basis"],
            index=crit["index"],
        )
    else:
        units = sizes if sizes is not None else np.ones_like(counts)
        ac = attribute_module.defects_per_unit(counts, units, level=level)
    nominal = None
    if sizes is not None and np.allclose(sizes, sizes[0]):
        nominal = int(sizes[0]) if float(sizes[0]).is_integer() else None
    findings = list(withheld)
    if common["kept_signals"]:
        kept_keys = {(k["subgroup"], k["rule"]) for k in common["kept_signals"]}
        found, verdict = _signals_with_kept(chart, verdict, kept_keys, common["kept_signals"])
        findings[:0] = found
    elif chart.signals:
        finding, verdict = _not_in_control(chart, verdict)
        findings.insert(0, finding)
    verdict = _withhold(verdict, tuple(withheld))
    return CharacteristicResult(
        **common,
        verdict=verdict,
        findings=tuple(findings),
        n=int(counts.size),
        subgroup_size=nominal,
        mean=float(chart.center_value),
        within_sigma=None,
        overall_sigma=None,
        values=np.asarray(counts, dtype=float),
        labels=labels,
        attribute_capability=ac,
        warnings=tuple(warn),
    )


# ----------------------------------------------------------------------------- studies


def _kept(study, name) -> dict:
    """Signals of ``name`` kept with a reason, as :func:`analyze_characteristic` takes them."""
    kept_signals = getattr(study, "kept_signals", None)
    if kept_signals is None:
        return {}
    return {
        key: {
            "reason": d.reason,
            "who": d.who,
            "when": d.when,
            "origin": d.payload.get("origin", "person"),
        }
        for key, d in kept_signals(name).items()
    }


def recorded_exclusions(study, name) -> dict:
    """Subgroup label -> (reason, who) of the removals recorded in ``study`` for ``name``."""
    return {
        label: (d.reason, d.who or ("auto" if d.automatic else "user"))
        for label, d in study.excluded_subgroups(name).items()
    }


class StudyMeasurements:
    """Every data file of a study, read once; ``get(name)`` looks in the characteristic's file.

    Behaves like :class:`studykit.data.Measurements` for what the analysis needs (``names``,
    ``get``); ``files`` maps each file name to its own Measurements.
    """

    def __init__(self, study, **read_options):
        from studykit.data import read_measurements_bytes

        self.study = study
        self.files = {
            name: read_measurements_bytes(data, name, **read_options) for name, data in study.files
        }

    @property
    def names(self) -> tuple[str, ...]:
        out: list[str] = []
        for m in self.files.values():
            out.extend(n for n in m.names if n not in out)
        return tuple(out)

    def get(self, name: str, *, source: str | None = None):
        """The data of ``name`` from ``source`` (default: the file the study assigns it)."""
        if source is None and name in self.study.characteristics:
            source = self.study.source_of(name)
        if source is not None:
            return self.files[source].get(name)
        for m in self.files.values():
            if name in m.names:
                return m.get(name)
        return next(iter(self.files.values())).get(name)  # raises the reader's clear error


def read_study_measurements(study, **read_options) -> StudyMeasurements:
    """The study's stored data copies read as measurements (all files of the study)."""
    return StudyMeasurements(study, **read_options)


def analyze_study(
    study,
    name: str,
    *,
    measurements=None,
    options: AnalysisOptions | None = None,
    gauge: Mapping | None = None,
) -> CharacteristicResult:
    """Analyse characteristic ``name`` of a saved study with its recorded decisions.

    The chart and model settings recorded in the study (``set_chart``, ``set_model``) apply
    unless ``options`` names others; recorded exclusions are applied with their reasons. Without
    ``options`` no further subgroup is removed automatically (:data:`STUDY_OPTIONS_PHASE1`):
    in a study, a removal is a recorded decision.
    ``gauge`` is the stored gauge R&R payload of this characteristic (see :func:`gauge_results`)
    or :data:`NO_GAUGE` when the study has none, which the findings then say.
    """
    spec = study.characteristic(name)
    measurements = measurements or read_study_measurements(study)
    if options is None:
        options = AnalysisOptions(phase1=STUDY_OPTIONS_PHASE1)
    data = measurements.get(name)
    sizes = None
    if spec.size_column:
        source = study.source_of(name) if isinstance(measurements, StudyMeasurements) else None
        sizes = (
            measurements.get(spec.size_column, source=source)
            if source
            else measurements.get(spec.size_column)
        )
    options = options or AnalysisOptions()
    chart = options.chart or study.chart_for(name)
    model = options.model or study.model_for(name)
    rank = True if options.rank_models is None else options.rank_models  # shown by the views
    options = replace(options, chart=chart, model=model, rank_models=rank)
    return analyze_characteristic(
        data,
        spec,
        criteria=study.criteria_for(name),
        sizes=sizes,
        exclusions=recorded_exclusions(study, name),
        options=options,
        gauge=gauge,
        kept=_kept(study, name),
    )


def analyze_all(
    study,
    *,
    measurements=None,
    options: AnalysisOptions | None = None,
    progress: Callable[[int, int, str], None] | None = None,
    gauges: Mapping | None = None,
) -> StudyResult:
    """Analyse every characteristic of ``study``; one failure never stops the others.

    ``progress(done, total, name)`` is called after each characteristic. ``gauges`` maps
    characteristic names to stored gauge R&R payloads (:func:`gauge_results`); given, a
    characteristic without one gets the finding that its gauge was not checked.
    """
    measurements = measurements or read_study_measurements(study)
    names = study.characteristic_names
    results, errors = {}, {}
    for i, name in enumerate(names):
        try:
            gauge = None if gauges is None else gauges.get(name, NO_GAUGE)
            results[name] = analyze_study(
                study,
                name,
                measurements=measurements,
                options=options,
                gauge=gauge,
            )
        except StudyInputError as exc:
            errors[name] = str(exc)
        if progress is not None:
            progress(i + 1, len(names), name)
    return StudyResult(results=results, errors=errors, digest=study.content_digest())
