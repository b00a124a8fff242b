"""Fitted distribution models and their ranking, fast enough to run on every redraw.

Each family is fitted by maximum likelihood with closed forms or one-dimensional roots where
they exist, a safeguarded two-parameter Newton iteration for the log-concave location-scale
families, and a profile likelihood over the threshold for the three-parameter variants. The
shared base :class:`Family` turns the estimates into a :class:`FittedModel` with the
log-likelihood, AIC, BIC and the Anderson-Darling statistic (with a p-value where the
literature gives one); :func:`fit_all` fits several families and ranks them.

Family ids (:data:`FAMILIES`)
-----------------------------
``normal``, ``lognormal``, ``lognormal3``, ``weibull``, ``weibull3``, ``gamma``, ``gamma3``,
``exponential``, ``exponential2``, ``logistic``, ``loglogistic``, ``loglogistic3``,
``sev`` (smallest extreme value), ``lev`` (largest extreme value), ``halfnormal``.

Estimation
----------
normal, lognormal, exponential, halfnormal
    Closed-form maximum likelihood (standard deviation with divisor n).
weibull
    Shape k from the 1-D root of the profile score
    ``sum(y^k log y)/sum(y^k) - 1/k - mean(log y) = 0`` (increasing in k), by safeguarded
    Newton steps; scale ``(mean(y^k))^(1/k)``.
gamma
    Shape k from ``log k - digamma(k) = log(mean y) - mean(log y)`` (Minka's starting value and
    Newton iteration on 1/k); scale ``mean/k``.
logistic, loglogistic, sev, lev
    Newton iteration with analytic gradient and Hessian in the parametrisation
    ``a = 1/scale, b = location/scale``, where the log-likelihood of a log-concave density is
    concave, with step halving so the likelihood never decreases. Loglogistic is the logistic
    fit to ``log x``.
threshold variants (lognormal3, weibull3, gamma3, loglogistic3)
    Profile likelihood ``l(theta) = max over the other parameters`` as a function of the
    distance ``d = min(x) - theta`` on a logarithmic grid from ``1e-4 s`` to ``1e3 s``
    (s = sample standard deviation), then one finer vectorised pass around the best grid
    point and the root of the profile slope (envelope theorem: the partial derivative in theta
    at the inner maximum); see :func:`_profile_threshold`.
    The likelihood of these families is unbounded as theta approaches min(x) when the shape
    lets the density go to infinity at the threshold (Smith 1985). We take the largest
    *interior* local maximum of the profile (the "local maximum likelihood" estimate of
    Smith 1985 and Cheng & Amin 1983); if the profile only rises towards min(x), the family is
    reported as not fitted. If the profile keeps rising towards the far end of the grid, the
    data show no skew for this family (it tends to its two-parameter limit, e.g. lognormal3 to
    normal): the fit is kept at the grid end and flagged ``converged=False``.
exponential2
    The maximum likelihood threshold is min(x) itself, which puts one reading at F = 0 and
    makes the Anderson-Darling statistic infinite, so we use the unbiased estimates
    ``theta = x(1) - (mean - x(1))/(n-1)``, ``scale = n (mean - x(1))/(n-1)``
    (Johnson, Kotz & Balakrishnan 1994, ch. 19).

Ranking rule (:func:`fit_all`)
------------------------------
Fitted models are sorted by AIC (smallest first); models flagged ``converged=False`` come
after all converged ones; families that could not be fitted (unsuitable data, no interior
maximum) come last with their reason. Ties in AIC are broken by the smaller Anderson-Darling
statistic. AIC is used because it exists for every family and charges for the threshold.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property, lru_cache

import numpy as np
from scipy import special, stats

from studykit.errors import AnalysisError, StudyInputError
from studykit.stats._checks import check_sample

__all__ = ["FAMILIES", "Family", "FittedModel", "FitRow", "Ranking", "fit_all", "ROW_FIELDS",
           "RANKING_RULE"]

_LOG_2PI = math.log(2.0 * math.pi)
_TINY = 1e-300

# ---------------------------------------------------------------------------------------------
# Anderson-Darling p-value tables
# ---------------------------------------------------------------------------------------------
# The critical values below are those scipy.stats.anderson (scipy 1.17) tabulates, citing
# D'Agostino & Stephens (1986) and Stephens (1977, 1979); the table numbers of the book are
# given from memory. tests/test_fit.py checks every p-value chain by simulation.
#: Exponential, scale estimated: A*^2 = A^2 (1 + 0.6/n); upper-tail levels 15..1 %.
#: D'Agostino & Stephens (1986) Table 4.14 (from memory); scipy ``_Avals_expon``.
_AD_EXPON = (np.array([0.916, 1.062, 1.321, 1.591, 1.959]),
             np.array([0.15, 0.10, 0.05, 0.025, 0.01]), lambda n: 1.0 + 0.6 / n)
#: Extreme value (and Weibull through log x), both parameters estimated: A*^2 = A^2 (1 +
#: 0.2/sqrt(n)); Stephens (1977), Biometrika 64, 583-588; D'Agostino & Stephens (1986)
#: Table 4.17 (from memory); scipy ``_Avals_gumbel``.
_AD_EV = (np.array([0.474, 0.637, 0.757, 0.877, 1.038]),
          np.array([0.25, 0.10, 0.05, 0.025, 0.01]), lambda n: 1.0 + 0.2 / math.sqrt(n))
#: Logistic, both parameters estimated: A*^2 = A^2 (1 + 0.25/n); Stephens (1979),
#: Biometrika 66, 591-595; D'Agostino & Stephens (1986) Table 4.22 (from memory); scipy
#: ``_Avals_logistic``.
_AD_LOGISTIC = (np.array([0.426, 0.563, 0.660, 0.769, 0.906, 1.010]),
                np.array([0.25, 0.10, 0.05, 0.025, 0.01, 0.005]), lambda n: 1.0 + 0.25 / n)


def _ad_p_normal(a2: float, n: int) -> tuple[float, str]:
    """D'Agostino & Stephens (1986) Table 4.9, case 3 (mean and variance estimated)."""
    a = a2 * (1.0 + 0.75 / n + 2.25 / (n * n))
    if a >= 153.0:  # the formula's minimum (p < 1e-189); beyond it, it rises and overflows
        return 0.0, f"{0.0:.4f}"
    if a >= 0.6:
        p = math.exp(1.2937 - 5.709 * a + 0.0186 * a * a)
    elif a >= 0.34:
        p = math.exp(0.9177 - 4.279 * a - 1.38 * a * a)
    elif a >= 0.2:
        p = 1.0 - math.exp(-8.318 + 42.796 * a - 59.938 * a * a)
    else:
        p = 1.0 - math.exp(-13.436 + 101.14 * a - 223.73 * a * a)
    p = min(max(p, 0.0), 1.0)
    return p, f"{p:.4f}"


def _ad_p_table(a2: float, n: int, table) -> tuple[float, str]:
    """Linear interpolation of the significance level in a critical-value table.

    Outside the table the edge level is returned and the text carries ">" or "<".
    """
    crit, sig, factor = table
    a = a2 * factor(n)
    if a <= crit[0]:
        return float(sig[0]), f">{sig[0]:g}"
    if a >= crit[-1]:
        return float(sig[-1]), f"<{sig[-1]:g}"
    p = float(np.interp(a, crit, sig))
    return p, f"{p:.4f}"


@lru_cache(maxsize=16)
def _ad_weights(n: int) -> np.ndarray:
    """The weights 2i - 1, i = 1..n, of :func:`_ad_from_logs` (read-only, cached: fit_all
    computes the statistic for every family on the same n)."""
    w = np.arange(1.0, 2.0 * n, 2.0)
    w.flags.writeable = False
    return w


def _ad_from_logs(logcdf: np.ndarray, logsf: np.ndarray) -> float:
    """A^2 = -n - (1/n) sum (2i-1) [ln F(x_(i)) + ln(1 - F(x_(n+1-i)))] for sorted data."""
    n = logcdf.size
    w = _ad_weights(n)
    return float(-n - (w @ (logcdf + logsf[::-1])) / n)


_add_reduce = np.add.reduce
# the ufuncs behind ndarray.max/all/any (same results, without the methods' Python wrappers)
_max_reduce, _all, _any = np.maximum.reduce, np.logical_and.reduce, np.logical_or.reduce


def _mean_sd(x, ddof=0):
    """(mean, standard deviation) of a 1-D array: the sums of x.mean() and x.std(ddof=ddof)
    without their Python wrappers (fit_all calls them many times on small arrays)."""
    n = x.size
    m = float(_add_reduce(x)) / n
    c = x - m
    return m, math.sqrt(float(_add_reduce(c * c)) / (n - ddof))


# ---------------------------------------------------------------------------------------------
# Fast estimators
# ---------------------------------------------------------------------------------------------
def _weibull_fit(logy: np.ndarray, k0: float | None = None) -> tuple[float, float, float]:
    """ML shape and scale of a two-parameter Weibull from log data; returns (k, scale, loglik).

    Root of g(k) = sum(w z)/sum(w) - 1/k, z = log y - mean(log y), w = exp(k z) (g increases
    in k), by Newton steps kept inside a bracket.
    """
    n = logy.size
    slog = float(_add_reduce(logy))
    mlog = slog / n
    z = logy - mlog
    zmax = _max_reduce(z)
    zs = z - zmax
    if k0 is None or not (k0 > 0):
        sd = math.sqrt(float(z @ z) / n)
        k0 = 1.2825 / sd if sd > 0 else 1.0
    k = k0
    lo, hi = 0.0, math.inf
    for _ in range(100):
        w = np.exp(k * zs)
        sw = _add_reduce(w)
        wz = w @ z
        mz = wz / sw
        g = mz - 1.0 / k
        vz = (w @ (z * z)) / sw - mz * mz
        if g < 0:
            lo = k
        else:
            hi = k
        dg = vz + 1.0 / (k * k)
        k_new = k - g / dg
        newton = lo <= k_new <= hi
        if not newton:
            k_new = 0.5 * (lo + hi) if math.isfinite(hi) else 2.0 * k
        step = abs(k_new - k)
        k = k_new
        # a Newton step below 1e-7 k leaves an error of order step^2 (quadratic convergence:
        # below 1e-13 k), any step below 1e-12 k ends the bisection
        if step <= 1e-12 * k or (newton and step <= 1e-7 * k):
            break
    w = np.exp(k * zs)
    log_scale = mlog + zmax + math.log(float(_add_reduce(w)) / n) / k
    loglik = n * math.log(k) - n * k * log_scale + (k - 1.0) * slog - n
    return k, math.exp(log_scale), loglik


def _gamma_fit(y: np.ndarray, k0: float | None = None) -> tuple[float, float, float]:
    """ML shape and scale of a gamma distribution; returns (k, scale, loglik).

    Root of log k - digamma(k) = s, s = log(mean y) - mean(log y); Minka (2002) start and
    Newton iteration on 1/k.
    """
    n = y.size
    mean = float(_add_reduce(y)) / n
    ly = np.log(y)
    sly = float(_add_reduce(ly))
    s = math.log(mean) - sly / n
    if not s > 1e-14:
        raise AnalysisError(
            f"Gamma: the relative spread of the data (sd/mean = {y.std() / mean:.3g}) is too "
            "small to estimate a gamma shape in double precision; the normal family describes "
            "such data (or fit the threshold variant)."
        )
    if s < 1e-4:  # k > ~5000: log k - digamma(k) = 1/(2k) + 1/(12k^2) + O(k^-4), solved for k
        k0 = (math.sqrt(0.25 + s / 3.0) + 0.5) / (2.0 * s)
    elif k0 is None or not (k0 > 0):
        k0 = (3.0 - s + math.sqrt((s - 3.0) ** 2 + 24.0 * s)) / (12.0 * s)
    k = k0
    for _ in range(0 if s < 1e-4 else 100):
        f = math.log(k) - special.digamma(k) - s
        fp = 1.0 / k - special.zeta(2.0, k)
        k_new = 1.0 / (1.0 / k + f / (k * k * fp))
        if not k_new > 0:
            k_new = 0.5 * k
        if abs(k_new - k) <= 1e-12 * k:
            k = k_new
            break
        k = k_new
    scale = mean / k
    loglik = (k - 1.0) * sly - n * k - n * k * math.log(scale) - n * special.gammaln(k)
    return k, scale, float(loglik)


def _logistic_terms(z):
    t = np.tanh(0.5 * z)
    az = np.abs(z)
    return -az - 2.0 * np.log1p(np.exp(-az)), -t, -0.5 * (1.0 - t * t)


def _logistic_logpdf(z):
    """The first term of :func:`_logistic_terms` alone (same expression)."""
    az = np.abs(z)
    return -az - 2.0 * np.log1p(np.exp(-az))


def _sev_terms(z):
    e = np.exp(z)
    return z - e, 1.0 - e, -e


def _lev_terms(z):
    e = np.exp(-z)
    return -z - e, e - 1.0, -e


def _ls_fit(u: np.ndarray, terms, mu0: float, s0: float, *, start=None):
    """ML location and scale of a log-concave location-scale family by Newton's method.

    Works in a = sd/scale, b = (location - mean)/scale on standardised data v, where the
    log-likelihood sum log g(a v - b) + n log a is concave; step halving keeps it increasing.
    Stops when the Newton decrement (the predicted gain of the step) is below 1e-9, or after
    a full Newton step from a decrement below 1e-5 (quadratic convergence: the decrement
    left is of order 1e-10).
    Returns (location, scale, loglik, (a, b), converged).
    """
    n = u.size
    m = float(_add_reduce(u)) / n
    c = u - m
    sd = math.sqrt(float(c @ c) / n)
    v = c / sd
    if start is not None:
        a, b = start
    else:
        a, b = sd / s0, (mu0 - m) / s0
    vv = v * v

    def evaluate(a, b):
        lg, d1, d2 = terms(a * v - b)
        return float(_add_reduce(lg)) + n * math.log(a), d1, d2

    ll, d1, d2 = evaluate(a, b)
    converged = False
    for _ in range(200):
        ga = float(d1 @ v) + n / a
        gb = -float(_add_reduce(d1))
        haa = float(d2 @ vv) - n / (a * a)
        hab = -float(d2 @ v)
        hbb = float(_add_reduce(d2))
        det = haa * hbb - hab * hab
        if det > 0 and haa < 0:
            da = -(hbb * ga - hab * gb) / det
            db = -(haa * gb - hab * ga) / det
        else:  # not expected for log-concave families; fall back to a gradient step
            da, db = ga / n, gb / n
        decrement = ga * da + gb * db
        if decrement < 1e-20:
            converged = True
            break
        t = 1.0
        while True:
            an = a + t * da
            if an > 0:
                lln, d1n, d2n = evaluate(an, b + t * db)
                if lln >= ll - 1e-12 * abs(ll):
                    break
            t *= 0.5
            if t < 1e-12:
                break
        if t < 1e-12:
            converged = True
            break
        a, b, ll, d1, d2 = an, b + t * db, lln, d1n, d2n
        if decrement < 1e-5 and t == 1.0:  # the next decrement is of order 1e-10
            converged = True
            break
    scale = sd / a
    loc = m + b * scale
    return loc, scale, ll - n * math.log(sd), (a, b), converged


def _sev_start(x):
    m, sd = _mean_sd(x)
    s = sd * math.sqrt(6.0) / math.pi
    return m + 0.5772156649 * s, s


def _lev_start(x):
    m, sd = _mean_sd(x)
    s = sd * math.sqrt(6.0) / math.pi
    return m - 0.5772156649 * s, s


def _median(x, axis=-1):
    """np.median(x, axis) (same values: the middle element, or the mean of the two middle
    elements) by one partition, without np.median's generic machinery."""
    n = x.shape[axis]
    lo, hi = (n - 1) // 2, n // 2
    part = np.partition(x, (lo, hi), axis=axis)
    a, b = np.take(part, lo, axis=axis), np.take(part, hi, axis=axis)
    return a if lo == hi else (a + b) / 2.0


def _logistic_start(x):
    return float(_median(x)), _mean_sd(x)[1] * math.sqrt(3.0) / math.pi


# ---------------------------------------------------------------------------------------------
# Profile likelihood over the threshold
# ---------------------------------------------------------------------------------------------
_GRID_DECADES = np.linspace(-4.0, 3.0, 8)
_REFINE_POINTS = 33
# fractions of the bracket at the points of a pass (np.linspace without its overhead)
_FULL_PASS = np.arange(_REFINE_POINTS) / (_REFINE_POINTS - 1)
_HALF_PASS = np.arange(_REFINE_POINTS // 2 + 1) / (_REFINE_POINTS // 2)
_ZERO_POINTS = 4


#: inner fits whose warm starts are interpolated linearly in the threshold (the Weibull shape
#: is close to linear in theta across a grid step: one Newton step fewer on the pass); the
#: others' (the loglogistic's a, b) linearly in u = log(min(x) - theta), which suits them better
_WARM_IN_THETA = frozenset({"_inner_weibull"})

#: Most cells (rows x readings) a row-wise evaluation holds in one array: 2**21 doubles, 16 MB.
#: Above it the rows (thresholds of a profile pass, bootstrap samples) are evaluated in groups,
#: so memory is O(ROW_CELLS + n) whatever the number of rows; below it one call as before
#: (identical numbers). The row-wise Newton loops stop when every row of a call has converged,
#: so grouped rows can differ from one call in the last digits, far inside the tolerances.
ROW_CELLS = 1 << 21


def rows_per_group(n_cols: int, cells: int | None = None) -> int:
    """Rows of ``n_cols`` readings that fit in ``cells`` (default :data:`ROW_CELLS`); >= 1."""
    return max(1, (ROW_CELLS if cells is None else cells) // max(1, int(n_cols)))


def _slope_zero(us, slopes, k):
    """Zero of the profile slope between us[k] and us[k + 1] (slope > 0 >= next slope).

    Inverse cubic interpolation through the four points around the sign change (u as a
    cubic in the slope, Lagrange form, evaluated at slope 0) when the slope falls strictly
    across them; otherwise, or if the result leaves the bracket, linear interpolation.
    On the 33-point pass the cubic's error (order h^4, h = 0.144) is about that of linear
    interpolation on a pass 16 times finer, which it replaces.
    """
    u0, u1, s0, s1 = float(us[k]), float(us[k + 1]), float(slopes[k]), float(slopes[k + 1])
    lin = u0 + (u1 - u0) * s0 / (s0 - s1)
    p = min(_ZERO_POINTS, us.size)
    j = min(max(k - (p - 2) // 2, 0), us.size - p)
    uu = [float(v) for v in us[j:j + p]]
    ss = [float(v) for v in slopes[j:j + p]]
    if (not all(math.isfinite(v) for v in ss)
            or not all(ss[i] > ss[i + 1] for i in range(p - 1))):
        return lin
    u = 0.0
    for i in range(p):
        w = uu[i]
        for m in range(p):
            if m != i:
                w *= ss[m] / (ss[m] - ss[i])
        u += w
    return u if u0 <= u <= u1 else lin


def _profile_threshold(x: np.ndarray, inner, dtheta, label: str):
    """Maximise the profile log-likelihood over theta < min(x).

    ``inner(Y) -> (loglik, params)`` fits the two-parameter family to every row of
    Y = x - theta > 0 at once (one row per trial threshold; vectorised, so a pass over many
    thresholds costs about as much as one fit); ``dtheta(Y, params)`` is the derivative of the
    log-likelihood with respect to theta at fixed other parameters, which at the inner maximum
    is the derivative of the profile (envelope theorem).

    Search in u = log(min(x) - theta): a grid of 8 points from 1e-4 s to 1e3 s (inner fits
    to a looser tolerance, ``rough=True``: the grid only picks the bracket and the starting
    values; every value returned comes from a full-precision fit), then one pass across
    the grid step next to the best point where the profile slope changes sign (17 points; 33
    across both steps around the best point when the grid or that pass shows no sign change;
    the Newton iterations start from the grid's solutions), then the root of the profile derivative between the two points
    where it changes sign: inverse cubic interpolation (:func:`_slope_zero`), then, unless
    the slope there puts the root within 1e-6 in u, one secant step; each candidate is kept
    only if it beats the best point of the pass.
    Returns (theta, params, loglik, converged, note).
    """
    xmin = float(x.min())
    sd = _mean_sd(x)[1]

    warm = {}

    in_theta = inner.__name__ in _WARM_IN_THETA

    def evaluate(us, rough=False):
        """(dtheta, log-likelihoods, params) at the thresholds xmin - exp(us)."""
        gap = np.exp(us)  # min(x) - theta
        at = gap if in_theta else us
        start = None
        if warm:  # interpolate the previous pass's solutions: fewer Newton steps
            start = tuple(np.interp(at, warm["at"], c) for c in warm["state"])
        single = _SINGLE.get(inner.__name__) if us.size == 1 else None
        group = rows_per_group(x.size)
        if single is not None:  # one threshold: the scalar estimator, less numpy overhead
            ys = x[None, :] - (xmin - gap)[:, None]
            ll, params, state = single(ys[0], start)
            dt = dtheta(ys, params)
        elif us.size <= group:
            ys = x[None, :] - (xmin - gap)[:, None]
            ll, params, state = inner(ys, start, rough=rough)
            dt = dtheta(ys, params)
        else:  # many readings: the thresholds in groups, memory O(ROW_CELLS + n)
            parts = []
            for i in range(0, us.size, group):
                part = slice(i, i + group)
                ys = x[None, :] - (xmin - gap[part])[:, None]
                ll_p, p_p, st_p = inner(ys, None if start is None
                                        else tuple(c[part] for c in start), rough=rough)
                parts.append((ll_p, p_p, st_p, dtheta(ys, p_p)))
                del ys
            ll = np.concatenate([q[0] for q in parts])
            params = {k: np.concatenate([q[1][k] for q in parts]) for k in parts[0][1]}
            state = (None if parts[0][2] is None else
                     tuple(np.concatenate([q[2][j] for q in parts])
                           for j in range(len(parts[0][2]))))
            dt = np.concatenate([q[3] for q in parts])
        if us.size > 1 and state is not None:
            warm["at"], warm["state"] = at, state
        return dt, np.where(np.isfinite(ll), ll, -np.inf), params

    us = math.log(sd) + _GRID_DECADES * math.log(10.0)
    with np.errstate(all="ignore"):  # slopes at rough grid fits, used only when interior
        grid_dt, lls, params = evaluate(us, rough=True)
    best = int(lls.argmax())
    note = None
    if best == 0:
        interior = [i for i in range(1, us.size - 1)
                    if lls[i] >= lls[i - 1] and lls[i] >= lls[i + 1]]
        if not interior:
            raise AnalysisError(
                f"{label}: the likelihood keeps rising as the threshold approaches the smallest "
                f"reading ({xmin:g}) and has no interior maximum; use the two-parameter family."
            )
        best = max(interior, key=lambda i: lls[i])
        note = ("likelihood unbounded at the smallest reading; the interior local maximum is "
                "used (Smith 1985)")
    if best == us.size - 1:
        note = ("threshold at the search limit (min(x) - 1000 s): the data show no skew for "
                "this family, which tends to its limiting form")
        _, lls, params = evaluate(us[-1:])  # the grid's inner fits are rough: refit
        return (xmin - math.exp(us[-1]), {k: float(v[0]) for k, v in params.items()},
                float(lls[0]), False, note)
    # the pass spans the grid step where the profile slope changes sign next to the best
    # point (17 points), or both steps around it (33 points) when the grid slopes do not
    # show that sign change
    grid_slopes = -np.exp(us) * grid_dt
    full = (us[best - 1], us[best + 1], _FULL_PASS)
    if grid_slopes[best] > 0 >= grid_slopes[best + 1]:
        spans = [(us[best], us[best + 1], _HALF_PASS), full]
    elif grid_slopes[best - 1] > 0 >= grid_slopes[best]:
        spans = [(us[best - 1], us[best], _HALF_PASS), full]
    else:
        spans = [full]
    for lo_u, hi_u, frac in spans:  # the full bracket only if the half shows no sign change
        us = lo_u + (hi_u - lo_u) * frac
        dts, lls, params = evaluate(us)
        slopes = -np.exp(us) * dts
        best = min(max(int(lls.argmax()), 1), us.size - 2)
        if slopes[best - 1] > 0 >= slopes[best] or slopes[best] > 0 >= slopes[best + 1]:
            break
    u_best, ll_best = float(us[best]), float(lls[best])
    p_best = {k: float(v[best]) for k, v in params.items()}
    for k in (best - 1, best):
        if slopes[k] > 0 >= slopes[k + 1]:
            u = _slope_zero(us, slopes, k)
            for _ in range(2):  # the interpolated zero, then a secant step if needed
                dt1, ll1, p1 = evaluate(np.array([u]))
                if ll1[0] >= ll_best:
                    u_best, ll_best = u, float(ll1[0])
                    p_best = {k: float(v[0]) for k, v in p1.items()}
                s1 = float(-math.exp(u) * dt1[0])
                j = k + 1 if s1 > 0 else k  # the pass point across the zero from u
                if not (math.isfinite(s1) and s1 != float(slopes[j])):
                    break
                u_next = u - s1 * (u - float(us[j])) / (s1 - float(slopes[j]))
                if (not float(us[k]) <= u_next <= float(us[k + 1]) or abs(u_next - u) <= 1e-6
                        or abs(s1 * (u_next - u)) <= 2e-10 * max(1.0, abs(float(ll1[0])))):
                    break  # the step would gain ~ s1 (u_next - u) / 2: below rounding
                u = u_next
            break
    return xmin - math.exp(u_best), p_best, ll_best, True, note


def _rowsum(a):
    # the ufunc directly: same sums as a.sum(axis=1) without the method's Python wrapper
    return _add_reduce(a, 1)


def _inner_lognormal(ys, start=None, *, rough=False):
    ly = np.log(ys)
    n = ys.shape[1]
    sly = _rowsum(ly)
    mu = sly / n
    c = ly - mu[:, None]
    var = _rowsum(c * c) / n
    with np.errstate(divide="ignore"):
        ll = -sly - 0.5 * n * (_LOG_2PI + np.log(var)) - 0.5 * n
    return ll, {"log_mean": mu, "log_sd": np.sqrt(var)}, None


def _dtheta_lognormal(ys, p):
    r = 1.0 / ys
    return _rowsum(r) + _rowsum((np.log(ys) - p["log_mean"][:, None]) * r) / p["log_sd"] ** 2


def _inner_weibull(ys, start=None, *, rough=False):
    """Row-wise Weibull ML (same root as :func:`_weibull_fit`); ``rough=True`` (the profile
    grid) stops at a relative Newton step of 1e-2 instead of 1e-6 (quadratic convergence: the
    shape is then within about 1e-4 of the root, the log-likelihood within n 1e-8: ample to
    rank grid points a decade apart)."""
    n = ys.shape[1]
    ly = np.log(ys)
    slog = _rowsum(ly)
    z = ly - (slog / n)[:, None]
    zmax = _max_reduce(z, 1)
    zs = z - zmax[:, None]
    k = 1.2825 / np.sqrt(_rowsum(z * z) / n) if start is None else start[0]
    tol = 1e-2 if rough else 1e-6
    lo = np.zeros_like(k)
    hi = np.full_like(k, np.inf)
    for _ in range(100):
        w = np.exp(k[:, None] * zs)
        sw = _rowsum(w)
        wz = w * z
        mz = _rowsum(wz) / sw
        g = mz - 1.0 / k
        vz = _rowsum(wz * z) / sw - mz * mz
        below = g < 0
        lo = np.where(below, k, lo)
        hi = np.where(below, hi, k)
        k_new = k - g / (vz + 1.0 / (k * k))
        bad = ~((k_new >= lo) & (k_new <= hi))
        step = np.abs(k_new - k)
        # converged: a step below 1e-10 k, or a Newton step below 1e-6 k (the next correction
        # is of order step^2, below 1e-11 k)
        if _any(bad):
            k_new = np.where(bad, np.where(np.isfinite(hi), 0.5 * (lo + hi), 2.0 * k), k_new)
            step = np.abs(k_new - k)
            done = (step <= 1e-10 * k) | (~bad & (step <= tol * k))
        else:
            done = step <= tol * k
        k = k_new
        if _all(done):
            break
    w = np.exp(k[:, None] * zs)
    log_scale = slog / n + zmax + np.log(_rowsum(w) / n) / k
    ll = n * np.log(k) - n * k * log_scale + (k - 1.0) * slog - n
    return ll, {"shape": k, "scale": np.exp(log_scale)}, (k,)


def _dtheta_weibull(ys, p):
    k, lam = p["shape"][:, None], p["scale"][:, None]
    r = 1.0 / ys
    t = (ys / lam) ** k
    return p["shape"] * _rowsum(t * r) - (p["shape"] - 1.0) * _rowsum(r)


def _inner_gamma(ys, start=None, *, rough=False):
    """Row-wise gamma ML (same root and iteration as :func:`_gamma_fit`); ``rough=True``
    (the profile grid) stops at a relative Newton step of 1e-2 instead of 1e-5 (the shape is
    then within about 1e-4 of the root, as for :func:`_inner_weibull`)."""
    n = ys.shape[1]
    mean = _rowsum(ys) / n
    sly = _rowsum(np.log(ys))
    s = np.log(mean) - sly / n
    s = np.where(s > 0, s, np.nan)
    large = s < 1e-4  # asymptotic root, as in _gamma_fit
    k = np.where(large, (np.sqrt(0.25 + s / 3.0) + 0.5) / (2.0 * s),
                 (3.0 - s + np.sqrt((s - 3.0) ** 2 + 24.0 * s)) / (12.0 * s))
    for _ in range(50):
        f = np.log(k) - special.digamma(k) - s
        fp = 1.0 / k - special.zeta(2.0, k)
        with np.errstate(divide="ignore", invalid="ignore"):
            k_new = 1.0 / (1.0 / k + f / (k * k * fp))
        newton = k_new > 0
        k_new = np.where(large, k, np.where(newton, k_new, 0.5 * k))
        # rounding noise of s limits very large k to 1e-8; a Newton step below 1e-5 k leaves a
        # correction of order step^2 (quadratic convergence)
        step = np.abs(k_new - k)
        done = (step <= 1e-8 * k) | (newton & (step <= (1e-2 if rough else 1e-5) * k))
        k = k_new
        if _all(done):
            break
    scale = mean / k
    ll = (k - 1.0) * sly - n * k - n * k * np.log(scale) - n * special.gammaln(k)
    # the shapes start the scalar iteration of single thresholds (_single_gamma); the
    # row-wise iteration itself always starts from Minka's value
    return ll, {"shape": k, "scale": scale}, (k,)


def _dtheta_gamma(ys, p):
    return ys.shape[1] / p["scale"] - (p["shape"] - 1.0) * _rowsum(1.0 / ys)


def _inner_loglogistic(ys, start=None, *, rough=False):
    """Row-wise loglogistic ML: logistic Newton iteration (see :func:`_ls_fit`) per row;
    ``rough=True`` (the profile grid) stops after a full step from a decrement below 1e-3
    instead of 1e-5."""
    n = ys.shape[1]
    ly = np.log(ys)
    m = _rowsum(ly) / n
    c = ly - m[:, None]
    sd = np.sqrt(_rowsum(c * c) / n)
    v = c / sd[:, None]
    vv = v * v
    # start: location = median, scale = mean absolute deviation from the median / (2 ln 2)
    # (the logistic's E|X - mu| = 2 s ln 2; less swayed than the sd by the one far reading of
    # a threshold close to min(x): half the Newton steps on the profile grid)
    if start is None:
        med = _median(v, axis=1)
        a = (2.0 * math.log(2.0) * n) / _rowsum(np.abs(v - med[:, None]))
        b = med * a
    else:
        a, b = start

    # sums of v and v^2 per row (n and 0 up to rounding): the Hessian sums below use
    # sum (1 - t^2) w = sum w - sum t^2 w, with t = tanh(z/2)
    s_v, s_vv = _rowsum(v), _rowsum(vv)
    tol = 1e-3 if rough else 1e-5

    def ev(a, b):
        """Log-likelihood (standardised units), t = tanh(z/2) and t^2 at z = a v - b; the
        log-density derivatives of :func:`_logistic_terms` are -t and -(1 - t^2)/2."""
        z = a[:, None] * v - b[:, None]
        az = np.abs(z)
        t = np.tanh(0.5 * z)
        lg = _rowsum(az) + 2.0 * _rowsum(np.log1p(np.exp(-az)))
        return n * np.log(a) - lg, t, t * t

    ll, t1, q1 = ev(a, b)
    for _ in range(100):
        ga = n / a - _rowsum(t1 * v)
        gb = _rowsum(t1)
        haa = -0.5 * (s_vv - _rowsum(q1 * vv)) - n / (a * a)
        hab = 0.5 * (s_v - _rowsum(q1 * v))
        hbb = -0.5 * (n - _rowsum(q1))
        det = haa * hbb - hab * hab
        da = -(hbb * ga - hab * gb) / det
        db = -(haa * gb - hab * ga) / det
        dec = ga * da + gb * db
        if not _max_reduce(dec) > 1e-9:
            break
        an = a + da
        if _all(an > 0):  # the full Newton step, accepted when no likelihood decreases
            lln, t1n, q1n = ev(an, b + db)
            if _all(lln >= ll - 1e-12 * np.abs(ll)):
                a, b, ll, t1, q1 = an, b + db, lln, t1n, q1n
                if _max_reduce(dec) < tol:
                    break  # a full Newton step from a decrement below 1e-5 leaves ~1e-10
                continue
        t = np.ones_like(a)  # step halving, row by row
        for _ in range(40):
            an = a + t * da
            an_ok = an > 0
            lln, t1n, q1n = ev(np.where(an_ok, an, a), b + t * db)
            good = an_ok & (lln >= ll - 1e-12 * np.abs(ll))
            if _all(good):
                break
            t = np.where(good, t, 0.5 * t)
        keep = good[:, None]
        a = np.where(good, an, a)
        b = np.where(good, b + t * db, b)
        ll = np.where(good, lln, ll)
        t1 = np.where(keep, t1n, t1)
        q1 = np.where(keep, q1n, q1)
    scale = sd / a
    loc = m + b * scale
    ll_orig = ll - n * np.log(sd) - _rowsum(ly)
    return ll_orig, {"shape": 1.0 / scale, "scale": np.exp(loc)}, (a, b)


def _dtheta_loglogistic(ys, p):
    c = p["shape"][:, None]
    z = c * (np.log(ys) - np.log(p["scale"])[:, None])
    return _rowsum((1.0 + c * np.tanh(0.5 * z)) / ys)


def _single_weibull(y, start=None):
    """:func:`_inner_weibull` for one row by the scalar :func:`_weibull_fit` (same root)."""
    k, scale, ll = _weibull_fit(np.log(y), None if start is None else float(start[0][0]))
    return np.array([ll]), {"shape": np.array([k]), "scale": np.array([scale])}, (np.array([k]),)


def _single_gamma(y, start=None):
    """:func:`_inner_gamma` for one row by the scalar :func:`_gamma_fit` (same root)."""
    try:
        k, scale, ll = _gamma_fit(y, None if start is None else float(start[0][0]))
    except AnalysisError:  # no spread left in double precision: not a candidate
        k = scale = ll = math.nan
    return np.array([ll]), {"shape": np.array([k]), "scale": np.array([scale])}, (np.array([k]),)


def _single_loglogistic(y, start=None):
    """:func:`_inner_loglogistic` for one row by the scalar :func:`_ls_fit` (same root)."""
    ly = np.log(y)
    if start is None:
        loc, s, ll, ab, _ = _ls_fit(ly, _logistic_terms, *_logistic_start(ly))
    else:
        loc, s, ll, ab, _ = _ls_fit(ly, _logistic_terms, 0.0, 1.0,
                                    start=(float(start[0][0]), float(start[1][0])))
    return (np.array([ll - float(_add_reduce(ly))]),
            {"shape": np.array([1.0 / s]), "scale": np.array([math.exp(loc)])},
            (np.array([ab[0]]), np.array([ab[1]])))


#: scalar versions of the row-wise inner fits, used by _profile_threshold for one threshold
_SINGLE = {"_inner_weibull": _single_weibull, "_inner_gamma": _single_gamma,
           "_inner_loglogistic": _single_loglogistic}


# ---------------------------------------------------------------------------------------------
# Input checks
# ---------------------------------------------------------------------------------------------
def _clean(x, *, name="x", minimum=3) -> np.ndarray:
    return check_sample(
        x, name=name, minimum=minimum, before="fitting a distribution",
        needed_for="fitting a distribution",
        zero_spread="no distribution can be fitted. Check the gauge resolution or the data "
                    "import.",
    )


# ---------------------------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------------------------
def _f(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


@dataclass(frozen=True)
class FittedModel:
    """One distribution family fitted to one sample by maximum likelihood.

    Attributes
    ----------
    family : Family
        The family object (``family.id``, ``family.label``, ``family.n_params``).
    name : str
        The family id, e.g. ``"weibull3"``.
    parameters : dict
        Estimated parameters by name (``shape``, ``scale``, ``threshold``, ``mean``, ``sd``,
        ``log_mean``, ``log_sd``, ``location``); only estimated ones.
    n : int
        Number of readings fitted.
    loglik, aic, bic : float
        Log-likelihood at the estimate; AIC = 2p - 2 loglik; BIC = p ln n - 2 loglik, with p
        the number of estimated parameters.
    ad_statistic : float
        Anderson-Darling A^2 of the data against the fitted cdf (unmodified). For normal and
        lognormal it uses the standard deviation with divisor n-1, as D'Agostino & Stephens
        case 3 and scipy.stats.anderson do, so it equals the normality-test value.
    ad_p_value : float or None
        p-value where the literature gives one (see :data:`Family.ad_p_source`); at the edge of
        a critical-value table the edge level is returned and ``ad_p_text`` says ">" or "<".
    ad_p_text : str or None
        The p-value as text, e.g. ``"0.0431"``, ``">0.25"``, ``"<0.01"``.
    converged : bool
        False when the estimate sits at a search limit (see ``note``).
    note : str or None
        How the estimate was obtained when that matters.
    """

    family: Family = field(repr=False)
    name: str
    parameters: dict
    n: int
    loglik: float
    aic: float
    bic: float
    ad_statistic: float
    ad_p_value: float | None
    ad_p_text: str | None
    converged: bool = True
    note: str | None = None

    @cached_property
    def dist(self):
        """The scipy.stats frozen distribution of the fitted model."""
        return self.family.frozen(self.parameters)

    def cdf(self, x):
        """Cumulative probability at x."""
        return self.dist.cdf(x)

    def sf(self, x):
        """Survival function 1 - F(x), accurate in the upper tail."""
        return self.dist.sf(x)

    def ppf(self, q):
        """Quantile function: the value below which a fraction q of the model lies."""
        return self.dist.ppf(q)

    def pdf(self, x):
        """Density at x."""
        return self.dist.pdf(x)

    def rvs(self, size, *, random_state):
        """Random draws from the fitted model; ``random_state`` (seed or Generator) required."""
        return self.dist.rvs(size=size, random_state=np.random.default_rng(random_state)
                             if not isinstance(random_state, np.random.Generator)
                             else random_state)

    def to_dict(self) -> dict:
        """JSON-safe summary."""
        return {
            "family": self.name,
            "label": self.family.label,
            "n_params": self.family.n_params,
            "parameters": {k: _f(v) for k, v in self.parameters.items()},
            "n": int(self.n),
            "loglik": _f(self.loglik),
            "aic": _f(self.aic),
            "bic": _f(self.bic),
            "ad_statistic": _f(self.ad_statistic),
            "ad_p_value": _f(self.ad_p_value),
            "ad_p_text": self.ad_p_text,
            "ad_p_source": self.family.ad_p_source,
            "converged": bool(self.converged),
            "note": self.note,
        }


# ---------------------------------------------------------------------------------------------
# Families
# ---------------------------------------------------------------------------------------------
class Family:
    """Base class: a family declares its parameters, estimator and distribution mapping.

    Subclasses set ``id``, ``label``, ``param_names``, ``support`` (``"real"``,
    ``"positive"``, ``"nonnegative"`` or ``"above_threshold"``), ``base_id`` (the nested
    variant without threshold, for the likelihood-ratio test), ``ad_p_source`` and implement
    ``_estimate(x) -> (params, converged, note)``, ``frozen(params)`` and the fast
    ``_logpdf / _logcdf / _logsf(x, params)`` on the data. Everything else (checks,
    log-likelihood, AIC, BIC, Anderson-Darling) lives here.
    """

    id: str = ""
    label: str = ""
    param_names: tuple[str, ...] = ()
    support: str = "real"
    base_id: str | None = None
    ad_p_source: str | None = None
    minimum_n: int = 3

    @property
    def n_params(self) -> int:
        return len(self.param_names)

    def __repr__(self) -> str:
        return f"Family({self.id!r})"

    # -- to implement -------------------------------------------------------------------------
    def _estimate(self, x):  # pragma: no cover - abstract
        raise NotImplementedError

    def frozen(self, p):  # pragma: no cover - abstract
        raise NotImplementedError

    def _logpdf(self, x, p):  # pragma: no cover - abstract
        raise NotImplementedError

    def _logcdf(self, x, p):  # pragma: no cover - abstract
        raise NotImplementedError

    def _logsf(self, x, p):  # pragma: no cover - abstract
        raise NotImplementedError

    def _standard_draws(self, p, size, rng):  # pragma: no cover - abstract
        """Draws of the family's standard variable (location 0, scale 1) from the numpy
        Generator ``rng``, with the same calls scipy.stats' ``_rvs`` of the frozen
        distribution makes, so :meth:`sample` gives scipy's numbers."""
        raise NotImplementedError

    def _loc_scale(self, p):
        """(location, scale) that :meth:`frozen` passes to scipy.stats."""
        return _th(p), p["scale"]

    # -- shared -------------------------------------------------------------------------------
    def _ad(self, xs, p) -> float:
        return _ad_from_logs(self._logcdf(xs, p), self._logsf(xs, p))

    def _ad_p(self, a2, n, xs, p):
        return None, None

    def check(self, x: np.ndarray) -> None:
        """Raise :class:`AnalysisError` when the data cannot come from this family."""
        if x.size < self.minimum_n:
            raise AnalysisError(
                f"{self.label}: {x.size} readings; at least {self.minimum_n} are needed."
            )
        if self.support not in ("positive", "nonnegative"):
            return
        xmin = float(x.min())
        if self.support == "positive" and xmin <= 0:
            raise AnalysisError(
                f"{self.label} needs positive data; the smallest reading is {xmin:g}. Use the "
                "threshold variant or a family for real-valued data."
            )
        if self.support == "nonnegative" and xmin < 0:
            raise AnalysisError(
                f"{self.label} needs data >= 0 (a zero-bounded characteristic); the smallest "
                f"reading is {xmin:g}."
            )

    def fit(self, x) -> FittedModel:
        """Fit the family to the readings ``x`` by maximum likelihood.

        Parameters
        ----------
        x : array_like
            Finite readings (at least 3; 5 for threshold variants).

        Returns
        -------
        FittedModel

        Raises
        ------
        AnalysisError
            Data unsuitable for the family (non-positive, too few, no spread) or no
            interior likelihood maximum.

        Examples
        --------
        >>> m = FAMILIES["weibull"].fit([2.1, 3.4, 1.7, 2.8, 3.9, 2.2, 3.1])
        >>> m.name, round(m.parameters["shape"], 3), round(m.parameters["scale"], 3)
        ('weibull', 4.251, 3.022)
        >>> round(float(m.ppf(0.5)), 3), m.ad_p_text
        (2.773, '>0.25')
        """
        return self._fit_sorted(np.sort(_clean(x)))

    def sample(self, p, size, rng: np.random.Generator) -> np.ndarray:
        """Random readings from the model with parameters ``p``, drawn from the numpy
        Generator ``rng`` directly: ``standard draws * scale + location``, the arithmetic of
        scipy.stats' ``rvs`` of :meth:`frozen` (same stream, same numbers) without building
        a frozen distribution."""
        loc, scale = self._loc_scale(p)
        return self._standard_draws(p, size, rng) * scale + loc

    def _fit_sorted(self, xs: np.ndarray) -> FittedModel:
        """Fit to readings already checked by ``_clean`` and sorted (fit_all's path)."""
        self.check(xs)
        params, converged, note = self._estimate(xs)
        params = {k: float(v) for k, v in params.items()}
        n = xs.size
        loglik = float(_add_reduce(self._logpdf(xs, params)))
        k = self.n_params
        a2 = self._ad(xs, params)
        p, ptext = self._ad_p(a2, n, xs, params) if math.isfinite(a2) else (None, None)
        return FittedModel(
            family=self, name=self.id, parameters=params, n=n, loglik=loglik,
            aic=2.0 * k - 2.0 * loglik, bic=k * math.log(n) - 2.0 * loglik,
            ad_statistic=a2, ad_p_value=p, ad_p_text=ptext, converged=converged, note=note,
        )


def _th(p):
    return p.get("threshold", 0.0)


class _Normal(Family):
    id, label, param_names = "normal", "Normal", ("mean", "sd")
    ad_p_source = "D'Agostino & Stephens (1986) Table 4.9, case 3"

    def _estimate(self, x):
        m, sd = _mean_sd(x)
        return {"mean": m, "sd": sd}, True, None

    def frozen(self, p):
        return stats.norm(p["mean"], p["sd"])
    def _loc_scale(self, p):
        return p["mean"], p["sd"]

    def _standard_draws(self, p, size, rng):
        return rng.standard_normal(size)


    def _logpdf(self, x, p):
        z = (x - p["mean"]) / p["sd"]
        return -0.5 * z * z - math.log(p["sd"]) - 0.5 * _LOG_2PI

    def _logcdf(self, x, p):
        return special.log_ndtr((x - p["mean"]) / p["sd"])

    def _logsf(self, x, p):
        return special.log_ndtr((p["mean"] - x) / p["sd"])

    def _ad(self, xs, p):
        m, sd = _mean_sd(xs, 1)
        z = (xs - m) / sd
        return _ad_from_logs(special.log_ndtr(z), special.log_ndtr(-z))

    def _ad_p(self, a2, n, xs, p):
        return _ad_p_normal(a2, n)


class _Lognormal(Family):
    id, label, param_names = "lognormal", "Lognormal", ("log_mean", "log_sd")
    support = "positive"
    ad_p_source = "D'Agostino & Stephens (1986) Table 4.9, case 3, on log(x - threshold)"

    def _estimate(self, x):
        ly = np.log(x)
        m, sd = _mean_sd(ly)
        return {"log_mean": m, "log_sd": sd}, True, None

    def frozen(self, p):
        return stats.lognorm(p["log_sd"], loc=_th(p), scale=math.exp(p["log_mean"]))
    def _loc_scale(self, p):
        return _th(p), math.exp(p["log_mean"])

    def _standard_draws(self, p, size, rng):
        return np.exp(p["log_sd"] * rng.standard_normal(size))


    def _z(self, x, p):
        return (np.log(x - _th(p)) - p["log_mean"]) / p["log_sd"]

    def _logpdf(self, x, p):
        ly = np.log(x - _th(p))
        z = (ly - p["log_mean"]) / p["log_sd"]
        return -0.5 * z * z - math.log(p["log_sd"]) - 0.5 * _LOG_2PI - ly

    def _logcdf(self, x, p):
        return special.log_ndtr(self._z(x, p))

    def _logsf(self, x, p):
        return special.log_ndtr(-self._z(x, p))

    def _ad(self, xs, p):
        ly = np.log(xs - _th(p))
        m, sd = _mean_sd(ly, 1)
        z = (ly - m) / sd
        return _ad_from_logs(special.log_ndtr(z), special.log_ndtr(-z))

    def _ad_p(self, a2, n, xs, p):
        return _ad_p_normal(a2, n)


class _Lognormal3(_Lognormal):
    id, label = "lognormal3", "Lognormal, 3-parameter"
    param_names = ("log_mean", "log_sd", "threshold")
    support, base_id, ad_p_source, minimum_n = "real", "lognormal", None, 5

    def _estimate(self, x):
        theta, params, _, conv, note = _profile_threshold(x, _inner_lognormal, _dtheta_lognormal,
                                                         self.label)
        return {**params, "threshold": theta}, conv, note

    def _ad_p(self, a2, n, xs, p):
        return None, None


class _Weibull(Family):
    id, label, param_names = "weibull", "Weibull", ("shape", "scale")
    support = "positive"
    ad_p_source = ("Stephens (1977); D'Agostino & Stephens (1986) Table 4.17 (extreme value "
                   "on log x), interpolated")

    def _estimate(self, x):
        k, scale, _ = _weibull_fit(np.log(x))
        return {"shape": k, "scale": scale}, True, None

    def frozen(self, p):
        return stats.weibull_min(p["shape"], loc=_th(p), scale=p["scale"])
    def _standard_draws(self, p, size, rng):  # scipy's inverse-cdf default
        return pow(-special.log1p(-rng.uniform(size=size)), 1.0 / p["shape"])


    def _t(self, x, p):
        return ((x - _th(p)) / p["scale"]) ** p["shape"]

    def _logpdf(self, x, p):
        k, lam = p["shape"], p["scale"]
        ly = np.log((x - _th(p)) / lam)
        return math.log(k / lam) + (k - 1.0) * ly - np.exp(k * ly)

    def _logcdf(self, x, p):
        t = self._t(x, p)
        return np.log(-np.expm1(-t))

    def _logsf(self, x, p):
        return -self._t(x, p)

    def _ad(self, xs, p):  # _logcdf and _logsf from one power
        t = self._t(xs, p)
        return _ad_from_logs(np.log(-np.expm1(-t)), -t)

    def _ad_p(self, a2, n, xs, p):
        return _ad_p_table(a2, n, _AD_EV)


class _Weibull3(_Weibull):
    id, label = "weibull3", "Weibull, 3-parameter"
    param_names = ("shape", "scale", "threshold")
    support, base_id, ad_p_source, minimum_n = "real", "weibull", None, 5

    def _estimate(self, x):
        theta, params, _, conv, note = _profile_threshold(x, _inner_weibull, _dtheta_weibull,
                                                         self.label)
        return {**params, "threshold": theta}, conv, note

    def _ad_p(self, a2, n, xs, p):
        return None, None


class _Gamma(Family):
    id, label, param_names = "gamma", "Gamma", ("shape", "scale")
    support = "positive"

    def _estimate(self, x):
        k, scale, _ = _gamma_fit(x)
        return {"shape": k, "scale": scale}, True, None

    def frozen(self, p):
        return stats.gamma(p["shape"], loc=_th(p), scale=p["scale"])
    def _standard_draws(self, p, size, rng):
        return rng.standard_gamma(p["shape"], size)


    def _logpdf(self, x, p):
        k, s = p["shape"], p["scale"]
        y = x - _th(p)
        return (k - 1.0) * np.log(y) - y / s - k * math.log(s) - special.gammaln(k)

    def _logcdf(self, x, p):
        return np.log(np.maximum(special.gammainc(p["shape"], (x - _th(p)) / p["scale"]),
                                 _TINY))

    def _logsf(self, x, p):
        return np.log(np.maximum(special.gammaincc(p["shape"], (x - _th(p)) / p["scale"]),
                                 _TINY))

    def _ad(self, xs, p):
        # each sorted reading needs one incomplete gamma function, not two: below the
        # median P = gammainc (then ln(1 - F) = log1p(-P)), above it Q = gammaincc (then
        # ln F = log1p(-Q)); both log1p terms stay accurate as P, Q < ~0.6
        k = p["shape"]
        z = (xs - _th(p)) / p["scale"]
        cut = int(np.searchsorted(z, k * (1.0 - 1.0 / (9.0 * k)) ** 3))  # Wilson-Hilferty
        lower, upper = z[:cut], z[cut:]
        pl = special.gammainc(k, lower)
        qu = special.gammaincc(k, upper)
        logcdf = np.concatenate((np.log(np.maximum(pl, _TINY)), np.log1p(-qu)))
        logsf = np.concatenate((np.log1p(-pl), np.log(np.maximum(qu, _TINY))))
        return _ad_from_logs(logcdf, logsf)


class _Gamma3(_Gamma):
    id, label = "gamma3", "Gamma, 3-parameter"
    param_names = ("shape", "scale", "threshold")
    support, base_id, minimum_n = "real", "gamma", 5

    def _estimate(self, x):
        theta, params, _, conv, note = _profile_threshold(x, _inner_gamma, _dtheta_gamma,
                                                         self.label)
        return {**params, "threshold": theta}, conv, note


class _Exponential(Family):
    id, label, param_names = "exponential", "Exponential", ("scale",)
    support = "positive"
    ad_p_source = "D'Agostino & Stephens (1986) Table 4.14 (scale estimated), interpolated"

    def _estimate(self, x):
        return {"scale": float(_add_reduce(x)) / x.size}, True, None

    def frozen(self, p):
        return stats.expon(loc=_th(p), scale=p["scale"])
    def _standard_draws(self, p, size, rng):
        return rng.standard_exponential(size)


    def _logpdf(self, x, p):
        return -math.log(p["scale"]) - (x - _th(p)) / p["scale"]

    def _logcdf(self, x, p):
        return np.log(-np.expm1(-(x - _th(p)) / p["scale"]))

    def _logsf(self, x, p):
        return -(x - _th(p)) / p["scale"]

    def _ad_p(self, a2, n, xs, p):
        return _ad_p_table(a2, n, _AD_EXPON)


class _Exponential2(_Exponential):
    id, label = "exponential2", "Exponential, 2-parameter"
    param_names = ("scale", "threshold")
    support, base_id, ad_p_source = "real", "exponential", None

    def _estimate(self, x):
        n = x.size
        x1 = float(x.min())
        scale = n * (float(_add_reduce(x)) / n - x1) / (n - 1)
        note = ("unbiased estimates (the likelihood maximum puts the threshold at the smallest "
                "reading)")
        return {"scale": scale, "threshold": x1 - scale / n}, True, note

    def _ad_p(self, a2, n, xs, p):
        return None, None


class _Logistic(Family):
    id, label, param_names = "logistic", "Logistic", ("location", "scale")
    ad_p_source = "Stephens (1979); D'Agostino & Stephens (1986) Table 4.22, interpolated"

    def _estimate(self, x):
        loc, s, _, _, conv = _ls_fit(x, _logistic_terms, *_logistic_start(x))
        return {"location": loc, "scale": s}, conv, None

    def frozen(self, p):
        return stats.logistic(p["location"], p["scale"])
    def _loc_scale(self, p):
        return p["location"], p["scale"]

    def _standard_draws(self, p, size, rng):
        return rng.logistic(size=size)


    def _logpdf(self, x, p):
        return _logistic_logpdf((x - p["location"]) / p["scale"]) - math.log(p["scale"])

    def _logcdf(self, x, p):
        return -np.logaddexp(0.0, -(x - p["location"]) / p["scale"])

    def _logsf(self, x, p):
        return -np.logaddexp(0.0, (x - p["location"]) / p["scale"])

    def _ad_p(self, a2, n, xs, p):
        return _ad_p_table(a2, n, _AD_LOGISTIC)


class _Loglogistic(Family):
    id, label, param_names = "loglogistic", "Loglogistic", ("shape", "scale")
    support = "positive"
    ad_p_source = ("Stephens (1979); D'Agostino & Stephens (1986) Table 4.22 on log x, "
                   "interpolated")

    def _estimate(self, x):
        ly = np.log(x)
        loc, s, _, _, conv = _ls_fit(ly, _logistic_terms, *_logistic_start(ly))
        return {"shape": 1.0 / s, "scale": math.exp(loc)}, conv, None

    def frozen(self, p):
        return stats.fisk(p["shape"], loc=_th(p), scale=p["scale"])
    def _standard_draws(self, p, size, rng):  # scipy's inverse-cdf default (fisk = burr d=1)
        q = rng.uniform(size=size)
        return (q ** (-1.0 / 1.0) - 1) ** (-1.0 / p["shape"])


    def _w(self, x, p):
        return p["shape"] * (np.log(x - _th(p)) - math.log(p["scale"]))

    def _logpdf(self, x, p):
        ly = np.log(x - _th(p))
        w = p["shape"] * (ly - math.log(p["scale"]))
        return _logistic_logpdf(w) + math.log(p["shape"]) - ly

    def _logcdf(self, x, p):
        return -np.logaddexp(0.0, -self._w(x, p))

    def _logsf(self, x, p):
        return -np.logaddexp(0.0, self._w(x, p))

    def _ad(self, xs, p):  # _logcdf and _logsf from one log
        w = self._w(xs, p)
        return _ad_from_logs(-np.logaddexp(0.0, -w), -np.logaddexp(0.0, w))

    def _ad_p(self, a2, n, xs, p):
        return _ad_p_table(a2, n, _AD_LOGISTIC)


class _Loglogistic3(_Loglogistic):
    id, label = "loglogistic3", "Loglogistic, 3-parameter"
    param_names = ("shape", "scale", "threshold")
    support, base_id, ad_p_source, minimum_n = "real", "loglogistic", None, 5

    def _estimate(self, x):
        theta, params, _, conv, note = _profile_threshold(
            x, _inner_loglogistic, _dtheta_loglogistic, self.label)
        return {**params, "threshold": theta}, conv, note

    def _ad_p(self, a2, n, xs, p):
        return None, None


class _SEV(Family):
    id, label, param_names = "sev", "Smallest extreme value", ("location", "scale")
    ad_p_source = "Stephens (1977); D'Agostino & Stephens (1986) Table 4.17, interpolated"

    def _estimate(self, x):
        loc, s, _, _, conv = _ls_fit(x, _sev_terms, *_sev_start(x))
        return {"location": loc, "scale": s}, conv, None

    def frozen(self, p):
        return stats.gumbel_l(p["location"], p["scale"])
    def _loc_scale(self, p):
        return p["location"], p["scale"]

    def _standard_draws(self, p, size, rng):  # scipy's inverse-cdf default
        return np.log(-special.log1p(-rng.uniform(size=size)))


    def _z(self, x, p):
        return (x - p["location"]) / p["scale"]

    def _logpdf(self, x, p):
        z = self._z(x, p)
        return z - np.exp(z) - math.log(p["scale"])

    def _logcdf(self, x, p):
        return np.log(-np.expm1(-np.exp(self._z(x, p))))

    def _logsf(self, x, p):
        return -np.exp(self._z(x, p))

    def _ad(self, xs, p):  # _logcdf and _logsf from one exponential
        e = np.exp(self._z(xs, p))
        return _ad_from_logs(np.log(-np.expm1(-e)), -e)

    def _ad_p(self, a2, n, xs, p):
        return _ad_p_table(a2, n, _AD_EV)


class _LEV(_SEV):
    id, label = "lev", "Largest extreme value"

    def _estimate(self, x):
        loc, s, _, _, conv = _ls_fit(x, _lev_terms, *_lev_start(x))
        return {"location": loc, "scale": s}, conv, None

    def frozen(self, p):
        return stats.gumbel_r(p["location"], p["scale"])
    def _standard_draws(self, p, size, rng):  # scipy's inverse-cdf default
        return -np.log(-np.log(rng.uniform(size=size)))


    def _logpdf(self, x, p):
        z = self._z(x, p)
        return -z - np.exp(-z) - math.log(p["scale"])

    def _logcdf(self, x, p):
        return -np.exp(-self._z(x, p))

    def _logsf(self, x, p):
        return np.log(-np.expm1(-np.exp(-self._z(x, p))))

    def _ad(self, xs, p):  # _logcdf and _logsf from one exponential
        e = np.exp(-self._z(xs, p))
        return _ad_from_logs(-e, np.log(-np.expm1(-e)))


class _Halfnormal(Family):
    id, label, param_names = "halfnormal", "Half-normal (zero-bounded)", ("scale",)
    support = "nonnegative"

    def _estimate(self, x):
        return {"scale": math.sqrt(float(x @ x) / x.size)}, True, None

    def frozen(self, p):
        return stats.halfnorm(0.0, p["scale"])
    def _loc_scale(self, p):
        return 0.0, p["scale"]

    def _standard_draws(self, p, size, rng):
        return abs(rng.standard_normal(size=size))


    def _logpdf(self, x, p):
        z = x / p["scale"]
        return 0.5 * math.log(2.0 / math.pi) - math.log(p["scale"]) - 0.5 * z * z

    def _logcdf(self, x, p):
        return np.log(np.maximum(special.erf(x / (p["scale"] * math.sqrt(2.0))), _TINY))

    def _logsf(self, x, p):
        return math.log(2.0) + special.log_ndtr(-x / p["scale"])


#: Every family by id, in display order.
FAMILIES: dict[str, Family] = {
    f.id: f for f in (
        _Normal(), _Lognormal(), _Lognormal3(), _Weibull(), _Weibull3(), _Gamma(), _Gamma3(),
        _Exponential(), _Exponential2(), _Logistic(), _Loglogistic(), _Loglogistic3(), _SEV(),
        _LEV(), _Halfnormal(),
    )
}


# ---------------------------------------------------------------------------------------------
# Ranking
# ---------------------------------------------------------------------------------------------
RANKING_RULE = ("AIC ascending among converged fits, then fits at a search limit "
                "(converged=False), then families that could not be fitted; ties broken by the "
                "smaller Anderson-Darling statistic")


@dataclass(frozen=True)
class FitRow:
    """One line of the ranking table (numbers None when the family could not be fitted).

    ``lrt_p_value`` compares a threshold variant with its two-parameter base (``lrt_against``):
    chi-square with 1 degree of freedom on 2 (loglik3 - loglik2). The reference distribution
    is approximate: threshold estimation is non-regular for small shapes (Smith 1985).
    """

    rank: int
    id: str
    label: str
    n_params: int
    loglik: float | None
    aic: float | None
    bic: float | None
    ad_statistic: float | None
    ad_p_value: float | None
    ad_p_text: str | None
    lrt_p_value: float | None
    lrt_against: str | None
    converged: bool
    error: str | None
    note: str | None

    def to_dict(self) -> dict:
        out = {}
        for name in ROW_FIELDS:
            v = getattr(self, name)
            out[name] = _f(v) if isinstance(v, float) else v
        out["converged"] = bool(self.converged)
        return out


#: Column names of the ranking table, defined once for the JSON, the table and the report.
ROW_FIELDS = ("rank", "id", "label", "n_params", "loglik", "aic", "bic", "ad_statistic",
              "ad_p_value", "ad_p_text", "lrt_p_value", "lrt_against", "converged", "error",
              "note")


@dataclass(frozen=True)
class Ranking:
    """Result of :func:`fit_all`.

    Attributes
    ----------
    rows : tuple of FitRow
        One per requested family, best first (see ``rule``).
    models : dict
        Family id -> FittedModel, for the families that could be fitted.
    n : int
        Number of readings.
    rule : str
        The ranking rule in words.
    """

    rows: tuple
    models: dict
    n: int
    rule: str = RANKING_RULE

    @property
    def best(self) -> FittedModel | None:
        """The first-ranked fitted model (None when nothing could be fitted)."""
        if self.rows and self.rows[0].id in self.models:
            return self.models[self.rows[0].id]
        return None

    def to_dict(self) -> dict:
        return {
            "n": int(self.n),
            "rule": self.rule,
            "best": None if self.best is None else self.best.name,
            "rows": [r.to_dict() for r in self.rows],
            "models": {k: m.to_dict() for k, m in self.models.items()},
        }


def fit_all(x, *, families=None) -> Ranking:
    """Fit several distribution families to one sample and rank them.

    Parameters
    ----------
    x : array_like
        Finite readings, at least 3.
    families : sequence of str, optional
        Family ids from :data:`FAMILIES`; all of them by default.

    Returns
    -------
    Ranking
        ``rows`` (rank, id, label, n_params, loglik, aic, bic, ad_statistic, ad_p_value,
        ad_p_text, lrt_p_value, lrt_against, converged, error, note), ``models``, ``best``,
        ``n``, ``rule``.

    Notes
    -----
    AIC = 2p - 2 ln L, BIC = p ln n - 2 ln L (p estimated parameters). Likelihood-ratio test of
    a threshold variant against its two-parameter base: 2 (ln L3 - ln L2) ~ chi-square(1); the
    base fixes the threshold at 0, an interior point when min(x) > 0, but the reference
    distribution is only approximate because threshold estimation is non-regular for small
    shapes (Smith 1985); for exponential2 the estimate is not the likelihood maximum (see the
    module notes) and the statistic is floored at 0. Families needing positive data are
    skipped, with the reason in ``error``, when a reading is <= 0.

    References
    ----------
    D'Agostino, R. B. & Stephens, M. A. (1986). Goodness-of-Fit Techniques. Dekker. Tables 4.9,
    4.14, 4.17, 4.22.
    Smith, R. L. (1985). Maximum likelihood estimation in a class of nonregular cases.
    Biometrika 72, 67-90.
    Cheng, R. C. H. & Amin, N. A. K. (1983). Estimating parameters in continuous univariate
    distributions with a shifted origin. JRSS B 45, 394-403.
    Minka, T. (2002). Estimating a gamma distribution. Technical note, Microsoft Research.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(1).weibull(2.0, size=100) * 10.0
    >>> r = fit_all(x, families=["normal", "weibull", "lognormal"])
    >>> [row.id for row in r.rows]
    ['weibull', 'lognormal', 'normal']
    >>> round(r.best.parameters["shape"], 3)
    1.893
    """
    x = np.sort(_clean(x))
    if families is None:
        ids = list(FAMILIES)
    else:
        if isinstance(families, str):
            families = [families]
        ids = list(families)
        unknown = [f for f in ids if f not in FAMILIES]
        if unknown:
            raise StudyInputError(
                f"`families` contains unknown id(s) {unknown}; choose from {list(FAMILIES)}."
            )
    models: dict[str, FittedModel] = {}
    errors: dict[str, str] = {}
    for fid in ids:
        try:
            models[fid] = FAMILIES[fid]._fit_sorted(x)
        except AnalysisError as exc:
            errors[fid] = str(exc)
    rows = []
    for fid in ids:
        fam = FAMILIES[fid]
        m = models.get(fid)
        if m is None:
            rows.append(dict(id=fid, label=fam.label, n_params=fam.n_params, loglik=None,
                             aic=None, bic=None, ad_statistic=None, ad_p_value=None,
                             ad_p_text=None, lrt_p_value=None, lrt_against=None,
                             converged=False, error=errors[fid], note=None))
            continue
        lrt = None
        against = None
        base = models.get(fam.base_id) if fam.base_id else None
        if base is not None:
            stat = max(0.0, 2.0 * (m.loglik - base.loglik))
            lrt = float(special.chdtrc(1.0, stat))
            against = base.name
        rows.append(dict(id=fid, label=fam.label, n_params=fam.n_params, loglik=m.loglik,
                         aic=m.aic, bic=m.bic, ad_statistic=m.ad_statistic,
                         ad_p_value=m.ad_p_value, ad_p_text=m.ad_p_text, lrt_p_value=lrt,
                         lrt_against=against, converged=m.converged, error=None, note=m.note))

    def key(r):
        if r["error"] is not None:
            return (2, 0.0, 0.0)
        ad = r["ad_statistic"] if math.isfinite(r["ad_statistic"]) else math.inf
        return (0 if r["converged"] else 1, r["aic"], ad)

    rows.sort(key=key)
    out = tuple(FitRow(rank=i + 1, **r) for i, r in enumerate(rows))
    return Ranking(rows=out, models=models, n=int(x.size))
