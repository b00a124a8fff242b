"""Gauge error taken out of the capability: the indices of the process itself.

What a capability study sees is the process spread plus the measurement spread. With a gauge
study of the same characteristic, and the two independent,

    sigma_process^2 = sigma_observed^2 - sigma_gauge^2,

and the process-only indices use sigma_process in place of the observed sigma (Cp, Cpk from the
within sigma; Pp, Ppk from the overall sigma; the mean is unchanged: gauge *bias* is not removed
here, only its random error).

Both variances are estimates (the observed one on the chart's effective degrees of freedom, the
gauge one on the Satterthwaite degrees of freedom of the gauge R&R), so the difference gets a
confidence interval: the modified large-sample (MLS) interval for a difference of two
independent scaled chi-square variances (Ting, Burdick, Graybill, Jeyaratnam & Lu 1990, J.
Statist. Comput. Simul. 35, 135-143; presented for gauge studies in Burdick, Borror & Montgomery
2005, *Design and Analysis of Gauge R&R Studies*, SIAM/ASA; the formula here is written from
memory and checked by a seeded Monte Carlo of its coverage in the tests).

When the gauge variance is a large share of the observed variance the difference is small
against its own uncertainty and the process-only figures say little; a warning then says so.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy import special

from studykit.errors import AnalysisError, SpecError
from studykit.stats._checks import check_number
from studykit.stats.result import Result
from studykit.stats.result import json_float as _f

__all__ = [
    "MAX_GAUGE_SHARE",
    "MLS_METHOD",
    "SigmaWithoutGauge",
    "MeasurementErrorResult",
    "mls_difference_interval",
    "remove_gauge_variance",
    "gauge_sigma_from_stored",
]

#: Above this share of the observed variance taken by the gauge variance, the process-only
#: figures are flagged as resting on the small difference of two uncertain estimates (common
#: practice, no source: a rule of thumb; the interval says the rest).
MAX_GAUGE_SHARE = 0.5

MLS_METHOD = (
    "modified large-sample (MLS) interval for a difference of two variances "
    "(Ting et al. 1990; Burdick, Borror & Montgomery 2005)"
)


def _chi2_ppf(q, df):
    """scipy.stats.chi2.ppf(q, df) (its _ppf: 2 gammaincinv(df/2, q)); df = inf gives df."""
    if math.isinf(df):
        return df
    return 2.0 * special.gammaincinv(df / 2.0, q)


def _f_ppf(q, d1, d2):
    """scipy.stats.f.ppf(q, d1, d2), also for d2 = inf (then chi2.ppf(q, d1) / d1)."""
    if math.isinf(d2):
        return _chi2_ppf(q, d1) / d1
    return float(special.fdtri(d1, d2, q))


def mls_difference_interval(s1, df1: float, s2, df2: float, *, confidence: float = 0.95):
    """Two-sided MLS confidence interval for theta = E[s1] - E[s2].

    ``s1`` and ``s2`` are independent variance estimates with ``df1 * s1 / theta1 ~ chi2(df1)``
    and ``df2 * s2 / theta2 ~ chi2(df2)``; ``df2`` may be ``math.inf`` (s2 known exactly).

    Parameters
    ----------
    s1, s2 : float or array_like
        The two variance estimates (arrays broadcast; used by the Monte Carlo check).
    df1, df2 : float
        Their degrees of freedom (positive; ``df2`` may be infinite).
    confidence : float, keyword-only
        Two-sided level; each bound is one-sided at (1 + confidence) / 2.

    Returns
    -------
    (estimate, lower, upper)
        ``s1 - s2`` and the bounds (the lower bound may be negative: then the data cannot tell
        theta from zero).

    Notes
    -----
    With a = (1 - confidence) / 2 and F_{q: m, k} the q-quantile of the F distribution
    (F_{q: m, inf} = chi2_q(m) / m):

    G1 = 1 - 1/F_{1-a: df1, inf},   H1 = 1/F_{a: df1, inf} - 1,
    G2 = 1 - 1/F_{1-a: df2, inf},   H2 = 1/F_{a: df2, inf} - 1,
    F_hi = F_{1-a: df1, df2},      F_lo = F_{a: df1, df2},
    G12 = ((F_hi - 1)^2 - G1^2 F_hi^2 - H2^2) / F_hi,
    H12 = ((1 - F_lo)^2 - H1^2 F_lo^2 - G2^2) / F_lo,

    lower = s1 - s2 - sqrt(G1^2 s1^2 + H2^2 s2^2 + G12 s1 s2),
    upper = s1 - s2 + sqrt(H1^2 s1^2 + G2^2 s2^2 + H12 s1 s2).

    With ``df2`` infinite (s2 exact) the bounds are the exact chi-square bounds of theta1 minus
    s2. Source: Ting, Burdick, Graybill, Jeyaratnam & Lu (1990); Burdick, Borror & Montgomery
    (2005), chapter on confidence intervals for the balanced one- and two-factor designs
    (written from memory; coverage checked by a seeded Monte Carlo in the tests).

    Examples
    --------
    >>> est, lo, hi = mls_difference_interval(4.0, 99, 1.0, math.inf)
    >>> round(est, 3), round(lo, 3), round(hi, 3)
    (3.0, 2.084, 4.398)
    """
    if not 0 < confidence < 1:
        raise SpecError(f"`confidence` ({confidence!r}) must be between 0 and 1, e.g. 0.95")
    for name, d in (("df1", df1), ("df2", df2)):
        if not (d > 0):
            raise AnalysisError(f"`{name}` ({d!r}) must be a positive number of degrees of freedom")
    if math.isinf(df1):
        raise AnalysisError("`df1` must be finite: the observed variance is always an estimate")
    a = (1.0 - confidence) / 2.0
    s1 = np.asarray(s1, dtype=float)
    s2 = np.asarray(s2, dtype=float)
    g1 = 1.0 - 1.0 / _f_ppf(1 - a, df1, math.inf)
    h1 = 1.0 / _f_ppf(a, df1, math.inf) - 1.0
    if math.isinf(df2):
        g2 = h2 = 0.0
    else:
        g2 = 1.0 - 1.0 / _f_ppf(1 - a, df2, math.inf)
        h2 = 1.0 / _f_ppf(a, df2, math.inf) - 1.0
    f_hi, f_lo = _f_ppf(1 - a, df1, df2), _f_ppf(a, df1, df2)
    g12 = ((f_hi - 1.0) ** 2 - g1 * g1 * f_hi * f_hi - h2 * h2) / f_hi
    h12 = ((1.0 - f_lo) ** 2 - h1 * h1 * f_lo * f_lo - g2 * g2) / f_lo
    est = s1 - s2
    v_lo = np.maximum(g1 * g1 * s1 * s1 + h2 * h2 * s2 * s2 + g12 * s1 * s2, 0.0)
    v_hi = np.maximum(h1 * h1 * s1 * s1 + g2 * g2 * s2 * s2 + h12 * s1 * s2, 0.0)
    lower, upper = est - np.sqrt(v_lo), est + np.sqrt(v_hi)
    if est.ndim == 0:
        return float(est), float(lower), float(upper)
    return est, lower, upper


@dataclass(frozen=True)
class SigmaWithoutGauge(Result):
    """One observed sigma (within or overall) with the gauge variance taken out.

    Attributes
    ----------
    basis : str
        ``"within"`` (gives Cp, Cpk) or ``"overall"`` (gives Pp, Ppk).
    observed_sigma, observed_df : float
        The sigma of the capability study and its (effective) degrees of freedom.
    gauge_share : float
        sigma_gauge^2 / sigma_observed^2.
    process_variance : float
        sigma_observed^2 - sigma_gauge^2 (may be zero or negative: then no process-only index).
    process_sigma : float or None
        Its square root when positive.
    variance_lower, variance_upper : float or None
        Two-sided MLS interval on the process variance at ``level`` (lower may be <= 0).
    sigma_lower, sigma_upper : float or None
        The same on the sigma scale (lower 0 when the variance bound is <= 0).
    observed, process : dict
        Indices from the observed and the process sigma: ``{"cp", "cpk"}`` or ``{"pp",
        "ppk"}`` (None where undefined).
    spread_interval : dict
        ``{"cp": [lower, upper]}`` or ``{"pp": [...]}``: the index interval from the sigma
        interval (upper None when the variance's lower bound is <= 0). No interval is given for
        Cpk/Ppk: it would also need the uncertainty of the mean.
    """

    basis: str
    observed_sigma: float
    observed_df: float | None
    gauge_share: float
    process_variance: float
    process_sigma: float | None
    variance_lower: float | None
    variance_upper: float | None
    sigma_lower: float | None
    sigma_upper: float | None
    observed: dict
    process: dict
    spread_interval: dict

    def to_dict(self) -> dict:
        return {
            "basis": self.basis,
            "observed_sigma": _f(self.observed_sigma),
            "observed_df": _f(self.observed_df),
            "gauge_share": _f(self.gauge_share),
            "process_variance": _f(self.process_variance),
            "process_sigma": _f(self.process_sigma),
            "variance_lower": _f(self.variance_lower),
            "variance_upper": _f(self.variance_upper),
            "sigma_lower": _f(self.sigma_lower),
            "sigma_upper": _f(self.sigma_upper),
            "observed": {k: _f(v) for k, v in self.observed.items()},
            "process": {k: _f(v) for k, v in self.process.items()},
            "spread_interval": {k: [_f(v) for v in b] for k, b in self.spread_interval.items()},
        }


@dataclass(frozen=True)
class MeasurementErrorResult(Result):
    """Observed versus process-only capability; see :func:`remove_gauge_variance`.

    Attributes
    ----------
    gauge_sigma, gauge_df : float, float or None
        The gauge's sigma (total gauge R&R) and its degrees of freedom (None: no interval).
    gauge_source : str
        Where the gauge sigma came from (e.g. ``"gauge_rr"``).
    level : float
        Two-sided confidence level of the intervals.
    max_gauge_share : float
        The share above which the warning is given.
    within, overall : SigmaWithoutGauge or None
    warnings : tuple of str
    method : str
    """

    gauge_sigma: float
    gauge_df: float | None
    gauge_source: str
    level: float
    max_gauge_share: float
    within: SigmaWithoutGauge | None
    overall: SigmaWithoutGauge | None
    warnings: tuple[str, ...] = ()
    method: str = MLS_METHOD

    def to_dict(self) -> dict:
        return {
            "gauge_sigma": _f(self.gauge_sigma),
            "gauge_df": _f(self.gauge_df),
            "gauge_source": self.gauge_source,
            "level": _f(self.level),
            "max_gauge_share": _f(self.max_gauge_share),
            "within": None if self.within is None else self.within.to_dict(),
            "overall": None if self.overall is None else self.overall.to_dict(),
            "warnings": list(self.warnings),
            "method": self.method,
        }


def _indices(mean, sigma, lsl, usl):
    """(spread index, location index) for one sigma: Cp-like and Cpk-like; None if undefined."""
    if sigma is None or not sigma > 0:
        return None, None
    both = None if lsl is None or usl is None else (usl - lsl) / (6.0 * sigma)
    sides = [
        v
        for v in (
            None if usl is None else (usl - mean) / (3.0 * sigma),
            None if lsl is None else (mean - lsl) / (3.0 * sigma),
        )
        if v is not None
    ]
    return both, (min(sides) if sides else None)


def _one(basis, sigma, df, var_g, df_g, mean, lsl, usl, level):
    var_o = sigma * sigma
    est = var_o - var_g
    lo = hi = None
    if df is not None and df > 0 and df_g is not None and df_g > 0 and var_g > 0:
        _, lo, hi = mls_difference_interval(var_o, df, var_g, df_g, confidence=level)
    elif df is not None and df > 0 and var_g == 0:
        _, lo, hi = mls_difference_interval(var_o, df, 0.0, math.inf, confidence=level)
    names = ("cp", "cpk") if basis == "within" else ("pp", "ppk")
    obs = dict(zip(names, _indices(mean, sigma, lsl, usl), strict=True))
    p_sigma = math.sqrt(est) if est > 0 else None
    proc = dict(zip(names, _indices(mean, p_sigma, lsl, usl), strict=True))
    s_lo = None if lo is None else math.sqrt(max(lo, 0.0))
    s_hi = None if hi is None or hi <= 0 else math.sqrt(hi)
    interval = {}
    if lsl is not None and usl is not None and s_hi is not None:
        width = usl - lsl
        interval[names[0]] = [width / (6.0 * s_hi), width / (6.0 * s_lo) if s_lo else None]
    return SigmaWithoutGauge(
        basis=basis,
        observed_sigma=sigma,
        observed_df=df,
        gauge_share=var_g / var_o,
        process_variance=est,
        process_sigma=p_sigma,
        variance_lower=lo,
        variance_upper=hi,
        sigma_lower=s_lo,
        sigma_upper=s_hi,
        observed=obs,
        process=proc,
        spread_interval=interval,
    )


# long: signature and numpydoc docstring take 62 lines; the body calls named steps
def remove_gauge_variance(
    *,
    gauge_sigma: float,
    gauge_df: float | None,
    mean: float,
    lsl: float | None = None,
    usl: float | None = None,
    within_sigma: float | None = None,
    within_df: float | None = None,
    overall_sigma: float | None = None,
    n: int | None = None,
    confidence: float = 0.95,
    max_gauge_share: float = MAX_GAUGE_SHARE,
    gauge_source: str = "gauge_rr",
) -> MeasurementErrorResult:
    """Observed and process-only capability indices with the gauge variance taken out.

    Parameters
    ----------
    gauge_sigma : float, keyword-only
        Sigma of the measurement system (total gauge R&R of a stored gauge study).
    gauge_df : float or None
        Its degrees of freedom (Satterthwaite for a gauge R&R; ``math.inf`` if known exactly;
        None: no interval).
    mean : float
        Mean of the capability study (unchanged by the correction).
    lsl, usl : float, optional
        Specification limits (at least one).
    within_sigma, within_df : float, optional
        Within sigma of the study and the effective degrees of freedom of its estimator.
    overall_sigma : float, optional
        Overall (sample) sigma of the study; its degrees of freedom are ``n - 1``.
    n : int, optional
        Values in the study (needed with ``overall_sigma``).
    confidence : float, default 0.95
        Two-sided level of the intervals.
    max_gauge_share : float, default 0.5
        Warn when sigma_gauge^2 / sigma_observed^2 exceeds this (common practice, no source).
    gauge_source : str
        Recorded in the result (``"gauge_rr"``).

    Returns
    -------
    MeasurementErrorResult

    Notes
    -----
    sigma_process^2 = sigma_observed^2 - sigma_gauge^2 for each of the within and overall
    sigmas; Cp = (USL - LSL) / (6 sigma), Cpk = min(USL - mean, mean - LSL) / (3 sigma) (Pp, Ppk
    with the overall sigma). The interval on sigma_process^2 is
    :func:`mls_difference_interval`; Cp and Pp get the interval that follows from it. The
    correction assumes the gauge error is independent of the part and of the same size over the
    process range, and that the gauge study's parts and conditions match production.

    Examples
    --------
    >>> r = remove_gauge_variance(gauge_sigma=0.3, gauge_df=40.0, mean=10.0, lsl=7.0, usl=13.0,
    ...                           overall_sigma=0.5, n=100)
    >>> round(r.overall.process_sigma, 4), round(r.overall.observed["pp"], 3), \
round(r.overall.process["pp"], 3)
    (0.4, 2.0, 2.5)
    """
    _check_inputs(gauge_sigma, mean, lsl, usl, confidence, max_gauge_share)
    if gauge_df is not None and not gauge_df > 0:
        gauge_df = None
    var_g = float(gauge_sigma) ** 2
    parts = {}
    rest = (var_g, gauge_df, float(mean), lsl, usl, confidence)  # shared by both sigmas
    if within_sigma is not None and within_sigma > 0:
        parts["within"] = _one("within", float(within_sigma), within_df, *rest)
    if overall_sigma is not None and overall_sigma > 0:
        df_o = None if n is None or n < 2 else float(n - 1)
        parts["overall"] = _one("overall", float(overall_sigma), df_o, *rest)
    if not parts:
        raise AnalysisError(
            "no observed sigma to correct: give `within_sigma` or `overall_sigma` (positive)"
        )
    warn = _warnings(parts, max_gauge_share, confidence, gauge_df, var_g)
    return MeasurementErrorResult(
        gauge_sigma=float(gauge_sigma),
        gauge_df=gauge_df,
        gauge_source=gauge_source,
        level=float(confidence),
        max_gauge_share=float(max_gauge_share),
        within=parts.get("within"),
        overall=parts.get("overall"),
        warnings=tuple(warn),
    )


def _check_inputs(gauge_sigma, mean, lsl, usl, confidence, max_gauge_share) -> None:
    """Reject a missing or negative gauge sigma, no limit, and levels out of range."""
    for nm, v in (("gauge_sigma", gauge_sigma), ("mean", mean)):
        if v is None:
            raise AnalysisError(f"`{nm}` (None) must be a finite number")
        check_number(v, nm, error=AnalysisError, tail="")
    if gauge_sigma < 0:
        raise AnalysisError(f"`gauge_sigma` ({gauge_sigma!r}) must not be negative")
    if lsl is None and usl is None:
        raise SpecError("capability indices need at least one specification limit")
    if not 0 < confidence < 1:
        raise SpecError(f"`confidence` ({confidence!r}) must be between 0 and 1, e.g. 0.95")
    if not 0 < max_gauge_share <= 1:
        raise SpecError(f"`max_gauge_share` ({max_gauge_share!r}) must be in (0, 1], e.g. 0.5")


def _warnings(parts: dict, max_gauge_share, confidence, gauge_df, var_g: float) -> list[str]:
    """Cautions: a large gauge share, a process variance not told from zero, no gauge df."""
    warn: list[str] = []
    share = max(p.gauge_share for p in parts.values())
    if share >= 1:
        warn.append(
            f"The gauge variance is {100 * share:.0f} % of the observed variance: the "
            "measurement error accounts for all the spread seen, so no process-only "
            "index can be given. Improve the gauge (or check that the gauge study "
            "matches these parts) before judging the process."
        )
    elif share > max_gauge_share:
        warn.append(
            f"The gauge variance is {100 * share:.0f} % of the observed variance "
            f"(above {100 * max_gauge_share:g} %, common practice, no source): the "
            "process-only indices rest on the small difference of two uncertain "
            "estimates. Read them as rough; improve the gauge first."
        )
    zero = [
        b
        for b, p in parts.items()
        if p.variance_lower is not None and p.variance_lower <= 0 and p.process_variance > 0
    ]
    if zero:
        warn.append(
            f"At {100 * confidence:g} % confidence the process variance ({' and '.join(zero)}) "
            "cannot be told from zero: the interval's lower bound reaches 0, so the "
            "process-only Cp/Pp has no upper bound."
        )
    if gauge_df is None and var_g > 0:
        warn.append(
            "The gauge sigma has no degrees of freedom recorded: the process-only "
            "figures are given without an interval."
        )
    return warn


def gauge_sigma_from_stored(payload: Mapping) -> tuple[float, float | None] | None:
    """(sigma, degrees of freedom) of the total gauge R&R in a stored gauge R&R payload.

    The payload is the JSON of :meth:`studykit.stats.gauge.GaugeResult.to_dict` as ``studykit
    gauge --study`` stores it; None when it holds no usable gauge R&R component.
    """
    if not isinstance(payload, Mapping):
        return None
    comps = payload.get("components")
    if not isinstance(comps, list):
        return None
    for c in comps:
        if isinstance(c, Mapping) and c.get("name") == "gauge_rr":
            sigma = c.get("sigma")
            if not isinstance(sigma, int | float) or not math.isfinite(sigma) or sigma < 0:
                return None
            df = c.get("interval_df")
            df = float(df) if isinstance(df, int | float) and df > 0 else None
            return float(sigma), df
    return None
