"""Capability indices with confidence bounds, expected and observed PPM.

The verdict policy (``judge``, ``diagnose``, ``model_band``) lives in
:mod:`studykit.stats.verdict`; its names are re-exported here.

Normal theory: Cp, Cpk, CPU, CPL from the within-subgroup sigma; Pp, Ppk, PPU, PPL and Cpm from
the overall sigma. Non-normal data: the percentile method (ISO 22514-2) from a fitted model, with
the equivalent-PPM (z) method as a second, labelled figure.

Tail convention
---------------
The percentile method uses the quantiles at exactly 0.135 % and 99.865 % (p = 0.00135, as
ISO 22514-2 states them; :data:`TAIL_PROBABILITY`), not Phi(-3) = 0.0013499. For a normal model
the percentile indices therefore differ from the normal-theory ones by the factor
3 / Phi^-1(0.99865) = 1.0000077, far below any reported digit.

Fitted models
-------------
A non-normal model is any object with ``name``, ``parameters`` (dict), ``n``, ``cdf(x)``,
``sf(x)``, ``ppf(q)``, ``rvs(size, *, random_state)`` and ``family.fit(x)`` returning another
such object (the protocol of :mod:`studykit.stats.fit`).

Bootstrap of a large sample
---------------------------
The bounds of a fitted model come from a parametric bootstrap. Its samples are drawn and
refitted in blocks (at most :data:`studykit.stats.solvers.ROW_CELLS` cells at a time), so memory
does not grow with the number of samples times n. Above :data:`BOOTSTRAP_FULL_N` readings
each bootstrap sample has m = BOOTSTRAP_FULL_N readings instead of n, and the spread of its
index around the estimate T_n is scaled to n: T_n + sqrt(m / n) (T*_m - T_n). This is the
rescaled m-out-of-n bootstrap for a statistic that is asymptotically normal at rate sqrt(n)
(the indices are smooth functions of maximum-likelihood estimates): P. J. Bickel, F. Goetze
and W. R. van Zwet, "Resampling fewer than n observations: gains, losses, and remedies for
losses", Statistica Sinica 7 (1997) 1-31; D. N. Politis, J. P. Romano and M. Wolf,
*Subsampling*, Springer 1999, ch. 2. The time and memory of a study then stop growing with n
beyond the sample itself; at 20,000 readings the percentile interval's own bias, of order
1/m, is far below the width of the interval. The bounds' ``method`` field then reads
``rescaled_m_out_of_n_bootstrap_percentile`` instead of ``parametric_bootstrap_percentile``.

Bootstrap samples are drawn from the numpy Generator directly by the family's ``sample``
(the same calls and arithmetic as scipy.stats' ``rvs`` of the frozen model, so the same
numbers); a model object outside :mod:`studykit.stats.fit` is sampled through its ``rvs``.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field

import numpy as np
from scipy import special

from studykit import names
from studykit.errors import AnalysisError, SpecError, StudyInputError
from studykit.stats import bootstrap
from studykit.stats._checks import NOISE_ULPS, check_number, check_resolution, check_sample
from studykit.stats.lazy import brentq
from studykit.stats.result import Result
from studykit.stats.result import json_float as _finite_or_none
from studykit.stats.verdict import (  # the verdict policy, re-exported so old imports work
    DEFAULT_CRITERIA,
    Finding,
    ModelBand,
    Verdict,
    diagnose,
    judge,
    model_band,
)

__all__ = [
    "TAIL_PROBABILITY",
    "BOOTSTRAP_FULL_N",
    "INDEX_NAMES",
    "DEFAULT_CRITERIA",
    "CapabilityResult",
    "Verdict",
    "Finding",
    "ModelBand",
    "capability",
    "judge",
    "diagnose",
    "model_band",
    "effective_df_range",
    "effective_df_stdev",
    "effective_df_moving_range",
    "moving_range_sigma",
]

#: Lower tail of the percentile method: exactly 0.135 % (ISO 22514-2). See module notes.
TAIL_PROBABILITY = bootstrap.TAIL_PROBABILITY

#: Capability indices, in report order. Output field names are defined here once.
INDEX_NAMES = names.INDEX_IDS
WITHIN_INDICES = ("cp", "cpk", "cpu", "cpl")
OVERALL_INDICES = ("pp", "ppk", "ppu", "ppl")
#: Indices whose one-sided lower bound also appears as a top-level key, e.g. ``ppk_lower_95``.
HEADLINE_BOUNDS = ("cp", "cpk", "pp", "ppk")
METHODS = ("normal", "percentile", "equivalent_ppm")

#: Above this many readings the bootstrap of a fitted model uses samples of this size with
#: their spread scaled by sqrt(m / n) (module notes, "Bootstrap of a large sample").
BOOTSTRAP_FULL_N = 20_000


_PRETTY = names.INDEX_LABELS


# --------------------------------------------------------------------------------------------
# Effective degrees of freedom of within-sigma estimators (Patnaik's chi approximation)
# --------------------------------------------------------------------------------------------


def _chi_mean(nu: float) -> float:
    """E[chi_nu / sqrt(nu)] for real nu > 0 (equals c4(nu + 1))."""
    return math.exp(
        0.5 * math.log(2.0 / nu) + special.gammaln((nu + 1) / 2) - special.gammaln(nu / 2)
    )


@functools.lru_cache(maxsize=256)
def _df_from_cv2(cv2: float) -> float:
    """Degrees of freedom nu whose scaled chi variable has squared coefficient of variation cv2
    (a root search, kept for the last values asked: the studies of a batch share their sizes)."""

    def gap(log_nu):
        m = _chi_mean(math.exp(log_nu))
        return (1.0 - m * m) / (m * m) - cv2

    # The CV of chi_nu decreases in nu; bracket over nu in [1e-3, 1e9].
    return float(math.exp(brentq(gap, math.log(1e-3), math.log(1e9), xtol=1e-12)))


def _check_count(value, *, name, low):
    if isinstance(value, bool) or int(value) != value or value < low:
        raise StudyInputError(f"`{name}` ({value!r}) must be a whole number of at least {low}.")
    return int(value)


def effective_df_range(n_subgroups: int, subgroup_size: int) -> float:
    """Effective degrees of freedom of sigma = R-bar / d2.

    Parameters
    ----------
    n_subgroups : int
        Number of subgroups k (at least 1).
    subgroup_size : int
        Subgroup size n (2 to 100).

    Returns
    -------
    float
        nu such that R-bar/d2 behaves like sigma * chi_nu / sqrt(nu) (up to the c4 bias).

    Notes
    -----
    Patnaik's approximation: match the coefficient of variation of R-bar/d2, d3 / (d2 sqrt(k)),
    to that of chi_nu / sqrt(nu), (1 - c4(nu+1)^2)^(1/2) / c4(nu+1), and solve for real nu.
    For k = 1, n = 2 it gives nu = 1 exactly; roughly nu = 0.9 k (n - 1) for n near 5.

    References
    ----------
    P. B. Patnaik, "The use of mean range as an estimator of variance in statistical tests",
    Biometrika 37 (1950) 78-87; A. J. Duncan, *Quality Control and Industrial Statistics*,
    5th ed., Irwin, 1986, ch. 8 (the same approximation, from memory).

    Examples
    --------
    >>> round(effective_df_range(1, 2), 6)
    1.0
    >>> round(effective_df_range(15, 5), 1)
    54.6
    """
    from studykit.stats.constants import d2, d3

    k = _check_count(n_subgroups, name="n_subgroups", low=1)
    n = _check_count(subgroup_size, name="subgroup_size", low=2)
    cv2 = (d3(n) / d2(n)) ** 2 / k
    return _df_from_cv2(cv2)


def effective_df_stdev(n_subgroups: int, subgroup_size: int) -> float:
    """Effective degrees of freedom of sigma = S-bar / c4.

    Parameters
    ----------
    n_subgroups : int
        Number of subgroups k (at least 1).
    subgroup_size : int
        Subgroup size n (at least 2).

    Returns
    -------
    float
        nu by matching the coefficient of variation of S-bar/c4, sqrt(1 - c4^2) / (c4 sqrt(k)),
        to that of chi_nu / sqrt(nu). For k = 1 it is n - 1 exactly; slightly below k (n - 1)
        (the pooled-variance df) otherwise.

    Notes
    -----
    Same moment matching as :func:`effective_df_range` (Patnaik 1950).

    References
    ----------
    P. B. Patnaik, Biometrika 37 (1950) 78-87.

    Examples
    --------
    >>> round(effective_df_stdev(1, 5), 6)
    4.0
    """
    from studykit.stats.constants import c4

    k = _check_count(n_subgroups, name="n_subgroups", low=1)
    n = _check_count(subgroup_size, name="subgroup_size", low=2)
    c = c4(n)
    return _df_from_cv2((1.0 - c * c) / (c * c) / k)


def effective_df_moving_range(n_values: int) -> float:
    """Effective degrees of freedom of sigma = MR-bar / d2 (moving ranges of span 2).

    Parameters
    ----------
    n_values : int
        Number of individual values N (at least 2); there are N - 1 moving ranges.

    Returns
    -------
    float
        nu by Patnaik's moment matching; about 0.6 (N - 1) for long series.

    Notes
    -----
    With m = N - 1 and sigma = 1, each MR = |X_i - X_(i+1)| has mean 2/sqrt(pi) and variance
    2 - 4/pi; neighbouring moving ranges share a value (correlation of the differences -1/2), so
    Cov = (4/pi)(sqrt(3)/2 + pi/12) - 4/pi from the bivariate-normal moment
    E|U||V| = (2 s_u s_v / pi)(sqrt(1 - rho^2) + rho arcsin rho); non-neighbours are independent:

        Var(MR-bar) = [m (2 - 4/pi) + 2 (m - 1) Cov] / m^2,   CV^2 = Var(MR-bar) / (4/pi).

    References
    ----------
    J. D. Cryer and T. P. Ryan, "The estimation of sigma for an X chart: MR/d2 or S/c4?",
    Journal of Quality Technology 22 (1990) 187-192 (efficiency of MR-bar, from memory);
    P. B. Patnaik, Biometrika 37 (1950) 78-87.

    Examples
    --------
    >>> round(effective_df_moving_range(2), 6)
    1.0
    """
    big_n = _check_count(n_values, name="n_values", low=2)
    m = big_n - 1
    var_mr = 2.0 - 4.0 / math.pi
    cov = (4.0 / math.pi) * (math.sqrt(3.0) / 2.0 + math.pi / 12.0) - 4.0 / math.pi
    var_bar = (m * var_mr + 2.0 * (m - 1) * cov) / m**2
    return _df_from_cv2(var_bar / (4.0 / math.pi))


def moving_range_sigma(x) -> float:
    """Within sigma of individual values in time order: MR-bar / d2(2), d2(2) = 2 / sqrt(pi).

    Parameters
    ----------
    x : array-like
        Individual values in production order (at least 2).

    Returns
    -------
    float
        Mean absolute difference of neighbours divided by 2/sqrt(pi) = 1.128379...

    References
    ----------
    NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.2.2.

    Examples
    --------
    >>> round(moving_range_sigma([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]), 4)
    1.6641
    """
    arr = _clean_data(x, name="x", minimum=2)
    return float(np.mean(np.abs(np.diff(arr))) / (2.0 / math.sqrt(math.pi)))


# --------------------------------------------------------------------------------------------
# Input checks
# --------------------------------------------------------------------------------------------


def _clean_data(x, *, name="x", minimum=2):
    return check_sample(
        x, name=name, minimum=minimum, before="computing capability", needed_for="capability"
    )


def _spec_value(value, name):
    if value is None:
        return None
    return check_number(value, name, error=SpecError, tail=" or None.")


def _check_level(level):
    if not isinstance(level, int | float) or not 0.5 <= float(level) < 1:
        raise StudyInputError(
            f"`level` ({level!r}) must be a confidence level in [0.5, 1), e.g. 0.95."
        )
    return float(level)


def _level_suffix(level: float) -> str:
    pct = level * 100
    return f"{round(pct):d}" if abs(pct - round(pct)) < 1e-9 else f"{pct:g}".replace(".", "_")


# --------------------------------------------------------------------------------------------
# Index formulas
# --------------------------------------------------------------------------------------------


def _normal_indices(mean, sigma, lsl, usl):
    upper = None if usl is None else (usl - mean) / (3.0 * sigma)
    lower = None if lsl is None else (mean - lsl) / (3.0 * sigma)
    both = None if usl is None or lsl is None else (usl - lsl) / (6.0 * sigma)
    k = min(v for v in (upper, lower) if v is not None)
    return both, k, upper, lower


def percentile_indices(model, lsl, usl):
    if bootstrap.is_family_model(model):  # model.ppf's numbers without a frozen scipy object
        q = model.family.quantile(bootstrap.PROBS, dict(model.parameters))
    else:
        q = model.ppf(np.array([TAIL_PROBABILITY, 0.5, 1 - TAIL_PROBABILITY]))
    q_lo, q_mid, q_hi = (float(v) for v in q)
    if not (q_lo < q_mid < q_hi):
        raise AnalysisError(
            f"the fitted model '{model.name}' has no spread (quantiles {q_lo!r}, {q_mid!r}, "
            f"{q_hi!r}); the percentile method needs a model with positive spread."
        )
    pp = None if lsl is None or usl is None else (usl - lsl) / (q_hi - q_lo)
    ppu = None if usl is None else (usl - q_mid) / (q_hi - q_mid)
    ppl = None if lsl is None else (q_mid - lsl) / (q_mid - q_lo)
    ppk = min(v for v in (ppu, ppl) if v is not None)
    return {"pp": pp, "ppk": ppk, "ppu": ppu, "ppl": ppl}, (q_lo, q_mid, q_hi)


def _tail_z(p):
    """Phi^-1(1 - p) / 3, or None when the tail is 0 (unbounded index)."""
    if p <= 0:
        return None
    return float(-special.ndtri(p)) / 3.0  # = scipy.stats.norm.isf(p), without its overhead


def _equivalent_indices(model, lsl, usl):
    p_above = None if usl is None else float(model.sf(usl))
    p_below = None if lsl is None else float(model.cdf(lsl))
    ppu = None if p_above is None else _tail_z(p_above)
    ppl = None if p_below is None else _tail_z(p_below)
    pp = None if ppu is None or ppl is None else (ppu + ppl) / 2.0
    present = [v for v in (ppu, ppl) if v is not None]
    ppk = min(present) if present else None
    return {"pp": pp, "ppk": ppk, "ppu": ppu, "ppl": ppl}


def _chi2_bounds(value, nu, level):
    """One-sided lower bound and two-sided interval value * sqrt(chi2_q(nu) / nu)."""
    alpha = 1.0 - level
    # 2 gammaincinv(nu/2, q) is scipy.stats.chi2.ppf(q, nu) (its _ppf), without the overhead
    f = lambda q: value * math.sqrt(2 * special.gammaincinv(nu / 2, q) / nu)  # noqa: E731
    return f(alpha), f(alpha / 2), f(1 - alpha / 2)


def _bissell_bounds(value, n, nu, level):
    """Bissell (1990) normal approximation: value -/+ z sqrt(1/(9n) + value^2 / (2 nu))."""
    alpha = 1.0 - level
    se = math.sqrt(1.0 / (9.0 * n) + value * value / (2.0 * nu))
    z1, z2 = special.ndtri(1 - alpha), special.ndtri(1 - alpha / 2)  # scipy.stats.norm.ppf
    return value - z1 * se, value - z2 * se, value + z2 * se


def _bound_entry(bounds, method):
    lb, lo, hi = bounds
    return {"lower_bound": float(lb), "lower": float(lo), "upper": float(hi), "method": method}


# --------------------------------------------------------------------------------------------
# Result
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CapabilityResult(Result):
    """Capability indices, confidence bounds and PPM for one characteristic.

    Attributes
    ----------
    cp, cpk, cpu, cpl : float or None
        Within (potential) indices, normal method only; None when undefined (one-sided spec,
        non-normal model).
    cpm : float or None
        Taguchi index about ``target`` (normal method, both limits and a target).
    pp, ppk, ppu, ppl : float or None
        Overall (performance) indices by ``method``.
    cp_lower, cpk_lower, pp_lower, ppk_lower : float or None
        One-sided lower confidence bounds at ``level``; ``to_dict`` names them ``cp_lower_95``
        etc. for level 0.95 (``cp_lower_90`` for 0.90). Properties ``cp_lower_95`` etc. exist.
    bounds : dict
        ``{index: {"lower_bound", "lower", "upper", "method"}}`` for every defined index: the
        one-sided lower bound and the two-sided interval, both at ``level``.
    ppm_within, ppm_within_below, ppm_within_above : float or None
        Expected parts per million outside the limits with the within sigma (normal method).
    ppm_overall, ppm_overall_below, ppm_overall_above : float
        Expected PPM with the overall sigma, or from the fitted model.
    ppm_observed, ppm_observed_below, ppm_observed_above : float
        Observed PPM: share of values strictly outside the limits times 10^6.
    method : str
        ``"normal"``, ``"percentile"`` or ``"equivalent_ppm"``.
    model : str
        ``"normal"`` or the fitted model's name.
    alternatives : dict
        Second figures: for a fitted model, the other non-normal method's indices and the
        normal-theory Pp/Ppk of the same data (for comparison; label them as such).
    inputs : dict
        n, mean, within_sigma, overall_sigma, lsl, usl, target, level, df_within,
        within_sigma_source, model_parameters, n_boot, random_state.
    notes : tuple of str
        Plain-word remarks made while computing.
    """

    cp: float | None
    cpk: float | None
    cpu: float | None
    cpl: float | None
    cpm: float | None
    pp: float | None
    ppk: float | None
    ppu: float | None
    ppl: float | None
    bounds: dict
    ppm_within: float | None
    ppm_within_below: float | None
    ppm_within_above: float | None
    ppm_overall: float
    ppm_overall_below: float
    ppm_overall_above: float
    ppm_observed: float
    ppm_observed_below: float
    ppm_observed_above: float
    method: str
    model: str
    level: float
    alternatives: dict = field(default_factory=dict)
    inputs: dict = field(default_factory=dict)
    notes: tuple = ()

    def lower_bound(self, index: str) -> float | None:
        """One-sided lower confidence bound of ``index`` at ``level`` (None if undefined)."""
        if index not in INDEX_NAMES:
            raise StudyInputError(f"`index` ({index!r}) must be one of {list(INDEX_NAMES)}.")
        entry = self.bounds.get(index)
        return None if entry is None else entry["lower_bound"]

    def _default_level_bound(self, index):
        if abs(self.level - 0.95) > 1e-12:
            raise AttributeError(
                f"{index}_lower_95 exists only for level 0.95 (this result has level "
                f"{self.level}); use lower_bound('{index}')."
            )
        return self.lower_bound(index)

    cp_lower = property(lambda self: self.lower_bound("cp"))
    cpk_lower = property(lambda self: self.lower_bound("cpk"))
    pp_lower = property(lambda self: self.lower_bound("pp"))
    ppk_lower = property(lambda self: self.lower_bound("ppk"))
    cp_lower_95 = property(lambda self: self._default_level_bound("cp"))
    cpk_lower_95 = property(lambda self: self._default_level_bound("cpk"))
    pp_lower_95 = property(lambda self: self._default_level_bound("pp"))
    ppk_lower_95 = property(lambda self: self._default_level_bound("ppk"))

    def to_dict(self) -> dict:
        """JSON-safe dictionary; bound keys are named for the level (``ppk_lower_95``)."""
        suffix = _level_suffix(self.level)
        out = {"method": self.method, "model": self.model, "level": self.level}
        for name in INDEX_NAMES:
            out[name] = getattr(self, name)
        for name in HEADLINE_BOUNDS:
            out[f"{name}_lower_{suffix}"] = self.lower_bound(name)
        out["bounds"] = {"level": self.level, **{k: dict(v) for k, v in self.bounds.items()}}
        for group in ("within", "overall", "observed"):
            for part in ("", "_below", "_above"):
                key = f"ppm_{group}{part}"
                out[key] = getattr(self, key)
        out["alternatives"] = {k: dict(v) for k, v in self.alternatives.items()}
        out["inputs"] = dict(self.inputs)
        out["notes"] = list(self.notes)
        return out

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{_PRETTY[k]}</td><td>{_fmt(getattr(self, k))}</td>"
            f"<td>{_fmt(self.lower_bound(k))}</td></tr>"
            for k in INDEX_NAMES
            if getattr(self, k) is not None
        )
        return (
            f"<table><tr><th>index</th><th>estimate</th><th>lower {self.level:.0%} bound</th>"
            f"</tr>{rows}</table>"
        )


def _fmt(v, digits=3):
    return "n/a" if v is None else f"{v:.{digits}f}"


def _ppm_normal(mean, sigma, lsl, usl):
    # special.ndtr(z), ndtr(-z): what scipy.stats.norm.cdf / sf compute, without the overhead
    below = 0.0 if lsl is None else float(special.ndtr((lsl - mean) / sigma)) * 1e6
    above = 0.0 if usl is None else float(special.ndtr(-((usl - mean) / sigma))) * 1e6
    return below + above, below, above


# --------------------------------------------------------------------------------------------
# Main entry point
# --------------------------------------------------------------------------------------------


# long: the numpydoc docstring (formulas, references) is 85 lines; the code is 50, in named steps
def capability(
    x,
    *,
    lsl=None,
    usl=None,
    target=None,
    within_sigma=None,
    df_within=None,
    model=None,
    method=None,
    level=0.95,
    n_boot=1000,
    random_state=0,
) -> CapabilityResult:
    """Capability indices with confidence bounds, expected and observed PPM.

    Parameters
    ----------
    x : array-like
        All retained measurements (in production order when ``within_sigma`` is not given).
    lsl, usl : float or None
        Specification limits; at least one. Indices that need a missing limit are None.
    target : float or None
        Target for Cpm (between the limits). Cpm is None without a target or a two-sided spec.
    within_sigma : float or None
        Within-subgroup sigma from the control chart (R-bar/d2, S-bar/c4, MR-bar/d2). If None,
        MR-bar/d2 of ``x`` in the given order is used (see :func:`moving_range_sigma`).
    df_within : float or None
        Effective degrees of freedom of ``within_sigma`` (see :func:`effective_df_range`,
        :func:`effective_df_stdev`, :func:`effective_df_moving_range`). Default: n - 1 when
        ``within_sigma`` is given, the moving-range df when it is estimated here.
    model : FittedModel or None
        A fitted non-normal model (protocol in the module notes). None for normal theory.
    method : {"normal", "percentile", "equivalent_ppm"} or None
        Default "normal" without a model and "percentile" with one.
    level : float
        Confidence level of the bounds (default 0.95).
    n_boot : int
        Bootstrap resamples for the bounds of a fitted model (default 1000).
    random_state : int or numpy.random.Generator
        Seed of the parametric bootstrap (fitted models only); fixed default for repeatability.

    Returns
    -------
    CapabilityResult
        Indices, bounds, PPM, method and inputs (see the class).

    Notes
    -----
    Normal method, m = mean, s = overall standard deviation (n - 1), sw = within sigma:
    Cp = (USL - LSL)/(6 sw), CPU = (USL - m)/(3 sw), CPL = (m - LSL)/(3 sw), Cpk = min(CPU, CPL);
    Pp, PPU, PPL, Ppk the same with s; Cpm = (USL - LSL) / (6 sqrt(s^2 + (m - T)^2)) (uses the
    overall s: Taguchi's expected squared deviation from target is a long-run quantity).

    Bounds at confidence ``level`` = 1 - alpha (one-sided lower, and two-sided interval):

    * Cp, Pp: index * sqrt(chi2_alpha(nu) / nu), nu = df_within for Cp, n - 1 for Pp.
    * Cpk, CPU, CPL, Ppk, PPU, PPL: Bissell, index - z_(1-alpha) sqrt(1/(9n) + index^2/(2 nu));
      nu = n - 1 for overall indices and df_within for within indices (n - 1 replaced by the
      effective df: our generalisation, the same as for Cp).
    * Cpm: chi-square with Boyles' df nu = n (1 + a^2)^2 / (1 + 2 a^2), a = (m - T) / s.
    * Fitted model: percentile interval of a parametric bootstrap: ``n_boot`` samples of size n
      from the model, each refitted with ``model.family.fit`` and re-evaluated.

    Percentile method: Pp = (USL - LSL)/(X_hi - X_lo), PPU = (USL - X50)/(X_hi - X50),
    PPL = (X50 - LSL)/(X50 - X_lo), X_lo, X_hi the model quantiles at 0.00135 and 0.99865 (module notes).
    Equivalent-PPM method: PPU = Phi^-1(1 - P(X > USL))/3, PPL = Phi^-1(1 - P(X < LSL))/3,
    Pp = (PPU + PPL)/2, Ppk = min; an index whose tail probability is 0 is None (unbounded).

    References
    ----------
    NIST/SEMATECH e-Handbook of Statistical Methods, section 6.1.6 (Cp, Cpk, Cpm);
    ISO 22514-2:2017, Statistical methods in process management - Capability and performance -
    Part 2 (percentile method); J. A. Clements, "Process capability calculations for non-normal
    distributions", Quality Progress 22 (1989) 95-100;
    A. F. Bissell, "How reliable is your capability index?", Applied Statistics 39 (1990)
    331-340; R. A. Boyles, "The Taguchi capability index", Journal of Quality Technology 23
    (1991) 17-26; D. C. Montgomery, *Introduction to Statistical Quality Control*, ch. 8
    (chi-square interval for Cp); B. Efron and R. J. Tibshirani, *An Introduction to the
    Bootstrap*, Chapman & Hall, 1993, ch. 6 and 13 (parametric bootstrap, percentile interval).

    Examples
    --------
    >>> x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
    >>> r = capability(x, lsl=44.0, usl=58.0)
    >>> round(r.pp, 4), round(r.ppk, 4), r.method
    (1.1472, 1.1161, 'normal')
    >>> r.to_dict()["ppk_lower_95"] < r.ppk
    True
    """
    arr = _clean_data(x)
    n = arr.size
    lsl, usl, target, level, method = _checked_inputs(lsl, usl, target, level, model, method)
    check_resolution(arr)  # overflow, rounding-noise spread, precision collapse
    mean = float(arr.mean())
    overall_sigma = _overall_sigma(arr)
    notes: list = []
    within_sigma, df_within, source = _within_sigma(arr, within_sigma, df_within, notes)
    pp_n, ppk_n, ppu_n, ppl_n = _normal_indices(mean, overall_sigma, lsl, usl)
    normal = {"pp": pp_n, "ppk": ppk_n, "ppu": ppu_n, "ppl": ppl_n}
    values = dict.fromkeys(INDEX_NAMES)
    alternatives: dict = {}
    model_name, model_parameters = "normal", None
    if method == "normal":
        bounds, ppm_w, ppm_o = _normal_method(
            values, normal, mean, within_sigma, overall_sigma, df_within, n,
            lsl, usl, target, level,
        )  # fmt: skip
    else:
        model_name = str(getattr(model, "name", "model"))
        model_parameters = {k: float(v) for k, v in dict(getattr(model, "parameters", {})).items()}
        bounds, ppm_o = _model_method(
            values, alternatives, normal, model, method, n, lsl, usl, level, n_boot,
            random_state, notes,
        )  # fmt: skip
        ppm_w = (None, None, None)
    inputs = {
        "n": int(n),
        "mean": mean,
        "within_sigma": float(within_sigma) if method == "normal" else None,
        "overall_sigma": overall_sigma,
        "lsl": lsl,
        "usl": usl,
        "target": target,
        "level": level,
        "df_within": df_within if method == "normal" else None,
        "within_sigma_source": source if method == "normal" else None,
        "model_parameters": model_parameters,
        "n_boot": int(n_boot) if method != "normal" else None,
        "random_state": random_state
        if isinstance(random_state, int) and method != "normal"
        else None,
    }
    return _capability_result(
        arr, lsl, usl, values, bounds, ppm_w, ppm_o, method, model_name, level, alternatives,
        inputs, notes,
    )  # fmt: skip


def _checked_inputs(lsl, usl, target, level, model, method):
    """Checked limits, target, level and method of :func:`capability` (messages name the fix)."""
    lsl = _spec_value(lsl, "lsl")
    usl = _spec_value(usl, "usl")
    target = _spec_value(target, "target")
    level = _check_level(level)
    if lsl is None and usl is None:
        raise SpecError("give at least one specification limit: `lsl` and `usl` are both None.")
    if lsl is not None and usl is not None and not usl > lsl:
        raise SpecError(f"`usl` ({usl:g}) must be greater than `lsl` ({lsl:g}).")
    if target is not None:
        if (lsl is not None and target < lsl) or (usl is not None and target > usl):
            raise SpecError(
                f"`target` ({target:g}) must lie within the specification "
                f"[{'-inf' if lsl is None else f'{lsl:g}'}, "
                f"{'inf' if usl is None else f'{usl:g}'}]."
            )
    if method is None:
        method = "normal" if model is None else "percentile"
    if method not in METHODS:
        raise StudyInputError(f"`method` ({method!r}) must be one of {list(METHODS)}.")
    if method == "normal" and model is not None:
        raise StudyInputError(
            "`method` 'normal' ignores a fitted `model`; pass model=None for normal theory, or "
            "method='percentile' / 'equivalent_ppm' to use the model."
        )
    if method != "normal" and model is None:
        raise StudyInputError(
            f"`method` '{method}' needs a fitted non-normal `model`; none was given."
        )
    return lsl, usl, target, level, method


def _overall_sigma(arr) -> float:
    """Overall standard deviation (n - 1) of the readings; refuses zero spread."""
    n = arr.size
    overall_sigma = float(arr.std(ddof=1))
    if not overall_sigma > 0:
        raise AnalysisError(
            f"the {n} values have zero spread (all equal {float(arr[0]):g}); capability indices would "
            "be infinite. Check the gauge resolution (it may be too coarse for this tolerance) "
            "or the data import."
        )
    return overall_sigma


def _within_sigma(arr, within_sigma, df_within, notes):
    """Within sigma (given, else MR-bar/d2 of ``arr``), its degrees of freedom and its source."""
    n = arr.size
    if within_sigma is None:
        within_sigma = moving_range_sigma(arr)
        source = "moving_range"
        if df_within is None:
            df_within = effective_df_moving_range(n)
    else:
        source = "given"
        try:
            within_sigma = float(within_sigma)
        except (TypeError, ValueError):
            raise StudyInputError(f"`within_sigma` ({within_sigma!r}) must be a number.") from None
        floor = NOISE_ULPS * float(np.spacing(np.max(np.abs(arr))))
        if not (math.isfinite(within_sigma) and within_sigma > floor):
            raise AnalysisError(
                f"the within-subgroup sigma ({within_sigma:.3g}) is zero or below the "
                f"resolution of the readings ({floor:.3g}): the values within each subgroup (or "
                "each moving range) show no variation, so Cp and Cpk would be infinite. Check "
                "the gauge resolution (it may be too coarse for this tolerance) or the data "
                "import."
            )
        if df_within is None:
            df_within = n - 1
            notes.append(
                "The within-sigma degrees of freedom were not given; n - 1 was used, which makes "
                "the Cp/Cpk bounds too narrow for R-bar/d2 or MR-bar/d2 estimates."
            )
    try:
        df_within = float(df_within)
    except (TypeError, ValueError):
        raise StudyInputError(f"`df_within` ({df_within!r}) must be a number.") from None
    if not (math.isfinite(df_within) and df_within > 0):
        raise StudyInputError(f"`df_within` ({df_within!r}) must be a positive number.")
    return within_sigma, df_within, source


def _normal_method(
    values, normal, mean, within_sigma, overall_sigma, df_within, n, lsl, usl, target, level
):
    """Normal theory: fills ``values``; returns the bounds and the within / overall PPM."""
    bounds: dict = {}
    pp_n, ppk_n, ppu_n, ppl_n = (normal[k] for k in ("pp", "ppk", "ppu", "ppl"))
    cp, cpk, cpu, cpl = _normal_indices(mean, within_sigma, lsl, usl)
    values.update(cp=cp, cpk=cpk, cpu=cpu, cpl=cpl, pp=pp_n, ppk=ppk_n, ppu=ppu_n, ppl=ppl_n)
    if target is not None and lsl is not None and usl is not None:
        tau = math.sqrt(overall_sigma**2 + (mean - target) ** 2)
        values["cpm"] = (usl - lsl) / (6.0 * tau)
        a = (mean - target) / overall_sigma
        nu_cpm = n * (1 + a * a) ** 2 / (1 + 2 * a * a)
        bounds["cpm"] = _bound_entry(
            _chi2_bounds(values["cpm"], nu_cpm, level), "chi_square_boyles"
        )
    for name, nu in (("cp", df_within), ("pp", n - 1)):
        if values[name] is not None:
            bounds[name] = _bound_entry(_chi2_bounds(values[name], nu, level), "chi_square")
    for group, nu in ((WITHIN_INDICES[1:], df_within), (OVERALL_INDICES[1:], n - 1)):
        for name in group:
            if values[name] is not None:
                bounds[name] = _bound_entry(_bissell_bounds(values[name], n, nu, level), "bissell")
    ppm_w = _ppm_normal(mean, within_sigma, lsl, usl)
    ppm_o = _ppm_normal(mean, overall_sigma, lsl, usl)
    return bounds, ppm_w, ppm_o


def _model_method(
    values, alternatives, normal, model, method, n, lsl, usl, level, n_boot, random_state, notes
):
    """A fitted model: fills ``values`` and ``alternatives``; returns the bootstrap bounds and
    the overall PPM."""
    perc, quantiles = percentile_indices(model, lsl, usl)
    equiv = _equivalent_indices(model, lsl, usl)
    main, other = (perc, equiv) if method == "percentile" else (equiv, perc)
    other_name = "equivalent_ppm" if method == "percentile" else "percentile"
    values.update(main)
    alternatives[other_name] = dict(other)
    alternatives["normal"] = normal
    alternatives["quantiles"] = {
        "x_lower": quantiles[0], "x_median": quantiles[1], "x_upper": quantiles[2],
        "tail_probability": TAIL_PROBABILITY,
    }  # fmt: skip
    bounds = _bootstrap_bounds(
        model, n, lsl, usl, method, level, n_boot, random_state, values, notes
    )
    below = 0.0 if lsl is None else float(model.cdf(lsl)) * 1e6
    above = 0.0 if usl is None else float(model.sf(usl)) * 1e6
    ppm_o = (below + above, below, above)
    notes.append(
        "Cp, Cpk and Cpm are not given for a fitted non-normal model: the model describes "
        "the overall distribution only."
    )
    return bounds, ppm_o


def _capability_result(
    arr, lsl, usl, values, bounds, ppm_w, ppm_o, method, model_name, level, alternatives,
    inputs, notes,
):  # fmt: skip
    """The :class:`CapabilityResult`, with the observed PPM of ``arr``."""
    n = arr.size
    obs_below = 0.0 if lsl is None else float(np.count_nonzero(arr < lsl)) / n * 1e6
    obs_above = 0.0 if usl is None else float(np.count_nonzero(arr > usl)) / n * 1e6
    values = {k: None if v is None else float(v) for k, v in values.items()}
    return CapabilityResult(
        **values,
        bounds=bounds,
        ppm_within=None if ppm_w[0] is None else float(ppm_w[0]),
        ppm_within_below=None if ppm_w[1] is None else float(ppm_w[1]),
        ppm_within_above=None if ppm_w[2] is None else float(ppm_w[2]),
        ppm_overall=float(ppm_o[0]),
        ppm_overall_below=float(ppm_o[1]),
        ppm_overall_above=float(ppm_o[2]),
        ppm_observed=obs_below + obs_above,
        ppm_observed_below=obs_below,
        ppm_observed_above=obs_above,
        method=method,
        model=model_name,
        level=level,
        alternatives=alternatives,
        inputs=inputs,
        notes=tuple(notes),
    )


def _bootstrap_bounds(model, n, lsl, usl, method, level, n_boot, random_state, values, notes):
    n_boot = _check_count(n_boot, name="n_boot", low=50)
    rng = np.random.default_rng(random_state)
    names = ("pp", "ppk", "ppu", "ppl")
    n_draw = min(n, BOOTSTRAP_FULL_N)
    if method == "percentile" and bootstrap.is_family_model(model):
        draws, failed = bootstrap.percentile_draws(model, n_draw, lsl, usl, n_boot, rng, values)
    else:
        draws, failed = _bootstrap_draws_generic(
            model, n_draw, lsl, usl, method, n_boot, rng, values
        )
    if n_draw < n:
        # large sample: samples of BOOTSTRAP_FULL_N readings, their spread around the
        # estimate scaled by sqrt(m / n) (module notes, "Bootstrap of a large sample")
        shrink = math.sqrt(n_draw / n)
        for k in names:
            if values[k] is not None and len(draws[k]):
                d = np.asarray(draws[k], dtype=float)
                with np.errstate(invalid="ignore"):
                    draws[k] = np.where(np.isfinite(d), values[k] + shrink * (d - values[k]), d)
        notes.append(
            f"{n} values: the bootstrap bounds come from {n_boot} samples of {n_draw} values "
            f"with their spread scaled by sqrt({n_draw}/{n}) (large-sample bootstrap, "
            "Bickel, Goetze & van Zwet 1997)."
        )
    if failed > 0.1 * n_boot:
        raise AnalysisError(
            f"the model '{model.name}' could not be refitted to {failed} of {n_boot} bootstrap "
            "samples; its confidence bounds are not reliable. Try another model."
        )
    if failed:
        notes.append(f"{failed} of {n_boot} bootstrap refits failed and were left out.")
    alpha = 1.0 - level
    method_name = (
        "parametric_bootstrap_percentile"
        if n_draw == n
        else "rescaled_m_out_of_n_bootstrap_percentile"
    )
    out = {}
    for k in names:
        if values[k] is None or not len(draws[k]):
            continue
        d = np.asarray(draws[k])
        lb, lo, hi = np.quantile(d, [alpha, alpha / 2, 1 - alpha / 2])
        out[k] = {
            "lower_bound": _finite_or_none(lb),
            "lower": _finite_or_none(lo),
            "upper": _finite_or_none(hi),
            "method": method_name,
        }
    return out


def _bootstrap_draws_generic(model, n, lsl, usl, method, n_boot, rng, values):
    """Bootstrap index draws through the model protocol: one sample, refit and evaluation at a
    time (any model object; the reference for the fast path below)."""
    names = ("pp", "ppk", "ppu", "ppl")
    draws = {k: [] for k in names}
    failed = 0
    for _ in range(n_boot):
        sample = np.asarray(model.rvs(n, random_state=rng), dtype=float)
        try:
            refit = model.family.fit(sample)
            if method == "percentile":
                idx, _ = percentile_indices(refit, lsl, usl)
            else:
                idx = _equivalent_indices(refit, lsl, usl)
        except (StudyInputError, ValueError, FloatingPointError, RuntimeError):
            failed += 1
            continue
        for k in names:
            if values[k] is not None:
                draws[k].append(np.inf if idx[k] is None else idx[k])
    return draws, failed
