"""How many parts a capability demonstration needs.

A demonstration succeeds when the one-sided lower confidence bound of the index clears the
required value. Before measuring, the engineer assumes a true index (from a pilot run or a similar
process) and asks for the number of parts n at which the bound is expected to clear the target.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy import special

from studykit import names
from studykit.errors import StudyInputError
from studykit.stats.result import Result

__all__ = ["DemonstrationPlan", "PlanTable", "parts_needed", "planning_table"]

_CHI2_INDICES = ("cp", "pp")
_BISSELL_INDICES = ("cpk", "ppk", "cpu", "cpl", "ppu", "ppl")
#: Largest sample size searched; beyond it the plan says the demonstration is impractical.
MAX_PARTS = 1_000_000

CRITERION = (
    "expected-value criterion: the smallest n for which the lower bound, computed as if the "
    "estimate equalled the assumed true index, is at least the target; at that n the bound clears "
    "in about half of repeated studies"
)


def _number(value, name):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise StudyInputError(f"`{name}` ({value!r}) must be a number, e.g. 1.67.") from None
    if not (math.isfinite(v) and v > 0):
        raise StudyInputError(f"`{name}` ({value!r}) must be a positive finite number, e.g. 1.67.")
    return v


def _check(index, level):
    if index not in _CHI2_INDICES + _BISSELL_INDICES:
        raise StudyInputError(
            f"`index` ({index!r}) must be one of {list(_CHI2_INDICES + _BISSELL_INDICES)}."
        )
    if not isinstance(level, int | float) or not 0.5 <= float(level) < 1:
        raise StudyInputError(
            f"`level` ({level!r}) must be a confidence level in [0.5, 1), e.g. 0.95."
        )
    return float(level)


def _bound(index, assumed, n, level):
    """Lower one-sided bound at sample size n with the estimate equal to ``assumed``.

    The quantiles are scipy.stats' ``chi2.ppf`` / ``norm.ppf`` by the special functions they
    call (``2 gammaincinv(nu/2, p)``, ``ndtri``): the same numbers without the frozen-object
    overhead."""
    if index in _CHI2_INDICES:
        nu = n - 1
        return assumed * math.sqrt(2.0 * special.gammaincinv(nu / 2, 1 - level) / nu)
    z = float(special.ndtri(level))
    return assumed - z * math.sqrt(1.0 / (9.0 * n) + assumed**2 / (2.0 * (n - 1)))


def _bissell_closed_form(assumed, target, level):
    """Real root n of k - z sqrt(1/(9n) + k^2/(2(n-1))) = T (a quadratic in n)."""
    z = float(special.ndtri(level))
    d = (assumed - target) ** 2 / z**2
    b = d + 1.0 / 9.0 + assumed**2 / 2.0
    return (b + math.sqrt(b * b - 4.0 * d / 9.0)) / (2.0 * d)


@dataclass(frozen=True)
class DemonstrationPlan(Result):
    """Number of parts for a capability demonstration.

    Attributes
    ----------
    n : int or None
        Parts (individual values) needed; None when the assumed index does not exceed the target
        (no sample size can demonstrate it) or more than ``MAX_PARTS`` would be needed.
    index, assumed, target, level : inputs
    bound_at_n : float or None
        The lower bound at n with the estimate equal to ``assumed``.
    method : str
        ``"chi_square"`` (Cp, Pp) or ``"bissell"`` (Cpk, Ppk and one-sided indices).
    criterion : str
        The exact rule used (see :data:`CRITERION`).
    text : str
        One plain sentence.
    """

    n: int | None
    index: str
    assumed: float
    target: float
    level: float
    bound_at_n: float | None
    method: str
    criterion: str
    text: str

    def to_dict(self) -> dict:
        return {
            "n": self.n,
            "index": self.index,
            "assumed": self.assumed,
            "target": self.target,
            "level": self.level,
            "bound_at_n": self.bound_at_n,
            "method": self.method,
            "criterion": self.criterion,
            "text": self.text,
        }


def parts_needed(
    assumed: float,
    target: float,
    *,
    index: str = "ppk",
    confidence: float | None = None,
    level: float | None = None,
) -> DemonstrationPlan:
    """Parts needed so that the lower confidence bound is expected to clear the target.

    Parameters
    ----------
    assumed : float
        The true index the process is believed to have (e.g. from a pilot run).
    target : float
        Required value of the index (e.g. 1.67).
    index : str
        ``"ppk"`` (default), ``"cpk"``, ``"ppu"``, ``"ppl"``, ``"cpu"``, ``"cpl"`` (Bissell) or
        ``"pp"``, ``"cp"`` (chi-square).
    confidence : float, optional
        Confidence level of the one-sided lower bound; None (not given) means 0.95
        (:data:`studykit.names.DEFAULT_CONFIDENCE`).
    level : float, optional
        Deprecated spelling of ``confidence`` (kept so existing calls work).

    Returns
    -------
    DemonstrationPlan
        n, index, assumed, target, level, bound_at_n, method, criterion, text.

    Notes
    -----
    Criterion (expected value): the smallest n with L(n) >= target, where L is the lower bound
    evaluated at estimate = assumed:

    * Bissell: L(n) = k - z_(level) sqrt(1/(9n) + k^2 / (2(n - 1))); L(n) = T is a quadratic in
      n with D = (k - T)^2 / z^2, B = D + 1/9 + k^2/2: n = (B + sqrt(B^2 - 4D/9)) / (2D).
    * Chi-square: L(n) = k sqrt(chi2_(1-level)(n - 1) / (n - 1)).

    The estimate scatters around the true index, so at this n the bound clears the target in
    about half of repeated studies; a larger n is needed for a higher chance. n counts individual
    values with n - 1 degrees of freedom; a within sigma from ranges has fewer effective degrees
    of freedom (see :func:`studykit.stats.capability.effective_df_range`), so plan Cp/Cpk studies
    with some margin.

    References
    ----------
    A. F. Bissell, "How reliable is your capability index?", Applied Statistics 39 (1990)
    331-340; D. C. Montgomery, *Introduction to Statistical Quality Control*, ch. 8 (chi-square
    bound for Cp; sample size for a capability study).

    Examples
    --------
    >>> p = parts_needed(2.0, 1.67, index="ppk")
    >>> p.n, p.method
    (54, 'bissell')
    >>> parts_needed(1.5, 1.67).n is None
    True
    """
    level = _check(index, names.confidence_of(confidence, level=level))
    assumed = _number(assumed, "assumed")
    target = _number(target, "target")
    method = "chi_square" if index in _CHI2_INDICES else "bissell"
    name = index.capitalize() if len(index) == 2 else index[0].upper() + index[1:]
    text = _no_plan(index, assumed, target, level, name)
    if text is not None:
        return DemonstrationPlan(None, index, assumed, target, level, None, method, CRITERION, text)
    n = _smallest_n(index, assumed, target, level, method)
    bound = _bound(index, assumed, n, level)
    text = (
        f"About {n} parts: if the true {name} is {names.format_index(assumed)}, the lower "
        f"{level:.0%} bound from {n} "
        f"parts is expected to reach {target:g} (it does so in about half of such studies; use "
        "more parts for a safer margin)."
    )
    return DemonstrationPlan(
        n, index, assumed, target, level, float(bound), method, CRITERION, text
    )


def _no_plan(index: str, assumed: float, target: float, level: float, name: str) -> str | None:
    """Why no number of parts (up to MAX_PARTS) can demonstrate the target, or None."""
    if assumed <= target:
        return (
            f"An assumed {name} of {names.format_index(assumed)} does not exceed the target "
            f"{target:g}: no number of "
            "parts can demonstrate it. Improve the process or revisit the assumption."
        )
    if _bound(index, assumed, MAX_PARTS, level) < target:
        return (
            f"With an assumed {name} of {names.format_index(assumed)}, more than {MAX_PARTS} "
            "parts would be needed to "
            f"demonstrate {target:g}: the margin is too small to demonstrate in practice."
        )
    return None


def _smallest_n(index: str, assumed: float, target: float, level: float, method: str) -> int:
    """The smallest number of parts whose expected lower bound reaches the target."""
    lo, hi = 2, MAX_PARTS  # L(lo) < target <= L(hi) after the first check; L increases with n
    if _bound(index, assumed, lo, level) >= target:
        hi = lo
    elif method == "bissell":
        # the closed-form root brackets the answer: the smallest whole n >= 2 with
        # L(n) >= target is ceil(root) up to rounding, checked on both sides
        root = _bissell_closed_form(assumed, target, level)
        if math.isfinite(root):
            c = min(max(math.ceil(root), 3), MAX_PARTS)
            if _bound(index, assumed, c, level) >= target:
                hi = c
                if _bound(index, assumed, c - 1, level) < target:
                    lo = c - 1
            else:
                lo = c
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if _bound(index, assumed, mid, level) >= target:
            hi = mid
        else:
            lo = mid
    return hi


@dataclass(frozen=True)
class PlanTable(Result):
    """Parts needed for several assumed indices and targets.

    Attributes
    ----------
    index : str
    level : float
    assumed : list of float
        Row labels.
    targets : list of float
        Column labels.
    n : list of list of (int or None)
        n[i][j] for assumed[i] and targets[j]; None where not demonstrable.
    criterion : str
    """

    index: str
    level: float
    assumed: list
    targets: list
    n: list
    criterion: str

    def to_dict(self) -> dict:
        return {
            "index": self.index,
            "level": self.level,
            "assumed": list(self.assumed),
            "targets": list(self.targets),
            "n": [list(row) for row in self.n],
            "criterion": self.criterion,
        }


def planning_table(
    assumed=(1.33, 1.5, 1.67, 2.0, 2.33),
    targets=(1.0, 1.33, 1.67),
    *,
    index: str = "ppk",
    confidence: float | None = None,
    level: float | None = None,
) -> PlanTable:
    """Table of :func:`parts_needed` over assumed indices (rows) and targets (columns).

    Parameters
    ----------
    assumed : sequence of float
        Assumed true indices.
    targets : sequence of float
        Required values.
    index : str
        As in :func:`parts_needed`.
    confidence : float, optional
        Confidence level; None (not given) means 0.95. ``level`` is its deprecated spelling.

    Returns
    -------
    PlanTable
        index, level, assumed, targets, n (rows x columns), criterion.

    Notes
    -----
    Each cell is ``parts_needed(a, t, index=index, level=level).n``.

    References
    ----------
    A. F. Bissell, Applied Statistics 39 (1990) 331-340.

    Examples
    --------
    >>> t = planning_table([2.0], [1.33, 1.67])
    >>> t.n
    [[14, 54]]
    """
    rows = [float(a) for a in assumed]
    cols = [float(t) for t in targets]
    if not rows or not cols:
        raise StudyInputError("`assumed` and `targets` must each hold at least one value.")
    level = names.confidence_of(confidence, level=level)
    table = [[parts_needed(a, t, index=index, confidence=level).n for t in cols] for a in rows]
    return PlanTable(index, float(level), rows, cols, table, CRITERION)
