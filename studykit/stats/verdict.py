"""The verdict policy: a capability result judged against a requirement, plain-word findings
about how far it can be trusted, and the band of the judged index over plausible models.

:func:`judge` gives the :class:`Verdict` of ``index >= threshold`` on the estimate or the lower
confidence bound; :func:`diagnose` the :class:`Finding` list (between-subgroup variation, too
few data, model choice, tails); :func:`model_band` the :class:`ModelBand`. They read a
:class:`~studykit.stats.capability.CapabilityResult` and compute no index themselves.
``studykit.stats.capability`` re-exports every name here, so older imports keep working.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from studykit import names
from studykit.errors import StudyInputError
from studykit.stats._checks import check_number
from studykit.stats.result import Result

if TYPE_CHECKING:
    from studykit.stats.capability import CapabilityResult

__all__ = [
    "DEFAULT_CRITERIA",
    "Verdict",
    "Finding",
    "ModelBand",
    "judge",
    "diagnose",
    "model_band",
]

#: Default demonstration criteria: common practice, no source; the customer's requirement governs.
DEFAULT_CRITERIA = {
    "pre_launch": {k: names.DEFAULT_CRITERION[k] for k in ("index", "threshold")},
    "ongoing": {k: names.DEFAULT_ONGOING_CRITERION[k] for k in ("index", "threshold")},
    "note": "common practice; the customer's requirement governs",
}

INDEX_NAMES = names.INDEX_IDS
_PRETTY = names.INDEX_LABELS


def _check_level(level):
    if not isinstance(level, int | float) or not 0.5 <= float(level) < 1:
        raise StudyInputError(
            f"`level` ({level!r}) must be a confidence level in [0.5, 1), e.g. 0.95."
        )
    return float(level)


@dataclass(frozen=True)
class Verdict(Result):
    """Whether a capability requirement is met, in numbers and in words.

    Attributes
    ----------
    criterion : str
        E.g. ``"ppk >= 1.67"``.
    index : str
    threshold : float
    basis : str
        ``"lower_bound"`` (demonstrated with confidence) or ``"estimate"``.
    estimate, lower_bound : float or None
    level : float
    meets : bool or None
        None when the index is undefined for this specification or method.
    text : str
        One or two plain sentences.
    """

    criterion: str
    index: str
    threshold: float
    basis: str
    estimate: float | None
    lower_bound: float | None
    level: float
    meets: bool | None
    text: str

    def to_dict(self) -> dict:
        return {
            "criterion": self.criterion,
            "index": self.index,
            "threshold": self.threshold,
            "basis": self.basis,
            "estimate": self.estimate,
            "lower_bound": self.lower_bound,
            "level": self.level,
            "meets": self.meets,
            "text": self.text,
        }


def judge(
    result: CapabilityResult,
    *,
    index: str = names.DEFAULT_CRITERION["index"],
    threshold: float = names.DEFAULT_CRITERION["threshold"],
    basis: str = names.DEFAULT_CRITERION["basis"],
) -> Verdict:
    """Judge a capability result against a requirement ``index >= threshold``.

    Parameters
    ----------
    result : CapabilityResult
    index : str
        One of ``INDEX_NAMES`` (default ``"ppk"``).
    threshold : float
        Required value. Defaults: Ppk >= 1.67 before launch, Cpk >= 1.33 in series production
        (:data:`DEFAULT_CRITERIA`; common practice, the customer's requirement governs).
    basis : {"lower_bound", "estimate"}
        Judge the one-sided lower confidence bound (demonstration) or the point estimate.

    Returns
    -------
    Verdict
        criterion, index, threshold, basis, estimate, lower_bound, level, meets, text.

    Notes
    -----
    With basis "lower_bound" the requirement is demonstrated when the lower bound at the
    result's level is at least the threshold. When the estimate passes but the bound does not,
    the text says that more data would be needed.

    References
    ----------
    A. F. Bissell, Applied Statistics 39 (1990) 331-340 (lower bounds as the demonstration).

    Examples
    --------
    >>> from studykit.stats.capability import capability
    >>> x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
    >>> v = judge(capability(x, lsl=44.0, usl=58.0), index="ppk", threshold=1.0)
    >>> v.meets
    False
    >>> "more data would be needed" in v.text
    True
    """
    threshold = _checked_criterion(index, basis, threshold)
    est = getattr(result, index)
    lb = result.lower_bound(index)
    name = _PRETTY[index]
    pct = _pct(result.level)
    criterion = f"{index} >= {threshold:g}"
    if est is None:
        why = (
            "a fitted non-normal model gives overall indices only"
            if result.method != "normal" and index in ("cp", "cpk", "cpu", "cpl", "cpm")
            else "the specification does not define it (one-sided limits or no target)"
        )
        text = f"{name} cannot be judged: {why}."
        return Verdict(criterion, index, threshold, basis, None, lb, result.level, None, text)
    meets, text = _judged_text(name, est, lb, threshold, basis, pct)
    return Verdict(criterion, index, threshold, basis, float(est), lb, result.level, meets, text)


def _checked_criterion(index, basis, threshold) -> float:
    """The threshold as a float, after checking the index, basis and threshold of a criterion."""
    if index not in INDEX_NAMES:
        raise StudyInputError(f"`index` ({index!r}) must be one of {list(INDEX_NAMES)}.")
    if basis not in ("lower_bound", "estimate"):
        raise StudyInputError(f"`basis` ({basis!r}) must be 'lower_bound' or 'estimate'.")
    return check_number(threshold, "threshold", tail=", e.g. 1.33.")


def _judged_text(name, est, lb, threshold, basis, pct):
    """Whether the requirement is met (None: no bound to judge) and the verdict's sentence."""
    est_ok = est >= threshold
    lb_txt = "not available" if lb is None else f"{lb:.2f}"
    if basis == "estimate":
        meets = est_ok
        text = (
            f"The estimate of {name} is {est:.2f}, which "
            f"{'meets' if est_ok else 'does not meet'} the requirement {name} >= {threshold:g}. "
            f"This is judged on the estimate alone; the lower {pct} confidence bound is {lb_txt}."
        )
    elif lb is None:
        meets = None
        text = (
            f"The estimate of {name} is {est:.2f}, but no lower {pct} bound is available, so the "
            f"requirement {name} >= {threshold:g} cannot be demonstrated."
        )
    else:
        meets = lb >= threshold
        if meets:
            text = (
                f"The lower {pct} confidence bound of {name} is {lb:.2f}, at least the required "
                f"{threshold:g}: the data demonstrate the requirement (estimate {est:.2f})."
            )
        elif est_ok:
            text = (
                f"The estimate of {name} ({est:.2f}) meets {threshold:g}, but the lower {pct} "
                f"bound ({lb:.2f}) does not: more data would be needed to demonstrate it."
            )
        else:
            text = (
                f"The estimate of {name} is {est:.2f}, below the required {threshold:g}: the "
                f"process does not meet the requirement (lower {pct} bound {lb:.2f})."
            )
    return meets, text


@dataclass(frozen=True)
class Finding(Result):
    """One plain-word observation about a capability result.

    Attributes
    ----------
    code : str
        Stable identifier: ``within_overall_disagree``, ``few_values``, ``few_subgroups``,
        ``model_matters``, ``observed_exceeds_expected``.
    severity : str
        ``"warning"`` or ``"info"``.
    text : str
    """

    code: str
    severity: str
    text: str

    def to_dict(self) -> dict:
        return {"code": self.code, "severity": self.severity, "text": self.text}


def diagnose(
    result: CapabilityResult,
    *,
    n_subgroups: int | None = None,
    threshold: float | None = None,
    index: str = "ppk",
    band_decides: bool = False,
) -> list[Finding]:
    """Plain-word findings that affect how far a capability result can be trusted.

    Parameters
    ----------
    result : CapabilityResult
    n_subgroups : int or None
        Number of subgroups behind the within sigma, when the data are subgrouped.
    threshold : float or None
        Requirement for ``index``; used to say whether the choice of model changes the verdict.
    index : str
        Index the requirement is about (default ``"ppk"``).
    band_decides : bool
        True when a model band on the verdict's basis (:func:`model_band`) says whether a
        plausible model changes the verdict: the ``model_matters`` finding then leaves that
        sentence to the band (normal theory's estimate may cross the threshold where no
        plausible model's bound does, or the normal model may be rejected).

    Returns
    -------
    list of Finding
        Possibly empty.

    Notes
    -----
    Rules (common practice, no source): Cpk/Ppk at least 1.25 (overall sigma 25 % above within)
    flags between-subgroup variation; n < 100 values or fewer than 25 subgroups flags too few
    data; for a fitted model, a normal-theory Ppk that differs by more than 10 % or falls on the
    other side of the threshold flags that the model choice matters; observed PPM above three
    times the expected flags tails or outliers the model does not describe.

    References
    ----------
    D. C. Montgomery, *Introduction to Statistical Quality Control*, ch. 8 (Cpk versus Ppk, the
    need for a process in control; from memory).

    Examples
    --------
    >>> from studykit.stats.capability import capability
    >>> x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
    >>> [f.code for f in diagnose(capability(x, lsl=44.0, usl=58.0))]
    ['few_values']
    """
    findings = _data_findings(result, n_subgroups)
    findings += _model_findings(result, threshold, index, band_decides)
    findings += _tail_findings(result)
    return findings


def _data_findings(result, n_subgroups) -> list[Finding]:
    """Between-subgroup variation, too few values, too few subgroups."""
    findings = []
    if result.cpk is not None and result.ppk is not None and result.ppk > 0:
        ratio = result.cpk / result.ppk
        if ratio >= 1.25:
            findings.append(
                Finding(
                    "within_overall_disagree",
                    "warning",
                    f"Cpk ({result.cpk:.2f}) is much larger than Ppk ({result.ppk:.2f}): the "
                    "values vary more between subgroups than within them. Look for drift, shifts "
                    "between batches or shifts, or subgroups that do not contain only "
                    "consecutive parts; Cpk then overstates what customers receive.",
                )
            )
    n = result.inputs.get("n", 0)
    if n < 100:
        findings.append(
            Finding(
                "few_values",
                "warning",
                f"Only {n} values: the indices are uncertain (see the confidence bounds); "
                "about 100 values or more are usual for a capability study.",
            )
        )
    if n_subgroups is not None and n_subgroups < 25:
        findings.append(
            Finding(
                "few_subgroups",
                "warning",
                f"Only {n_subgroups} subgroups: the within sigma and the stability judgement rest "
                "on few subgroups; 25 or more are usual.",
            )
        )
    return findings


def _model_findings(result, threshold, index, band_decides=False) -> list[Finding]:
    """A fitted model whose index differs much from normal theory's, or flips the verdict."""
    findings: list[Finding] = []
    normal = result.alternatives.get("normal")
    if result.method != "normal" and normal is not None:
        mine, theirs = getattr(result, index, None), normal.get(index)
        if mine is not None and theirs is not None:
            flips = threshold is not None and (mine >= threshold) != (theirs >= threshold)
            if flips or abs(theirs - mine) > 0.1 * abs(mine):
                findings.append(
                    Finding(
                        "model_matters",
                        "warning",
                        f"The fitted model ({names.model_label(result.model)}) gives "
                        f"{_PRETTY[index]} {mine:.2f}; "
                        f"normal theory would give {theirs:.2f}."
                        + (
                            " The verdict depends on the model chosen."
                            if flips and not band_decides
                            else ""
                        )
                        + " Justify the model with the goodness-of-fit results.",
                    )
                )
    return findings


def _tail_findings(result) -> list[Finding]:
    """More observed PPM than the model expects (heavy tails or outliers)."""
    findings: list[Finding] = []
    expected = result.ppm_overall
    if result.ppm_observed > 0 and result.ppm_observed > 3 * expected:
        findings.append(
            Finding(
                "observed_exceeds_expected",
                "warning",
                f"Observed {result.ppm_observed:.0f} PPM outside the limits against "
                f"{expected:.0f} PPM expected: the tails may be heavier than the model assumes, "
                "or there are outliers to investigate.",
            )
        )
    return findings


@dataclass(frozen=True)
class ModelBand(Result):
    """Range of one index over several candidate models, on the verdict's basis.

    Attributes
    ----------
    low, high : float
        Smallest and largest value (estimates, or lower confidence bounds: ``basis``).
    low_models, high_models : list of str
        Models that give them.
    meeting, failing : list of str
        Models whose value is at least / below ``threshold``.
    threshold : float
    verdict_changes : bool
        True when some models meet the threshold and others do not.
    warning : str or None
        Plain-word warning when the verdict changes.
    basis : str
        ``"estimate"`` or ``"lower_bound"``: what is compared with the threshold, the same as
        the verdict's basis.
    level : float or None
        Confidence level of the lower bounds (basis ``"lower_bound"``).
    """

    low: float
    high: float
    low_models: list
    high_models: list
    meeting: list
    failing: list
    threshold: float
    verdict_changes: bool
    warning: str | None
    basis: str = "estimate"
    level: float | None = None

    @property
    def quantity(self) -> str:
        """What the band's values are, in words: "estimate" or "lower 95% bound"."""
        if self.basis == "lower_bound" and self.level is not None:
            return f"lower {_pct(self.level)} bound"
        return "estimate"

    def to_dict(self) -> dict:
        return {
            "low": self.low,
            "high": self.high,
            "low_models": list(self.low_models),
            "high_models": list(self.high_models),
            "meeting": list(self.meeting),
            "failing": list(self.failing),
            "threshold": self.threshold,
            "verdict_changes": self.verdict_changes,
            "warning": self.warning,
            "basis": self.basis,
            "level": self.level,
            "quantity": self.quantity,
        }


def _pct(level: float) -> str:
    """A confidence level as a percentage with no needless decimal: 0.95 -> "95%"."""
    whole = abs(level * 100 - round(level * 100)) < 1e-9
    return f"{level:.0%}" if whole else f"{level:.1%}"


def model_band(
    index_by_model: dict,
    threshold: float,
    *,
    basis: str = "estimate",
    level: float | None = None,
) -> ModelBand:
    """How much an index moves across plausible models, and whether the verdict moves with it.

    Parameters
    ----------
    index_by_model : dict of str to float
        E.g. ``{"normal": 1.41, "lognormal": 1.72, "weibull": 1.55}``; None values are skipped.
        With ``basis="lower_bound"`` the values are each model's lower confidence bound.
    threshold : float
        Requirement the index is judged against.
    basis : {"estimate", "lower_bound"}
        What the values are: the verdict's basis, so the band warns only when a model would
        change the verdict itself.
    level : float or None
        Confidence level of the bounds (needed with ``basis="lower_bound"``).

    Returns
    -------
    ModelBand
        low, high, low_models, high_models, meeting, failing, threshold, verdict_changes, warning.

    Notes
    -----
    A plain summary, no statistics: the spread of the index over models the data cannot tell
    apart is a part of its uncertainty that confidence bounds for one model do not show.

    Examples
    --------
    >>> b = model_band({"normal": 1.41, "lognormal": 1.72}, 1.67)
    >>> b.verdict_changes, b.low_models
    (True, ['normal'])
    >>> model_band({"normal": 1.52, "lognormal": 1.60}, 1.67, basis="lower_bound",
    ...            level=0.95).quantity
    'lower 95% bound'
    """
    if basis not in ("estimate", "lower_bound"):
        raise StudyInputError(f"`basis` ({basis!r}) must be 'lower_bound' or 'estimate'.")
    level = _check_level(level) if basis == "lower_bound" else None
    vals = _band_values(index_by_model)
    threshold = float(threshold)
    low, high = min(vals.values()), max(vals.values())
    meeting = sorted(k for k, v in vals.items() if v >= threshold)
    failing = sorted(k for k, v in vals.items() if v < threshold)
    changes = bool(meeting) and bool(failing)
    warning = None
    if changes:
        on = "" if level is None else f" on the lower {_pct(level)} bound"
        warning = (
            f"The verdict depends on the model: {names.model_list(meeting)} meet {threshold:g}"
            f"{on} but {names.model_list(failing)} do not (range {low:.2f} to {high:.2f}). Choose "
            "the model on "
            "goodness of fit and process knowledge, and record why."
        )
    return ModelBand(
        low=low,
        high=high,
        low_models=sorted(k for k, v in vals.items() if v == low),
        high_models=sorted(k for k, v in vals.items() if v == high),
        meeting=meeting,
        failing=failing,
        threshold=threshold,
        verdict_changes=changes,
        warning=warning,
        basis=basis,
        level=level,
    )


def _band_values(index_by_model) -> dict[str, float]:
    """The finite index values by model name (None values left out); refuses anything else."""
    if not isinstance(index_by_model, dict):
        raise StudyInputError(
            "the model band needs the index under each model (model name -> value)."
        )
    vals = {str(k): float(v) for k, v in index_by_model.items() if v is not None}
    if not vals:
        raise StudyInputError("the model band has no model with an index value.")
    bad = [k for k, v in vals.items() if not math.isfinite(v)]
    if bad:
        raise StudyInputError(
            f"the index under the model {bad[0]!r} is not a finite number, so the model band "
            "cannot be drawn; check the readings for extreme values."
        )
    return vals
