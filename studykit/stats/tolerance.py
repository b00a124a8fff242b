"""Statistical tolerance intervals (ISO 16269-6) and the "P % within specification" criterion.

A (P, C) tolerance interval contains at least the proportion P (the coverage) of the population
with confidence C. Three kinds:

* **normal**: x-bar -/+ k s. The two-sided factor is computed exactly (the integral of Odeh &
  Owen 1980 / ISO 16269-6, solved for k); Howe's and the Wald-Wolfowitz approximations are offered
  and named. The one-sided factor is exact from the noncentral t distribution.
* **distribution-free**: order statistics (x_(r), x_(n-s+1)); the coverage between them follows a
  beta distribution, so the confidence is a binomial sum (Wilks 1941; ISO 16269-6 clause on
  distribution-free intervals).
* **on a fitted model's scale**: the normal interval computed on the log (lognormal) or Box-Cox
  scale and back-transformed. The back-transform is monotone, so the coverage statement carries
  over exactly for a known transformation; an estimated Box-Cox lambda is treated as known (its
  uncertainty is not in the interval; the result says so).

The acceptance criterion "at least P % of parts within specification with C % confidence" is met
when the interval lies within the specification limits (:func:`tolerance_interval` with ``lsl`` /
``usl``). :func:`distribution_free_sample_size` and :func:`normal_sample_size` give the number of
parts the criterion needs.

References
----------
ISO 16269-6:2014, Statistical interpretation of data - Part 6: Determination of statistical
tolerance intervals.
Odeh, R. E. & Owen, D. B. (1980). Tables for Normal Tolerance Limits, Sampling Plans and
Screening. Marcel Dekker.
Howe, W. G. (1969). Two-sided tolerance limits for normal populations - some improvements.
JASA 64, 610-620.
Wald, A. & Wolfowitz, J. (1946). Tolerance limits for a normal distribution. Ann. Math. Statist.
17, 208-215.
Wilks, S. S. (1941). Determination of sample sizes for setting tolerance limits. Ann. Math.
Statist. 12, 91-96.
Meeker, W. Q., Hahn, G. J. & Escobar, L. A. (2017). Statistical Intervals, 2nd ed. Wiley.
NIST/SEMATECH e-Handbook of Statistical Methods, section 7.2.6.3.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import cast

import numpy as np
from scipy import special

from studykit.errors import AnalysisError, SpecError, StudyInputError
from studykit.stats._checks import check_number, check_sample
from studykit.stats.lazy import (
    binom_cdf,
    brentq,
    chi2_isf,
    chi2_pdf,
    chi2_ppf,
    chi2_sf,
    norm_cdf,
    norm_sf,
)
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.result import Result
from studykit.stats.result import json_float as _f

__all__ = [
    "TWO_SIDED_METHODS",
    "MODELS",
    "ToleranceInterval",
    "SampleSizePlan",
    "normal_factor_two_sided",
    "normal_factor_one_sided",
    "two_sided_confidence",
    "distribution_free_confidence",
    "distribution_free_sample_size",
    "normal_pass_probability",
    "normal_sample_size",
    "tolerance_interval",
]

#: Ways to get the two-sided normal factor: the exact integral and two named approximations.
TWO_SIDED_METHODS = ("exact", "howe", "wald_wolfowitz")
#: Interval kinds of :func:`tolerance_interval`.
MODELS = ("normal", "lognormal", "boxcox", "distribution_free")

# Gauss-Legendre nodes for the exact two-sided integral over t = sqrt(n) x in [0, T_MAX]; the
# weight exp(-t^2/2) is below 1e-21 beyond T_MAX = 10.
_T_MAX = 10.0


@functools.cache
def _t_rule() -> tuple[np.ndarray, np.ndarray]:
    """Nodes t and weights of that rule, made on first use (an eigenvalue problem: not at
    import, which most runs pay without needing it)."""
    nodes, weights = np.polynomial.legendre.leggauss(256)
    t = 0.5 * _T_MAX * (nodes + 1.0)
    return t, 0.5 * _T_MAX * weights * np.sqrt(2.0 / np.pi) * np.exp(-0.5 * t**2)


#: Largest sample size searched by the sample-size functions.
MAX_PARTS = 100_000


def _level(value, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise StudyInputError(
            f"`{name}` ({value!r}) must be a number between 0 and 1, e.g. 0.95."
        ) from None
    if not 0.0 < v < 1.0:
        raise StudyInputError(
            f"`{name}` ({value!r}) must be between 0 and 1 (exclusive), e.g. 0.95 for 95 %."
        )
    return v


def _size(n, name: str = "n", minimum: int = 2) -> int:
    if isinstance(n, bool) or not isinstance(n, int | np.integer) or n < minimum:
        raise StudyInputError(f"`{name}` ({n!r}) must be a whole number of at least {minimum}.")
    return int(n)


def _sides(sides) -> int:
    if sides not in (1, 2):
        raise StudyInputError(f"`sides` ({sides!r}) must be 1 (one-sided) or 2 (two-sided).")
    return int(sides)


# ---------------------------------------------------------------------------------------------
# normal factors
# ---------------------------------------------------------------------------------------------


def _half_width(x: np.ndarray, p: float) -> np.ndarray:
    """r(x) with Phi(x + r) - Phi(x - r) = p, for each x >= 0 (vectorised, safeguarded Newton).

    r lies in [z, x + z] with z = Phi^-1((1 + p)/2): coverage falls as |x| grows (lower end) and
    Phi(2x + z) - Phi(-z) >= p (upper end). The coverage rises with r (derivative
    phi(x + r) + phi(x - r) > 0), so each Newton step either stays inside the current bracket or
    is replaced by bisection.
    """
    z = special.ndtri(0.5 * (1.0 + p))
    lo = np.full_like(x, z)
    hi = x + z
    r = 0.5 * (lo + hi)
    for _ in range(100):
        f = special.ndtr(x + r) - special.ndtr(x - r) - p
        below = f < 0
        lo = np.where(below, r, lo)
        hi = np.where(below, hi, r)
        d = (np.exp(-0.5 * (x + r) ** 2) + np.exp(-0.5 * (x - r) ** 2)) / math.sqrt(2 * math.pi)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = r - f / d
        bad = ~np.isfinite(step) | (step <= lo) | (step >= hi)
        new = np.where(bad, 0.5 * (lo + hi), step)
        done = np.max(np.abs(new - r)) <= 4e-16 * np.max(np.abs(r))
        r = new
        if done:
            break
    return r


def two_sided_confidence(k: float, n: int, p: float, *, df: float | None = None) -> float:
    """Confidence that x-bar -/+ k s covers at least the proportion ``p`` of a normal population.

    Parameters
    ----------
    k : float
        Tolerance factor (> 0).
    n : int
        Sample size (the mean is of n values).
    p : float
        Coverage, 0 < p < 1.
    df : float, optional
        Degrees of freedom of s (default n - 1).

    Returns
    -------
    float
        Pr{ Phi((x-bar + k s - mu)/sigma) - Phi((x-bar - k s - mu)/sigma) >= p }.

    Notes
    -----
    With x-bar ~ N(mu, sigma^2/n) and nu s^2/sigma^2 ~ chi^2(nu) independent,

        C(k) = sqrt(2n/pi) int_0^inf Q_chi2(nu r(x)^2 / k^2; nu) exp(-n x^2 / 2) dx,

    where r(x) solves Phi(x + r) - Phi(x - r) = p and Q_chi2 is the chi-square survival function
    (Odeh & Owen 1980, ch. 2; ISO 16269-6:2014, Annex F). The integral is taken by 256-point
    Gauss-Legendre quadrature in t = sqrt(n) x over [0, 10].

    References
    ----------
    Odeh & Owen (1980); ISO 16269-6:2014; Meeker, Hahn & Escobar (2017), section 4.

    Examples
    --------
    >>> round(two_sided_confidence(3.3935, 10, 0.95), 4)  # ISO 16269-6 Table F.5: 95 % confidence
    0.95
    """
    n = _size(n)
    p = _level(p, "p")
    nu = float(n - 1 if df is None else df)
    if not k > 0:
        raise StudyInputError(f"`k` ({k!r}) must be positive.")
    t, w = _t_rule()
    r = _half_width(t / math.sqrt(n), p)
    return float(np.sum(w * chi2_sf(nu * r**2 / k**2, nu)))


def _factor_args(n, p, c, df) -> tuple[int, float, float, float]:
    """The checked sample size, coverage and confidence of a normal factor, and the degrees of
    freedom of s (``df``, default n - 1; must be positive)."""
    n, p, c = _size(n), _level(p, "p"), _level(c, "c")
    nu = float(n - 1 if df is None else df)
    if not nu > 0:
        raise StudyInputError(f"`df` ({df!r}) must be positive.")
    return n, p, c, nu


def _howe(n: int, p: float, c: float, nu: float) -> float:
    z = special.ndtri(0.5 * (1.0 + p))
    chi = chi2_ppf(1.0 - c, nu)
    return float(z * math.sqrt(nu * (1.0 + 1.0 / n) / chi))


def _wald_wolfowitz(n: int, p: float, c: float, nu: float) -> float:
    # r with Phi(1/sqrt(n) + r) - Phi(1/sqrt(n) - r) = p, times sqrt(nu / chi2_{1-c, nu})
    r = float(_half_width(np.array([1.0 / math.sqrt(n)]), p)[0])
    return r * math.sqrt(nu / chi2_ppf(1.0 - c, nu))


def normal_factor_two_sided(
    n: int, p: float, c: float, *, method: str = "exact", df: float | None = None
) -> float:
    """Two-sided normal tolerance factor k: x-bar -/+ k s covers >= p with confidence c.

    Parameters
    ----------
    n : int
        Sample size (>= 2).
    p : float
        Coverage (proportion of the population inside), 0 < p < 1.
    c : float
        Confidence level, 0 < c < 1.
    method : {"exact", "howe", "wald_wolfowitz"}
        ``"exact"``: the root of :func:`two_sided_confidence` (k) = c (Odeh & Owen 1980;
        ISO 16269-6:2014 Annex F tabulates it). ``"howe"``: Howe's (1969) approximation
        k = z_{(1+p)/2} sqrt(nu (1 + 1/n) / chi2_{1-c; nu}), the formula of NIST/SEMATECH
        e-Handbook 7.2.6.3. ``"wald_wolfowitz"``: Wald & Wolfowitz (1946),
        k = r(1/sqrt(n)) sqrt(nu / chi2_{1-c; nu}).
    df : float, optional
        Degrees of freedom of s (default n - 1).

    Returns
    -------
    float
        The factor k of the two limits.

    References
    ----------
    Odeh & Owen (1980); ISO 16269-6:2014 Annex F; Howe (1969); Wald & Wolfowitz (1946);
    NIST/SEMATECH e-Handbook of Statistical Methods, 7.2.6.3.

    Examples
    --------
    >>> round(normal_factor_two_sided(10, 0.95, 0.95), 3)  # Meeker et al. (2017) Table J.5b
    3.393
    >>> round(normal_factor_two_sided(43, 0.90, 0.99, method="howe"), 4)  # NIST 7.2.6.3
    2.2173
    """
    n, p, c, nu = _factor_args(n, p, c, df)
    if method == "howe":
        return _howe(n, p, c, nu)
    if method == "wald_wolfowitz":
        return _wald_wolfowitz(n, p, c, nu)
    if method != "exact":
        raise StudyInputError(f"`method` ({method!r}) must be one of {list(TWO_SIDED_METHODS)}.")
    return _exact_two_sided(n, p, c, nu)


@functools.lru_cache(maxsize=4096)
def _exact_two_sided(n: int, p: float, c: float, nu: float) -> float:
    lo = float(special.ndtri(0.5 * (1.0 + p)))  # the factor with mu and sigma known
    hi = 2.0 * max(_howe(n, p, c, nu), lo)
    # r(x) does not depend on k: solve it once, then only the chi-square term changes
    t, w = _t_rule()
    nur2 = nu * _half_width(t / math.sqrt(n), p) ** 2

    def conf(k: float) -> float:
        return float(np.sum(w * special.chdtrc(nu, nur2 / k**2)))

    while conf(hi) < c:
        hi *= 2.0
        if hi > 1e7:  # pragma: no cover - beyond any table
            raise AnalysisError(
                f"no two-sided tolerance factor below 1e7 for n = {n}, p = {p:g}, c = {c:g}."
            )
    return float(brentq(lambda k: conf(k) - c, lo * (1 + 1e-12), hi, xtol=1e-12, rtol=1e-12))


def normal_factor_one_sided(
    n: int, p: float, c: float, *, method: str = "exact", df: float | None = None
) -> float:
    """One-sided normal tolerance factor k: x-bar + k s (or x-bar - k s) bounds >= p with conf. c.

    Parameters
    ----------
    n, p, c, df
        Sample size, coverage, confidence and degrees of freedom of s, as in
        :func:`normal_factor_two_sided`.
    method : {"exact", "natrella"}
        ``"exact"``: k = t'_{c}(nu, delta) / sqrt(n), the c-quantile of the noncentral t
        distribution with nu degrees of freedom and noncentrality delta = z_p sqrt(n)
        (``scipy.stats.nct.ppf(c, nu, z_p * sqrt(n)) / sqrt(n)``). ``"natrella"``: the
        large-sample approximation k = (z_p + sqrt(z_p^2 - a b)) / a, a = 1 - z_c^2 / (2 nu),
        b = z_p^2 - z_c^2 / n (Natrella 1963; NIST/SEMATECH e-Handbook 7.2.6.3).

    Returns
    -------
    float
        The factor k of the one limit.

    References
    ----------
    Owen, D. B. (1963), Factors for one-sided tolerance limits and for variables sampling plans,
    SCR-607; ISO 16269-6:2014; NIST/SEMATECH e-Handbook 7.2.6.3.

    Examples
    --------
    >>> round(normal_factor_one_sided(10, 0.95, 0.95), 3)  # Montgomery & Runger Table XII
    2.911
    """
    n, p, c, nu = _factor_args(n, p, c, df)
    zp = float(special.ndtri(p))
    if method == "natrella":
        zc = float(special.ndtri(c))
        a = 1.0 - zc**2 / (2.0 * nu)
        b = zp**2 - zc**2 / n
        if a <= 0 or zp**2 - a * b < 0:
            raise AnalysisError(
                f"the Natrella approximation is undefined for n = {n}; use method='exact'."
            )
        return float((zp + math.sqrt(zp**2 - a * b)) / a)
    if method != "exact":
        raise StudyInputError(f"`method` ({method!r}) must be 'exact' or 'natrella'.")
    return float(stats.nct.ppf(c, nu, zp * math.sqrt(n)) / math.sqrt(n))


# ---------------------------------------------------------------------------------------------
# distribution-free
# ---------------------------------------------------------------------------------------------


def distribution_free_confidence(
    n: int, p: float, *, r: int = 1, s: int = 1, sides: int = 2
) -> float:
    """Confidence that order statistics of a sample of n cover at least ``p`` of any continuous law.

    Parameters
    ----------
    n : int
        Sample size.
    p : float
        Coverage.
    r, s : int
        The interval is (x_(r), x_(n-s+1)): r-th smallest to s-th largest. With ``sides=1`` only
        the limit on one side is used: the upper limit x_(n-s+1) (r is ignored) - by symmetry the
        same confidence as the lower limit x_(s).
    sides : {1, 2}

    Returns
    -------
    float
        Pr{coverage >= p} = Pr{Binomial(n, p) <= n - m} with m = r + s (two-sided) or m = s
        (one-sided): the coverage between the order statistics is Beta(n - m + 1, m).

    References
    ----------
    Wilks (1941); ISO 16269-6:2014 (distribution-free intervals); Meeker, Hahn & Escobar (2017),
    section 5.

    Examples
    --------
    >>> round(distribution_free_confidence(59, 0.95, sides=1), 4)  # Wilks: 59 parts for 95/95
    0.9515
    """
    n = _size(n, minimum=1)
    p = _level(p, "p")
    sides = _sides(sides)
    m = (int(r) + int(s)) if sides == 2 else int(s)
    if min(int(s), int(r) if sides == 2 else 1) < 1:
        raise StudyInputError("`r` and `s` must be whole numbers of at least 1.")
    if m > n:
        return 0.0
    return float(binom_cdf(n - m, n, p))


def distribution_free_sample_size(
    p: float, c: float, *, sides: int = 2, r: int = 1, s: int = 1
) -> int:
    """Smallest n whose order-statistic interval covers ``p`` with confidence ``c``.

    Parameters
    ----------
    p, c : float
        Coverage and confidence.
    sides : {1, 2}
        Two-sided (x_(r), x_(n-s+1)) or one-sided (x_(n-s+1), or x_(s) for a lower limit).
    r, s : int
        How many values from each end are the limits (1: the extremes, the usual choice for the
        acceptance criterion: every part inside the specification).

    Returns
    -------
    int

    References
    ----------
    Wilks (1941); ISO 16269-6:2014, table of sample sizes for distribution-free intervals.

    Examples
    --------
    >>> distribution_free_sample_size(0.95, 0.95), distribution_free_sample_size(0.95, 0.95, sides=1)
    (93, 59)
    """
    p = _level(p, "p")
    c = _level(c, "c")
    sides = _sides(sides)
    m = (r + s) if sides == 2 else s
    n = m
    # the confidence rises with n; step until it clears c
    while distribution_free_confidence(n, p, r=r, s=s, sides=sides) < c:
        n += 1
        if n > MAX_PARTS:
            raise AnalysisError(
                f"more than {MAX_PARTS} parts would be needed for p = {p:g}, c = {c:g}."
            )
    return n


# ---------------------------------------------------------------------------------------------
# normal acceptance: pass probability and sample size
# ---------------------------------------------------------------------------------------------


@functools.cache
def _chi_rule() -> tuple[np.ndarray, np.ndarray]:
    """The 200-point Gauss-Legendre rule of the pass probability, made on first use."""
    return np.polynomial.legendre.leggauss(200)


def normal_pass_probability(
    n: int,
    p: float,
    c: float,
    *,
    mean: float,
    sd: float,
    lsl: float | None = None,
    usl: float | None = None,
) -> float:
    """Probability that a sample of n from N(mean, sd^2) passes the tolerance-interval criterion.

    The criterion: the (p, c) normal tolerance interval (two-sided with both limits, else
    one-sided on the limit given) lies within the specification.

    Parameters
    ----------
    n : int
    p, c : float
        Coverage and confidence of the interval.
    mean, sd : float
        The process assumed (e.g. from a pilot run).
    lsl, usl : float, optional
        Specification limits (at least one).

    Returns
    -------
    float

    Notes
    -----
    One limit (upper): pass when x-bar + k s <= USL, i.e. sqrt(n)(USL - x-bar)/s >= k sqrt(n);
    that statistic is noncentral t with nu = n - 1 and delta = sqrt(n)(USL - mean)/sd, so the
    probability is ``scipy.stats.nct.sf(k sqrt(n), nu, delta)`` (exact). Two limits: pass when
    LSL + k s <= x-bar <= USL - k s; x-bar and s are independent, so the probability is
    E_s[max(0, Phi(sqrt(n)(USL - k s - mean)/sd) - Phi(sqrt(n)(LSL + k s - mean)/sd))], taken by
    Gauss-Legendre quadrature over the chi-square law of nu s^2 / sd^2.

    References
    ----------
    Owen (1963); Meeker, Hahn & Escobar (2017), ch. 4 (tolerance intervals to demonstrate
    conformance).

    Examples
    --------
    >>> round(normal_pass_probability(30, 0.99, 0.95, mean=0.0, sd=1.0, usl=4.0), 3)
    0.983
    """
    n = _size(n)
    if lsl is None and usl is None:
        raise SpecError("give at least one specification limit (`lsl` or `usl`).")
    if not sd > 0:
        raise StudyInputError(f"`sd` ({sd!r}) must be positive.")
    nu = n - 1
    rn = math.sqrt(n)
    if lsl is None or usl is None:
        k = normal_factor_one_sided(n, p, c)
        delta = rn * ((usl - mean) if usl is not None else (mean - cast(float, lsl))) / sd
        return float(stats.nct.sf(k * rn, nu, delta))
    if not usl > lsl:
        raise SpecError(f"`usl` ({usl:g}) must be greater than `lsl` ({lsl:g}).")
    k = normal_factor_two_sided(n, p, c)
    # s/sd = sqrt(chi2/nu); s can pass only while 2 k s <= usl - lsl
    q_hi = nu * ((usl - lsl) / (2.0 * k * sd)) ** 2
    lo_q, hi_q = chi2_ppf(1e-15, nu), min(q_hi, chi2_isf(1e-15, nu))
    if hi_q <= lo_q:
        return 0.0
    chi_nodes, chi_weights = _chi_rule()
    q = 0.5 * (hi_q - lo_q) * (chi_nodes + 1.0) + lo_q
    w = 0.5 * (hi_q - lo_q) * chi_weights * chi2_pdf(q, nu)
    s = sd * np.sqrt(q / nu)
    inside = special.ndtr(rn * (usl - k * s - mean) / sd) - special.ndtr(
        rn * (lsl + k * s - mean) / sd
    )
    return float(np.sum(w * np.clip(inside, 0.0, None)))


def normal_sample_size(
    p: float,
    c: float,
    *,
    mean: float,
    sd: float,
    lsl: float | None = None,
    usl: float | None = None,
    power: float = 0.9,
) -> int | None:
    """Smallest n at which a process N(mean, sd^2) passes the (p, c) criterion with ``power``.

    Parameters
    ----------
    p, c : float
        Coverage and confidence of the tolerance interval.
    mean, sd : float
        The process assumed.
    lsl, usl : float, optional
        Specification limits (at least one).
    power : float
        Required probability of passing (default 0.9).

    Returns
    -------
    int or None
        None when even the known process (k = z) would leave fewer than ``p`` inside, or no n up
        to ``MAX_PARTS`` reaches ``power``.

    References
    ----------
    See :func:`normal_pass_probability`.

    Examples
    --------
    >>> normal_sample_size(0.99, 0.95, mean=0.0, sd=1.0, usl=4.0, power=0.8)
    16
    """
    power = _level(power, "power")
    p = _level(p, "p")
    # the population itself must have at least p inside (a necessary condition for any n)
    inside = 1.0
    if usl is not None:
        inside -= norm_sf(usl, mean, sd)
    if lsl is not None:
        inside -= norm_cdf(lsl, mean, sd)
    if inside <= p:
        return None

    def ok(m: int) -> bool:
        return normal_pass_probability(m, p, c, mean=mean, sd=sd, lsl=lsl, usl=usl) >= power

    hi = 4
    while not ok(hi):
        hi *= 2
        if hi > MAX_PARTS:
            return None
    lo = max(2, hi // 2)
    if ok(lo):
        lo = 2
        if ok(2):
            return 2
    # ok(hi) is True, ok(lo) False; the pass probability rises with n
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if ok(mid):
            hi = mid
        else:
            lo = mid
    return hi


# ---------------------------------------------------------------------------------------------
# the interval of a sample and the acceptance decision
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SampleSizePlan(Result):
    """Parts needed for the "at least P % within specification with C % confidence" criterion.

    Attributes
    ----------
    distribution_free : int or None
        Smallest n for which the extreme values (every part inside the specification) make the
        criterion (:func:`distribution_free_sample_size`, r = s = 1); None when more than
        ``MAX_PARTS`` would be needed.
    normal : int or None
        Smallest n at which a process like the sample (its mean and sd, on the log or Box-Cox
        scale for those models, with the limits transformed the same way) passes the normal
        criterion with probability ``power`` (:func:`normal_sample_size`); None without limits or
        when such a process cannot pass.
    power : float
    """

    distribution_free: int | None
    normal: int | None
    power: float

    def to_dict(self) -> dict:
        """JSON-safe fields."""
        return {
            "distribution_free": (
                None if self.distribution_free is None else int(self.distribution_free)
            ),
            "normal": None if self.normal is None else int(self.normal),
            "power": float(self.power),
        }


@dataclass(frozen=True)
class ToleranceInterval(Result):
    """A (P, C) statistical tolerance interval and, with limits, the acceptance decision.

    Attributes
    ----------
    model : str
        ``normal``, ``lognormal``, ``boxcox`` or ``distribution_free``.
    sides : int
        1 or 2.
    bound : str
        ``both``, ``upper`` or ``lower``.
    coverage, confidence : float
        P and C.
    n : int
    lower, upper : float or None
        The interval on the data's scale (None: unbounded side).
    factor : float or None
        k (normal and fitted-model intervals).
    factor_method : str or None
        ``exact``, ``howe``, ``wald_wolfowitz`` (two-sided), ``exact`` or ``natrella``
        (one-sided).
    mean, sd : float or None
        x-bar and s on the scale the interval was computed (the transformed scale for a fitted
        model).
    scale : str
        ``data``, ``log`` or ``boxcox(lambda=...)``: where x-bar -/+ k s was computed.
    order_statistics : tuple of int or None
        (r, n - s + 1) for the distribution-free interval (1-based ranks; None for an unbounded
        side).
    achieved_confidence : float or None
        Distribution-free: the confidence the chosen order statistics actually give (>= C when
        the interval exists).
    lsl, usl : float or None
    meets : bool or None
        The interval lies within the specification: at least P of the parts are inside with
        confidence C. None without limits, or when no interval exists (too few values for a
        distribution-free interval).
    plan : SampleSizePlan or None
        Parts the criterion needs (with limits).
    notes : tuple of str
    """

    model: str
    sides: int
    bound: str
    coverage: float
    confidence: float
    n: int
    lower: float | None
    upper: float | None
    factor: float | None
    factor_method: str | None
    mean: float | None
    sd: float | None
    scale: str
    order_statistics: tuple | None
    achieved_confidence: float | None
    lsl: float | None
    usl: float | None
    meets: bool | None
    plan: SampleSizePlan | None
    notes: tuple = ()

    @property
    def statement(self) -> str:
        """One sentence: what the interval says."""
        p, c = f"{100 * self.coverage:g} %", f"{100 * self.confidence:g} %"
        if self.lower is None and self.upper is None:
            return (
                f"No {self.model.replace('_', '-')} interval: {self.n} values are too few "
                f"for {p} coverage with {c} confidence."
            )
        if self.lower is None:
            where = f"below {self.upper:.6g}"
        elif self.upper is None:
            where = f"above {self.lower:.6g}"
        else:
            where = f"in [{self.lower:.6g}, {self.upper:.6g}]"
        return f"With {c} confidence at least {p} of the population lies {where}."

    def to_dict(self) -> dict:
        """JSON-safe fields (see the README table of ``studykit interval --json``)."""
        return {
            "model": self.model,
            "sides": int(self.sides),
            "bound": self.bound,
            "coverage": float(self.coverage),
            "confidence": float(self.confidence),
            "n": int(self.n),
            "lower": _f(self.lower),
            "upper": _f(self.upper),
            "factor": _f(self.factor),
            "factor_method": self.factor_method,
            "mean": _f(self.mean),
            "sd": _f(self.sd),
            "scale": self.scale,
            "order_statistics": (
                None
                if self.order_statistics is None
                else [None if v is None else int(v) for v in self.order_statistics]
            ),
            "achieved_confidence": _f(self.achieved_confidence),
            "lsl": _f(self.lsl),
            "usl": _f(self.usl),
            "meets": self.meets,
            "statement": self.statement,
            "plan": None if self.plan is None else self.plan.to_dict(),
            "notes": list(self.notes),
        }


def _bound_kind(sides: int, bound: str | None, lsl, usl) -> str:
    if sides == 2:
        if bound not in (None, "both"):
            raise StudyInputError(
                f"`bound` ({bound!r}) applies to one-sided intervals; leave it out or use sides=1."
            )
        return "both"
    if bound is None:
        if usl is not None and lsl is None:
            return "upper"
        if lsl is not None and usl is None:
            return "lower"
        raise StudyInputError(
            "a one-sided interval needs `bound` ('upper' or 'lower'), or "
            "exactly one specification limit to take it from."
        )
    if bound not in ("upper", "lower"):
        raise StudyInputError(f"`bound` ({bound!r}) must be 'upper' or 'lower'.")
    return bound


def _decide(lower, upper, lsl, usl, bound: str):
    if lsl is None and usl is None:
        return None
    if bound == "both":
        if lower is None or upper is None:
            return None
        return bool((lsl is None or lower >= lsl) and (usl is None or upper <= usl))
    if bound == "upper":
        if usl is None:
            return None
        return None if upper is None else bool(upper <= usl)
    if lsl is None:
        return None
    return None if lower is None else bool(lower >= lsl)


# long: signature and numpydoc docstring take 71 lines; the body calls named steps
def tolerance_interval(
    x,
    *,
    coverage: float = 0.95,
    confidence: float = 0.95,
    sides: int = 2,
    bound: str | None = None,
    model: str = "normal",
    method: str = "exact",
    lsl: float | None = None,
    usl: float | None = None,
    power: float = 0.9,
    boxcox_lambda: float | None = None,
) -> ToleranceInterval:
    """Statistical tolerance interval of a sample and the "P % within specification" decision.

    Parameters
    ----------
    x : array_like
        The measurements (finite; at least 3).
    coverage, confidence : float
        P and C, each in (0, 1). Default 0.95 / 0.95.
    sides : {1, 2}
        Two-sided interval, or a one-sided limit (``bound``).
    bound : {"upper", "lower"}, optional
        For ``sides=1``; taken from the one specification limit given when left out.
    model : {"normal", "lognormal", "boxcox", "distribution_free"}
        ``normal``: x-bar -/+ k s. ``lognormal``: the normal interval of log(x), back-transformed
        with exp (needs positive data). ``boxcox``: the normal interval on the Box-Cox scale
        (maximum-likelihood lambda from :func:`studykit.stats.transform.box_cox`, or
        ``boxcox_lambda``), back-transformed with the inverse transformation.
        ``distribution_free``: the extreme order statistics (x_(1), x_(n)) or, one-sided, x_(n) /
        x_(1), with the confidence they achieve; for large n the innermost order statistics that
        still reach C are used.
    method : str
        Two-sided factor: ``exact`` (default), ``howe`` or ``wald_wolfowitz``; one-sided:
        ``exact`` (noncentral t) or ``natrella``. See :func:`normal_factor_two_sided`,
        :func:`normal_factor_one_sided`.
    lsl, usl : float, optional
        Specification limits: the interval is compared with them (``meets``) and the parts the
        criterion needs are planned (``plan``).
    power : float
        Probability of passing used for the normal sample size (default 0.9).
    boxcox_lambda : float, optional
        Fixed Box-Cox lambda (``model="boxcox"``).

    Returns
    -------
    ToleranceInterval

    Notes
    -----
    The decision for a two-sided specification uses the two-sided interval: both ends inside the
    limits. This controls the total fraction outside (at least P inside), not each tail
    separately (ISO 16269-6 also describes intervals that bound each tail; not offered here).
    A back-transformed interval keeps its coverage statement exactly, because the transformation
    is monotone, when the transformation is fixed in advance; a lambda estimated from the same
    data is treated as known (a note says so).

    References
    ----------
    ISO 16269-6:2014; Meeker, Hahn & Escobar (2017), ch. 4 and 5; Box & Cox (1964).

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(1).normal(10.0, 0.1, size=40)
    >>> ti = tolerance_interval(x, coverage=0.99, confidence=0.95, lsl=9.5, usl=10.5)
    >>> round(ti.factor, 4), ti.meets
    (3.2159, True)
    """
    p = _level(coverage, "coverage")
    c = _level(confidence, "confidence")
    sides = _sides(sides)
    _check_model_and_specs(model, lsl, usl)
    kind = _bound_kind(sides, bound, lsl, usl)
    arr = check_sample(
        x,
        minimum=3,
        before="computing a tolerance interval",
        needed_for="a tolerance interval",
        zero_spread=None
        if model == "distribution_free"
        else "a normal tolerance interval needs spread; the gauge may be too coarse.",
    )
    n = int(arr.size)
    notes: list[str] = []
    mean = sd = k = fmethod = None
    order = achieved = None
    scale = "data"
    if model == "distribution_free":
        lower, upper, order, achieved = _distribution_free(arr, p, c, kind)
        if lower is None and upper is None:
            notes.append(_too_few_note(n, p, c, sides))
    else:
        lower, upper, mean, sd, k, scale = _normal_interval(
            arr, model, boxcox_lambda, p, c, sides, kind, method, notes
        )
        fmethod = method
    meets = _decide(lower, upper, lsl, usl, kind)
    plan = None
    if lsl is not None or usl is not None:
        plan = SampleSizePlan(
            _free_size_or_none(p, c, sides),
            _normal_plan(arr, model, boxcox_lambda, p, c, kind, lsl, usl, power),
            _level(power, "power"),
        )
    return ToleranceInterval(
        model=model,
        sides=sides,
        bound=kind,
        coverage=p,
        confidence=c,
        n=n,
        lower=lower,
        upper=upper,
        factor=k,
        factor_method=fmethod,
        mean=mean,
        sd=sd,
        scale=scale,
        order_statistics=order,
        achieved_confidence=achieved,
        lsl=None if lsl is None else float(lsl),
        usl=None if usl is None else float(usl),
        meets=meets,
        plan=plan,
        notes=tuple(notes),
    )


def _check_model_and_specs(model: str, lsl, usl) -> None:
    """Reject an unknown model, a non-finite limit and limits in the wrong order."""
    if model not in MODELS:
        raise StudyInputError(f"`model` ({model!r}) must be one of {list(MODELS)}.")
    for name, v in (("lsl", lsl), ("usl", usl)):
        if v is not None:
            check_number(v, name, error=SpecError)
    if lsl is not None and usl is not None and not float(usl) > float(lsl):
        raise SpecError(f"`usl` ({usl:g}) must be greater than `lsl` ({lsl:g}).")


def _too_few_note(n: int, p: float, c: float, sides: int) -> str:
    """The note on a sample too small for a distribution-free interval."""
    need = _free_size_or_none(p, c, sides)
    return (
        f"{n} values are too few for a distribution-free interval with "
        f"{100 * p:g} % coverage and {100 * c:g} % confidence; "
        + (f"{need} are needed." if need is not None else f"more than {MAX_PARTS} would be needed.")
    )


def _normal_interval(arr, model, boxcox_lambda, p, c, sides, kind, method, notes: list[str]):
    """The normal-theory interval on the model's scale, taken back to the data:
    (lower, upper, mean, sd, factor, scale); notes are appended to ``notes``."""
    y, forward_note, back, scale = _transformed(arr, model, boxcox_lambda)
    if forward_note:
        notes.append(forward_note)
    n = int(arr.size)
    mean = float(np.mean(y))
    sd = float(np.std(y, ddof=1))
    if not sd > 0:
        raise AnalysisError("the transformed values have zero spread; no interval.")
    lo_t: float | None
    hi_t: float | None
    if sides == 2:
        if method not in TWO_SIDED_METHODS:
            raise StudyInputError(
                f"`method` ({method!r}) must be one of "
                f"{list(TWO_SIDED_METHODS)} for a two-sided interval."
            )
        k = normal_factor_two_sided(n, p, c, method=method)
        lo_t, hi_t = mean - k * sd, mean + k * sd
    else:
        if method not in ("exact", "natrella"):
            raise StudyInputError(
                f"`method` ({method!r}) must be 'exact' or 'natrella' for a one-sided interval."
            )
        k = normal_factor_one_sided(n, p, c, method=method)
        lo_t = mean - k * sd if kind == "lower" else None
        hi_t = mean + k * sd if kind == "upper" else None
    lower = None if lo_t is None else float(back(lo_t))
    upper = None if hi_t is None else float(back(hi_t))
    if method != "exact":
        notes.append(
            f"factor from the {method.replace('_', '-')} approximation, not the exact computation."
        )
    return lower, upper, mean, sd, k, scale


def _free_size_or_none(p: float, c: float, sides: int) -> int | None:
    """:func:`distribution_free_sample_size`, or None beyond ``MAX_PARTS`` (e.g. P = 0.99999)."""
    try:
        return distribution_free_sample_size(p, c, sides=sides)
    except AnalysisError:
        return None


def _normal_plan(arr, model, boxcox_lambda, p, c, kind, lsl, usl, power):
    """Normal sample size for a process like the sample, on the model's computing scale."""
    spec_l = lsl if kind in ("both", "lower") else None
    spec_u = usl if kind in ("both", "upper") else None
    if spec_l is None and spec_u is None:
        return None
    if model in ("lognormal", "boxcox"):
        y, _, _, _, forward = _transformed(arr, model, boxcox_lambda, with_forward=True)
        try:
            spec_l = None if spec_l is None else float(forward(spec_l))
            spec_u = None if spec_u is None else float(forward(spec_u))
        except (ValueError, FloatingPointError):  # pragma: no cover - limit outside the range
            return None
        if any(v is not None and not math.isfinite(v) for v in (spec_l, spec_u)):
            return None
    else:
        y = arr
    m0, s0 = float(np.mean(y)), float(np.std(y, ddof=1))
    if not s0 > 0:
        return None
    return normal_sample_size(p, c, mean=m0, sd=s0, lsl=spec_l, usl=spec_u, power=power)


def _transformed(arr: np.ndarray, model: str, boxcox_lambda, *, with_forward: bool = False):
    """(values on the computing scale, note, back-transformation, scale label)."""
    if model in ("normal", "distribution_free"):
        out = (arr, None, (lambda v: v), "data")
        return (*out, (lambda v: v)) if with_forward else out
    if model == "lognormal":
        if np.any(arr <= 0):
            bad = int(np.flatnonzero(arr <= 0)[0])
            raise AnalysisError(
                f"a lognormal interval needs positive values; value {bad + 1} "
                f"is {arr[bad]:g}. Use model 'boxcox' (it shifts) or "
                "'distribution_free'."
            )
        out = (np.log(arr), None, math.exp, "log")
        return (*out, (lambda v: math.log(v) if v > 0 else -math.inf)) if with_forward else out
    from studykit.stats.transform import box_cox

    bc = box_cox(arr, lam=boxcox_lambda)
    y = np.asarray(bc.transform(arr), dtype=float)
    note = (
        f"Box-Cox lambda {bc.lam_used:.4g}"
        + (f", shift {bc.shift:.4g}" if bc.shift else "")
        + (
            "; estimated from these data and treated as known (its uncertainty is not in the "
            "interval)"
            if boxcox_lambda is None
            else " (given)"
        )
    )
    bc_out = (y, note, (lambda v: float(bc.inverse(v))), f"boxcox(lambda={bc.lam_used:.4g})")
    return (*bc_out, (lambda v: float(bc.transform(v)))) if with_forward else bc_out


def _distribution_free(arr: np.ndarray, p: float, c: float, kind: str):
    """Innermost symmetric order statistics that still reach confidence c."""
    n = arr.size
    xs = np.sort(arr)
    if kind == "both":
        if distribution_free_confidence(n, p, r=1, s=1, sides=2) < c:
            return None, None, None, None
        m = 1
        # widen inward while the confidence stays >= c (r = s = m)
        while (
            2 * (m + 1) <= n and distribution_free_confidence(n, p, r=m + 1, s=m + 1, sides=2) >= c
        ):
            m += 1
        conf = distribution_free_confidence(n, p, r=m, s=m, sides=2)
        return float(xs[m - 1]), float(xs[n - m]), (m, n - m + 1), conf
    if distribution_free_confidence(n, p, s=1, sides=1) < c:
        return None, None, None, None
    m = 1
    while m + 1 <= n and distribution_free_confidence(n, p, s=m + 1, sides=1) >= c:
        m += 1
    conf = distribution_free_confidence(n, p, s=m, sides=1)
    if kind == "upper":
        return None, float(xs[n - m]), (None, n - m + 1), conf
    return float(xs[m - 1]), None, (m, None), conf
