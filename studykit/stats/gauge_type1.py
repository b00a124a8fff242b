"""Short gauge study: one reference part measured repeatedly (Cg, Cgk, bias and its t-test).

Before the crossed gauge R&R (:mod:`studykit.stats.gauge`) a gauge is often qualified on its own:
one person measures one reference part of known value many times (25-50 readings is the usual
plan; common practice, no source) at the same place on the part. The spread of the readings is
the gauge's repeatability; their mean minus the reference value is its bias. Both are compared
with a share of the tolerance the gauge will judge:

* Cg  = (K/100 * T) / (L * s)
* Cgk = (K/200 * T - |bias|) / (L/2 * s)

with T = USL - LSL, s the sample standard deviation of the readings, K the share of the
tolerance granted to the gauge (20 %) and L the number of standard deviations that stand for the
gauge's spread (6; 4 in some plans). K = 20, L = 6 and the acceptance limit Cg, Cgk >= 1.33 are
common practice, no source; all three are options. Bias is tested against zero with the
one-sample t-test (the same statistic and p-value as ``scipy.stats.ttest_1samp(values,
reference)``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from studykit.errors import AnalysisError, SpecError
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.result import Result
from studykit.stats.result import json_float as _f

__all__ = [
    "DEFAULT_K_PERCENT",
    "DEFAULT_L_SIGMAS",
    "DEFAULT_MINIMUM",
    "FEW_READINGS",
    "ShortGaugeResult",
    "short_gauge_study",
]

#: Share of the tolerance granted to the gauge, in percent (common practice, no source).
DEFAULT_K_PERCENT = 20.0
#: Standard deviations that stand for the gauge's spread (common practice, no source; 4 in some
#: plans).
DEFAULT_L_SIGMAS = 6.0
#: Cg and Cgk at or above this are taken as capable (common practice, no source).
DEFAULT_MINIMUM = 1.33
#: Fewer readings than this get a note: 25 is the usual minimum, 50 the usual plan (common
#: practice, no source).
FEW_READINGS = 25

CAPABLE = "capable"
NOT_CAPABLE = "not capable"


@dataclass(frozen=True)
class ShortGaugeResult(Result):
    """Everything a short gauge study (one reference part) produced; see
    :func:`short_gauge_study`.

    Attributes
    ----------
    values : ndarray
        The readings in the order taken.
    n, mean, sd : int, float, float
        Number of readings, their mean and sample standard deviation (n - 1).
    reference : float
        The reference value of the part (from a better measurement, e.g. a calibration
        certificate).
    lsl, usl, tolerance : float
        Specification limits of the characteristic and T = usl - lsl.
    k_percent, l_sigmas : float
        K (share of the tolerance in percent) and L (sigmas for the gauge spread).
    cg, cgk : float or None
        The indices (None when the readings have no spread).
    bias : float
        mean - reference.
    bias_pct_tolerance : float
        100 * |bias| / T.
    t_statistic, df, p_value : float or None, int, float or None
        One-sample t-test of bias = 0 (two-sided); None when the readings have no spread.
    bias_lower, bias_upper : float or None
        Two-sided (1 - alpha) confidence interval of the bias (t-based).
    alpha : float
        Significance level of the test and 1 - level of the interval.
    bias_significant : bool or None
        p-value below alpha.
    pct_repeatability, pct_repeatability_bias : float or None
        K / Cg and K / Cgk in percent of the tolerance (the gauge's share of the tolerance,
        without and with the bias).
    minimum : float
        Cg and Cgk at or above this are judged capable.
    status : str
        "capable" or "not capable".
    message : str
        The verdict in plain words.
    notes : tuple of str
    """

    values: np.ndarray = field(repr=False)
    n: int
    mean: float
    sd: float
    reference: float
    lsl: float
    usl: float
    tolerance: float
    k_percent: float
    l_sigmas: float
    cg: float | None
    cgk: float | None
    bias: float
    bias_pct_tolerance: float
    t_statistic: float | None
    df: int
    p_value: float | None
    bias_lower: float | None
    bias_upper: float | None
    alpha: float
    bias_significant: bool | None
    pct_repeatability: float | None
    pct_repeatability_bias: float | None
    minimum: float
    status: str
    message: str
    notes: tuple[str, ...] = ()
    method: str = "short gauge study: one reference part, Cg/Cgk, one-sample t-test of the bias"

    def to_dict(self) -> dict:
        return {
            "kind": "gauge_short",
            "method": self.method,
            "n": self.n,
            "values": [_f(v) for v in self.values],
            "mean": _f(self.mean),
            "sd": _f(self.sd),
            "reference": _f(self.reference),
            "lsl": _f(self.lsl),
            "usl": _f(self.usl),
            "tolerance": _f(self.tolerance),
            "k_percent": _f(self.k_percent),
            "l_sigmas": _f(self.l_sigmas),
            "cg": _f(self.cg),
            "cgk": _f(self.cgk),
            "bias": _f(self.bias),
            "bias_pct_tolerance": _f(self.bias_pct_tolerance),
            "t_test": {
                "statistic": _f(self.t_statistic),
                "df": int(self.df),
                "p_value": _f(self.p_value),
                "alpha": _f(self.alpha),
                "significant": self.bias_significant,
                "bias_lower": _f(self.bias_lower),
                "bias_upper": _f(self.bias_upper),
            },
            "pct_repeatability": _f(self.pct_repeatability),
            "pct_repeatability_bias": _f(self.pct_repeatability_bias),
            "minimum": _f(self.minimum),
            "verdict": {"status": self.status, "message": self.message},
            "notes": list(self.notes),
        }


def _positive(value, name: str, example: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
        raise SpecError(f"`{name}` ({value!r}) must be a number, e.g. {example}")
    v = float(value)
    if not (math.isfinite(v) and v > 0):
        raise SpecError(f"`{name}` ({value!r}) must be a positive number, e.g. {example}")
    return v


# long: signature and numpydoc docstring take 54 lines; the body is the Cg/Cgk formulas and the result
def short_gauge_study(
    values,
    *,
    reference: float,
    lsl: float | None = None,
    usl: float | None = None,
    tolerance: float | None = None,
    k_percent: float = DEFAULT_K_PERCENT,
    l_sigmas: float = DEFAULT_L_SIGMAS,
    alpha: float = 0.05,
    minimum: float = DEFAULT_MINIMUM,
) -> ShortGaugeResult:
    """Cg, Cgk, bias and its t-test from repeated readings of one reference part.

    Parameters
    ----------
    values : array_like
        The readings, in the order taken (at least 2, finite).
    reference : float, keyword-only
        The reference value of the part.
    lsl, usl : float, optional
        Specification limits; T = usl - lsl.
    tolerance : float, optional
        T given directly (instead of ``lsl``/``usl``); ``lsl``/``usl`` are then reported as
        reference -/+ T/2.
    k_percent : float, default 20
        K: share of the tolerance granted to the gauge, in percent (common practice, no source).
    l_sigmas : float, default 6
        L: standard deviations that stand for the gauge's spread (common practice, no source).
    alpha : float, default 0.05
        Significance level of the bias test; the bias interval is at 1 - alpha.
    minimum : float, default 1.33
        Cg and Cgk at or above this are judged capable (common practice, no source).

    Returns
    -------
    ShortGaugeResult

    Notes
    -----
    Cg = (K/100 T) / (L s) and Cgk = (K/200 T - |bias|) / (L/2 s), with s the sample standard
    deviation (n - 1) and bias = mean - reference (formulas: common practice, no source). The
    t-test statistic is t = bias / (s / sqrt(n)) with n - 1 degrees of freedom and a two-sided
    p-value; it equals ``scipy.stats.ttest_1samp(values, reference)``. The bias interval is
    bias -/+ t_{1 - alpha/2, n - 1} s / sqrt(n). A significant bias with a Cgk still above the
    minimum is reported as such: the bias is real but small against the tolerance.

    Examples
    --------
    >>> x = [5.001, 5.003, 5.002, 5.002, 5.004, 5.000, 5.002, 5.001, 5.003, 5.002]
    >>> r = short_gauge_study(x, reference=5.0, tolerance=0.1)
    >>> round(r.cg, 4), round(r.cgk, 4), round(r.bias, 4)
    (2.8868, 2.3094, 0.002)
    """
    y = _readings(values)
    reference, lsl_v, usl_v, t_width = _limits(reference, lsl, usl, tolerance)
    k, ell, mn = _check_factors(k_percent, l_sigmas, alpha, minimum)
    n = int(y.size)
    mean = float(np.mean(y))
    sd = float(np.std(y, ddof=1))
    bias = mean - reference
    df = n - 1
    notes: list[str] = []
    cg: float | None
    cgk: float | None
    t_stat: float | None
    p_value: float | None
    lo: float | None
    hi: float | None
    pct_r: float | None
    pct_rb: float | None
    significant: bool | None
    if sd > 0:
        cg = (k / 100.0 * t_width) / (ell * sd)
        cgk = (k / 200.0 * t_width - abs(bias)) / (ell / 2.0 * sd)
        t_stat, p_value, lo, hi = _bias_test(bias, sd, n, alpha)
        significant = p_value < alpha
        pct_r = k / cg
        pct_rb = k / cgk if cgk > 0 else None
    else:
        cg = cgk = t_stat = p_value = lo = hi = pct_r = pct_rb = None
        significant = None
        notes.append(
            "Every reading is the same: the gauge shows no spread on this part, so Cg, "
            "Cgk and the t-test are undefined. Check the gauge's resolution: it should "
            "resolve at least a tenth of the tolerance in steps small enough to show "
            "the repeat variation."
        )
    if n < FEW_READINGS:
        notes.append(
            f"Only {n} readings: 25 is the usual minimum and 50 the usual plan "
            "(common practice, no source); Cg and Cgk from so few readings are rough."
        )
    if pct_rb is None and cgk is not None:
        notes.append(
            "Cgk is zero or negative: the bias alone uses up the share of the tolerance "
            "granted to the gauge."
        )
    status, message = _judge(cg, cgk, k, ell, mn, bias, significant, t_stat, p_value, alpha)
    return ShortGaugeResult(
        values=y,
        n=n,
        mean=mean,
        sd=sd,
        reference=reference,
        lsl=lsl_v,
        usl=usl_v,
        tolerance=t_width,
        k_percent=k,
        l_sigmas=ell,
        cg=cg,
        cgk=cgk,
        bias=bias,
        bias_pct_tolerance=100.0 * abs(bias) / t_width,
        t_statistic=t_stat,
        df=df,
        p_value=p_value,
        bias_lower=lo,
        bias_upper=hi,
        alpha=float(alpha),
        bias_significant=significant,
        pct_repeatability=pct_r,
        pct_repeatability_bias=pct_rb,
        minimum=mn,
        status=status,
        message=message,
        notes=tuple(notes),
    )


def _readings(values) -> np.ndarray:
    """The readings as floats: all finite, at least 2."""
    y = np.asarray(values, dtype=float).ravel()
    bad = np.flatnonzero(~np.isfinite(y))
    if bad.size:
        raise AnalysisError(
            f"the readings have {bad.size} missing or non-finite value(s) (first at position "
            f"{int(bad[0])}, 0-based); remove or re-measure them"
        )
    if y.size < 2:
        raise AnalysisError(
            f"a short gauge study needs at least 2 readings of the reference part; found "
            f"{y.size} (25 or more is the usual plan)"
        )
    return y


def _limits(reference, lsl, usl, tolerance) -> tuple[float, float, float, float]:
    """The reference value, the limits and the tolerance width T, checked."""
    if (
        isinstance(reference, bool)
        or not isinstance(reference, int | float | np.integer | np.floating)
        or not math.isfinite(reference)
    ):
        raise SpecError(
            f"`reference` ({reference!r}) must be the part's reference value, a finite number"
        )
    reference = float(reference)
    if tolerance is not None:
        if lsl is not None or usl is not None:
            raise SpecError("give either `tolerance` or `lsl` and `usl`, not both")
        t_width = _positive(tolerance, "tolerance", "0.1")
        return reference, reference - t_width / 2, reference + t_width / 2, t_width
    if lsl is None or usl is None:
        raise SpecError("Cg and Cgk need the tolerance: give `tolerance`, or both `lsl` and `usl`")
    lsl_v, usl_v = float(lsl), float(usl)
    if not (math.isfinite(lsl_v) and math.isfinite(usl_v)):
        raise SpecError(f"`lsl` ({lsl!r}) and `usl` ({usl!r}) must be finite numbers")
    if usl_v <= lsl_v:
        raise SpecError(f"`usl` ({usl}) must be greater than `lsl` ({lsl})")
    return reference, lsl_v, usl_v, usl_v - lsl_v


def _check_factors(k_percent, l_sigmas, alpha, minimum) -> tuple[float, float, float]:
    """K, L and the minimum, checked (and alpha checked)."""
    k = _positive(k_percent, "k_percent", "20")
    if k > 100:
        raise SpecError(
            f"`k_percent` ({k_percent!r}) is a share of the tolerance in percent; "
            "use a value up to 100, e.g. 20"
        )
    ell = _positive(l_sigmas, "l_sigmas", "6 (or 4)")
    if isinstance(alpha, bool) or not isinstance(alpha, int | float) or not 0 < alpha < 1:
        raise SpecError(f"`alpha` ({alpha!r}) must be between 0 and 1, e.g. 0.05")
    mn = _positive(minimum, "minimum", "1.33")
    return k, ell, mn


def _bias_test(bias: float, sd: float, n: int, alpha: float) -> tuple[float, float, float, float]:
    """The one-sample t-test of the bias: t, two-sided p and the confidence bounds."""
    df = n - 1
    se = sd / math.sqrt(n)
    t_stat = bias / se
    p_value = float(2.0 * stats.t.sf(abs(t_stat), df))
    half = float(stats.t.ppf(1 - alpha / 2, df)) * se
    return t_stat, p_value, bias - half, bias + half


def _judge(cg, cgk, k, ell, mn, bias, significant, t_stat, p_value, alpha) -> tuple[str, str]:
    """The status (capable or not) and the message that explains it."""
    if cg is None:
        return NOT_CAPABLE, (
            "The short gauge study cannot be judged: the readings have no spread (see the notes)."
        )
    ok = cg >= mn and cgk >= mn
    status = CAPABLE if ok else NOT_CAPABLE
    low = [nm for nm, v in (("Cg", cg), ("Cgk", cgk)) if v < mn]
    message = (
        f"The gauge is {status} on this reference part: Cg = {cg:.2f}, Cgk = "
        f"{cgk:.2f} (K = {k:g} % of the tolerance, L = {ell:g} sigma; both must be at "
        f"least {mn:g}, common practice)"
    )
    message += "." if ok else f"; {' and '.join(low)} below the limit."
    if significant:
        message += (
            f" The bias {bias:.4g} is significant (t = {t_stat:.3g}, p = "
            f"{p_value:.3g} < {alpha:g}): correct the gauge's zero or setting against "
            "the reference" + (" even though Cgk passes." if ok else ".")
        )
    else:
        message += f" The bias {bias:.4g} is not significant (p = {p_value:.3g} >= {alpha:g})."
    return status, message
