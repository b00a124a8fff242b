"""Normalising transformations: Box-Cox (with a lambda interval) and the Johnson system.

Both return a frozen result whose ``transform`` and ``inverse`` methods apply to any values,
readings and specification limits alike, so a capability study can run on the transformed
scale and report on the original one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from studykit.errors import AnalysisError, StudyInputError
from studykit.stats._checks import check_sample
from studykit.stats.lazy import LazyModule
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.result import Result
from studykit.stats.result import json_float as _f

# imported on first use: scipy.integrate and scipy.optimize together cost about 0.3 s
optimize = LazyModule("scipy.optimize")

__all__ = ["BoxCoxResult", "JohnsonResult", "box_cox", "johnson", "NICE_LAMBDAS", "JOHNSON_Z_GRID"]

#: Convenient Box-Cox exponents (reciprocal square, reciprocal, reciprocal root, log, root,
#: none, square); common practice, no source.
NICE_LAMBDAS = (-2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 2.0)

#: z values tried by :func:`johnson` (Chou, Polansky & Mason 1998: 0.25 to 1.25 by 0.01).
JOHNSON_Z_GRID = tuple(round(0.25 + 0.01 * i, 2) for i in range(101))


def _clean(x, *, name="x", minimum=3) -> np.ndarray:
    return check_sample(
        x,
        name=name,
        minimum=minimum,
        before="transforming",
        needed_for="this transformation",
        zero_spread="no transformation can be estimated. Check the gauge resolution or the data "
        "import.",
    )


# ---------------------------------------------------------------------------------------------
# Box-Cox
# ---------------------------------------------------------------------------------------------
def _boxcox_llf(lam: float, lx: np.ndarray) -> float:
    """Profile log-likelihood (lam - 1) sum(log x) - n/2 log(var(y_lam)), var with divisor n.

    The variance is computed on a scaled copy for large |lam| to avoid overflow.
    """
    n = lx.size
    with np.errstate(all="ignore"):
        if abs(lam) < 1e-12:
            var = lx.var()
            logvar = math.log(var) if var > 0 else -math.inf
        elif abs(lam) * max(abs(lx.max()), abs(lx.min())) < 30.0:
            var = (np.expm1(lam * lx) / lam).var()
            logvar = math.log(var) if var > 0 else -math.inf
        else:
            c = lx.max() if lam > 0 else lx.min()
            var = np.exp(lam * (lx - c)).var()
            logvar = (
                math.log(var) + 2.0 * lam * c - 2.0 * math.log(abs(lam)) if var > 0 else -math.inf
            )
    if not math.isfinite(logvar):  # the spread vanished in rounding: no evidence here
        return -math.inf
    return (lam - 1.0) * float(lx.sum()) - 0.5 * n * logvar


#: Box-Cox is refused when the readings' relative spread (sd of log x) is below this: a power
#: transformation cannot change the shape of readings that agree to six digits, and lambda
#: would be set by rounding. Our threshold, no source.
BOXCOX_MIN_RELATIVE_SPREAD = 1e-6


def _var_slope(lam: float, ls: np.ndarray) -> float:
    """Half the derivative in lambda of var(y_lam) for centred logs ``ls`` (sum 0): with
    sum log u = 0 the profile log-likelihood is -n/2 log var(y_lam), so its maximum is the
    zero of this slope. y = expm1(lam ls)/lam, dy/dlam = (ls exp(lam ls) - y)/lam."""
    if abs(lam) < 1e-12:
        y, dy = ls, 0.5 * ls * ls
    else:
        a = lam * ls
        y = np.expm1(a) / lam
        dy = (ls * np.exp(a) - y) / lam
    return float(np.mean((y - y.mean()) * dy))


def _polish_lambda(lam: float, ls: np.ndarray) -> float:
    """Brent's maximum of the profile likelihood is only as precise as a comparison of nearly
    equal likelihoods allows (about 1e-8 relative); the zero of the likelihood's slope next to
    it is precise to rounding, so lambda comes out the same for the data in any unit."""
    if not math.isfinite(lam) or abs(lam) * float(np.abs(ls).max()) >= 30.0:
        return lam
    step = 1e-5 * max(1.0, abs(lam))
    lo, hi = lam - step, lam + step
    try:
        s_lo, s_hi = _var_slope(lo, ls), _var_slope(hi, ls)
        if not (math.isfinite(s_lo) and math.isfinite(s_hi)) or s_lo * s_hi > 0:
            return lam
        return float(optimize.brentq(_var_slope, lo, hi, args=(ls,), xtol=1e-15))
    except (ValueError, RuntimeError, FloatingPointError):
        return lam


def _boxcox_forward(v: np.ndarray, lam: float) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        out = special.boxcox(np.where(v > 0, v, 1.0), lam)
    floor = -1.0 / lam if lam > 0 else -math.inf
    return np.where(v > 0, out, floor)


def _boxcox_backward(y: np.ndarray, lam: float) -> np.ndarray:
    if lam == 0:
        return np.exp(y)
    base = lam * y + 1.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        out = np.where(base > 0, np.power(np.where(base > 0, base, 1.0), 1.0 / lam), 0.0)
    if lam < 0:
        out = np.where(base > 0, out, math.inf)
    return out


@dataclass(frozen=True)
class BoxCoxResult(Result):
    """Result of :func:`box_cox`.

    Attributes
    ----------
    n : int
        Number of readings.
    lam : float
        Maximum likelihood lambda.
    lam_interval : tuple of float
        Profile-likelihood confidence interval for lambda at level 1 - alpha.
    alpha : float
        1 - confidence level of ``lam_interval``.
    lam_used : float
        The lambda the transformation applies (``lam`` or its rounded value).
    note : str or None
        Why ``lam_used`` differs from ``lam`` (or why it could not be rounded).
    shift : float
        Added to every value before transforming (0 for positive data).
    loglik, loglik_used : float
        Profile log-likelihood at ``lam`` and at ``lam_used``.
    transformed_mean, transformed_sd : float
        Mean and standard deviation (divisor n - 1) of the transformed readings.
    original_center, original_lower, original_upper : float
        ``inverse`` of the transformed mean and of mean -/+ 3 sd: the centre and the natural
        spread of the process on the original scale.
    shapiro_before, shapiro_after : tuple of float
        Shapiro-Wilk (W, p) of the readings and of the transformed readings.
    scale : float
        Geometric mean of the shifted readings: :meth:`scaled_transform` divides by it first
        (1.0 when not known).
    """

    n: int
    lam: float
    lam_interval: tuple
    alpha: float
    lam_used: float
    note: str | None
    shift: float
    loglik: float
    loglik_used: float
    transformed_mean: float
    transformed_sd: float
    original_center: float
    original_lower: float
    original_upper: float
    shapiro_before: tuple
    shapiro_after: tuple
    scale: float = 1.0

    def scaled_transform(self, values):
        """Box-Cox transform of ``(values + shift) / scale`` with ``lam_used``.

        An increasing affine function of :meth:`transform` (``transform(x) = scale^lam *
        scaled_transform(x) + (scale^lam - 1) / lam``), so capability indices computed on
        either scale are the same; this one keeps its digits whatever the unit of the data
        (in metres, ``x^lam - 1`` of readings near 0.01 cancels to a few significant digits).
        """
        v = (np.asarray(values, dtype=float) + self.shift) / self.scale
        out = _boxcox_forward(v, self.lam_used)
        return float(out) if out.ndim == 0 else out

    def scaled_inverse(self, values):
        """Inverse of :meth:`scaled_transform`."""
        y = np.asarray(values, dtype=float)
        out = _boxcox_backward(y, self.lam_used) * self.scale - self.shift
        return float(out) if out.ndim == 0 else out

    def transform(self, values):
        """Box-Cox transform of ``values + shift`` with ``lam_used``.

        Values at or below zero after the shift map to the transformation's lower bound
        (-1/lambda for lambda > 0, -inf otherwise): nothing of the fitted process lies there.
        """
        v = np.asarray(values, dtype=float) + self.shift
        out = _boxcox_forward(v, self.lam_used)
        return float(out) if out.ndim == 0 else out

    def inverse(self, values):
        """Back to the original scale: ``(lam*y + 1)^(1/lam) - shift`` (``exp(y)`` at 0).

        Transformed values beyond the transformation's range map to the range's end
        (``-shift`` below, ``+inf`` above).
        """
        y = np.asarray(values, dtype=float)
        out = _boxcox_backward(y, self.lam_used) - self.shift
        return float(out) if out.ndim == 0 else out

    def to_dict(self) -> dict:
        """JSON-safe summary."""
        return {
            "method": "box_cox",
            "n": int(self.n),
            "lam": _f(self.lam),
            "lam_interval": [_f(v) for v in self.lam_interval],
            "alpha": _f(self.alpha),
            "lam_used": _f(self.lam_used),
            "note": self.note,
            "shift": _f(self.shift),
            "loglik": _f(self.loglik),
            "loglik_used": _f(self.loglik_used),
            "transformed_mean": _f(self.transformed_mean),
            "transformed_sd": _f(self.transformed_sd),
            "original_center": _f(self.original_center),
            "original_lower": _f(self.original_lower),
            "original_upper": _f(self.original_upper),
            "shapiro_before": [_f(v) for v in self.shapiro_before],
            "shapiro_after": [_f(v) for v in self.shapiro_after],
            "scale": _f(self.scale),
        }


def _fmt(v: float) -> str:
    return f"{v:.4g}"


# long: signature and numpydoc docstring take 59 lines; the body calls named steps
def box_cox(x, *, lam=None, shift="auto", alpha=0.05, round_to=None) -> BoxCoxResult:
    """Box-Cox transformation with a maximum likelihood lambda and its interval.

    Parameters
    ----------
    x : array_like
        Readings (at least 3, not all equal).
    lam : float, optional
        Use this lambda instead of rounding the estimate (the estimate and interval are still
        reported).
    shift : "auto", float or None
        Added to the readings before transforming. ``"auto"``: 0 for positive data, otherwise
        ``-min(x) + 0.05 (max(x) - min(x))``, so the smallest reading sits at 5 % of the range
        (common practice, no source). None: no shift; non-positive data are then an error.
    alpha : float
        1 - confidence level of the lambda interval (default 0.05).
    round_to : None, "nice" or float
        None: use the estimate. ``"nice"``: the value of :data:`NICE_LAMBDAS` inside the
        interval nearest the estimate (the estimate itself, with a note, when none is inside).
        A positive float: round the estimate to a multiple of it (a note says when that leaves
        the interval).

    Returns
    -------
    BoxCoxResult
        ``lam``, ``lam_interval``, ``lam_used``, ``note``, ``shift``, ``loglik``,
        ``loglik_used``, transformed mean and sd, original-scale centre and 3-sd points,
        Shapiro-Wilk before and after; methods ``transform``, ``inverse``, ``to_dict``.

    Notes
    -----
    y = (x^lam - 1)/lam (log x at lam = 0). Profile log-likelihood
    l(lam) = (lam - 1) sum log x - (n/2) log(sigma^2(lam)), sigma^2 with divisor n (Box & Cox
    1964, section 3); the estimate maximises it by Brent's method from the bracket (-2, 2); the
    interval is {lam : l(lam) >= l(lam_hat) - chi2_{1, 1-alpha}/2}. This is the computation of
    scipy.stats.boxcox_normmax(x, method='mle') and scipy.stats.boxcox(x, alpha=...).

    Change of unit: the readings are divided by their geometric mean g before the search (Box &
    Cox 1964, section 3, write the likelihood with the transformation normalised by the
    geometric mean, for this reason). For readings c x the profile likelihood only gains the
    constant -n log c, so lambda and its interval do not depend on the unit; dividing by g
    makes the computation do the same (in metres or micrometres the unscaled x^lam - 1 loses
    its digits or overflows). ``loglik`` is reported for the readings as given. Capability
    on the transformed scale uses :meth:`BoxCoxResult.scaled_transform`.

    References
    ----------
    Box, G. E. P. & Cox, D. R. (1964). An analysis of transformations. JRSS B 26, 211-252.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(7).lognormal(1.0, 0.5, size=80)
    >>> r = box_cox(x, round_to="nice")
    >>> round(r.lam, 3), r.lam_used
    (0.048, 0.0)
    >>> round(float(r.inverse(r.transform(4.0))), 12)
    4.0
    """
    x = _clean(x)
    if not (isinstance(alpha, (int, float)) and 0 < alpha < 1):
        raise StudyInputError(f"`alpha` ({alpha!r}) must be between 0 and 1, e.g. 0.05.")
    shift = _boxcox_shift(x, shift)
    v = x + shift
    lx = np.log(v)
    n = x.size
    sum_lx = float(lx.sum())
    log_scale = sum_lx / n
    scale = math.exp(log_scale)  # geometric mean: the search runs on v / g (see Notes)
    ls = lx - log_scale
    if not float(ls.std()) >= BOXCOX_MIN_RELATIVE_SPREAD:
        raise AnalysisError(
            f"Box-Cox: the relative spread of the data (sd/mean = "
            f"{_fmt(float(v.std() / v.mean()))}) is too small for a power transformation to "
            f"change their shape (below {BOXCOX_MIN_RELATIVE_SPREAD:g}: every lambda gives the "
            "same shape within rounding). Use `shift` to measure from a reference value, or a "
            "fitted distribution."
        )

    def neg(lmb):
        return -_boxcox_llf(lmb, ls)

    with np.errstate(all="ignore"):
        lam_hat = _polish_lambda(float(optimize.brent(neg, brack=(-2.0, 2.0))), ls)
    ll_hat = -neg(lam_hat)  # for v / g; + (-sum log g) = - n log g for v, below
    cut = ll_hat - 0.5 * stats.chi2.ppf(1.0 - alpha, 1)
    interval = (_lambda_bound(ls, lam_hat, cut, -1.0), _lambda_bound(ls, lam_hat, cut, +1.0))
    used, note = _lambda_used(lam, round_to, lam_hat, interval, f"{100 * (1 - alpha):g} %")
    with np.errstate(all="ignore"):
        y = _boxcox_forward(v, used)
        my = float(y.mean())
        sy = float(y.std(ddof=1))
        yc = _boxcox_forward(v / scale, used)  # the same readings, unit-free
        myc = float(yc.mean())
        syc = float(yc.std(ddof=1))
    if not (
        math.isfinite(lam_hat)
        and math.isfinite(myc)
        and math.isfinite(syc)
        and syc > 1e-9 * max(1.0, abs(myc))
    ):
        raise AnalysisError(
            f"Box-Cox: lambda {_fmt(used)} makes the transformed readings overflow or collapse; "
            f"the relative spread of the data (sd/mean = {_fmt(float(v.std() / v.mean()))}) is "
            "too small for a power transformation to change their shape. Use `shift` to "
            "measure from a reference value, or a fitted distribution."
        )
    back = _boxcox_backward(np.array([myc, myc - 3 * syc, myc + 3 * syc]), used) * scale - shift
    sw0 = stats.shapiro(x)
    sw1 = stats.shapiro(yc)  # W is unchanged by the affine map between y and yc
    return BoxCoxResult(
        n=n,
        lam=lam_hat,
        lam_interval=interval,
        alpha=float(alpha),
        lam_used=float(used),
        note=note,
        shift=float(shift),
        loglik=ll_hat - sum_lx,
        loglik_used=_boxcox_llf(used, ls) - sum_lx,
        scale=scale,
        transformed_mean=my,
        transformed_sd=sy,
        original_center=float(back[0]),
        original_lower=float(back[1]),
        original_upper=float(back[2]),
        shapiro_before=(float(sw0.statistic), float(sw0.pvalue)),
        shapiro_after=(float(sw1.statistic), float(sw1.pvalue)),
    )


def _boxcox_shift(x: np.ndarray, shift) -> float:
    """The shift added before the transformation: 0, automatic, or the one given (checked)."""
    xmin = float(x.min())
    if shift is None:
        if xmin <= 0:
            raise AnalysisError(
                f"Box-Cox needs positive data; the smallest reading is {xmin:g}. Pass "
                "`shift='auto'` or a number that makes every reading positive."
            )
        return 0.0
    if isinstance(shift, str):
        if shift != "auto":
            raise StudyInputError(f"`shift` ({shift!r}) must be 'auto', a number or None.")
        return 0.0 if xmin > 0 else -xmin + 0.05 * float(np.ptp(x))
    try:
        shift = float(shift)
    except (TypeError, ValueError):
        raise StudyInputError(f"`shift` ({shift!r}) must be 'auto', a number or None.") from None
    if not xmin + shift > 0:
        raise StudyInputError(
            f"`shift` ({shift:g}) leaves the smallest reading at {xmin + shift:g}; it must "
            f"be greater than {-xmin:g} so that every shifted reading is positive."
        )
    return shift


def _lambda_bound(ls: np.ndarray, lam_hat: float, cut: float, direction: float) -> float:
    """One end of the profile-likelihood interval of lambda (infinite when none is found)."""
    step = 0.5
    for _ in range(60):
        b = lam_hat + direction * step
        if _boxcox_llf(b, ls) < cut:
            return float(
                optimize.brentq(
                    lambda t: _boxcox_llf(t, ls) - cut, *sorted((lam_hat, b)), xtol=1e-12
                )
            )
        step *= 2.0
    return direction * math.inf


def _lambda_used(lam, round_to, lam_hat: float, interval, level: str) -> tuple[float, str | None]:
    """The lambda applied (the user's, the estimate or a rounded one) and a note on it."""
    if lam is not None:
        try:
            used = float(lam)
        except (TypeError, ValueError):
            raise StudyInputError(f"`lam` ({lam!r}) must be a number or None.") from None
        inside = interval[0] <= used <= interval[1]
        return used, (
            f"lambda {_fmt(used)} chosen by the user (estimate {_fmt(lam_hat)}, "
            f"{level} interval [{_fmt(interval[0])}, {_fmt(interval[1])}]"
            + ("" if inside else "; outside the interval")
            + ")"
        )
    if round_to is None:
        return lam_hat, None
    if isinstance(round_to, str):
        if round_to != "nice":
            raise StudyInputError(
                f"`round_to` ({round_to!r}) must be None, 'nice' or a positive number such as 0.5."
            )
        return _nice_lambda(lam_hat, interval, level)
    try:
        step = float(round_to)
    except (TypeError, ValueError):
        step = float("nan")
    if not step > 0:
        raise StudyInputError(
            f"`round_to` ({round_to!r}) must be None, 'nice' or a positive number such as 0.5."
        )
    used = round(lam_hat / step) * step
    used = 0.0 if abs(used) < 1e-12 else used
    inside = interval[0] <= used <= interval[1]
    return used, (
        f"lambda rounded from {_fmt(lam_hat)} to {_fmt(used)}"
        + (f", inside the {level} interval" if inside else f", OUTSIDE the {level} interval")
        + f" [{_fmt(interval[0])}, {_fmt(interval[1])}]"
    )


def _nice_lambda(lam_hat: float, interval, level: str) -> tuple[float, str]:
    """The convenient lambda nearest the estimate inside the interval, or the estimate."""
    inside = [c for c in NICE_LAMBDAS if interval[0] <= c <= interval[1]]
    if inside:
        used = min(inside, key=lambda c: (abs(c - lam_hat), abs(c)))
        return used, (
            f"lambda rounded from {_fmt(lam_hat)} to {_fmt(used)}, inside the {level} "
            f"interval [{_fmt(interval[0])}, {_fmt(interval[1])}]"
        )
    return lam_hat, (
        f"no convenient lambda inside the {level} interval "
        f"[{_fmt(interval[0])}, {_fmt(interval[1])}]; the estimate is used"
    )


# ---------------------------------------------------------------------------------------------
# Johnson system
# ---------------------------------------------------------------------------------------------
def _percentiles(xs: np.ndarray, probs: np.ndarray) -> np.ndarray:
    """Sample percentiles at position n*P + 0.5 (1-based), linear between order statistics,
    clamped to the smallest and largest reading (Chou, Polansky & Mason 1998)."""
    n = xs.size
    pos = np.clip(n * probs + 0.5, 1.0, float(n)) - 1.0
    lo = np.floor(pos).astype(int)
    hi = np.minimum(lo + 1, n - 1)
    frac = pos - lo
    return xs[lo] + frac * (xs[hi] - xs[lo])


def _johnson_params(q: np.ndarray, z: float, sl_tolerance: float = 0.0):
    """Slifker & Shapiro (1980) parameters from the quantiles at -3z, -z, z, 3z.

    Returns (kind, gamma, eta, epsilon, lambda, quantile ratio) or None when the quantiles
    give no valid member.
    """
    xm3, xm1, xp1, xp3 = (float(v) for v in q)
    m = xp3 - xp1
    nn = xm1 - xm3
    p = xp1 - xm1
    if not (m > 0 and nn > 0 and p > 0):
        return None
    qr = m * nn / (p * p)
    mid = 0.5 * (xp1 + xm1)
    if abs(qr - 1.0) <= sl_tolerance:
        r = m / p
        if not r > 1:
            return None
        eta = 2.0 * z / math.log(r)
        gamma = eta * math.log((r - 1.0) / (p * math.sqrt(r)))
        eps = mid - 0.5 * p * (r + 1.0) / (r - 1.0)
        return "SL", gamma, eta, eps, None, qr
    mp, np_ = m / p, nn / p
    if qr > 1.0:
        arg = 0.5 * (mp + np_)
        if not (arg > 1 and mp + np_ - 2 > 0):
            return None
        eta = 2.0 * z / math.acosh(arg)
        gamma = eta * math.asinh((np_ - mp) / (2.0 * math.sqrt(qr - 1.0)))
        lam = 2.0 * p * math.sqrt(qr - 1.0) / ((mp + np_ - 2.0) * math.sqrt(mp + np_ + 2.0))
        eps = mid + p * (np_ - mp) / (2.0 * (mp + np_ - 2.0))
        return "SU", gamma, eta, eps, lam, qr
    pm, pn = p / m, p / nn
    prod = (1.0 + pm) * (1.0 + pn)
    den = pm * pn - 1.0
    if not (prod > 4 and den > 0):
        return None
    eta = z / math.acosh(0.5 * math.sqrt(prod))
    gamma = eta * math.asinh((pn - pm) * math.sqrt(prod - 4.0) / (2.0 * den))
    lam = p * math.sqrt((prod - 2.0) ** 2 - 4.0) / den
    eps = mid - 0.5 * lam + p * (pn - pm) / (2.0 * den)
    return "SB", gamma, eta, eps, lam, qr


def _johnson_forward(x, kind, gamma, eta, eps, lam):
    x = np.asarray(x, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if kind == "SU":
            return gamma + eta * np.arcsinh((x - eps) / lam)
        if kind == "SL":
            return np.where(
                x > eps, gamma + eta * np.log(np.where(x > eps, x - eps, 1.0)), -math.inf
            )
        inside = (x > eps) & (x < eps + lam)
        safe = np.where(inside, x, eps + 0.5 * lam)
        out = gamma + eta * np.log((safe - eps) / (lam + eps - safe))
        return np.where(inside, out, np.where(x <= eps, -math.inf, math.inf))


def _johnson_backward(zv, kind, gamma, eta, eps, lam):
    zv = np.asarray(zv, dtype=float)
    u = (zv - gamma) / eta
    with np.errstate(over="ignore"):
        if kind == "SU":
            return eps + lam * np.sinh(u)
        if kind == "SL":
            return eps + np.exp(u)
        return eps + lam * special.expit(u)


@dataclass(frozen=True)
class JohnsonResult(Result):
    """Result of :func:`johnson`: z = gamma + eta * f((x - epsilon)/lambda).

    Attributes
    ----------
    n : int
        Number of readings.
    kind : str
        ``"SB"`` (bounded, f(u) = ln(u/(1-u))), ``"SL"`` (lognormal, z = gamma + eta
        ln(x - epsilon)) or ``"SU"`` (unbounded, f = asinh).
    gamma, eta, epsilon : float
        Shape, shape (often called delta) and location parameters.
    lam : float or None
        Scale parameter (None for SL).
    z : float
        The z of the grid whose quantile fit was chosen.
    quantile_ratio : float
        m n / p^2 at that z (> 1: SU, < 1: SB).
    shapiro_w, shapiro_p : float
        Shapiro-Wilk statistic and p-value of the transformed readings.
    candidates : tuple of dict
        Selection evidence: for each z of the grid with a valid fit, ``z``, ``kind``,
        ``quantile_ratio``, ``shapiro_w``, ``shapiro_p``.
    method : str
        How the member was chosen.
    """

    n: int
    kind: str
    gamma: float
    eta: float
    epsilon: float
    lam: float | None
    z: float
    quantile_ratio: float
    shapiro_w: float
    shapiro_p: float
    candidates: tuple
    method: str = (
        "Chou, Polansky & Mason (1998): Slifker-Shapiro quantile fit at each z of "
        "0.25..1.25 by 0.01, member chosen by the quantile ratio, z chosen by the "
        "largest Shapiro-Wilk p-value of the transformed readings"
    )

    @property
    def delta(self) -> float:
        """Alias of ``eta``."""
        return self.eta

    @property
    def parameters(self) -> dict:
        """gamma, eta, epsilon, lambda by name."""
        return {"gamma": self.gamma, "eta": self.eta, "epsilon": self.epsilon, "lambda": self.lam}

    def transform(self, values):
        """z = gamma + eta f((x - epsilon)/lambda); outside an SB/SL range: -inf or +inf."""
        out = _johnson_forward(values, self.kind, self.gamma, self.eta, self.epsilon, self.lam)
        return float(out) if np.ndim(out) == 0 else out

    def inverse(self, values):
        """x from z: epsilon + lambda sinh(u), epsilon + lambda/(1+e^-u) or epsilon + e^u,
        u = (z - gamma)/eta."""
        out = _johnson_backward(values, self.kind, self.gamma, self.eta, self.epsilon, self.lam)
        return float(out) if np.ndim(out) == 0 else out

    def to_dict(self) -> dict:
        """JSON-safe summary (with the selection evidence)."""
        return {
            "method": "johnson",
            "selection": self.method,
            "n": int(self.n),
            "kind": self.kind,
            "gamma": _f(self.gamma),
            "eta": _f(self.eta),
            "epsilon": _f(self.epsilon),
            "lambda": _f(self.lam),
            "z": _f(self.z),
            "quantile_ratio": _f(self.quantile_ratio),
            "shapiro_w": _f(self.shapiro_w),
            "shapiro_p": _f(self.shapiro_p),
            "candidates": [
                {k: (v if isinstance(v, str) else _f(v)) for k, v in c.items()}
                for c in self.candidates
            ],
        }


def johnson(x, *, z_grid=JOHNSON_Z_GRID, sl_tolerance=0.0) -> JohnsonResult:
    """Johnson transformation chosen as Chou, Polansky & Mason (1998) describe.

    Parameters
    ----------
    x : array_like
        Readings, at least 10 (common practice, no source: fewer cannot pin four quantiles).
    z_grid : sequence of float
        z values to try (default 0.25 to 1.25 by 0.01, as in Chou et al.).
    sl_tolerance : float
        The SL member is used when ``|m n / p^2 - 1| <= sl_tolerance`` (default 0: only an
        exact ratio of one; SB and SU contain SL as a limit).

    Returns
    -------
    JohnsonResult
        ``kind``, ``gamma``, ``eta`` (``delta``), ``epsilon``, ``lam``, ``z``,
        ``quantile_ratio``, ``shapiro_w``, ``shapiro_p``, ``candidates``; methods
        ``transform``, ``inverse``, ``to_dict``.

    Notes
    -----
    For each z, the sample percentiles x_{-3z}, x_{-z}, x_z, x_{3z} at the normal
    probabilities Phi(-3z)..Phi(3z) (position n P + 0.5, Chou et al.) give m = x_{3z} - x_z,
    n = x_{-z} - x_{-3z}, p = x_z - x_{-z}. The quantile ratio m n / p^2 picks SU (> 1), SB
    (< 1) or SL (= 1), and the Slifker & Shapiro (1980) formulas give the parameters that map
    those four percentiles exactly onto -3z, -z, z, 3z. A fit is valid when every reading
    transforms to a finite value. The z whose transformed readings have the largest
    Shapiro-Wilk p-value wins. Chou et al. give no numeric worked example; the tests recover
    known transformations from scipy.stats.johnsonsu / johnsonsb samples.

    References
    ----------
    Chou, Y.-M., Polansky, A. M. & Mason, R. L. (1998). Transforming non-normal data to
    normality in statistical process control. J. Quality Technology 30(2), 133-141.
    Slifker, J. F. & Shapiro, S. S. (1980). The Johnson system: selection and parameter
    estimation. Technometrics 22(2), 239-246.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import stats
    >>> x = stats.johnsonsu.rvs(1.0, 2.0, loc=10, scale=3, size=400, random_state=1)
    >>> r = johnson(x)
    >>> r.kind
    'SU'
    >>> round(float(r.inverse(r.transform(12.0))), 10)
    12.0
    """
    x = _clean(x, minimum=10)
    xs = np.sort(x)
    zs = np.asarray(z_grid, dtype=float)
    if zs.ndim != 1 or zs.size == 0 or not np.all(zs > 0):
        raise StudyInputError(
            f"`z_grid` must be a non-empty list of positive numbers; got {z_grid!r}."
        )
    candidates, best = _johnson_search(xs, zs, sl_tolerance)
    if best is None:
        raise AnalysisError(
            "Johnson transformation: no z in the grid gives a fit that keeps every reading "
            "inside the fitted range; try a Box-Cox transformation or a fitted distribution."
        )
    p, w, z, (kind, gamma, eta, eps, lam, qr) = best
    return JohnsonResult(
        n=int(x.size),
        kind=kind,
        gamma=gamma,
        eta=eta,
        epsilon=eps,
        lam=lam,
        z=z,
        quantile_ratio=qr,
        shapiro_w=w,
        shapiro_p=p,
        candidates=tuple(candidates),
    )


def _johnson_search(xs: np.ndarray, zs: np.ndarray, sl_tolerance) -> tuple[list, tuple | None]:
    """Fit the Johnson system at each z of the grid: every usable fit as a candidate row, and
    the best by Shapiro-Wilk p (p, W, z, fitted parameters), or None."""
    probs = special.ndtr(np.outer(zs, [-3.0, -1.0, 1.0, 3.0]))
    candidates = []
    best = None
    for z, pr in zip(zs, probs, strict=True):
        fitted = _johnson_params(_percentiles(xs, pr), float(z), sl_tolerance)
        if fitted is None:
            continue
        kind, gamma, eta, eps, lam, qr = fitted
        if not (eta > 0 and (lam is None or lam > 0)):
            continue
        t = _johnson_forward(xs, kind, gamma, eta, eps, lam)
        if not np.all(np.isfinite(t)) or np.ptp(t) == 0:
            continue
        sw = stats.shapiro(t)
        w, p = float(sw.statistic), float(sw.pvalue)
        candidates.append(
            {"z": float(z), "kind": kind, "quantile_ratio": qr, "shapiro_w": w, "shapiro_p": p}
        )
        if best is None or p > best[0]:
            best = (p, w, float(z), fitted)
    return candidates, best
