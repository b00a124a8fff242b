"""Signals a stable process gives by chance: phase-I removal limits for long charts.

A Shewhart chart with 3-sigma limits has a per-point false-alarm probability p0 (0.27 % on a
normal location chart). Over a phase-I chart of m points the probability of at least one false
alarm is 1 - (1 - p0)^m: 6.5 % for 25 points, 93 % for 1,000 and certain for 10^5, where a
stable series shows about m p0 points beyond its limits. Removing them round after round trims
the tails of an in-control process.

Phase I therefore controls the false-alarm probability of the whole chart rather than of each
point (the false-alarm-probability design of phase-I charts: Chakraborti, Human and Graham
(2009), Phase I statistical process control charts: an overview and some results, Quality
Engineering 21(1), 52-62, sections 2-3; the adjustment of the per-point probability for the
number of points is the Sidak/Bonferroni-type one described there, from memory):

* the chart-wide probability kept is the one the 3-sigma limits give a chart of
  :data:`REFERENCE_POINTS` points (25: the number of subgroups commonly recommended for trial
  limits, Montgomery, Introduction to SQC, ch. 6, from memory), ``FAP = 1 - (1 - p0)^25``;
* a chart of m > 25 points gets the per-point probability ``alpha_m = 1 - (1 - p0)^(25 / m)``
  on each side (Sidak: ``1 - (1 - alpha_m)^m = FAP``); its **removal limits** are the values
  the plotted statistic of a stable normal process exceeds with probability ``alpha_m``. Charts
  of up to 25 points keep their 3-sigma limits as removal limits (nothing changes there);
* tails are exact under normality with the chart's own estimates: the X-bar and individuals
  values are normal; the moving range is |N(0, 2 sigma^2)|; the range of n normal values has
  the distribution P(R <= r) = n * integral phi(x) [Phi(x + r) - Phi(x)]^(n-1) dx (Montgomery,
  Appendix VI, the definition of d2 and d3); (n - 1) s^2 / sigma^2 is chi-square with n - 1
  degrees of freedom;
* a **count test** compares the number of points beyond the 3-sigma limits with the number a
  stable process of m points gives by chance (sum of the per-point p0): the count is "more than
  chance" when P(X >= seen) < FAP for X Poisson with that mean (the Poisson approximation of a
  sum of rare independent events; neighbouring moving ranges share a value, so for the moving
  range it is approximate).

Attribute charts (p, np, c, u) are not adjusted: their limits rest on a normal approximation
whose tail is not exact, and the studies here are short.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from studykit.stats.constants import c4, d2
from studykit.stats.lazy import brentq, quad_whole_line  # scipy's compiled routines, no import

__all__ = ["REFERENCE_POINTS", "SeriesChance", "series_chance"]

#: Chart length whose chart-wide false-alarm probability (with 3-sigma limits) phase I keeps
#: for longer charts (Montgomery recommends 20 to 25 subgroups for trial limits, from memory).
REFERENCE_POINTS = 25

_ADJUSTED = ("individual", "xbar", "moving_range", "range", "stdev")


@dataclass(frozen=True, eq=False)
class SeriesChance:
    """One chart series: its phase-I removal limits and the count of chance signals.

    Attributes
    ----------
    points : int
        Plotted points (the undefined first moving range not counted).
    adjusted : bool
        True when the removal limits are wider than the 3-sigma limits (more than
        :data:`REFERENCE_POINTS` points).
    lower, upper : ndarray
        Removal limits per point (the 3-sigma limits when not adjusted).
    alpha : float
        Per-point probability of a stable point beyond the removal limit on one side (mean over
        the points; the 3-sigma tail when not adjusted).
    fap : float
        Chart-wide false-alarm probability kept (1 - (1 - p0)^25, p0 both sides).
    beyond_limits : int
        Points beyond the 3-sigma control limits.
    expected : float
        Points beyond the 3-sigma limits a stable process of this many points gives by chance.
    p_value : float
        P(X >= beyond_limits) for X Poisson(expected).
    beyond_removal : int
        Points beyond the removal limits.
    """

    points: int
    adjusted: bool
    lower: np.ndarray
    upper: np.ndarray
    alpha: float
    fap: float
    beyond_limits: int
    expected: float
    p_value: float
    beyond_removal: int

    @property
    def more_than_chance(self) -> bool:
        """The count of points beyond the 3-sigma limits is more than chance gives."""
        return self.beyond_limits > 0 and self.p_value < self.fap

    @property
    def unexplained(self) -> bool:
        """Some point is a signal after the adjustment, or there are more than chance gives."""
        return self.beyond_removal > 0 or self.more_than_chance

    def to_dict(self) -> dict:
        """JSON-safe dictionary."""
        return {
            "points": int(self.points),
            "adjusted": bool(self.adjusted),
            "per_point_probability": float(self.alpha),
            "chart_false_alarm_probability": float(self.fap),
            "beyond_limits": int(self.beyond_limits),
            "expected_by_chance": float(self.expected),
            "p_value": float(self.p_value),
            "more_than_chance": bool(self.more_than_chance),
            "beyond_removal_limits": int(self.beyond_removal),
        }


def _range_cdf(w: float, n: int) -> float:
    """P(W <= w) for the range W of n standard normal values."""
    if w <= 0:
        return 0.0

    def f(x):
        return (
            math.exp(-0.5 * x * x)
            / math.sqrt(2 * math.pi)
            * (special.ndtr(x + w) - special.ndtr(x)) ** (n - 1)
        )

    cdf, _ = quad_whole_line(f, epsabs=1e-16, epsrel=1e-13, limit=200)
    return min(1.0, float(n * cdf))


def _unit_tails(name: str, n: int):
    """(upper tail, lower tail, upper quantile, lower quantile) of the plotted statistic of a
    stable normal process in units of the process sigma (location: of its standard error)."""
    if name in ("individual", "xbar"):
        return (
            lambda v: special.ndtr(-v),
            lambda v: special.ndtr(v),
            lambda a: -special.ndtri(a),
            lambda a: special.ndtri(a),
        )
    if name == "moving_range":
        r2 = math.sqrt(2.0)
        return (
            lambda v: 2.0 * special.ndtr(-v / r2) if v > 0 else 1.0,
            lambda v: 0.0,
            lambda a: -r2 * special.ndtri(a / 2.0),
            lambda a: 0.0,
        )
    if name == "stdev":
        k = n - 1
        return (
            lambda v: special.chdtrc(k, k * v * v) if v > 0 else 1.0,
            lambda v: special.chdtr(k, k * v * v) if v > 0 else 0.0,
            lambda a: math.sqrt(special.chdtri(k, a) / k),
            lambda a: math.sqrt(special.chdtri(k, 1.0 - a) / k),
        )

    def up_t(v):
        return 1.0 - _range_cdf(v, n)

    def up_q(a):
        return brentq(lambda w: up_t(w) - a, 0.0, 40.0, xtol=1e-12)

    def low_q(a):
        return brentq(lambda w: _range_cdf(w, n) - a, 0.0, 40.0, xtol=1e-12)

    return (up_t, lambda v: _range_cdf(v, n), up_q, low_q)


def _scale(name: str, center: float, sigma: float, n: int) -> float:
    """The unit the statistic is measured in: its standard error (location) or the process
    sigma (dispersion: centre = d2 sigma, c4 sigma)."""
    if name in ("individual", "xbar"):
        return sigma
    if name in ("moving_range", "range"):
        return center / d2(max(n, 2))
    return center / c4(n)


def series_chance(series, sizes=None, *, reference: int = REFERENCE_POINTS) -> SeriesChance:
    """Removal limits and chance-signal count of one chart series (see the module notes).

    Parameters
    ----------
    series : studykit.stats.charts.ChartSeries
    sizes : array_like, optional
        Values per subgroup (range and standard-deviation charts).
    reference : int
        Chart length whose chart-wide false-alarm probability is kept.
    """
    pts = np.asarray(series.points, dtype=float)
    ok = ~np.isnan(pts)
    m = int(ok.sum())
    every = m == pts.size  # (no copies of 10^6 points when none is missing)

    def used(a):
        return a if every else a[ok]

    lcl, ucl = np.asarray(series.lcl, float), np.asarray(series.ucl, float)
    above = int(np.count_nonzero(used(pts) > used(ucl)))
    below = int(np.count_nonzero(used(pts) < used(lcl)))
    seen = above + below
    if series.name not in _ADJUSTED or m == 0:
        return SeriesChance(
            m, False, lcl, ucl, float("nan"), float("nan"), seen, float("nan"), float("nan"), seen
        )
    uniq, inv = _distinct_points(series, sizes, pts.size)
    k = len(uniq)
    adjusted = m > reference
    lo_v, hi_v, p0_v, alphas, p0s = _limits_per_kind(
        series.name, uniq, inv, lcl, ucl, m, reference, adjusted
    )
    if k == 1:  # one number for every point (read-only views)
        lo_lim, hi_lim = _one_number_rows(lo_v[0], hi_v[0], pts.shape[0])
        expected = float(p0_v[0]) * m
    else:
        lo_lim, hi_lim = lo_v[inv], hi_v[inv]
        expected = float(used(p0_v[inv]).sum())
    p0_mean = _mean(p0s)
    fap = -math.expm1(reference * math.log1p(-p0_mean)) if p0_mean < 1 else 1.0
    p_value = float(special.pdtrc(seen - 1, expected)) if seen > 0 else 1.0
    beyond = int(np.count_nonzero((used(pts) > used(hi_lim)) | (used(pts) < used(lo_lim))))
    return SeriesChance(
        m,
        adjusted,
        lo_lim,
        hi_lim,
        _mean(alphas),
        fap,
        seen,
        expected,
        p_value,
        beyond,
    )


def _mean(values: list[float]) -> float:
    """np.mean of a short list (0 when empty; the one value itself when there is one)."""
    if len(values) == 1:
        return float(values[0])
    return float(np.mean(values)) if values else 0.0


def _one_number_rows(low: float, high: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Two read-only views of length n, each one number (stride 0): the removal limits."""
    vec = np.array([low, high], dtype=float)
    view = np.ndarray((2, n), dtype=float, buffer=vec, strides=(vec.itemsize, 0))
    view.flags.writeable = False
    return view[0], view[1]


def _distinct_points(series, sizes, n_points: int) -> tuple:
    """The distinct (size, centre, standard error) of the points and each point's index
    into them: one computation per distinct point kind (constant in most charts)."""
    center = np.asarray(series.center, float)
    sigma = np.asarray(series.sigma, float)
    one_size = sizes is None or series.name in ("individual", "moving_range")
    n_arr = (
        np.full(1, 2 if series.name == "moving_range" else 1, dtype=np.int64)
        if one_size
        else np.asarray(sizes, dtype=np.int64)
    )
    if (one_size and _constant(center) and _constant(sigma)) or (
        np.all(n_arr == n_arr[0]) and np.all(center == center[0]) and np.all(sigma == sigma[0])
    ):
        return [(float(n_arr[0]), float(center[0]), float(sigma[0]))], np.zeros(
            n_points, dtype=np.int64
        )
    if one_size:
        n_arr = np.broadcast_to(n_arr, center.shape)
    key = np.stack([n_arr.astype(float), center, sigma], axis=1)
    uniq, inv = np.unique(key, axis=0, return_inverse=True)
    return uniq, inv.ravel()


def _constant(a: np.ndarray) -> bool:
    """True for a read-only view of one number (a chart line of stride 0: no test needed)."""
    return a.ndim == 1 and a.shape[0] > 0 and a.strides == (0,)


def _limits_per_kind(name, uniq, inv, lcl, ucl, m: int, reference: int, adjusted: bool):
    """Per distinct point kind: the removal limits, the chance beyond the 3-sigma limits and
    the per-point removal tail (lo_v, hi_v, p0_v, alphas, p0s)."""
    k = len(uniq)
    lo_v, hi_v, p0_v = np.empty(k), np.empty(k), np.zeros(k)
    alphas: list[float] = []
    p0s: list[float] = []
    for j, (n_f, c, s) in enumerate(uniq):
        n = int(n_f)
        first = int(np.argmax(inv == j)) if k > 1 else 0
        u3, l3 = float(ucl[first]), float(lcl[first])
        lo_v[j], hi_v[j] = l3, u3
        unit = _scale(name, c, s, n)
        if not unit > 0:
            continue
        up_t, lo_t, up_q, lo_q = _unit_tails(name, n)
        off = c if name in ("individual", "xbar") else 0.0
        location = name in ("individual", "xbar")
        p_up = float(up_t((u3 - off) / unit))
        p_lo = float(lo_t((l3 - off) / unit)) if location or l3 > 0 else 0.0
        p0_v[j] = p_up + p_lo
        p0s.append(p_up + p_lo)
        if adjusted:
            a_up = -math.expm1(reference / m * math.log1p(-p_up)) if p_up > 0 else 0.0
            a_lo = -math.expm1(reference / m * math.log1p(-p_lo)) if p_lo > 0 else 0.0
            if a_up > 0:
                hi_v[j] = max(u3, off + unit * float(up_q(a_up)))
            if a_lo > 0:
                lo_v[j] = min(l3, off + unit * float(lo_q(a_lo)))
            alphas.append(a_up)
        else:
            alphas.append(p_up)
    return lo_v, hi_v, p0_v, alphas, p0s
