"""Capability of attribute (pass/fail and count) characteristics.

Defective parts: average defective rate with an exact Clopper-Pearson interval, PPM and the
process Z. Defects counted on units: defects per unit with an exact Poisson interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from studykit import names
from studykit.errors import AnalysisError, StudyInputError
from studykit.stats.lazy import beta_ppf, norm_isf, norm_sf
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.result import Result

__all__ = [
    "AttributeCapability",
    "DefectsPerUnit",
    "attribute_capability",
    "attribute_verdict",
    "defects_per_unit",
    "zero_defect_sample_size",
]


def _level(level):
    # the one name of the parameter is ``confidence`` (None: not given -> 0.95); ``level`` is
    # its deprecated spelling, still accepted
    if not isinstance(level, int | float) or not 0.5 <= float(level) < 1:
        raise StudyInputError(
            f"`level` ({level!r}) must be a confidence level in [0.5, 1), e.g. 0.95."
        )
    return float(level)


def _suffix(level):
    pct = level * 100
    return f"{round(pct):d}" if abs(pct - round(pct)) < 1e-9 else f"{pct:g}".replace(".", "_")


def _counts(values, name, *, integer=True):
    try:
        arr = np.atleast_1d(np.asarray(values, dtype=float)).ravel()
    except (TypeError, ValueError):
        raise StudyInputError(f"`{name}` must contain numbers only.") from None
    if arr.size == 0:
        raise AnalysisError(f"`{name}` is empty; give at least one count.")
    bad = ~np.isfinite(arr) | (arr < 0)
    if integer:
        bad |= arr != np.round(arr)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        kind = "a whole number of at least 0" if integer else "a number of at least 0"
        raise StudyInputError(
            f"`{name}` value {float(arr[i]):g} at position {i} must be {kind}; correct the count."
        )
    return arr


def _z(p):
    """Phi^-1(1 - p); None when p is 0 (infinitely far) and -inf is never returned."""
    if p <= 0:
        return None
    if p >= 1:
        return None
    return norm_isf(p)


@dataclass(frozen=True)
class AttributeCapability(Result):
    """Defective rate, its exact confidence bounds, PPM and process Z.

    Attributes
    ----------
    defective_rate : float
        p = total defectives / total inspected.
    defective_rate_lower, defective_rate_upper : float
        Two-sided Clopper-Pearson interval at ``level``.
    defective_rate_upper_bound : float
        One-sided upper Clopper-Pearson bound at ``level`` (``defective_rate_upper_95`` in
        ``to_dict`` for level 0.95).
    ppm_defective, ppm_defective_upper_bound : float
        10^6 p and 10^6 times the one-sided upper bound.
    z_process : float or None
        Phi^-1(1 - p); None when no defectives were found (p = 0, unbounded).
    z_process_lower_bound : float or None
        Phi^-1(1 - upper bound): the Z the data demonstrate at ``level``.
    defectives, inspected, n_subgroups : int
    level : float
    method : str
        ``"clopper_pearson"``.
    """

    defective_rate: float
    defective_rate_lower: float
    defective_rate_upper: float
    defective_rate_upper_bound: float
    ppm_defective: float
    ppm_defective_upper_bound: float
    z_process: float | None
    z_process_lower_bound: float | None
    defectives: int
    inspected: int
    n_subgroups: int
    level: float
    method: str = "clopper_pearson"

    @property
    def defective_rate_upper_95(self) -> float:
        """One-sided upper bound; defined only for level 0.95."""
        if abs(self.level - 0.95) > 1e-12:
            raise AttributeError(
                f"defective_rate_upper_95 exists only for level 0.95 (level is {self.level}); "
                "use defective_rate_upper_bound."
            )
        return self.defective_rate_upper_bound

    def to_dict(self) -> dict:
        s = _suffix(self.level)
        return {
            "method": self.method,
            "level": self.level,
            "defectives": self.defectives,
            "inspected": self.inspected,
            "n_subgroups": self.n_subgroups,
            "defective_rate": self.defective_rate,
            "defective_rate_lower": self.defective_rate_lower,
            "defective_rate_upper": self.defective_rate_upper,
            f"defective_rate_upper_{s}": self.defective_rate_upper_bound,
            "ppm_defective": self.ppm_defective,
            f"ppm_defective_upper_{s}": self.ppm_defective_upper_bound,
            "z_process": self.z_process,
            f"z_process_lower_{s}": self.z_process_lower_bound,
        }


def attribute_capability(
    defectives, inspected, *, confidence: float | None = None, level: float | None = None
) -> AttributeCapability:
    """Capability of a pass/fail characteristic from counts of defective parts.

    Parameters
    ----------
    defectives : int or array-like of int
        Defective parts found, per subgroup (or a total).
    inspected : int or array-like of int
        Parts inspected, per subgroup (same length as ``defectives``), or a total.
    confidence : float, optional
        Confidence level; None (not given) means 0.95. ``level`` is its deprecated spelling.

    Returns
    -------
    AttributeCapability
        defective_rate, its two-sided interval and one-sided upper bound, PPM, process Z and its
        lower bound, counts, level, method.

    Notes
    -----
    With x defectives out of n: p = x / n. Clopper-Pearson bounds from beta quantiles:
    lower = B(alpha/2; x, n - x + 1) (0 if x = 0), upper = B(1 - alpha/2; x + 1, n - x) (1 if
    x = n); the one-sided upper bound uses 1 - alpha. Z = Phi^-1(1 - p): the process Z is the
    standard normal quantile with the same one-sided tail share as the defective rate.

    References
    ----------
    C. J. Clopper and E. S. Pearson, "The use of confidence or fiducial limits illustrated in
    the case of the binomial", Biometrika 26 (1934) 404-413; D. C. Montgomery, *Introduction to
    Statistical Quality Control*, ch. 8 (process capability from attribute data; from memory).

    Examples
    --------
    >>> r = attribute_capability([2, 0, 1], [500, 500, 500])
    >>> r.ppm_defective, round(r.z_process, 3)
    (2000.0, 2.878)
    >>> round(r.defective_rate_upper_95, 5)
    0.00516
    """
    level = _level(names.confidence_of(confidence, level=level))
    x, n = _checked_counts(defectives, inspected)
    xt, nt = int(x.sum()), int(n.sum())
    alpha = 1.0 - level
    p = xt / nt
    lower = 0.0 if xt == 0 else beta_ppf(alpha / 2, xt, nt - xt + 1)
    upper = 1.0 if xt == nt else beta_ppf(1 - alpha / 2, xt + 1, nt - xt)
    upper1 = 1.0 if xt == nt else beta_ppf(1 - alpha, xt + 1, nt - xt)
    return AttributeCapability(
        defective_rate=p,
        defective_rate_lower=lower,
        defective_rate_upper=upper,
        defective_rate_upper_bound=upper1,
        ppm_defective=p * 1e6,
        ppm_defective_upper_bound=upper1 * 1e6,
        z_process=_z(p),
        z_process_lower_bound=_z(upper1),
        defectives=xt,
        inspected=nt,
        n_subgroups=int(x.size),
        level=level,
    )


def _checked_counts(defectives, inspected) -> tuple[np.ndarray, np.ndarray]:
    """Defectives and inspected counts per subgroup: paired, inspected >= 1 and >= defectives."""
    x = _counts(defectives, "defectives")
    n = _counts(inspected, "inspected")
    if x.size != n.size and n.size != 1:
        raise StudyInputError(
            f"`defectives` has {x.size} entries but `inspected` has {n.size}; give one inspected "
            "count per subgroup, or a single total."
        )
    if n.size == 1 and x.size > 1:
        raise StudyInputError(
            "`inspected` is a single number but `defectives` has several subgroups; give the "
            "inspected count of each subgroup."
        )
    if np.any(n <= 0):
        i = int(np.flatnonzero(n <= 0)[0])
        raise StudyInputError(
            f"`inspected` value {float(n[i]):g} at position {i} must be at least 1."
        )
    over = x > n
    if over.any():
        i = int(np.flatnonzero(over)[0])
        raise StudyInputError(
            f"`defectives` ({x[i]:g}) exceeds `inspected` ({n[i]:g}) at position {i}; a "
            "subgroup cannot have more defectives than parts."
        )
    return x, n


def zero_defect_sample_size(
    rate: float, *, confidence: float | None = None, level: float | None = None
) -> int:
    """Items to inspect with no defective found so that the one-sided upper bound at ``level``
    is at most ``rate``: the smallest n with 1 - (1 - level)^(1/n) <= rate, i.e.
    n = ceil(ln(1 - level) / ln(1 - rate)) (Clopper & Pearson 1934 with x = 0).

    Examples
    --------
    >>> zero_defect_sample_size(0.0117, level=0.95)
    255
    """
    level = _level(names.confidence_of(confidence, level=level))
    if not 0 < rate < 1:
        raise StudyInputError(f"`rate` ({rate!r}) must lie strictly between 0 and 1.")
    return int(math.ceil(math.log(1 - level) / math.log1p(-rate)))


def attribute_verdict(
    ac: AttributeCapability, *, threshold: float, basis: str = "lower_bound", index: str = "ppk"
):
    """Judge a pass/fail characteristic from its defective rate (p and np charts).

    The requirement "index >= threshold" is read as a one-sided defective rate: Ppk = Z / 3,
    so the rate allowed is Phi(-3 threshold) (process Z = 3 Ppk; common practice for attribute
    capability, Montgomery ch. 8, from memory). The judged figure is the process Z divided by 3
    from the exact one-sided upper Clopper-Pearson bound on the rate (``basis="lower_bound"``),
    or from the observed rate (``basis="estimate"``). With no defective found the observed rate
    gives no finite Z, so the verdict always uses the bound then; with only defectives found the
    requirement is not met.

    Returns
    -------
    studykit.stats.capability.Verdict

    Examples
    --------
    >>> v = attribute_verdict(attribute_capability([0], [255]), threshold=0.7)
    >>> v.meets, round(v.lower_bound, 3)
    (True, 0.756)
    """
    from studykit.stats.capability import Verdict

    level = ac.level
    allowed = norm_sf(3 * threshold)
    est = None if ac.z_process is None else ac.z_process / 3
    low = None if ac.z_process_lower_bound is None else ac.z_process_lower_bound / 3
    pct = f"{level:.0%}"
    bound_ppm = ac.ppm_defective_upper_bound
    head = (
        f"{ac.defectives} defective(s) in {ac.inspected} items: the exact one-sided {pct} "
        f"upper bound on the defective rate is {ac.defective_rate_upper_bound:.4g} "
        f"({bound_ppm:,.0f} PPM, Clopper-Pearson)"
    )
    judged_on_bound = basis == "lower_bound" or ac.defectives == 0
    if ac.defectives == ac.inspected:
        meets = False
        text = (
            f"Every inspected item ({ac.inspected}) is defective: the requirement "
            f"({index.capitalize()} >= {threshold:g}, a defective rate of at most "
            f"{allowed * 1e6:.3g} PPM) is not met."
        )
    else:
        judged = low if judged_on_bound else est
        meets = judged is not None and judged >= threshold
        what = "the bound" if judged_on_bound else "the observed rate"
        zval = ac.z_process_lower_bound if judged_on_bound else ac.z_process
        text = (
            f"{head}; the process Z from {what} is {zval:.2f}, equivalent to "
            f"{index.capitalize()} {judged:.2f} against the required {threshold:g} (a rate "
            f"of at most {allowed * 1e6:.3g} PPM): "
        )
        if meets:
            text += "the data demonstrate the requirement."
        else:
            text += "the data do not demonstrate the requirement."
            if ac.defectives == 0:
                need = zero_defect_sample_size(allowed, level=level)
                text += (
                    f" With no defective found, {need:,} items without a defective would "
                    f"be needed to show it at {pct} confidence."
                )
        if ac.defectives == 0 and basis == "estimate":
            text += " (No defective was found, so the bound is judged, not the estimate.)"
    return Verdict(
        criterion=f"{index} >= {threshold:g}",
        index=index,
        threshold=float(threshold),
        basis="lower_bound" if judged_on_bound else basis,
        estimate=est,
        lower_bound=low,
        level=level,
        meets=meets,
        text=text,
    )


@dataclass(frozen=True)
class DefectsPerUnit(Result):
    """Defects per unit with an exact Poisson confidence interval.

    Attributes
    ----------
    dpu : float
        Total defects / total units.
    dpu_lower, dpu_upper : float
        Two-sided exact interval at ``level``.
    dpu_upper_bound : float
        One-sided upper bound at ``level`` (``dpu_upper_95`` in ``to_dict`` for 0.95).
    defects : int
    units : float
    n_subgroups : int
    level : float
    method : str
        ``"poisson_exact"``.
    """

    dpu: float
    dpu_lower: float
    dpu_upper: float
    dpu_upper_bound: float
    defects: int
    units: float
    n_subgroups: int
    level: float
    method: str = "poisson_exact"

    def to_dict(self) -> dict:
        s = _suffix(self.level)
        return {
            "method": self.method,
            "level": self.level,
            "defects": self.defects,
            "units": self.units,
            "n_subgroups": self.n_subgroups,
            "dpu": self.dpu,
            "dpu_lower": self.dpu_lower,
            "dpu_upper": self.dpu_upper,
            f"dpu_upper_{s}": self.dpu_upper_bound,
        }


def defects_per_unit(
    defects, units, *, confidence: float | None = None, level: float | None = None
) -> DefectsPerUnit:
    """Defects per unit with an exact (Garwood) Poisson confidence interval.

    Parameters
    ----------
    defects : int or array-like of int
        Defects counted, per subgroup (or a total).
    units : float or array-like of float
        Inspection units per subgroup (may be fractional, e.g. area), same length, or a total.
    confidence : float, optional
        Confidence level; None (not given) means 0.95. ``level`` is its deprecated spelling.

    Returns
    -------
    DefectsPerUnit
        dpu, dpu_lower, dpu_upper, dpu_upper_bound, defects, units, n_subgroups, level, method.

    Notes
    -----
    With c defects on u units: DPU = c / u; lower = chi2_(alpha/2)(2c) / (2u) (0 if c = 0),
    upper = chi2_(1 - alpha/2)(2c + 2) / (2u); the one-sided upper bound uses 1 - alpha.

    References
    ----------
    F. Garwood, "Fiducial limits for the Poisson distribution", Biometrika 28 (1936) 437-442.

    Examples
    --------
    >>> r = defects_per_unit([3, 5, 2], [10, 10, 10])
    >>> round(r.dpu, 3), round(r.dpu_upper, 4)
    (0.333, 0.613)
    """
    level = _level(names.confidence_of(confidence, level=level))
    c = _counts(defects, "defects")
    u = _counts(units, "units", integer=False)
    if c.size != u.size:
        raise StudyInputError(
            f"`defects` has {c.size} entries but `units` has {u.size}; give the units of each "
            "subgroup."
        )
    if np.any(u <= 0):
        i = int(np.flatnonzero(u <= 0)[0])
        raise StudyInputError(
            f"`units` value {float(u[i]):g} at position {i} must be greater than 0."
        )
    ct, ut = int(c.sum()), float(u.sum())
    alpha = 1.0 - level
    lower = 0.0 if ct == 0 else float(stats.chi2.ppf(alpha / 2, 2 * ct)) / (2 * ut)
    upper = float(stats.chi2.ppf(1 - alpha / 2, 2 * ct + 2)) / (2 * ut)
    upper1 = float(stats.chi2.ppf(1 - alpha, 2 * ct + 2)) / (2 * ut)
    if not math.isfinite(upper):
        raise AnalysisError("the Poisson upper bound is not finite; check the counts.")
    return DefectsPerUnit(
        dpu=ct / ut,
        dpu_lower=lower,
        dpu_upper=upper,
        dpu_upper_bound=upper1,
        defects=ct,
        units=ut,
        n_subgroups=int(c.size),
        level=level,
    )
