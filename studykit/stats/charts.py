"""Shewhart control charts: limits, zones and run-rule signals for variables and attributes.

Variables charts (X-bar/R, X-bar/S, individuals/moving range) take flat measurements plus one
subgroup label per value; subgroups may differ in size. Attribute charts (p, np, c, u) take one
count and one size per subgroup. Every chart returns a frozen :class:`ControlChart` whose two
:class:`ChartSeries` (location and dispersion) carry one value per plotted point for the point,
centre line, control limits, 2-sigma warning lines and 1-sigma zone lines, so a figure can draw
them without further arithmetic.

Choices (each stated once here and in the result's ``reason`` / ``sigma_method`` fields):

* ``kind="auto"``: one value per subgroup -> individuals/moving range; subgroups of 2 to 8 ->
  X-bar/R; larger, or unequal sizes -> X-bar/S (common practice, no source).
* Default within-subgroup sigma: X-bar/R -> R-bar/d2, X-bar/S -> S-bar/c4, I-MR -> MR-bar/d2(2)
  (Montgomery, Introduction to SQC, ch. 6). ``sigma_method="pooled"`` gives the pooled standard
  deviation divided by c4(d + 1), d = sum(n_i - 1) (ASTM E2587; Montgomery ch. 6, from memory).
* Unequal sizes: the centre is the grand mean of all values; sigma from R is the average of
  R_i / d2(n_i) and from S the average of s_i / c4(n_i) (each unbiased; common practice, no
  source); limits are per subgroup: centre +- 3 sigma / sqrt(n_i) (Montgomery 6.3.2 for the S
  chart). The R and S charts use per-subgroup centres d2(n_i) sigma and c4(n_i) sigma.
* Rules on the dispersion chart (default ``DISPERSION_RULES``): beyond the limits and a run of
  nine on one side of the centre only. Range, standard deviation and moving range are skewed,
  so the zone rules (2 of 3 in zone A, 4 of 5 in zone B, ...) built for a symmetric normal
  statistic give false-alarm rates far from their nominal ones; trend and alternation rules are
  not used on the moving range because neighbouring moving ranges share a value.
* Attribute charts: LCL below zero is set to zero. With no nonconforming item (or only
  nonconforming items) in any subgroup the chart is its centre line (limits equal to it), no
  rule is evaluated and a note says so; the capability is then judged from the exact bound. The over-dispersion check computes Laney's
  sigma_z (moving range of the standardised points / d2(2)); ``laney=True`` widens the limits by
  sigma_z (Laney 2002), ``"auto"`` only suggests it.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import sys
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from studykit.errors import AnalysisError, LargeSubgroupWarning, StudyInputError
from studykit.stats import rules as rules_module
from studykit.stats.constants import MAX_SUBGROUP_SIZE, c4, d2, d3
from studykit.stats.result import Result

__all__ = [
    "AUTO_R_MAX_SIZE",
    "DISPERSION_RULES",
    "VARIABLE_KINDS",
    "ATTRIBUTE_KINDS",
    "ChartSeries",
    "ControlChart",
    "OverdispersionCheck",
    "control_chart",
    "xbar_r_chart",
    "xbar_s_chart",
    "imr_chart",
    "p_chart",
    "np_chart",
    "c_chart",
    "u_chart",
    "evaluate_series",
    "Labels",
    "SubgroupCodes",
    "LISTED_SIGNALS",
    "listed_signals",
    "signal_counts",
]

#: The analysis JSON lists at most this many run-rule signals per chart part (location,
#: dispersion), the first ones in time order; a longer chart gives the exact counts beside the
#: list (:func:`signal_counts`). Our choice: a study of 10^6 individuals gives about 3 * 10^4
#: signals, whose list would dwarf the rest of the JSON and take most of its time.
LISTED_SIGNALS = 1000

VARIABLE_KINDS = ("xbar_r", "xbar_s", "imr")
ATTRIBUTE_KINDS = ("p", "np", "c", "u")
#: Largest subgroup size for which ``kind="auto"`` picks X-bar/R (common practice, no source).
AUTO_R_MAX_SIZE = 8
#: Fewer subgroups than this add a caution to ``ControlChart.warnings`` (no Python warning).
FEW_SUBGROUPS = 20
#: Default rules on the dispersion chart: Nelson 1 (beyond limits) and 2 (nine on one side).
DISPERSION_RULES = "1,2"
#: Laney suggestion thresholds (common practice, no source): sigma_z outside [1/1.5, 1.5] and
#: large subgroups (mean size >= 500 for p/np, mean expected count >= 50 for c/u).
LANEY_RATIO = 1.5
LANEY_MIN_SIZE = 500
LANEY_MIN_COUNT = 50.0

_SIGMA_METHODS = {
    "xbar_r": ("rbar", "sbar", "pooled"),
    "xbar_s": ("sbar", "rbar", "pooled"),
    "imr": ("mrbar",),
}
_DEFAULT_SIGMA = {"xbar_r": "rbar", "xbar_s": "sbar", "imr": "mrbar"}
_SIGMA_TEXT = {
    "rbar": "R-bar / d2",
    "sbar": "S-bar / c4",
    "pooled": "pooled standard deviation / c4(d + 1)",
    "mrbar": "MR-bar / d2(2)",
    "known": "given standard",
    "binomial": "binomial, sqrt(p(1 - p) / n)",
    "poisson": "Poisson, sqrt(u / n)",
    "laney": "Laney sigma_z times the binomial/Poisson sigma",
}


# --------------------------------------------------------------------------- signals


def evaluate_series(series_points, *, center, sigma, lcl, ucl, rules, labels=None) -> tuple:
    """Run the run rules on one plotted series (NaN points are skipped by the rules).

    Positions in the returned signals refer to the full series (NaN points included).
    Delegates to :func:`studykit.stats.rules.evaluate`.

    Parameters
    ----------
    series_points, center, sigma, lcl, ucl : array_like
        Per-point arrays of equal length.
    rules : str or tuple
        Any rule specification that ``rules.evaluate`` accepts.
    labels : sequence, optional
        Subgroup labels used in the signal texts.

    Returns
    -------
    tuple of Signal

    Examples
    --------
    >>> import numpy as np
    >>> sig = evaluate_series(np.array([0.0, 4.0]), center=np.zeros(2), sigma=np.ones(2),
    ...                       lcl=-3 * np.ones(2), ucl=3 * np.ones(2), rules="limits_only")
    >>> [s.trigger for s in sig]
    [1]
    """
    levels = [_scalar_if_constant(a) for a in (center, sigma, lcl, ucl)]
    return rules_module.evaluate(
        np.asarray(series_points, dtype=float),
        center=levels[0],
        sigma=levels[1],
        lcl=levels[2],
        ucl=levels[3],
        rules=rules,
        labels=labels,
    )


def _scalar_if_constant(a):
    """A per-point array whose values are all equal is passed on as one number (faster)."""
    arr = np.asarray(a, dtype=float)
    if arr.ndim == 0 or arr.size == 0:
        return arr
    if arr.ndim == 1 and arr.strides == (0,):  # a broadcast number (see _per_point)
        return float(arr[0])
    first = arr.flat[0]
    if np.all(arr == first):
        return float(first)
    return arr


# --------------------------------------------------------------------------- results


def _json_list(a) -> list:
    arr = np.asarray(a, dtype=float)
    return [float(v) if math.isfinite(v) else None for v in arr.tolist()]


def _json_scalar(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _signal_dict(s) -> dict:
    return s.to_dict()


def _rules_text(rules) -> str:
    if isinstance(rules, str):
        return rules
    return ",".join(str(getattr(r, "id", r)) for r in rules)


@dataclass(frozen=True, eq=False)
class ChartSeries(Result):
    """One plotted series with its per-point reference lines.

    Attributes
    ----------
    name : str
        ``"xbar"``, ``"range"``, ``"stdev"``, ``"individual"``, ``"moving_range"``, ``"p"``,
        ``"np"``, ``"c"`` or ``"u"``.
    points : ndarray
        Plotted statistic per subgroup (NaN where undefined: the first moving range).
    center, lcl, ucl, sigma : ndarray
        Centre line, control limits and standard error of the plotted statistic, per point.
        ``lcl`` is floored at zero where the statistic cannot be negative.
    lower_warning, upper_warning : ndarray
        centre -+ 2 sigma (floored at zero like ``lcl``).
    lower_zone, upper_zone : ndarray
        centre -+ 1 sigma (floored at zero like ``lcl``).
    rules : str
        The rule specification used for ``signals``.
    signals : tuple of Signal
        Output of ``rules.evaluate``; positions index ``points``.
    """

    name: str
    points: np.ndarray
    center: np.ndarray
    lcl: np.ndarray
    ucl: np.ndarray
    sigma: np.ndarray
    lower_warning: np.ndarray
    upper_warning: np.ndarray
    lower_zone: np.ndarray
    upper_zone: np.ndarray
    rules: str
    signals: tuple = ()

    @property
    def signalling(self) -> np.ndarray:
        """Sorted positions that completed at least one signal (every ``trigger`` of each)."""
        return np.unique(np.array([t for s in self.signals for t in s.triggers], dtype=int))

    def to_dict(self) -> dict:
        """JSON-safe dictionary (lists of floats, None for undefined)."""
        out: dict[str, Any] = {"name": self.name, "rules": self.rules}
        for key in (
            "points",
            "center",
            "lcl",
            "ucl",
            "sigma",
            "lower_warning",
            "upper_warning",
            "lower_zone",
            "upper_zone",
        ):
            out[key] = _json_list(getattr(self, key))
        out["signals"] = [_signal_dict(s) for s in self.signals]
        return out


@dataclass(frozen=True)
class OverdispersionCheck(Result):
    """Laney's over-dispersion check for an attribute chart.

    Attributes
    ----------
    sigma_z : float
        Moving range of the standardised points z_i divided by d2(2); 1 when the binomial or
        Poisson model holds.
    mean_size : float
        Average subgroup size.
    mean_count : float
        Average expected count per subgroup (n_i times the centre proportion or rate).
    suggested : bool
        True when sigma_z is outside [1/1.5, 1.5] and the subgroups are large.
    applied : bool
        True when the limits were widened by sigma_z.
    reason : str
        Plain-words explanation.
    """

    sigma_z: float
    mean_size: float
    mean_count: float
    suggested: bool
    applied: bool
    reason: str

    def to_dict(self) -> dict:
        """JSON-safe dictionary."""
        return {
            "sigma_z": _json_scalar(self.sigma_z),
            "mean_size": float(self.mean_size),
            "mean_count": float(self.mean_count),
            "suggested": self.suggested,
            "applied": self.applied,
            "reason": self.reason,
        }


@dataclass(frozen=True, eq=False)
class ControlChart(Result):
    """A computed control chart: both series, the sigma used and the reasons for each choice.

    Attributes
    ----------
    kind : str
        ``"xbar_r"``, ``"xbar_s"``, ``"imr"``, ``"p"``, ``"np"``, ``"c"`` or ``"u"``.
    reason : str
        Why this chart (the ``auto`` rule, or "chosen by the user").
    labels : tuple
        Subgroup labels in time order (first appearance).
    sizes : ndarray of int
        Values (or inspected units) per subgroup.
    location : ChartSeries
        X-bar, individuals, or the attribute statistic.
    dispersion : ChartSeries or None
        R, S or moving range; None for attribute charts.
    within_sigma : float or None
        Within-subgroup standard deviation used for the limits (None for attributes).
    sigma_method : str
        ``"rbar"``, ``"sbar"``, ``"pooled"``, ``"mrbar"``, ``"known"``, ``"binomial"``,
        ``"poisson"`` or ``"laney"``.
    sigma_method_text : str
        The method in words.
    center_value : float
        Grand mean (variables) or centre proportion / rate per unit (attributes).
    subgroup_size : int or None
        Common subgroup size, None when sizes differ.
    n_values, n_subgroups : int
    known_standard : bool
        True when the centre and/or sigma were given rather than estimated.
    standard_mu, standard_sigma : float or None
        The given standard values.
    overdispersion : OverdispersionCheck or None
        Attribute charts only.
    warnings : tuple of str
        Cautions about this chart in plain words.
    options : dict
        The keyword options that rebuild this chart with :func:`control_chart`.
    """

    kind: str
    reason: str
    labels: tuple
    sizes: np.ndarray
    location: ChartSeries
    dispersion: ChartSeries | None
    within_sigma: float | None
    sigma_method: str
    sigma_method_text: str
    center_value: float
    subgroup_size: int | None
    n_values: int
    n_subgroups: int
    known_standard: bool
    standard_mu: float | None
    standard_sigma: float | None
    overdispersion: OverdispersionCheck | None
    warnings: tuple = ()
    options: dict = field(default_factory=dict)

    @property
    def series(self) -> tuple[ChartSeries, ...]:
        """The location series and, for variables charts, the dispersion series."""
        return (self.location,) if self.dispersion is None else (self.location, self.dispersion)

    @functools.cached_property
    def signals(self) -> tuple:
        """Signals of the location chart followed by those of the dispersion chart (joined
        once: a chart of 10^6 points has some 3 * 10^4, and the analysis reads them several
        times; the series are frozen, so the joined tuple never goes stale)."""
        loc, disp = self.location.signals, self.dispersion
        return tuple(loc) + tuple(disp.signals) if disp is not None else tuple(loc)

    @property
    def signalling_labels(self) -> tuple:
        """Labels of subgroups that completed a signal on either chart, in time order."""
        pos = np.unique(np.concatenate([ser.signalling for ser in self.series]))
        return tuple(self.labels[int(i)] for i in pos)

    def to_dict(self) -> dict:
        """JSON-safe dictionary of every field."""
        return {
            "kind": self.kind,
            "reason": self.reason,
            "labels": [plain_label(v) for v in self.labels],
            "sizes": [int(v) for v in self.sizes],
            "location": self.location.to_dict(),
            "dispersion": None if self.dispersion is None else self.dispersion.to_dict(),
            "within_sigma": _json_scalar(self.within_sigma),
            "sigma_method": self.sigma_method,
            "sigma_method_text": self.sigma_method_text,
            "center_value": _json_scalar(self.center_value),
            "subgroup_size": self.subgroup_size,
            "n_values": self.n_values,
            "n_subgroups": self.n_subgroups,
            "known_standard": self.known_standard,
            "standard_mu": _json_scalar(self.standard_mu),
            "standard_sigma": _json_scalar(self.standard_sigma),
            "overdispersion": None
            if self.overdispersion is None
            else self.overdispersion.to_dict(),
            "warnings": list(self.warnings),
            "options": {k: _plain_option(v) for k, v in self.options.items()},
        }


def listed_signals(series: ChartSeries) -> tuple:
    """The signals of ``series`` that the analysis JSON lists (the first :data:`LISTED_SIGNALS`)."""
    return series.signals[:LISTED_SIGNALS]


def signal_counts(chart: ControlChart) -> dict:
    """Exact counts beside a cut signal list: ``{}`` when every signal is listed, otherwise
    ``signals_total``, ``signals_listed`` and ``signals_by_rule`` (rule id -> count, in the
    order the rules first signal).

    >>> from studykit.stats.charts import imr_chart
    >>> signal_counts(imr_chart([1.0, 2.0, 1.5, 1.8, 1.2, 1.7, 1.4, 1.6]))
    {}
    """
    total = sum(len(s.signals) for s in chart.series)
    listed = sum(len(listed_signals(s)) for s in chart.series)
    if listed == total:
        return {}
    by_rule: dict[str, int] = {}
    for s in chart.series:
        for sig in s.signals:
            by_rule[sig.rule] = by_rule.get(sig.rule, 0) + 1
    return {"signals_total": total, "signals_listed": listed, "signals_by_rule": by_rule}


def with_signals(chart: ControlChart, rules, dispersion_rules) -> ControlChart:
    """``chart`` (built with ``evaluate=False``) with the run-rule signals of its series, the
    same that :func:`control_chart` with ``evaluate=True`` gives when its subgroups are given
    (phase I evaluates its display rules on the trial and the final chart only).

    >>> x = [10.0, 10.2, 9.9, 10.1, 14.0, 10.0, 9.8, 10.1, 10.2, 9.9, 10.0, 10.1]
    >>> bare = control_chart(x, list(range(12)), evaluate=False)
    >>> full = control_chart(x, list(range(12)))
    >>> got = with_signals(bare, "nelson", DISPERSION_RULES)
    >>> got.signals == full.signals and bare.signals == ()
    True
    """
    disp = chart.dispersion
    return dataclasses.replace(
        chart,
        location=_series_with_signals(chart.location, rules, chart.labels),
        dispersion=None
        if disp is None
        else _series_with_signals(disp, dispersion_rules, chart.labels),
    )


def _series_with_signals(series: ChartSeries, rules, labels) -> ChartSeries:
    """``series`` with the signals of ``rules`` (none on a chart that is its centre line)."""
    if not np.any(np.asarray(series.sigma) > 0):
        return series  # an attribute chart with no (or only) nonconforming items
    levels = {key: getattr(series, key) for key in ("center", "sigma", "lcl", "ucl")}
    signals = evaluate_series(series.points, rules=rules, labels=labels, **levels)
    return dataclasses.replace(series, signals=signals)


def plain_label(v):
    """A subgroup label as a plain Python value (numpy scalars unwrapped) for JSON and text."""
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, int | float | str | bool) or v is None:
        return v
    return str(v)


def _plain_option(v):
    if isinstance(v, np.generic):
        return v.item()
    if isinstance(v, int | float | str | bool) or v is None:
        return v
    return _rules_text(v) if isinstance(v, tuple | list) else str(v)


# --------------------------------------------------------------------------- helpers


def _series(
    name,
    points,
    center,
    sigma,
    *,
    floor_zero,
    lcl=None,
    ucl=None,
    rules,
    evaluate=True,
    labels=None,
):
    n = points.shape[0]
    if lcl is not None:
        lcl = _per_point(lcl, n)
    if ucl is not None:
        ucl = _per_point(ucl, n)
    if _one_value(center) and _one_value(sigma):
        # one number per line: read-only rows of one (8, n) view (no memory per point; one
        # view instead of eight broadcasts, which cost more than the arithmetic on 125 points)
        rows = _constant_lines(center, sigma, n, floor_zero)
        center, sigma = rows[0], rows[1]
        if lcl is None:
            lcl = rows[2]
        if ucl is None:
            ucl = rows[3]
        warn_lo, warn_hi, zone_lo, zone_hi = rows[4], rows[5], rows[6], rows[7]
    else:
        center = _per_point(center, n)
        sigma = _per_point(sigma, n)

        def line(k):
            v = center + k * sigma
            return np.maximum(v, 0.0) if floor_zero else v

        if lcl is None:
            lcl = line(-3.0)
        if ucl is None:
            ucl = line(3.0)
        warn_lo, warn_hi, zone_lo, zone_hi = line(-2.0), line(2.0), line(-1.0), line(1.0)
    signals = ()
    if evaluate:
        signals = evaluate_series(
            points, center=center, sigma=sigma, lcl=lcl, ucl=ucl, rules=rules, labels=labels
        )
    return ChartSeries(
        name=name,
        points=points,
        center=center,
        lcl=lcl,
        ucl=ucl,
        sigma=sigma,
        lower_warning=warn_lo,
        upper_warning=warn_hi,
        lower_zone=zone_lo,
        upper_zone=zone_hi,
        rules=_rules_text(rules),
        signals=signals,
    )


#: Multiples of sigma of the lines after centre and sigma: LCL, UCL, warning and zone lines.
_LINE_STEPS = (-3.0, 3.0, -2.0, 2.0, -1.0, 1.0)


def _one_value(a) -> bool:
    """True when ``a`` is one number (a Python or numpy number, or an array of one element)."""
    if isinstance(a, float | int | np.floating | np.integer):
        return True
    return np.asarray(a).size == 1


def _first(a) -> float:
    """The one number ``a`` holds, as a Python float."""
    if type(a) is float:
        return a
    return float(np.asarray(a, dtype=float).reshape(-1)[0])


def _constant_lines(center, sigma, n: int, floor_zero: bool) -> np.ndarray:
    """Centre, sigma, LCL, UCL, warning and zone lines of a constant series: a read-only
    (8, n) view of 8 numbers whose rows have stride 0 (each line ``center + k * sigma``,
    floored at zero where the statistic cannot be negative)."""
    c, s = _first(center), _first(sigma)
    # Python floats: the same IEEE operations as c + k * s on float64 arrays
    vec = np.array([c, s] + [c + k * s for k in _LINE_STEPS])
    if floor_zero:
        np.maximum(vec[2:], 0.0, out=vec[2:])
    view = np.ndarray((8, n), dtype=float, buffer=vec, strides=(vec.itemsize, 0))
    view.flags.writeable = False
    return view


def _per_point(a, n: int) -> np.ndarray:
    """``a`` as one value per point: a number becomes a read-only view of length n (a chart of
    10^6 points then holds one number per line, not 10^6); an array is copied."""
    arr = np.asarray(a, dtype=float)
    if arr.ndim == 0 or arr.size == 1:
        return np.broadcast_to(arr.reshape(()), (n,))
    if arr.shape == (n,):
        return arr.copy()
    return np.broadcast_to(arr, (n,)).copy()


def _as_float_array(values, *, name):
    try:
        x = np.asarray(values, dtype=float).ravel()
    except (TypeError, ValueError):
        raise StudyInputError(
            f"`{name}` must contain numbers only; convert text such as '1,5' to 1.5 first."
        ) from None
    bad = ~np.isfinite(x)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise StudyInputError(
            f"`{name}` has a missing or non-finite value ({float(x[i])!r}) at position {i}; remove it "
            "or exclude it before charting.",
            value=x[i],
        )
    if x.size == 0:
        raise AnalysisError(f"`{name}` is empty; a control chart needs data.")
    return x


class Labels(Sequence):
    """Subgroup labels kept as one array; an item becomes a plain Python value when read.

    A chart of 10^6 individuals would otherwise hold 10^6 Python objects; this sequence compares
    equal to a tuple or list of the same labels.
    """

    __slots__ = ("_a",)

    def __init__(self, arr):
        self._a = np.asarray(arr)

    def __len__(self) -> int:
        return int(self._a.shape[0])

    def __getitem__(self, i):
        if isinstance(i, slice):
            return Labels(self._a[i])
        return plain_label(self._a[i])

    def __iter__(self):
        return (plain_label(v) for v in self._a.tolist())

    def __eq__(self, other):
        if isinstance(other, tuple | list | Labels):
            return tuple(self) == tuple(other)
        return NotImplemented

    __hash__ = None  # type: ignore[assignment]  # unhashable, like a list

    def __repr__(self) -> str:
        return f"Labels({tuple(self[:6])!r}{' ...' if len(self) > 6 else ''}, n={len(self)})"

    @property
    def array(self) -> np.ndarray:
        """The labels as an array (read-only use)."""
        return self._a

    def take(self, index) -> Labels:
        """The labels at the given positions (or boolean mask)."""
        return Labels(self._a[index])


@dataclass(frozen=True, eq=False)
class SubgroupCodes:
    """Subgroup membership as integer codes: ``codes[i]`` is the subgroup of value i, numbered
    0, 1, ... in order of first appearance, and ``names[j]`` is the label of subgroup j.

    Pass it as ``subgroups`` to :func:`control_chart` or ``phase1`` to skip grouping labels
    (what a study of 10^6 individuals does: the labels are only read for what is shown).
    """

    codes: np.ndarray
    names: np.ndarray

    def __len__(self) -> int:
        return int(self.codes.shape[0])

    @classmethod
    def of(cls, subgroups) -> SubgroupCodes:
        """Codes of any label array (first-appearance order)."""
        if isinstance(subgroups, SubgroupCodes):
            return subgroups
        lab = np.asarray(subgroups)
        # a small array of text or integer labels: numpy below gives pandas' codes and labels
        # without importing pandas (about 28 MB of the workbook's kernel)
        plain = (
            lab.size <= 20_000
            and "pandas" not in sys.modules
            and (
                lab.dtype.kind in "iubUS"
                or (lab.dtype.kind == "O" and all(type(v) is str for v in lab.tolist()))
            )
        )
        if not plain:
            try:
                import pandas as pd

                codes, uniq = pd.factorize(lab, sort=False)
                if lab.dtype.kind in "US" or lab.dtype.kind in "iub":
                    uniq = np.asarray(uniq, dtype=lab.dtype)
                if lab.dtype.kind == "f" or np.any(codes < 0):
                    raise TypeError  # NaN labels / floats: keep numpy's exact grouping
                return cls(np.asarray(codes, dtype=np.int64), np.asarray(uniq))
            except (TypeError, ValueError):
                pass
        uniq, first, inverse = np.unique(lab, return_index=True, return_inverse=True)
        order = np.argsort(first, kind="stable")
        rank = np.empty_like(order)
        rank[order] = np.arange(order.size)
        return cls(rank[inverse.ravel()].astype(np.int64), uniq[order])

    def select(self, mask) -> SubgroupCodes:
        """The codes of the values where ``mask`` is True, renumbered 0, 1, ... (kept order)."""
        if bool(np.all(mask)):
            return self
        if self.names.shape[0] == self.codes.shape[0]:  # one value per subgroup: codes 0..n-1
            names = self.names[mask]
            return SubgroupCodes(np.arange(names.shape[0]), names)
        codes = self.codes[mask]
        present = np.zeros(self.names.shape[0], dtype=bool)
        present[codes] = True
        new = np.cumsum(present) - 1
        return SubgroupCodes(new[codes], self.names[present])


def _group(x, subgroups):
    """Codes 0..k-1 in order of first appearance, labels, sizes."""
    if subgroups is None:
        k = x.size
        return np.arange(k), Labels(np.arange(1, k + 1)), np.ones(k, dtype=np.int64)
    if isinstance(subgroups, SubgroupCodes):
        if subgroups.codes.shape[0] != x.size:
            raise StudyInputError(
                f"`subgroups` has {subgroups.codes.shape[0]} labels but `values` has {x.size} "
                "values; give one subgroup label per value."
            )
        codes = subgroups.codes
        labels = Labels(subgroups.names)
        return codes, labels, np.bincount(codes, minlength=len(labels))
    lab = np.asarray(subgroups)
    if lab.ndim != 1 or lab.shape[0] != x.size:
        raise StudyInputError(
            f"`subgroups` has {lab.size} labels but `values` has {x.size} values; give one "
            "subgroup label per value."
        )
    try:
        uniq, first, inverse = np.unique(lab, return_index=True, return_inverse=True)
        order = np.argsort(first, kind="stable")
        rank = np.empty_like(order)
        rank[order] = np.arange(order.size)
        codes = rank[inverse.ravel()]
        labels = (
            Labels(uniq[order])
            if lab.dtype.kind != "O"
            else tuple(plain_label(v) for v in uniq[order].tolist())
        )
    except TypeError:  # labels of mixed types: group in Python
        seen: dict = {}
        codes = np.array([seen.setdefault(v, len(seen)) for v in lab.tolist()], dtype=np.int64)
        labels = tuple(plain_label(v) for v in seen)
    sizes = np.bincount(codes, minlength=len(labels))
    return codes, labels, sizes


def _subgroup_stats(x, codes, sizes):
    means = np.bincount(codes, weights=x, minlength=sizes.size) / sizes
    order = np.argsort(codes, kind="stable")
    xs = x[order]
    starts = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    ranges = np.maximum.reduceat(xs, starts) - np.minimum.reduceat(xs, starts)
    dev2 = (x - means[codes]) ** 2
    ss = np.bincount(codes, weights=dev2, minlength=sizes.size)
    with np.errstate(invalid="ignore", divide="ignore"):
        sds = np.sqrt(ss / (sizes - 1))
    return means, ranges, sds


def _per_size(func, sizes):
    uniq, inv = np.unique(sizes, return_inverse=True)
    vals = np.array([func(int(n)) for n in uniq])
    return vals[inv.ravel()]


def _as_number(v, name: str) -> float:
    """``v`` as a float, with a clear message when it is not a number."""
    try:
        return float(v)
    except (TypeError, ValueError):
        raise StudyInputError(f"`{name}` ({v!r}) must be a number.") from None


def _check_positive(v, *, name):
    if v is None:
        return None
    v = _as_number(v, name)
    if not math.isfinite(v) or v <= 0:
        raise StudyInputError(f"`{name}` ({v}) must be a positive finite number.")
    return v


def _check_finite(v, *, name):
    if v is None:
        return None
    v = _as_number(v, name)
    if not math.isfinite(v):
        raise StudyInputError(f"`{name}` ({v}) must be a finite number.")
    return v


def _auto_kind(sizes):
    lo, hi = int(sizes.min()), int(sizes.max())
    if hi == 1:
        return "imr", "one value per subgroup: individuals and moving range chart (common practice)"
    if lo != hi:
        return "xbar_s", (
            f"subgroup sizes vary ({lo} to {hi}): X-bar and S chart, whose limits adapt to each "
            "size (common practice)"
        )
    if hi <= AUTO_R_MAX_SIZE:
        return "xbar_r", (
            f"subgroups of {hi} (2 to {AUTO_R_MAX_SIZE}): X-bar and R chart (common practice)"
        )
    return "xbar_s", (
        f"subgroups of {hi} (more than {AUTO_R_MAX_SIZE}): X-bar and S chart, the range wastes "
        "information in large subgroups (common practice)"
    )


def _within_sigma(method, x, sizes, ranges, sds):
    if method == "mrbar":
        mr = np.abs(x[1:] - x[:-1])  # np.diff(x), without its wrapper
        return float(mr.mean()) / d2(2)
    equal = bool(np.all(sizes == sizes[0]))
    if method == "rbar":
        if equal:
            return float(ranges.mean()) / d2(int(sizes[0]))
        return float(np.mean(ranges / _per_size(d2, sizes)))
    if method == "sbar":
        if equal:
            return float(sds.mean()) / c4(int(sizes[0]))
        return float(np.mean(sds / _per_size(c4, sizes)))
    # pooled
    dof = int(np.sum(sizes - 1))
    sp = math.sqrt(float(np.sum((sizes - 1) * sds**2)) / dof)
    return sp / c4(dof + 1)


# --------------------------------------------------------------------------- variables


# long: signature and numpydoc docstring take 77 lines; the body is a sequence of named steps
def control_chart(
    values,
    subgroups=None,
    *,
    kind: str = "auto",
    sizes=None,
    sigma_method: str | None = None,
    mu: float | None = None,
    sigma: float | None = None,
    standard: float | None = None,
    laney="auto",
    rules="nelson",
    dispersion_rules=DISPERSION_RULES,
    evaluate: bool = True,
) -> ControlChart:
    """Compute a Shewhart control chart of any kind.

    Parameters
    ----------
    values : array_like
        Variables charts: the individual measurements, flat, in time order. Attribute charts:
        one count (nonconforming items or nonconformities) per subgroup.
    subgroups : array_like, optional
        Variables charts: one subgroup label per value (None: every value is its own subgroup).
        Attribute charts: one label per count (None: 1, 2, ...).
    kind : {"auto", "xbar_r", "xbar_s", "imr", "p", "np", "c", "u"}
        ``"auto"`` (variables only) picks from the subgroup sizes; see the module notes.
    sizes : array_like, optional
        Attribute charts: subgroup sizes (items inspected, or inspection units for c/u;
        default 1 for c). Ignored for variables charts.
    sigma_method : {"rbar", "sbar", "pooled", "mrbar"}, optional
        Within-subgroup sigma estimator (default per chart: rbar, sbar, mrbar).
    mu, sigma : float, optional
        Known standard for variables charts (either or both).
    standard : float, optional
        Known standard proportion (p, np) or rate per unit (c, u).
    laney : {"auto", True, False} or float
        Attribute charts: ``True`` widens the limits by Laney's sigma_z, a float uses that
        sigma_z (e.g. frozen from phase I), ``"auto"`` computes the check and only suggests.
    rules, dispersion_rules : str or tuple
        Rule specifications passed to ``rules.evaluate`` for the location and dispersion
        series.
    evaluate : bool
        False skips the run rules (``signals`` empty).

    Returns
    -------
    ControlChart
        See :class:`ControlChart` for every field.

    Notes
    -----
    X-bar chart: centre x-double-bar (mean of all values), limits centre +- 3 sigma/sqrt(n_i).
    R chart: centre d2(n_i) sigma, sigma_R = d3(n_i) sigma, LCL floored at 0 (equal sizes:
    R-bar, D3 R-bar, D4 R-bar). S chart: centre c4(n_i) sigma, sigma_S = sigma sqrt(1 - c4^2)
    (equal sizes: S-bar, B3 S-bar, B4 S-bar). Individuals: centre x-bar, limits +- 3 MR-bar/d2(2);
    moving range: centre MR-bar, sigma d3(2) MR-bar / d2(2). p: p-bar = sum d / sum n,
    sigma_i = sqrt(p-bar (1 - p-bar) / n_i); np: centre n_i p-bar; u: u-bar = sum c / sum n,
    sigma_i = sqrt(u-bar / n_i); c: centre n_i u-bar (c-bar for equal units). Laney:
    z_i = (y_i - centre_i) / sigma_i, sigma_z = mean |z_i - z_{i-1}| / d2(2), limits
    centre_i +- 3 sigma_i sigma_z.

    References
    ----------
    Montgomery, *Introduction to Statistical Quality Control*, ch. 6 (variables) and ch. 7
    (attributes). NIST/SEMATECH e-Handbook of Statistical Methods, 6.3.2 and 6.3.3.
    ASTM E2587, Standard Practice for Use of Control Charts in Statistical Process Control.
    D. B. Laney (2002), Improved control charts for attributes, Quality Engineering 14(4),
    531-537.

    Examples
    --------
    >>> x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
    >>> ch = control_chart(x, rules="limits_only")
    >>> ch.kind, round(float(ch.location.ucl[0]), 4), round(float(ch.dispersion.ucl[1]), 4)
    ('imr', 55.8024, 6.1338)
    """
    if kind in ATTRIBUTE_KINDS:
        return _attribute_chart(
            values,
            subgroups,
            kind=kind,
            sizes=sizes,
            standard=standard,
            laney=laney,
            rules=rules,
            evaluate=evaluate,
        )
    _check_variable_kind(kind)
    options = {
        "kind": kind,
        "sigma_method": sigma_method,
        "mu": mu,
        "sigma": sigma,
        "rules": rules,
        "dispersion_rules": dispersion_rules,
    }
    x = _as_float_array(values, name="values")
    mu = _check_finite(mu, name="mu")
    sigma = _check_positive(sigma, name="sigma")
    codes, labels, sizes_arr = _group(x, subgroups)
    sig_labels = None if subgroups is None else labels  # None: the rules number points 1, 2...
    k = sizes_arr.size
    if kind == "auto":
        kind, reason = _auto_kind(sizes_arr)
    else:
        reason = "chosen by the user"
    _check_sizes(kind, sizes_arr, labels)
    method = _sigma_method(kind, sigma_method)
    notes = _size_notes(kind, sizes_arr, mu, sigma)
    if kind == "imr":
        means, ranges, sds = x, None, None
    else:
        means, ranges, sds = _subgroup_stats(x, codes, sizes_arr)
    if sigma is None:
        within = _within_sigma(method, x, sizes_arr, ranges, sds)
        if not within > 0:
            raise AnalysisError(
                "the within-subgroup variation is zero (every subgroup, or every moving range, "
                "shows no spread); limits cannot be set. Check the gauge resolution or the import."
            )
    else:
        within = sigma
        method = "known"
    grand = float(x.mean()) if mu is None else mu
    equal = bool(np.all(sizes_arr == sizes_arr[0]))
    draw = functools.partial(_series, evaluate=evaluate, labels=sig_labels)
    if kind == "imr":
        loc, disp = _imr_series(x, grand, within, method, draw, rules, dispersion_rules)
    else:
        loc = draw("xbar", means, grand, within / np.sqrt(sizes_arr), floor_zero=False, rules=rules)
        disp = _dispersion_series(
            kind, method, equal, ranges, sds, sizes_arr, within, draw, dispersion_rules
        )
    return ControlChart(
        kind=kind,
        reason=reason,
        labels=labels,
        sizes=sizes_arr,
        location=loc,
        dispersion=disp,
        within_sigma=float(within),
        sigma_method=method,
        sigma_method_text=_SIGMA_TEXT[method],
        center_value=float(grand),
        subgroup_size=int(sizes_arr[0]) if equal else None,
        n_values=int(x.size),
        n_subgroups=int(k),
        known_standard=mu is not None or sigma is not None,
        standard_mu=mu,
        standard_sigma=sigma,
        overdispersion=None,
        warnings=tuple(notes),
        options=options,
    )


def _check_variable_kind(kind: str) -> None:
    """Reject a chart kind that is neither "auto" nor a variables chart."""
    if kind != "auto" and kind not in VARIABLE_KINDS:
        raise StudyInputError(
            f"`kind` ({kind!r}) is not a chart we know; use one of 'auto', "
            + ", ".join(repr(k) for k in VARIABLE_KINDS + ATTRIBUTE_KINDS)
            + "."
        )


def _check_sizes(kind: str, sizes_arr: np.ndarray, labels) -> None:
    """Reject subgroup sizes the chart kind cannot take (imr: 1; subgroup charts: 2 to max)."""
    if kind == "imr":
        if sizes_arr.max() > 1:
            bad = labels[int(np.argmax(sizes_arr > 1))]
            raise StudyInputError(
                f"the individuals chart needs one value per subgroup, but subgroup {bad!r} has "
                f"{int(sizes_arr.max())}; use an X-bar/R or X-bar/S chart (xbar-r, xbar-s), or "
                "analyse the values as individuals without subgroups."
            )
        return
    if sizes_arr.min() < 2:
        bad = labels[int(np.argmin(sizes_arr))]
        raise AnalysisError(
            f"subgroup {bad!r} has a single value; {kind} charts need at least 2 values per "
            "subgroup. Merge or exclude it, or use the individuals chart (imr)."
        )
    if sizes_arr.max() > MAX_SUBGROUP_SIZE:
        raise AnalysisError(
            f"the largest subgroup has {int(sizes_arr.max())} values; charts here support up "
            f"to {MAX_SUBGROUP_SIZE} per subgroup. Split the subgroups."
        )


def _sigma_method(kind: str, sigma_method: str | None) -> str:
    """The within-sigma estimator: the kind's default, or the one asked for if it applies."""
    method = _DEFAULT_SIGMA[kind] if sigma_method is None else sigma_method
    if method not in _SIGMA_METHODS[kind]:
        raise StudyInputError(
            f"`sigma_method` ({method!r}) does not apply to the {kind} chart; use one of "
            + ", ".join(repr(m) for m in _SIGMA_METHODS[kind])
            + "."
        )
    return method


def _size_notes(kind: str, sizes_arr: np.ndarray, mu, sigma) -> list[str]:
    """Check there are enough subgroups; note few subgroups and ranges of large subgroups."""
    k = sizes_arr.size
    notes: list[str] = []
    min_groups = 2
    if k < min_groups and sigma is None:
        raise AnalysisError(
            f"only {k} subgroup(s); estimating the within sigma needs at least {min_groups}. "
            "Collect more data or give a known `sigma`."
        )
    if sigma is None and mu is None and k < FEW_SUBGROUPS:
        notes.append(
            f"only {k} subgroups: trial limits from fewer than {FEW_SUBGROUPS} subgroups are "
            "uncertain (Montgomery recommends 20 to 25, from memory)."
        )
    if kind == "xbar_r" and sizes_arr.max() > 10:
        msg = (
            f"subgroups of up to {int(sizes_arr.max())} values on a range chart: the range "
            "uses only two values of each subgroup; the X-bar/S chart is more efficient above 10."
        )
        notes.append(msg)
        warnings.warn(msg, LargeSubgroupWarning, stacklevel=3)  # the caller of control_chart
    return notes


def _imr_series(x, grand, within, method, draw, rules, dispersion_rules) -> tuple:
    """The individuals and moving-range series."""
    loc = draw("individual", x, grand, within, floor_zero=False, rules=rules)
    mr = np.concatenate(([0.0], np.abs(x[1:] - x[:-1])))
    total = mr.sum()  # what np.nanmean sums (the undefined first range as 0), without its copies
    mr[0] = np.nan
    if method == "mrbar":
        mr_center = float(total / (mr.shape[0] - 1))  # exactly MR-bar, as np.nanmean gives it
    else:
        mr_center = d2(2) * within
    mr_sigma = d3(2) * mr_center / d2(2)
    disp = draw("moving_range", mr, mr_center, mr_sigma, floor_zero=True, rules=dispersion_rules)
    return loc, disp


def _dispersion_series(kind, method, equal, ranges, sds, sizes_arr, within, draw, rules):
    """The range or standard-deviation series of a subgroup chart."""
    k = sizes_arr.size
    if kind == "xbar_r":
        if method == "rbar" and equal:
            center = float(ranges.mean()) * np.ones(k)  # exactly R-bar
            s_disp = center * d3(int(sizes_arr[0])) / d2(int(sizes_arr[0]))
        else:
            center = _per_size(d2, sizes_arr) * within
            s_disp = _per_size(d3, sizes_arr) * within
        return draw("range", ranges, center, s_disp, floor_zero=True, rules=rules)
    c4s = _per_size(c4, sizes_arr)
    if method == "sbar" and equal:
        center = float(sds.mean()) * np.ones(k)  # exactly S-bar
        s_disp = center * np.sqrt(1 - c4s**2) / c4s
    else:
        center = c4s * within
        s_disp = within * np.sqrt(1 - c4s**2)
    return draw("stdev", sds, center, s_disp, floor_zero=True, rules=rules)


def xbar_r_chart(values, subgroups, **options) -> ControlChart:
    """X-bar and R chart; see :func:`control_chart` for options and fields.

    Examples
    --------
    >>> ch = xbar_r_chart([1.0, 2.0, 3.0, 2.0, 3.0, 5.0], [1, 1, 1, 2, 2, 2])
    >>> float(ch.dispersion.center[0])
    2.5
    """
    return control_chart(values, subgroups, kind="xbar_r", **options)


def xbar_s_chart(values, subgroups, **options) -> ControlChart:
    """X-bar and S chart; see :func:`control_chart` for options and fields.

    Examples
    --------
    >>> ch = xbar_s_chart([1.0, 2.0, 3.0, 2.0, 3.0, 5.0], [1, 1, 1, 2, 2, 2])
    >>> ch.sigma_method
    'sbar'
    """
    return control_chart(values, subgroups, kind="xbar_s", **options)


def imr_chart(values, labels=None, **options) -> ControlChart:
    """Individuals and moving range chart; see :func:`control_chart`.

    Examples
    --------
    >>> ch = imr_chart([1.0, 2.0, 4.0, 3.0])
    >>> round(ch.within_sigma, 4)
    1.1816
    """
    return control_chart(values, labels, kind="imr", **options)


# --------------------------------------------------------------------------- attributes


def _attribute_chart(counts, labels, *, kind, sizes, standard, laney, rules, evaluate):
    """The p, np, c or u chart (see :func:`control_chart`)."""
    options = {"kind": kind, "standard": standard, "laney": laney, "rules": rules}
    y = _check_counts(counts)
    k = y.size
    n = _attribute_sizes(kind, sizes, y)
    labels_t = _attribute_labels(labels, k)
    binomial = kind in ("p", "np")
    rate, edge = _attribute_rate(kind, y, n, standard, binomial)
    base_sd = np.sqrt(rate * (1 - rate) / n) if binomial else np.sqrt(rate / n)  # per unit
    if kind in ("p", "u"):
        points, center, sd = y / n, np.full(k, rate), base_sd
    else:
        points, center, sd = y, n * rate, n * base_sd
    if edge is not None:
        if laney is True or not (isinstance(laney, bool) or laney == "auto"):
            laney = False  # nothing to widen
        sigma_z = float("nan")
    else:
        z = (points - center) / sd
        sigma_z = float(np.mean(np.abs(np.diff(z))) / d2(2)) if k >= 2 else float("nan")
    check, sz_used = _overdispersion(n, rate, binomial, sigma_z, laney, edge)
    sd_plot = sd * sz_used if check.applied else sd
    notes = []
    if edge is not None:
        notes.append(check.reason)
    if laney == "auto" and check.suggested:
        notes.append(check.reason)
    loc = _series(
        kind,
        points,
        center,
        sd_plot,
        floor_zero=True,
        rules=rules,
        evaluate=evaluate and edge is None,
        labels=None if labels is None else labels_t,
    )
    method = "laney" if check.applied else ("binomial" if binomial else "poisson")
    equal = bool(np.all(n == n[0]))
    return ControlChart(
        kind=kind,
        reason="chosen by the user",
        labels=labels_t,
        sizes=n.astype(np.int64) if np.all(n == np.round(n)) else n,
        location=loc,
        dispersion=None,
        within_sigma=None,
        sigma_method=method,
        sigma_method_text=_SIGMA_TEXT[method],
        center_value=rate,
        subgroup_size=int(n[0]) if equal and float(n[0]).is_integer() else None,
        n_values=int(k),
        n_subgroups=int(k),
        known_standard=standard is not None,
        standard_mu=None if standard is None else float(standard),
        standard_sigma=None,
        overdispersion=check,
        warnings=tuple(notes),
        options=options,
    )


def _check_counts(counts) -> np.ndarray:
    """The counts as floats; each must be a whole number of 0 or more."""
    y = _as_float_array(counts, name="counts")
    if np.any(y < 0) or np.any(y != np.round(y)):
        i = int(np.flatnonzero((y < 0) | (y != np.round(y)))[0])
        raise StudyInputError(
            f"`counts` must be whole numbers of 0 or more; position {i} holds {y[i]!r}.",
            value=y[i],
        )
    return y


def _attribute_sizes(kind: str, sizes, y: np.ndarray) -> np.ndarray:
    """Items (or units) inspected per subgroup: one per count, positive, not below the count."""
    k = y.size
    if sizes is None:
        if kind in ("p", "np"):
            raise StudyInputError(f"the {kind} chart needs `sizes` (items inspected per subgroup).")
        n = np.ones(k)
    else:
        n = _as_float_array(sizes, name="sizes")
        if n.size == 1:
            n = np.full(k, n[0])
        if n.size != k:
            raise StudyInputError(
                f"`sizes` has {n.size} entries but `counts` has {k}; give one size per subgroup."
            )
        if np.any(n <= 0):
            i = int(np.flatnonzero(n <= 0)[0])
            raise StudyInputError(f"`sizes` must be positive; position {i} holds {n[i]!r}.")
    if kind in ("p", "np") and np.any(y > n):
        i = int(np.flatnonzero(y > n)[0])
        raise StudyInputError(
            f"subgroup at position {i} has {int(y[i])} nonconforming items out of {n[i]:g} "
            "inspected; a count cannot exceed its subgroup size."
        )
    return n


def _attribute_labels(labels, k: int) -> tuple:
    """One plain label per count (1, 2, ... when none are given)."""
    if isinstance(labels, SubgroupCodes):
        labels = labels.names[labels.codes]
    if labels is None:
        return tuple(range(1, k + 1))
    labels_t = tuple(plain_label(v) for v in np.asarray(labels).tolist())
    if len(labels_t) != k:
        raise StudyInputError(
            f"`subgroups` has {len(labels_t)} labels but `counts` has {k}; give one label "
            "per count."
        )
    return labels_t


def _attribute_rate(kind: str, y, n, standard, binomial: bool) -> tuple[float, str | None]:
    """The centre rate (estimated, or the known standard) and the edge case: "none" or "all"
    nonconforming (the chart is its centre line), else None."""
    edge = None
    if standard is None:
        rate = float(y.sum() / n.sum())
        if rate <= 0 or (binomial and rate >= 1):
            # zero (or all) nonconforming: the chart is its centre line, nothing can signal
            edge = "none" if rate <= 0 else "all"
    else:
        rate = float(standard)
        if not (rate > 0 and (rate < 1 or not binomial)):
            raise StudyInputError(
                f"`standard` ({standard}) must be a proportion between 0 and 1 for a {kind} "
                "chart, or a positive rate for c and u charts."
            )
    return rate, edge


def _overdispersion(n, rate, binomial, sigma_z, laney, edge) -> tuple[OverdispersionCheck, float]:
    """The over-dispersion check (Laney's sigma_z, whether to widen) and the sigma_z used."""
    mean_size = float(n.mean())
    mean_count = float(np.mean(n * rate))
    large = mean_size >= LANEY_MIN_SIZE if binomial else mean_count >= LANEY_MIN_COUNT
    far = math.isfinite(sigma_z) and (sigma_z > LANEY_RATIO or sigma_z < 1 / LANEY_RATIO)
    if isinstance(laney, bool) or laney == "auto":
        applied = laney is True
        sz_used = sigma_z
    else:
        sz_used = _check_positive(laney, name="laney")
        applied = True
    if applied and not (math.isfinite(sz_used) and sz_used > 0):
        raise AnalysisError(
            f"Laney's sigma_z ({sz_used}) must be positive and needs at least 2 subgroups that "
            "differ; use laney=False for these counts."
        )
    why = _overdispersion_reason(edge, far, large, sigma_z, binomial)
    if applied:
        why += f"; limits widened by sigma_z = {sz_used:.3f}"
    check = OverdispersionCheck(
        sigma_z=sigma_z,
        mean_size=mean_size,
        mean_count=mean_count,
        suggested=bool(far and large),
        applied=applied,
        reason=why,
    )
    return check, sz_used


def _overdispersion_reason(edge, far: bool, large: bool, sigma_z: float, binomial: bool) -> str:
    """The over-dispersion verdict in words."""
    if edge is not None:
        return (
            f"every subgroup has {'no' if edge == 'none' else 'only'} nonconforming "
            f"{'items' if binomial else 'findings'}: the limits coincide with the centre line "
            "and no point can signal; the over-dispersion check does not apply"
        )
    if far and large:
        return (
            f"the points vary {sigma_z:.2f} times as much as the "
            f"{'binomial' if binomial else 'Poisson'} model expects and subgroups are large; "
            "Laney's adjusted limits are advisable"
        )
    if far:
        return (
            f"sigma_z is {sigma_z:.2f}, but subgroups are small, so the model limits are kept "
            "(common practice, no source)"
        )
    return f"sigma_z is {sigma_z:.2f}, close to 1: the {'binomial' if binomial else 'Poisson'} model fits"


def p_chart(counts, sizes, labels=None, **options) -> ControlChart:
    """p chart (proportion nonconforming); see :func:`control_chart`.

    Examples
    --------
    >>> ch = p_chart([5, 10, 8], [50, 50, 50])
    >>> round(ch.center_value, 4)
    0.1533
    """
    return control_chart(counts, labels, kind="p", sizes=sizes, **options)


def np_chart(counts, sizes, labels=None, **options) -> ControlChart:
    """np chart (number nonconforming); see :func:`control_chart`.

    Examples
    --------
    >>> ch = np_chart([5, 10, 8], [50, 50, 50])
    >>> round(float(ch.location.center[0]), 4)
    7.6667
    """
    return control_chart(counts, labels, kind="np", sizes=sizes, **options)


def c_chart(counts, sizes=None, labels=None, **options) -> ControlChart:
    """c chart (nonconformities per inspection unit); see :func:`control_chart`.

    Examples
    --------
    >>> ch = c_chart([16, 14, 18])
    >>> float(ch.location.center[0])
    16.0
    """
    return control_chart(counts, labels, kind="c", sizes=sizes, **options)


def u_chart(counts, sizes, labels=None, **options) -> ControlChart:
    """u chart (nonconformities per unit, varying units); see :func:`control_chart`.

    Examples
    --------
    >>> ch = u_chart([4, 9], [2, 3])
    >>> ch.center_value
    2.6
    """
    return control_chart(counts, labels, kind="u", sizes=sizes, **options)
