"""Crossed gauge R&R: parts x appraisers x trials, balanced, by two-way ANOVA.

The analysis answers one question: is the measurement system good enough to judge the parts it
will see? It splits the observed variation into repeatability (the gauge), reproducibility (the
people: appraiser plus appraiser-by-part interaction) and part-to-part variation, and compares the
measurement share with the total variation and, when limits are given, with the tolerance.

The ANOVA estimate is the main one; the average-and-range estimate is reported beside it as a
second opinion (it ignores the interaction and uses ranges).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, fields

import numpy as np

from studykit import names
from studykit.errors import AnalysisError, SpecError
from studykit.stats import constants
from studykit.stats._checks import check_number
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.result import Result

__all__ = [
    "APPRAISER",
    "INTERACTION",
    "PART",
    "REPEATABILITY",
    "REPRODUCIBILITY",
    "GAUGE_RR",
    "TOTAL",
    "AnovaRow",
    "VarianceComponent",
    "RangeMethodEstimate",
    "GaugeVerdict",
    "GaugeChartLimits",
    "GaugeResult",
    "gauge_rr",
    "range_constants",
]

# ----------------------------------------------------------------------------------------------
# Field names, defined once so the table, the JSON and the PDF use the same words.
REPEATABILITY = "repeatability"
REPRODUCIBILITY = "reproducibility"
APPRAISER = "appraiser"
INTERACTION = "appraiser_by_part"
GAUGE_RR = "gauge_rr"
PART = "part_to_part"
TOTAL = "total"
ERROR = "error"
POOLED_ERROR = "pooled_error"

COMPONENT_ORDER = (GAUGE_RR, REPEATABILITY, REPRODUCIBILITY, APPRAISER, INTERACTION, PART, TOTAL)
COMPONENT_LABELS = {
    GAUGE_RR: names.GAUGE_TOTAL,
    REPEATABILITY: "  Repeatability (gauge)",
    REPRODUCIBILITY: "  Reproducibility (people)",
    APPRAISER: "    Appraiser",
    INTERACTION: "    Appraiser x part",
    PART: "Part-to-part",
    TOTAL: "Total variation",
}

ACCEPTABLE = "acceptable"
CONDITIONAL = "conditionally acceptable"
UNACCEPTABLE = "not acceptable"

#: %GRR bands (AIAG MSA 4th ed., 2010, ch. II sec. D, "from memory"): below 10 % acceptable,
#: 10-30 % acceptable depending on the application, above 30 % not acceptable.
GRR_ACCEPT_BELOW = 10.0
GRR_REJECT_ABOVE = 30.0
#: ndc of at least 5: common practice; the customer's rule governs.
NDC_MINIMUM = 5
#: default significance level for keeping the appraiser-by-part interaction in the model.
DEFAULT_ALPHA_INTERACTION = 0.25
#: largest number of values in one range (parts, appraisers, trials) for the range method.
MAX_RANGE_N = constants.MAX_SUBGROUP_SIZE
#: Satterthwaite intervals are not formed below this many degrees of freedom (common practice,
#: no source: below one degree of freedom the approximation carries no usable information).
MIN_INTERVAL_DF = 1.0
#: below this many parts a note warns that part variation is poorly estimated; 10 is the usual
#: plan (common practice, no source).
FEW_PARTS = 5
FEW_PARTS_USUAL = 10


# ----------------------------------------------------------------------------------------------
# Result classes
@dataclass(frozen=True)
class AnovaRow(Result):
    """One row of the ANOVA table.

    ``f`` and ``p`` are None for the error rows and the total.
    """

    source: str
    df: int
    ss: float
    ms: float | None
    f: float | None
    p: float | None

    @classmethod
    def from_dict(cls, d: Mapping) -> AnovaRow:
        """Rebuild the row from :meth:`to_dict` (a stored result is never recomputed)."""
        return cls(
            source=d["source"], df=int(d["df"]), ss=_nan(d["ss"]), ms=d["ms"], f=d["f"], p=d["p"]
        )


@dataclass(frozen=True)
class VarianceComponent(Result):
    """One variance component with its shares and a confidence interval on its sigma.

    ``lower``/``upper`` bound the standard deviation (not the variance); ``interval_df`` is the
    chi-square (exact) or Satterthwaite degrees of freedom; bounds are None when the estimate is
    zero (no interval can be formed from a zero estimate by these methods).
    """

    name: str
    variance: float
    sigma: float
    study_variation: float
    pct_contribution: float | None
    pct_study_variation: float | None
    pct_tolerance: float | None
    lower: float | None
    upper: float | None
    interval_df: float | None
    interval_method: str
    set_to_zero: bool

    def to_dict(self) -> dict:
        """The generated dict with the bounds named ``sigma_lower``/``sigma_upper``."""
        return {_COMPONENT_JSON.get(k, k): v for k, v in super().to_dict().items()}

    @classmethod
    def from_dict(cls, d: Mapping) -> VarianceComponent:
        """Rebuild the component from :meth:`to_dict`."""
        return _rebuild(
            cls,
            d,
            json_names=_COMPONENT_JSON,
            nan_floats=("variance", "sigma", "study_variation"),
            set_to_zero=bool(d["set_to_zero"]),
        )


#: JSON names of the VarianceComponent fields that are not stored under their own name
_COMPONENT_JSON = {"lower": "sigma_lower", "upper": "sigma_upper"}


#: The float fields of a RangeMethodEstimate that are always numbers (NaN when undefined).
_RANGE_METHOD_FLOATS = (
    "repeatability",
    "reproducibility",
    "gauge_rr",
    "part",
    "total",
    "k1",
    "k2",
    "k3",
    "mean_range",
    "appraiser_mean_range",
    "part_mean_range",
)


@dataclass(frozen=True)
class RangeMethodEstimate(Result):
    """The average-and-range estimate (a second opinion beside the ANOVA).

    Sigmas: ``repeatability`` (EV), ``reproducibility`` (AV), ``gauge_rr`` (GRR), ``part``
    (PV), ``total`` (TV). ``k1``, ``k2``, ``k3`` are 1/d2 (trials), 1/d2*(appraisers, g=1),
    1/d2*(parts, g=1).
    """

    repeatability: float
    reproducibility: float
    gauge_rr: float
    part: float
    total: float
    k1: float
    k2: float
    k3: float
    mean_range: float
    appraiser_mean_range: float
    part_mean_range: float
    pct_study_variation: float | None
    pct_tolerance: float | None
    ndc: int | None
    reproducibility_set_to_zero: bool

    @classmethod
    def from_dict(cls, d: Mapping) -> RangeMethodEstimate:
        """Rebuild the estimate from :meth:`to_dict`."""
        return _rebuild(
            cls,
            d,
            nan_floats=_RANGE_METHOD_FLOATS,
            reproducibility_set_to_zero=bool(d["reproducibility_set_to_zero"]),
        )


@dataclass(frozen=True)
class GaugeChartLimits(Result):
    """Limits of the range chart and the mean chart drawn by appraiser.

    Range chart: centre ``range_centre`` = Rbar, ``range_ucl`` = D4 Rbar, ``range_lcl`` = D3 Rbar
    (n = trials). Mean chart: centre = grand mean, limits = grand mean +- A2 Rbar. On a gauge
    study the mean chart should show most cell means OUTSIDE its limits (the parts differ by more
    than the gauge's noise); ``pct_means_outside`` says how many did. ``ranges_above_ucl`` lists
    (part, appraiser) cells whose range is above the range UCL.
    """

    range_centre: float
    range_ucl: float
    range_lcl: float
    mean_centre: float
    mean_ucl: float
    mean_lcl: float
    pct_means_outside: float
    ranges_above_ucl: tuple[tuple[str, str], ...]

    @classmethod
    def from_dict(cls, d: Mapping) -> GaugeChartLimits:
        """Rebuild the limits from :meth:`to_dict`."""
        ranges = tuple(tuple(c) for c in d["ranges_above_ucl"])
        floats = [f.name for f in fields(cls) if f.name != "ranges_above_ucl"]
        return _rebuild(cls, d, nan_floats=floats, ranges_above_ucl=ranges)


@dataclass(frozen=True)
class GaugeVerdict(Result):
    """The plain-words verdict.

    ``status`` is one of "acceptable", "conditionally acceptable", "not acceptable" and is the
    worse of the study-variation and (when limits were given) tolerance judgements; ``ndc_ok``
    is None when ndc is undefined; ``dominant`` names the larger measurement component
    ("repeatability" = the gauge, "reproducibility" = the people).
    """

    status: str
    basis: str
    pct_grr_study_variation: float | None
    pct_grr_tolerance: float | None
    ndc: int | None
    ndc_ok: bool | None
    dominant: str | None
    message: str
    advice: str

    @classmethod
    def from_dict(cls, d: Mapping) -> GaugeVerdict:
        """Rebuild the verdict from :meth:`to_dict`."""
        return _rebuild(cls, d)


@dataclass(frozen=True)
class GaugeResult(Result):
    """Everything a crossed gauge R&R study produced; see :func:`gauge_rr`."""

    n_parts: int
    n_appraisers: int
    n_trials: int
    n_values: int
    part_labels: tuple[str, ...]
    appraiser_labels: tuple[str, ...]
    values: np.ndarray = field(repr=False)  # shape (parts, appraisers, trials)
    anova_full: tuple[AnovaRow, ...]
    anova_used: tuple[AnovaRow, ...]
    interaction_p: float | None
    interaction_pooled: bool
    alpha_interaction: float
    components: tuple[VarianceComponent, ...]
    ndc: int | None
    ndc_ratio: float | None
    study_variation: float
    lsl: float | None
    usl: float | None
    tolerance: float | None
    confidence: float
    range_method: RangeMethodEstimate
    verdict: GaugeVerdict
    charts: GaugeChartLimits
    notes: tuple[str, ...]
    method: str = "two-way crossed ANOVA, random effects, expected mean squares"

    def component(self, name: str) -> VarianceComponent:
        """The component called ``name`` (one of the module constants, e.g. ``GAUGE_RR``)."""
        for comp in self.components:
            if comp.name == name:
                return comp
        raise KeyError(name)

    @property
    def pct_grr(self) -> float | None:
        """%GRR of the study variation (sigma ratio x 100)."""
        return self.component(GAUGE_RR).pct_study_variation

    def to_dict(self) -> dict:
        """The generated dict, led by its kind and method (the readings as nested lists)."""
        fields_ = {k: v for k, v in super().to_dict().items() if k != "method"}
        return {"kind": "gauge_rr", "method": self.method, **fields_}

    @classmethod
    def from_dict(cls, d: Mapping) -> GaugeResult:
        """Rebuild a stored result from :meth:`to_dict`, without computing anything again.

        Numbers that were not finite are stored as null and come back as NaN where the field is
        a plain float. Raises ``KeyError``/``TypeError``/``ValueError`` on a payload that is not
        a gauge R&R result (e.g. one written before the readings were stored).

        Examples
        --------
        >>> res = gauge_rr([1.0, 1.1, 1.2, 1.1, 2.0, 2.2, 2.1, 2.1], [1, 1, 1, 1, 2, 2, 2, 2],
        ...                ["A", "A", "B", "B"] * 2)
        >>> again = GaugeResult.from_dict(res.to_dict())
        >>> again.to_dict() == res.to_dict()
        True
        """
        values = np.array(
            [
                [[np.nan if v is None else float(v) for v in cell] for cell in row]
                for row in d["values"]
            ],
            dtype=float,
        )
        return cls(
            n_parts=int(d["n_parts"]),
            n_appraisers=int(d["n_appraisers"]),
            n_trials=int(d["n_trials"]),
            n_values=int(d["n_values"]),
            part_labels=tuple(d["part_labels"]),
            appraiser_labels=tuple(d["appraiser_labels"]),
            values=values,
            anova_full=tuple(AnovaRow.from_dict(r) for r in d["anova_full"]),
            anova_used=tuple(AnovaRow.from_dict(r) for r in d["anova_used"]),
            interaction_p=d["interaction_p"],
            interaction_pooled=bool(d["interaction_pooled"]),
            alpha_interaction=d["alpha_interaction"],
            components=tuple(VarianceComponent.from_dict(c) for c in d["components"]),
            ndc=d["ndc"],
            ndc_ratio=d["ndc_ratio"],
            study_variation=d["study_variation"],
            lsl=d["lsl"],
            usl=d["usl"],
            tolerance=d["tolerance"],
            confidence=d["confidence"],
            range_method=RangeMethodEstimate.from_dict(d["range_method"]),
            verdict=GaugeVerdict.from_dict(d["verdict"]),
            charts=GaugeChartLimits.from_dict(d["charts"]),
            notes=tuple(d["notes"]),
            method=d.get("method", cls.method),
        )


def _nan(x) -> float:
    """Back from JSON: null (a non-finite number on the way out) becomes NaN."""
    return math.nan if x is None else float(x)


def _rebuild(
    cls, d: Mapping, *, json_names: Mapping[str, str] | None = None, nan_floats=(), **given
):
    """The result class ``cls`` from its :meth:`~studykit.stats.result.Result.to_dict` ``d``:
    each field from the key of its name (or ``json_names[field]``) as stored, the fields in
    ``nan_floats`` back to floats (null -> NaN), and the fields in ``given`` as given."""
    names_ = json_names or {}
    values = {f.name: d[names_.get(f.name, f.name)] for f in fields(cls) if f.name not in given}
    values.update({k: _nan(values[k]) for k in nan_floats})
    return cls(**values, **given)


# ----------------------------------------------------------------------------------------------
# Range constants: d2 and d3 from studykit.stats.constants; d2* built on them here.
def range_constants(n: int, *, g: int | float = 1) -> dict:
    """d2, d3 and d2* for the range of ``n`` normal values (``g`` ranges averaged).

    Parameters
    ----------
    n : int
        Number of values in each range (at least 2).
    g : int or float, keyword-only
        Number of ranges averaged; ``math.inf`` gives d2* = d2.

    Returns
    -------
    dict
        ``n``, ``g``, ``d2`` (E[R]/sigma), ``d3`` (sd(R)/sigma), ``d2_star``.

    Notes
    -----
    d2* = sqrt(d2^2 + d3^2 / g), i.e. the root mean square of the average range over sigma; it is
    the two-moment (Patnaik) constant tabulated by Duncan and used for the K2 and K3 factors of
    the average-and-range gauge study. With g = 1 it gives 1/d2* = 0.7071, 0.5231, 0.4467, 0.4030
    for n = 2..5 as in the automotive MSA manual's K tables ("from memory").

    References
    ----------
    Patnaik, P. B. (1950). The use of mean range as an estimator of variance in statistical
    tests. Biometrika 37, 78-87. Duncan, A. J. (1986). Quality Control and Industrial
    Statistics, 5th ed., Table D3.

    Examples
    --------
    >>> c = range_constants(2)
    >>> round(c["d2"], 6), round(c["d2_star"], 5)
    (1.128379, 1.41421)
    """
    if isinstance(n, bool) or not isinstance(n, int | np.integer) or not 2 <= n <= MAX_RANGE_N:
        raise AnalysisError(
            f"`n` ({n!r}) must be a whole number of values per range from 2 to {MAX_RANGE_N}"
        )
    if not (g == math.inf or (isinstance(g, int | float | np.integer) and g >= 1)):
        raise AnalysisError(f"`g` ({g!r}) must be a number of ranges of at least 1, or math.inf")
    m1, sd = constants.d2(int(n)), constants.d3(int(n))
    d2_star = math.sqrt(m1 * m1 + (0.0 if g == math.inf else sd * sd / g))
    return {"n": int(n), "g": g, "d2": m1, "d3": sd, "d2_star": d2_star}


# ----------------------------------------------------------------------------------------------
# Input checks
def _labels(arr, name: str, n: int) -> np.ndarray:
    a = np.asarray(arr, dtype=object).ravel()
    if a.size != n:
        raise AnalysisError(
            f"`{name}` has {a.size} entries but `values` has {n}; give one {name} label per value"
        )
    for i, v in enumerate(a):
        if v is None or (isinstance(v, float) and math.isnan(v)):
            raise AnalysisError(
                f"`{name}` is empty at position {i} (0-based); every value needs a {name} label"
            )
    return a


def _sort_key(v):
    return (
        (0, float(v), "")
        if isinstance(v, (int, float, np.integer, np.floating))
        else (1, 0.0, str(v))
    )


def _arrange(values, parts, appraisers, trials) -> tuple[np.ndarray, list, list]:
    y = np.asarray(values, dtype=float).ravel()
    n = y.size
    bad = np.flatnonzero(~np.isfinite(y))
    if bad.size:
        raise AnalysisError(
            f"`values` has {bad.size} missing or non-finite entr{'y' if bad.size == 1 else 'ies'} "
            f"(first at position {int(bad[0])}, 0-based); remove or re-measure them so every "
            "part/appraiser cell keeps the same number of trials"
        )
    p_lab = _labels(parts, "parts", n)
    a_lab = _labels(appraisers, "appraisers", n)
    part_levels = sorted(set(p_lab.tolist()), key=_sort_key)
    appr_levels = sorted(set(a_lab.tolist()), key=_sort_key)
    if len(part_levels) < 2:
        raise AnalysisError(
            f"a gauge study needs at least 2 parts; found {len(part_levels)}; measure more parts"
        )
    if len(appr_levels) < 2:
        raise AnalysisError(
            f"a crossed gauge study needs at least 2 appraisers; found {len(appr_levels)}; "
            "add an appraiser (with one appraiser only repeatability can be estimated)"
        )
    p_idx = {v: i for i, v in enumerate(part_levels)}
    a_idx = {v: i for i, v in enumerate(appr_levels)}
    pi = np.array([p_idx[v] for v in p_lab])
    ai = np.array([a_idx[v] for v in a_lab])
    counts = np.zeros((len(part_levels), len(appr_levels)), dtype=int)
    np.add.at(counts, (pi, ai), 1)
    r = int(np.bincount(counts.ravel()).argmax())  # the most common number of trials
    if (counts != r).any():
        odd = np.argwhere(counts != r)
        shown = ", ".join(
            f"part {part_levels[i]!s} x appraiser {appr_levels[j]!s}: {counts[i, j]} trial(s)"
            for i, j in odd[:6]
        )
        more = f" and {len(odd) - 6} more" if len(odd) > 6 else ""
        raise AnalysisError(
            f"the study is unbalanced: most part/appraiser cells have {r} trial(s) but {shown}"
            f"{more}; every appraiser must measure every part the same number of times"
        )
    if r < 2:
        raise AnalysisError(
            f"a gauge study needs at least 2 trials per part and appraiser; found {r}; "
            "repeat the measurements"
        )
    if trials is not None:
        t_lab = _labels(trials, "trials", n)
        seen: dict[tuple, int] = {}
        for k in range(n):
            key = (pi[k], ai[k], t_lab[k])
            if key in seen:
                raise AnalysisError(
                    f"`trials`: part {part_levels[pi[k]]!s}, appraiser {appr_levels[ai[k]]!s}, "
                    f"trial {t_lab[k]!s} appears twice (positions {seen[key]} and {k}, 0-based); "
                    "each trial must be recorded once"
                )
            seen[key] = k
    order = np.lexsort((np.arange(n), ai, pi))  # stable: keeps trial order within a cell
    if trials is not None:
        t_keys = [_sort_key(v) for v in t_lab]
        order = np.array(sorted(range(n), key=lambda k: (pi[k], ai[k], t_keys[k])))
    cube = y[order].reshape(len(part_levels), len(appr_levels), r)
    cube.flags.writeable = False  # the result is frozen; so are its values
    if not np.isfinite(cube.var()) or np.ptp(cube) == 0:
        raise AnalysisError(
            "all values are equal; the gauge shows no variation at all (check the resolution: "
            "a gauge should read at least a tenth of the spread it judges)"
        )
    return cube, part_levels, appr_levels


# ----------------------------------------------------------------------------------------------
def _satterthwaite(
    coefs: dict[str, float], ms: dict[str, float], df: dict[str, int], confidence: float
) -> tuple[float | None, float | None, float | None]:
    """Satterthwaite interval on sigma for a variance estimated as sum c_k MS_k."""
    est = sum(c * ms[k] for k, c in coefs.items())
    if est <= 0:
        return None, None, None
    denom = sum((c * ms[k]) ** 2 / df[k] for k, c in coefs.items())
    nu = est * est / denom
    if nu < MIN_INTERVAL_DF:
        # the chi-square quantiles of a fraction of a degree of freedom give no usable bound
        # (the upper one overflows; the lower one can even exceed the estimate)
        return None, None, nu
    a = 1 - confidence
    lo = nu * est / stats.chi2.ppf(1 - a / 2, nu)
    hi = nu * est / stats.chi2.ppf(a / 2, nu)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return None, None, nu
    return math.sqrt(lo), math.sqrt(hi), nu


def _anova(cube: np.ndarray) -> dict:
    p, o, r = cube.shape
    grand = cube.mean()
    part_means = cube.mean(axis=(1, 2))
    appr_means = cube.mean(axis=(0, 2))
    cell_means = cube.mean(axis=2)
    ss_p = o * r * float(((part_means - grand) ** 2).sum())
    ss_a = p * r * float(((appr_means - grand) ** 2).sum())
    inter = cell_means - part_means[:, None] - appr_means[None, :] + grand
    ss_pa = r * float((inter**2).sum())
    ss_e = float(((cube - cell_means[:, :, None]) ** 2).sum())
    ss_t = float(((cube - grand) ** 2).sum())
    df = {PART: p - 1, APPRAISER: o - 1, INTERACTION: (p - 1) * (o - 1), ERROR: p * o * (r - 1)}
    ss = {PART: ss_p, APPRAISER: ss_a, INTERACTION: ss_pa, ERROR: ss_e}
    ms = {k: ss[k] / df[k] for k in ss}
    return {"ss": ss, "df": df, "ms": ms, "ss_total": ss_t, "df_total": p * o * r - 1}


def _fp(num: float, den: float, df1: int, df2: int) -> tuple[float | None, float | None]:
    if den <= 0:
        return None, None
    f = num / den
    return f, float(stats.f.sf(f, df1, df2))


# long: signature and numpydoc docstring (method, sources, example) take 124 lines; body 60
def gauge_rr(
    values,
    parts,
    appraisers,
    *,
    trials=None,
    alpha_interaction: float = DEFAULT_ALPHA_INTERACTION,
    study_variation: float = 6.0,
    lsl: float | None = None,
    usl: float | None = None,
    confidence: float = 0.95,
) -> GaugeResult:
    """Crossed gauge R&R by two-way random-effects ANOVA, with a range-method second estimate.

    Parameters
    ----------
    values : array-like of float
        The measurements, one per row of a long table.
    parts, appraisers : array-like
        The part and the appraiser of each value (any hashable labels).
    trials : array-like, optional, keyword-only
        Trial label of each value; used to order values within a cell and to reject a trial
        recorded twice. Without it the values' order within a cell is taken as the trial order.
    alpha_interaction : float, default 0.25
        The appraiser-by-part interaction is pooled into the error when its p-value is at or
        above this level.
    study_variation : float, default 6.0
        Multiplier of sigma for the study variation (6; 5.15 in older practice).
    lsl, usl : float, optional
        Specification limits; give both to get %tolerance.
    confidence : float, default 0.95
        Two-sided confidence level of the intervals on the component sigmas.

    Returns
    -------
    GaugeResult
        ``n_parts``, ``n_appraisers``, ``n_trials``, ``n_values``, ``part_labels``,
        ``appraiser_labels``, ``values`` (array parts x appraisers x trials);
        ``anova_full`` (with interaction) and ``anova_used`` (the model the components come
        from) as :class:`AnovaRow` tuples (source, df, ss, ms, f, p);
        ``interaction_p``, ``interaction_pooled``, ``alpha_interaction``;
        ``components``: :class:`VarianceComponent` for gauge_rr, repeatability,
        reproducibility, appraiser, appraiser_by_part, part_to_part, total (variance, sigma,
        study_variation, pct_contribution, pct_study_variation, pct_tolerance, sigma bounds,
        interval_df, interval_method, set_to_zero);
        ``ndc`` (int), ``ndc_ratio`` (sigma_part / sigma_grr); ``study_variation``, ``lsl``,
        ``usl``, ``tolerance``, ``confidence``; ``range_method`` (:class:`RangeMethodEstimate`);
        ``verdict`` (:class:`GaugeVerdict`); ``charts`` (:class:`GaugeChartLimits`: range and
        mean chart limits by appraiser); ``notes`` (plain sentences about choices made).

    Raises
    ------
    AnalysisError
        Unbalanced design (the message names each odd part/appraiser cell and its count), fewer
        than 2 parts, 2 appraisers or 2 trials, missing values, all values equal.
    SpecError
        Only one limit, ``usl`` not above ``lsl``, or an option out of range.

    Notes
    -----
    Model: y_ijk = mu + P_i + O_j + (PO)_ij + e_ijk, all effects random, p parts, o appraisers,
    r trials. Expected mean squares give

    - repeatability  s2_e  = MS_E
    - interaction    s2_po = (MS_PO - MS_E) / r
    - appraiser      s2_o  = (MS_O - MS_PO) / (p r)
    - part           s2_p  = (MS_P - MS_PO) / (o r)

    When the interaction is pooled (p-value >= ``alpha_interaction``), MS_E is replaced by
    (SS_PO + SS_E) / (df_PO + df_E), s2_po = 0 and the main effects use that pooled error.
    F ratios follow the random model: parts and appraisers are tested against MS_PO (full model)
    or the pooled error (reduced model); the interaction against MS_E. A negative estimate is set
    to 0 (``set_to_zero`` is True and a note says so). Reproducibility = s2_o + s2_po;
    GRR = repeatability + reproducibility; total = GRR + part.

    %contribution = 100 s2 / s2_total; %study variation = 100 sigma / sigma_total;
    %tolerance = 100 k sigma / (usl - lsl) with k = ``study_variation``;
    ndc = floor(1.41 sigma_part / sigma_grr).

    Intervals (on the sigmas): repeatability exact chi-square with p o (r - 1) df; all other
    components Satterthwaite's approximation on the linear combination of mean squares that
    defines them (a component set to 0 contributes nothing); no interval (None bounds, a note)
    when an estimate is 0 or its Satterthwaite degrees of freedom are below 1.
    This is the simple method; the modified large-sample method of Burdick, Borror & Montgomery
    (2005) is more accurate for small studies and is NOT used here.

    Range method (automotive MSA manual, average-and-range): EV = Rbar K1 with K1 = 1/d2(r)
    (d2 for many ranges); AV = sqrt((Xdiff K2)^2 - EV^2 / (p r)) with K2 = 1/d2*(o, g=1);
    PV = R_p K3 with K3 = 1/d2*(p, g=1); d2 and d2* computed (see :func:`range_constants`).

    The 0.25 level for keeping the interaction is common practice in gauge studies; it is the
    lower end of the "sometimes pool" preliminary-test levels tabulated by Bancroft & Han (1983)
    (about 0.24 to 0.48 depending on degrees of freedom; table read second-hand).

    References
    ----------
    Montgomery, D. C. & Runger, G. C. (1993). Gauge capability and designed experiments. Part II:
    experimental design models and variance component estimation. Quality Engineering 6(2),
    289-305 ("from memory").
    Burdick, R. K., Borror, C. M. & Montgomery, D. C. (2005). Design and Analysis of Gauge R&R
    Studies. ASA-SIAM ("from memory").
    Vardeman, S. B. & Jobe, J. M. (1999). Statistical Quality Assurance Methods for Engineers,
    sec. 2.2 (reproducibility estimator and Satterthwaite intervals).
    AIAG (2010). Measurement Systems Analysis Reference Manual, 4th ed. (%GRR bands, ndc with
    1.41, average-and-range K factors; "from memory"). ndc = sqrt(2) x the classification ratio:
    Wheeler, D. J. & Lyday, R. W. (1989). Evaluating the Measurement Process ("from memory").
    Bancroft, T. A. & Han, C.-P. (1983). A note on pooling variances. JASA 78(384), 981-983.
    Satterthwaite, F. E. (1946). Biometrics Bulletin 2(6), 110-114.

    Examples
    --------
    >>> values = [10.1, 10.2, 10.0, 10.1, 12.0, 12.1, 11.9, 12.1, 11.0, 11.1, 11.2, 11.1]
    >>> parts = [1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3]
    >>> appraisers = ["A", "A", "B", "B"] * 3
    >>> res = gauge_rr(values, parts, appraisers)
    >>> res.n_parts, res.n_appraisers, res.n_trials
    (3, 2, 2)
    >>> res.interaction_pooled
    True
    >>> round(res.component("repeatability").variance, 5)
    0.00833
    >>> res.verdict.status
    'acceptable'
    """
    _check_options(alpha_interaction, study_variation, lsl, usl, confidence)
    cube, part_levels, appr_levels = _arrange(values, parts, appraisers, trials)
    p, o, r = cube.shape
    an = _anova(cube)
    anova_full, p_pa = _anova_full(an)
    notes: list[str] = []
    # p_pa is None only when MS_E is 0 (no repeat variation): keep the interaction then
    pooled = p_pa is not None and p_pa >= alpha_interaction
    if pooled:
        anova_used, ms_x, df_x, coef = _pooled_model(an, p, o, r)
        notes.append(
            f"The appraiser-by-part interaction is not significant (p = {p_pa:.3g} >= "
            f"{alpha_interaction:g}); it was pooled into the repeatability error."
        )
    else:
        anova_used, ms_x, df_x, coef = _full_model(anova_full, an, p, o, r)
        if p_pa is not None:
            notes.append(
                f"The appraiser-by-part interaction is kept in the model (p = {p_pa:.3g} < "
                f"{alpha_interaction:g}): some appraisers measure some parts differently."
            )
    zeroed = _zero_negative(coef, ms_x, notes)
    combos = _combinations(coef)
    variances = {k: max(0.0, sum(c * ms_x[m] for m, c in v.items())) for k, v in combos.items()}
    tolerance = None if lsl is None or usl is None else float(usl) - float(lsl)
    components = _components(
        variances, combos, ms_x, df_x, pooled, zeroed, study_variation, tolerance, confidence
    )
    ratio, ndc = _ndc(variances)
    charts = _chart_limits(cube, part_levels, appr_levels)
    notes += _study_notes(components, ratio, p, charts)
    rm = _range_method(cube, study_variation, tolerance)
    comp = {c.name: c for c in components}
    verdict = _verdict(comp, ndc, tolerance is not None)
    return GaugeResult(
        n_parts=p,
        n_appraisers=o,
        n_trials=r,
        n_values=int(cube.size),
        part_labels=tuple(str(v) for v in part_levels),
        appraiser_labels=tuple(str(v) for v in appr_levels),
        values=cube,
        anova_full=anova_full,
        anova_used=anova_used,
        interaction_p=p_pa,
        interaction_pooled=pooled,
        alpha_interaction=float(alpha_interaction),
        components=tuple(components),
        ndc=ndc,
        ndc_ratio=ratio,
        study_variation=float(study_variation),
        lsl=None if lsl is None else float(lsl),
        usl=None if usl is None else float(usl),
        tolerance=tolerance,
        confidence=float(confidence),
        range_method=rm,
        verdict=verdict,
        charts=charts,
        notes=tuple(notes),
    )


def _anova_full(an: dict) -> tuple[tuple, float | None]:
    """The ANOVA table with the interaction term, and the interaction's p-value."""
    ss, df, ms = an["ss"], an["df"], an["ms"]
    f_pa, p_pa = _fp(ms[INTERACTION], ms[ERROR], df[INTERACTION], df[ERROR])
    f_p, p_p = _fp(ms[PART], ms[INTERACTION], df[PART], df[INTERACTION])
    f_a, p_a = _fp(ms[APPRAISER], ms[INTERACTION], df[APPRAISER], df[INTERACTION])
    anova_full = (
        AnovaRow(PART, df[PART], ss[PART], ms[PART], f_p, p_p),
        AnovaRow(APPRAISER, df[APPRAISER], ss[APPRAISER], ms[APPRAISER], f_a, p_a),
        AnovaRow(INTERACTION, df[INTERACTION], ss[INTERACTION], ms[INTERACTION], f_pa, p_pa),
        AnovaRow(REPEATABILITY, df[ERROR], ss[ERROR], ms[ERROR], None, None),
        AnovaRow(TOTAL, an["df_total"], an["ss_total"], None, None, None),
    )
    return anova_full, p_pa


def _pooled_model(an: dict, p: int, o: int, r: int) -> tuple[tuple, dict, dict, dict]:
    """The ANOVA table, mean squares, df and component coefficients with the interaction
    pooled into the error."""
    ss, df, ms = an["ss"], an["df"], an["ms"]
    df_err = df[INTERACTION] + df[ERROR]
    ms_err = (ss[INTERACTION] + ss[ERROR]) / df_err
    f_p2, p_p2 = _fp(ms[PART], ms_err, df[PART], df_err)
    f_a2, p_a2 = _fp(ms[APPRAISER], ms_err, df[APPRAISER], df_err)
    anova_used = (
        AnovaRow(PART, df[PART], ss[PART], ms[PART], f_p2, p_p2),
        AnovaRow(APPRAISER, df[APPRAISER], ss[APPRAISER], ms[APPRAISER], f_a2, p_a2),
        AnovaRow(REPEATABILITY, df_err, ss[INTERACTION] + ss[ERROR], ms_err, None, None),
        AnovaRow(TOTAL, an["df_total"], an["ss_total"], None, None, None),
    )
    ms_x = dict(ms)
    ms_x[POOLED_ERROR] = ms_err
    df_x = dict(df)
    df_x[POOLED_ERROR] = df_err
    coef = {
        REPEATABILITY: {POOLED_ERROR: 1.0},
        APPRAISER: {APPRAISER: 1 / (p * r), POOLED_ERROR: -1 / (p * r)},
        INTERACTION: {},
        PART: {PART: 1 / (o * r), POOLED_ERROR: -1 / (o * r)},
    }
    return anova_used, ms_x, df_x, coef


def _full_model(
    anova_full: tuple, an: dict, p: int, o: int, r: int
) -> tuple[tuple, dict, dict, dict]:
    """The ANOVA table, mean squares, df and component coefficients with the interaction kept."""
    coef = {
        REPEATABILITY: {ERROR: 1.0},
        APPRAISER: {APPRAISER: 1 / (p * r), INTERACTION: -1 / (p * r)},
        INTERACTION: {INTERACTION: 1 / r, ERROR: -1 / r},
        PART: {PART: 1 / (o * r), INTERACTION: -1 / (o * r)},
    }
    return anova_full, dict(an["ms"]), dict(an["df"]), coef


def _zero_negative(coef: dict, ms_x: dict, notes: list[str]) -> list[str]:
    """Set components with a negative estimate to 0 (their coefficients emptied), with a note."""
    raw = {k: sum(c * ms_x[m] for m, c in v.items()) for k, v in coef.items()}
    zeroed = [k for k in (APPRAISER, INTERACTION, PART) if coef[k] and raw[k] < 0]
    for k in zeroed:
        coef[k] = {}
    if zeroed:
        notes.append(
            "Negative variance estimate(s) set to 0: " + ", ".join(zeroed) + " (the mean square "
            "was smaller than the one it is compared with; the true component is small)."
        )
    return zeroed


def _combinations(coef: dict) -> dict[str, dict[str, float]]:
    """Each reported component as a linear combination of mean squares."""

    def add(*names):
        out: dict[str, float] = {}
        for nm in names:
            for m, c in coef[nm].items():
                out[m] = out.get(m, 0.0) + c
        return out

    return {
        REPEATABILITY: coef[REPEATABILITY],
        APPRAISER: coef[APPRAISER],
        INTERACTION: coef[INTERACTION],
        REPRODUCIBILITY: add(APPRAISER, INTERACTION),
        GAUGE_RR: add(REPEATABILITY, APPRAISER, INTERACTION),
        PART: coef[PART],
        TOTAL: add(REPEATABILITY, APPRAISER, INTERACTION, PART),
    }


def _components(
    variances, combos, ms_x, df_x, pooled, zeroed, study_variation, tolerance, confidence
) -> list[VarianceComponent]:
    """The variance components in report order, with their shares and intervals."""
    sd_total = math.sqrt(variances[TOTAL])
    components = []
    for name in COMPONENT_ORDER:
        var = variances[name]
        sd = math.sqrt(var)
        lo, hi, nu, method = _component_interval(name, var, combos, ms_x, df_x, pooled, confidence)
        components.append(
            VarianceComponent(
                name=name,
                variance=var,
                sigma=sd,
                study_variation=study_variation * sd,
                pct_contribution=100 * var / variances[TOTAL] if variances[TOTAL] > 0 else None,
                pct_study_variation=100 * sd / sd_total if sd_total > 0 else None,
                pct_tolerance=100 * study_variation * sd / tolerance if tolerance else None,
                lower=lo,
                upper=hi,
                interval_df=nu,
                interval_method=method,
                set_to_zero=name in zeroed,
            )
        )
    return components


def _component_interval(name, var, combos, ms_x, df_x, pooled, confidence) -> tuple:
    """Interval on one component's sigma: (lower, upper, df, method); None bounds when none."""
    if name == REPEATABILITY:
        dfe = df_x[POOLED_ERROR if pooled else ERROR]
        a = 1 - confidence
        lo = math.sqrt(dfe * var / stats.chi2.ppf(1 - a / 2, dfe))
        hi = math.sqrt(dfe * var / stats.chi2.ppf(a / 2, dfe))
        return lo, hi, float(dfe), "chi-square"
    if name == INTERACTION and pooled:
        return None, None, None, "pooled into repeatability"
    return (*_satterthwaite(combos[name], ms_x, df_x, confidence), "Satterthwaite")


def _ndc(variances: dict) -> tuple[float | None, int | None]:
    """The classification ratio sigma_part / sigma_grr and ndc = floor(1.41 x ratio)."""
    sd_grr = math.sqrt(variances[GAUGE_RR])
    sd_part = math.sqrt(variances[PART])
    ratio = sd_part / sd_grr if sd_grr > 0 else None
    ndc = None if ratio is None else int(math.floor(1.41 * ratio + 1e-12))
    return ratio, ndc


def _study_notes(components, ratio, p: int, charts) -> list[str]:
    """Notes on missing intervals, an undefined ndc, few parts and ranges above the limit."""
    notes: list[str] = []
    no_ci = [
        c.name
        for c in components
        if c.lower is None and c.variance > 0 and c.interval_method == "Satterthwaite"
    ]
    if no_ci:
        notes.append(
            "No confidence interval for " + ", ".join(no_ci) + ": fewer than "
            f"{MIN_INTERVAL_DF:g} Satterthwaite degree(s) of freedom; the study is too small to "
            "bound these components (more appraisers or parts would help)."
        )
    if ratio is None:
        notes.append("The gauge shows no measurement variation; ndc is undefined.")
    if p < FEW_PARTS:
        notes.append(
            f"Only {p} parts: the part-to-part sigma, and so %GRR and ndc, rest on {p - 1} "
            f"degree(s) of freedom; {FEW_PARTS_USUAL} parts spanning the process range is the "
            "usual plan (common practice, no source)."
        )
    if charts.ranges_above_ucl:
        cells = ", ".join(f"part {a} by appraiser {b}" for a, b in charts.ranges_above_ucl[:5])
        notes.append(
            f"Range above the range chart's upper limit: {cells}. Check for a misreading, a "
            "damaged part or a measuring-position error there before trusting repeatability."
        )
    return notes


def _check_options(alpha, k, lsl, usl, confidence) -> None:
    if not (isinstance(alpha, (int, float)) and 0 <= alpha <= 1):
        raise SpecError(f"`alpha_interaction` ({alpha!r}) must be between 0 and 1, e.g. 0.25")
    if not (isinstance(k, (int, float)) and math.isfinite(k) and k > 0):
        raise SpecError(f"`study_variation` ({k!r}) must be a positive number of sigmas, e.g. 6")
    if not (isinstance(confidence, (int, float)) and 0 < confidence < 1):
        raise SpecError(f"`confidence` ({confidence!r}) must be between 0 and 1, e.g. 0.95")
    if (lsl is None) != (usl is None):
        given = "lsl" if usl is None else "usl"
        raise SpecError(
            f"only `{given}` was given; %tolerance needs both `lsl` and `usl` (or neither)"
        )
    if lsl is not None:
        for nm, v in (("lsl", lsl), ("usl", usl)):
            check_number(v, nm, error=SpecError, tail="")
        if float(usl) <= float(lsl):
            raise SpecError(f"`usl` ({usl}) must be greater than `lsl` ({lsl})")


def _range_method(cube: np.ndarray, k: float, tolerance: float | None) -> RangeMethodEstimate:
    p, o, r = cube.shape
    if max(p, o, r) > MAX_RANGE_N:
        raise AnalysisError(
            f"the average-and-range estimate handles at most {MAX_RANGE_N} parts, appraisers "
            f"and trials; this study has {p} parts, {o} appraisers, {r} trials; use fewer parts"
        )
    k1 = 1.0 / range_constants(r)["d2"]
    k2 = 1.0 / range_constants(o, g=1)["d2_star"]
    k3 = 1.0 / range_constants(p, g=1)["d2_star"]
    rbar = float(np.ptp(cube, axis=2).mean())
    x_diff = float(np.ptp(cube.mean(axis=(0, 2))))
    r_part = float(np.ptp(cube.mean(axis=(1, 2))))
    ev = rbar * k1
    av2 = (x_diff * k2) ** 2 - ev * ev / (p * r)
    av = math.sqrt(max(av2, 0.0))
    grr = math.hypot(ev, av)
    pv = r_part * k3
    tv = math.hypot(grr, pv)
    ndc = int(math.floor(1.41 * pv / grr + 1e-12)) if grr > 0 else None
    return RangeMethodEstimate(
        repeatability=ev,
        reproducibility=av,
        gauge_rr=grr,
        part=pv,
        total=tv,
        k1=k1,
        k2=k2,
        k3=k3,
        mean_range=rbar,
        appraiser_mean_range=x_diff,
        part_mean_range=r_part,
        pct_study_variation=100 * grr / tv if tv > 0 else None,
        pct_tolerance=100 * k * grr / tolerance if tolerance else None,
        ndc=ndc,
        reproducibility_set_to_zero=av2 < 0,
    )


def _chart_limits(cube: np.ndarray, part_levels, appr_levels) -> GaugeChartLimits:
    p, o, r = cube.shape
    cc = constants.chart_constants(r)
    ranges = np.ptp(cube, axis=2)
    means = cube.mean(axis=2)
    rbar = float(ranges.mean())
    centre = float(cube.mean())
    ucl, lcl = centre + cc.A2 * rbar, centre - cc.A2 * rbar
    outside = float(np.mean((means > ucl) | (means < lcl))) * 100
    r_ucl = cc.D4 * rbar
    above = tuple(
        (str(part_levels[i]), str(appr_levels[j]))
        for i, j in np.argwhere(ranges > r_ucl * (1 + 1e-12))
    )
    return GaugeChartLimits(
        range_centre=rbar,
        range_ucl=r_ucl,
        range_lcl=cc.D3 * rbar,
        mean_centre=centre,
        mean_ucl=ucl,
        mean_lcl=lcl,
        pct_means_outside=outside,
        ranges_above_ucl=above,
    )


def _band(pct: float | None) -> str | None:
    if pct is None:
        return None
    if pct < GRR_ACCEPT_BELOW:
        return ACCEPTABLE
    if pct <= GRR_REJECT_ABOVE:
        return CONDITIONAL
    return UNACCEPTABLE


def _verdict(comp: dict, ndc: int | None, has_tol: bool) -> GaugeVerdict:
    pct_sv = comp[GAUGE_RR].pct_study_variation
    pct_tol = comp[GAUGE_RR].pct_tolerance if has_tol else None
    rank = {ACCEPTABLE: 0, CONDITIONAL: 1, UNACCEPTABLE: 2}
    banded = {"study variation": _band(pct_sv)}
    if has_tol:
        banded["tolerance"] = _band(pct_tol)
    bands = {k: v for k, v in banded.items() if v is not None}
    if not bands:  # no variation at all: nothing to judge against
        status, basis = UNACCEPTABLE, "study variation"
    else:
        basis = max(bands, key=lambda b: rank[bands[b]])
        status = bands[basis]
    ndc_ok = None if ndc is None else ndc >= NDC_MINIMUM
    v_rep = comp[REPEATABILITY].variance
    v_repro = comp[REPRODUCIBILITY].variance
    dominant = None
    if v_rep + v_repro > 0:
        dominant = REPEATABILITY if v_rep >= v_repro else REPRODUCIBILITY
    parts = [
        f"{names.GAUGE_TOTAL} is {pct_sv:.1f} % of the study variation"
        if pct_sv is not None
        else f"the share of {names.GAUGE_TOTAL} in the study variation is undefined"
    ]
    if pct_tol is not None:
        parts.append(f"{pct_tol:.1f} % of the tolerance")
    msg = (
        f"The measurement system is {status}: "
        + " and ".join(parts)
        + f" (below {GRR_ACCEPT_BELOW:g} % acceptable, {GRR_ACCEPT_BELOW:g}-"
        f"{GRR_REJECT_ABOVE:g} % conditionally, above {GRR_REJECT_ABOVE:g} % not)."
    )
    if ndc is not None:
        msg += (
            f" It tells {ndc} distinct categor{'y' if ndc == 1 else 'ies'} of parts apart"
            f" ({'meets' if ndc_ok else 'below'} the usual minimum of {NDC_MINIMUM}; common"
            " practice; the customer's rule governs)."
        )
    advice = ""
    need_action = status != ACCEPTABLE or ndc_ok is False
    if need_action and dominant == REPEATABILITY:
        advice = (
            "Repeatability (the gauge) dominates: the same person on the same part gets "
            "different readings. Look at the gauge itself: maintenance, clamping and "
            "fixturing, resolution, where on the part it measures, and variation within "
            "the part."
        )
    elif need_action and dominant == REPRODUCIBILITY:
        if comp[INTERACTION].variance > comp[APPRAISER].variance:
            advice = (
                "Reproducibility (the people) dominates, mostly through the appraiser-by-"
                "part interaction: some appraisers measure some parts differently. Compare "
                "how each appraiser handles those parts and make the method explicit."
            )
        else:
            advice = (
                "Reproducibility (the people) dominates: appraisers differ on average. "
                "Train to one written method, check the gauge's zeroing and reading by "
                "each appraiser, or add a fixture that removes handling differences."
            )
    if need_action and ndc_ok is False and status == ACCEPTABLE:
        advice += (
            " The parts in the study span too little of the process range for the "
            "gauge to tell them apart; choose parts covering the expected range."
        )
    return GaugeVerdict(
        status=status,
        basis=basis,
        pct_grr_study_variation=pct_sv,
        pct_grr_tolerance=pct_tol,
        ndc=ndc,
        ndc_ok=ndc_ok,
        dominant=dominant,
        message=msg,
        advice=advice.strip(),
    )
