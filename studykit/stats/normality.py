"""Normality checks: Anderson-Darling, Shapiro-Wilk and probability-plot coordinates.

All functions take a one-dimensional array of measurements and return frozen results with
``to_dict()``. Nothing here plots: :func:`probability_plot` returns the coordinates a view draws.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import special

from studykit.errors import StudyInputError
from studykit.stats._checks import check_sample
from studykit.stats.lazy import scipy_compiled
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.result import Result

__all__ = [
    "PLOTTING_POSITIONS",
    "AndersonDarlingResult",
    "ShapiroWilkResult",
    "ProbabilityPlot",
    "anderson_darling",
    "ad_p_value_adjusted",
    "shapiro_wilk",
    "plotting_positions",
    "probability_plot",
]

#: Plotting positions p_i = (i - a) / (n + 1 - 2a) for the i-th smallest of n values, by name.
#: ``blom``: a = 3/8, Blom (1958), the usual choice for a normal plot; ``benard``: a = 0.3,
#: Benard & Bos-Levenbach (1953) approximate median ranks; ``hazen``: a = 1/2, Hazen (1914);
#: ``weibull``: a = 0, mean ranks i/(n+1).
PLOTTING_POSITIONS = {"blom": 3.0 / 8.0, "benard": 0.3, "hazen": 0.5, "weibull": 0.0}

#: Names of the confidence bands :func:`probability_plot` can draw.
BANDS = ("beta_pointwise", "ks_simultaneous", None)


def _clean(x, *, name="x", minimum=3):
    """Return a finite float array, or raise an error naming the problem."""
    return check_sample(
        x,
        name=name,
        minimum=minimum,
        before="testing normality",
        needed_for="this test",
        zero_spread="a normality test is meaningless. Check the gauge resolution or the data "
        "import.",
    )


def ad_p_value_adjusted(a2_star: float) -> float:
    """D'Agostino & Stephens (1986) Table 4.9 p-value for the adjusted statistic (mean and
    variance estimated; also used by the normal family's goodness-of-fit)."""
    a = a2_star
    if a >= 153.0:
        # the quadratic has its minimum at a = 5.709 / (2 * 0.0186) = 153.5 (p < 1e-189 there)
        # and would rise again, then overflow: beyond it the p-value is 0 in double precision
        return 0.0
    if a >= 0.6:
        p = math.exp(1.2937 - 5.709 * a + 0.0186 * a * a)
    elif a >= 0.34:
        p = math.exp(0.9177 - 4.279 * a - 1.38 * a * a)
    elif a >= 0.2:
        p = 1.0 - math.exp(-8.318 + 42.796 * a - 59.938 * a * a)
    else:
        p = 1.0 - math.exp(-13.436 + 101.14 * a - 223.73 * a * a)
    return float(min(max(p, 0.0), 1.0))


@dataclass(frozen=True)
class AndersonDarlingResult(Result):
    """Anderson-Darling test of normality (mean and variance estimated).

    Attributes
    ----------
    a2 : float
        Unadjusted statistic A^2.
    a2_star : float
        Small-sample adjusted statistic A*^2 = A^2 (1 + 0.75/n + 2.25/n^2).
    p_value : float
        Approximate p-value from A*^2.
    n : int
        Number of values.
    method : str
        Always ``"anderson_darling"``.
    """

    a2: float
    a2_star: float
    p_value: float
    n: int
    method: str = "anderson_darling"

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "n": self.n,
            "a2": self.a2,
            "a2_star": self.a2_star,
            "p_value": self.p_value,
        }


def anderson_darling(x, *, ordered=None) -> AndersonDarlingResult:
    """Anderson-Darling test that ``x`` comes from a normal distribution.

    Parameters
    ----------
    x : array-like
        At least 3 finite measurements with some spread.
    ordered : ndarray, optional
        ``np.sort(x)`` when the caller has made it (shared with other steps).

    Returns
    -------
    AndersonDarlingResult
        Fields ``a2`` (unadjusted A^2), ``a2_star`` (adjusted), ``p_value``, ``n``, ``method``.

    Notes
    -----
    With z_i = Phi((x_(i) - mean) / s), s the sample standard deviation (n - 1):

        A^2 = -n - (1/n) sum_i (2i - 1) [ln z_i + ln(1 - z_(n+1-i))]

    (the statistic ``scipy.stats.anderson`` reports). A*^2 = A^2 (1 + 0.75/n + 2.25/n^2), and
    the p-value comes from the four-branch formula for the case of estimated mean and variance
    (branches at A*^2 = 0.2, 0.34, 0.6).

    References
    ----------
    R. B. D'Agostino and M. A. Stephens (eds.), *Goodness-of-Fit Techniques*, Marcel Dekker,
    1986, section 4.8 and Table 4.9.

    Examples
    --------
    >>> r = anderson_darling([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])
    >>> round(r.a2, 6), round(r.p_value, 6)
    (0.304858, 0.507862)
    """
    arr = _clean(x)
    arr = ordered if ordered is not None and ordered.shape == arr.shape else np.sort(arr)
    n = arr.size
    z = (arr - arr.mean()) / arr.std(ddof=1)
    # special.log_ndtr(z), log_ndtr(-z): what scipy.stats.norm.logcdf / logsf compute, without
    # their argument checks (noticeable at 10^6 readings)
    logcdf = special.log_ndtr(z)
    logsf = special.log_ndtr(-z)
    logcdf += logsf[::-1]
    logcdf *= np.arange(1.0, 2.0 * n, 2.0)  # the weights 2i - 1, i = 1..n (exact in floats)
    a2 = float(-n - np.sum(logcdf) / n)
    a2_star = a2 * (1.0 + 0.75 / n + 2.25 / n**2)
    return AndersonDarlingResult(
        a2=a2, a2_star=float(a2_star), p_value=ad_p_value_adjusted(a2_star), n=n
    )


@dataclass(frozen=True)
class ShapiroWilkResult(Result):
    """Shapiro-Wilk test of normality.

    Attributes
    ----------
    w : float
        The W statistic.
    p_value : float
        Royston's approximate p-value.
    n : int
        Number of values.
    method : str
        Always ``"shapiro_wilk"``.
    """

    w: float
    p_value: float
    n: int
    method: str = "shapiro_wilk"

    def to_dict(self) -> dict:
        return {"method": self.method, "n": self.n, "w": self.w, "p_value": self.p_value}


def shapiro_wilk(x, *, ordered=None) -> ShapiroWilkResult:
    """Shapiro-Wilk test that ``x`` comes from a normal distribution.

    Parameters
    ----------
    x : array-like
        3 to 5000 finite measurements with some spread (above 5000 the p-value is rough).
    ordered : ndarray, optional
        ``np.sort(x)`` when the caller has made it (copied, not changed).

    Returns
    -------
    ShapiroWilkResult
        Fields ``w``, ``p_value``, ``n``, ``method``.

    Notes
    -----
    W = (sum a_i x_(i))^2 / sum (x_i - mean)^2 with Royston's coefficients a_i, computed by
    ``scipy.stats.shapiro``.

    References
    ----------
    S. S. Shapiro and M. B. Wilk, "An analysis of variance test for normality", Biometrika 52
    (1965) 591-611; J. P. Royston, "Algorithm AS R94", Applied Statistics 44 (1995) 547-551.

    Examples
    --------
    >>> r = shapiro_wilk([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])
    >>> round(r.w, 6)
    0.933652
    """
    arr = _clean(x)
    swilk = getattr(scipy_compiled("stats._ansari_swilk_statistics"), "swilk", None)
    if swilk is not None and arr.dtype == np.float64 and arr.ndim == 1 and arr.size >= 3:
        # the steps of scipy.stats.shapiro around its compiled routine (scipy 1.17,
        # _morestats.py), without importing scipy.stats: same statistic and p-value
        y = (
            np.array(ordered)
            if ordered is not None and ordered.shape == arr.shape
            else np.sort(arr)
        )
        y -= arr[arr.size // 2]  # scipy subtracts this value (a nearby median; gh-15777)
        w, pw, ifault = swilk(y, np.zeros(arr.size // 2, dtype=np.float64), 0)
        if ifault in (0, 2):
            return ShapiroWilkResult(w=float(w), p_value=float(pw), n=arr.size)
    # scipy's function itself: its array-API/NaN wrapper (signature inspection on every call)
    # has nothing to do on a clean 1-D float array; same statistic and p-value
    shapiro = getattr(stats.shapiro, "__wrapped__", stats.shapiro)
    res = shapiro(arr)
    return ShapiroWilkResult(w=float(res[0]), p_value=float(res[1]), n=arr.size)


def plotting_positions(n: int, *, positions: str = "blom") -> np.ndarray:
    """Cumulative probabilities assigned to the ordered values of a sample of size ``n``.

    Parameters
    ----------
    n : int
        Sample size (at least 1).
    positions : {"blom", "benard", "hazen", "weibull"}
        Named rule, see Notes.

    Returns
    -------
    numpy.ndarray
        p_1 < ... < p_n.

    Notes
    -----
    p_i = (i - a) / (n + 1 - 2a) with a = 3/8 (Blom), 0.3 (Benard, median ranks), 1/2 (Hazen),
    0 (Weibull, mean ranks). Same family as ``scipy.stats.mstats.plotting_positions(x, a, a)``.

    References
    ----------
    G. Blom, *Statistical Estimates and Transformed Beta-Variables*, Wiley, 1958;
    A. Benard and E. C. Bos-Levenbach, Statistica 7 (1953) 163-173.

    Examples
    --------
    >>> plotting_positions(4, positions="hazen").tolist()
    [0.125, 0.375, 0.625, 0.875]
    """
    if positions not in PLOTTING_POSITIONS:
        raise StudyInputError(
            f"`positions` ({positions!r}) must be one of {sorted(PLOTTING_POSITIONS)}."
        )
    if int(n) != n or n < 1:
        raise StudyInputError(f"`n` ({n!r}) must be a whole number of at least 1.")
    a = PLOTTING_POSITIONS[positions]
    i = np.arange(1, int(n) + 1, dtype=float)
    return (i - a) / (n + 1 - 2 * a)


@dataclass(frozen=True)
class ProbabilityPlot(Result):
    """Coordinates of a normal probability plot with a confidence band.

    Attributes
    ----------
    values : list of float
        Ordered data (abscissa).
    probabilities : list of float
        Plotting positions p_i.
    normal_scores : list of float
        Phi^-1(p_i) (ordinate on a normal-score axis).
    line_mean, line_sigma : float
        Reference line x = mean + sigma * z (sample mean and standard deviation).
    band_lower, band_upper : list of float or None
        Band in data units at each normal score: where the i-th ordered value may fall under
        normality. ``None`` when no band was asked for.
    outside_band : list of bool or None
        Whether each ordered value falls outside the band.
    positions, band, level, n : inputs
    """

    values: list
    probabilities: list
    normal_scores: list
    line_mean: float
    line_sigma: float
    band_lower: list | None
    band_upper: list | None
    outside_band: list | None
    positions: str
    band: str | None
    level: float
    n: int

    def to_dict(self) -> dict:
        return {
            "n": self.n,
            "positions": self.positions,
            "band": self.band,
            "level": self.level,
            "values": list(self.values),
            "probabilities": list(self.probabilities),
            "normal_scores": list(self.normal_scores),
            "line_mean": self.line_mean,
            "line_sigma": self.line_sigma,
            "band_lower": None if self.band_lower is None else list(self.band_lower),
            "band_upper": None if self.band_upper is None else list(self.band_upper),
            "outside_band": None if self.outside_band is None else list(self.outside_band),
        }


def probability_plot(
    x, *, positions: str = "blom", band: str | None = "beta_pointwise", level: float = 0.95
) -> ProbabilityPlot:
    """Normal probability-plot coordinates with a confidence band.

    Parameters
    ----------
    x : array-like
        At least 3 finite measurements with some spread.
    positions : {"blom", "benard", "hazen", "weibull"}
        Plotting positions (default Blom).
    band : {"beta_pointwise", "ks_simultaneous", None}
        ``beta_pointwise``: for each i, the central ``level`` interval of the i-th uniform order
        statistic, Beta(i, n - i + 1), mapped through the fitted normal; each point separately
        has probability ``level`` of lying inside. ``ks_simultaneous``: p_i -/+ d, d the
        Kolmogorov-Smirnov critical value (``scipy.stats.kstwo``); all points together lie inside
        with probability at least ``level`` for known parameters (conservative when mean and sigma
        are estimated, as here).
    level : float
        Confidence level in (0, 1).

    Returns
    -------
    ProbabilityPlot
        See the class for fields.

    Notes
    -----
    Band in data units: mean + s * Phi^-1(q), q = Beta(i, n-i+1) quantiles at (1-level)/2 and
    (1+level)/2, or q = min/max(p_i -/+ d) clipped to (0, 1).

    References
    ----------
    H. A. David and H. N. Nagaraja, *Order Statistics*, 3rd ed., Wiley, 2003, section 2.2 (order
    statistics of the uniform are beta); NIST/SEMATECH e-Handbook of Statistical Methods,
    section 1.3.5.16 (Kolmogorov-Smirnov test).

    Examples
    --------
    >>> p = probability_plot([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])
    >>> p.n, p.band, any(p.outside_band)
    (10, 'beta_pointwise', False)
    """
    if band not in BANDS:
        raise StudyInputError(f"`band` ({band!r}) must be one of {list(BANDS)}.")
    if not 0 < level < 1:
        raise StudyInputError(f"`level` ({level!r}) must lie strictly between 0 and 1, e.g. 0.95.")
    arr = np.sort(_clean(x))
    n = arr.size
    p = plotting_positions(n, positions=positions)
    z = special.ndtri(p)  # scipy.stats.norm.ppf(p), without its per-call overhead
    mean, sigma = float(arr.mean()), float(arr.std(ddof=1))
    lower = upper = outside = None
    if band is not None:
        qlo, qhi = _band_probabilities(band, p, n, level)
        lo = mean + sigma * special.ndtri(qlo)  # scipy.stats.norm.ppf
        hi = mean + sigma * special.ndtri(qhi)
        out = (arr < lo) | (arr > hi)
        lower, upper, outside = lo.tolist(), hi.tolist(), [bool(v) for v in out]
    return ProbabilityPlot(
        values=arr.tolist(),
        probabilities=p.tolist(),
        normal_scores=z.tolist(),
        line_mean=mean,
        line_sigma=sigma,
        band_lower=lower,
        band_upper=upper,
        outside_band=outside,
        positions=positions,
        band=band,
        level=float(level),
        n=n,
    )


def _band_probabilities(band: str, p: np.ndarray, n: int, level: float) -> tuple:
    """The band's lower and upper probabilities at each plotting position."""
    if band == "beta_pointwise":
        # a function of (n, level) alone: kept for the sizes seen last when n is small (a
        # batch of studies of one size computes the 2n beta quantiles once; same numbers)
        if n <= _BAND_CACHE_N:
            return _beta_band_cached(n, float(level))
        return _beta_band(n, level)
    return _ks_band(p, n, level)


#: Largest n whose beta band is kept between calls (64 sizes of at most 2 x 80 kB).
_BAND_CACHE_N = 5000


def _beta_band(n: int, level: float) -> tuple:
    """Central ``level`` interval of each uniform order statistic Beta(i, n - i + 1)."""
    i = np.arange(1, n + 1)
    lo, hi = (1 - level) / 2, (1 + level) / 2
    beta_ppf = getattr(special._ufuncs, "_beta_ppf", None)  # not public: may be missing
    if beta_ppf is not None and 0.0 < lo < hi < 1.0:
        # the routine scipy.stats.beta.ppf calls for 0 < q < 1 (its _ppf), with its loc 0 and
        # scale 1 applied as it applies them: the same numbers without importing scipy.stats
        return beta_ppf(lo, i, n - i + 1) * 1.0 + 0.0, beta_ppf(hi, i, n - i + 1) * 1.0 + 0.0
    qlo = stats.beta.ppf(lo, i, n - i + 1)
    qhi = stats.beta.ppf(hi, i, n - i + 1)
    return qlo, qhi


@lru_cache(maxsize=64)
def _beta_band_cached(n: int, level: float) -> tuple:
    """:func:`_beta_band` as read-only arrays, computed once per (n, level)."""
    qlo, qhi = _beta_band(n, level)
    qlo.flags.writeable = False
    qhi.flags.writeable = False
    return qlo, qhi


def _ks_band(p: np.ndarray, n: int, level: float) -> tuple:
    """p_i -/+ d, d the Kolmogorov-Smirnov critical value, clipped to (0, 1)."""
    d = float(stats.kstwo.ppf(level, n))
    tiny = 1e-12
    return np.clip(p - d, tiny, 1 - tiny), np.clip(p + d, tiny, 1 - tiny)
