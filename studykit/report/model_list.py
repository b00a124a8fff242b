"""The fitted models as a list of families, each once, for the workbook's shape step and the PDF.

The ranking (:class:`studykit.stats.fit.Ranking`) has one row per fitted model, the threshold
(shifted) variants as rows of their own. People choose a *family* and then decide whether to
allow a threshold (a lower bound of the values other than zero); this module regroups the rows
that way and says in words what allowing the threshold changes (AIC, the likelihood-ratio test).
Nothing is computed: AIC, the Anderson-Darling p-value and the likelihood-ratio p-value are the
ranking's own. The JSON keeps the ranking's rows and ids unchanged.

The list of families is the usual one of the reliability literature: the location-scale
families (normal, lognormal, Weibull, smallest and largest extreme value, logistic,
log-logistic, exponential) and their threshold versions, and the gamma family, as presented
in W. Q. Meeker and L. A. Escobar, *Statistical Methods for Reliability Data*, Wiley 1998,
chapters 4 ("location-scale-based parametric distributions") and 5 ("other parametric
distributions", including threshold parameters) (from memory); the half-normal as in
N. L. Johnson, S. Kotz and N. Balakrishnan, *Continuous Univariate Distributions*, vol. 1,
2nd ed., Wiley 1994, chapter 13 (from memory).

Examples
--------
>>> import numpy as np
>>> from studykit.stats.fit import fit_all
>>> x = np.random.default_rng(1).weibull(2.0, 60) * 3 + 5
>>> lines = family_lines(fit_all(x))
>>> len({line.family for line in lines}) == len(lines)  # each family once
True
"""

from __future__ import annotations

from dataclasses import dataclass

from studykit import names

__all__ = ["LABELS", "SOURCE", "FamilyLine", "family_lines", "threshold_effect", "base_of"]

#: Every word of the model list.
LABELS = {
    "title": "Fitted model families, best first",
    "family": "Family",
    "plain": "Without threshold",
    "shifted": "Threshold allowed",
    "aic": "AIC",
    "ad_p": "Anderson-Darling p",
    "effect": "Effect of allowing a threshold",
    "allow": "Allow a threshold",
    "used": "◂ used",
    "no_variant": "no threshold variant",
    "not_fitted": "not fitted: {why}",
    "better": "AIC lower by {d}; likelihood-ratio test p {p}: the threshold {verdict}",
    "better_no_lrt": "AIC lower by {d}: the threshold improves the fit",
    "worse": "AIC higher by {d}: no better than without it",
    "helps": "improves the fit",
    "not_needed": "is not needed (the gain is within chance)",
    "rule": (
        "Each family once, ranked by its better AIC (smaller is better); the threshold "
        "variant is shown inside its family's row."
    ),
    "source": (
        "Families as in Meeker & Escobar, Statistical Methods for Reliability Data "
        "(1998), ch. 4-5, and Johnson, Kotz & Balakrishnan, Continuous Univariate "
        "Distributions vol. 1 (1994), ch. 13 (half-normal)."
    ),
}
#: The citation shown under the list (also in the module docstring).
SOURCE = LABELS["source"]

#: Threshold variant id -> its family (used when a row does not name it in ``lrt_against``).
_BASE = {
    "lognormal3": "lognormal",
    "weibull3": "weibull",
    "gamma3": "gamma",
    "exponential2": "exponential",
    "loglogistic3": "loglogistic",
}


def base_of(model_id: str, lrt_against: str | None = None) -> str:
    """The family a ranking row belongs to (its own id for a model without threshold).

    >>> base_of("weibull3"), base_of("normal")
    ('weibull', 'normal')
    """
    if lrt_against:
        return lrt_against
    try:
        from studykit.stats.fit import FAMILIES

        fam = FAMILIES.get(model_id)
        if fam is not None and getattr(fam, "base_id", None):
            return fam.base_id
    except ImportError:  # pragma: no cover - the fit module moved: fall back to the table
        pass
    return _BASE.get(model_id, model_id)


@dataclass(frozen=True)
class FamilyLine:
    """One family: its model without threshold, its threshold variant (None when the family
    has none), and the better of the two (the one that ranks higher)."""

    family: str
    name: str
    plain: object | None
    shifted: object | None
    best: object
    rank: int


def family_lines(ranking) -> list[FamilyLine]:
    """The ranking's rows regrouped: one :class:`FamilyLine` per family, best family first."""
    if ranking is None:
        return []
    groups: dict[str, dict] = {}
    for row in ranking.rows:  # rows come best first, so a family's first row is its best
        fam = base_of(row.id, getattr(row, "lrt_against", None))
        g = groups.setdefault(fam, {"plain": None, "shifted": None, "best": row})
        g["plain" if row.id == fam else "shifted"] = row
    out = []
    for rank, (fam, g) in enumerate(groups.items(), 1):
        name = names.model_label(fam)
        out.append(FamilyLine(fam, name, g["plain"], g["shifted"], g["best"], rank))
    return out


def _fitted(row) -> bool:
    return row is not None and not getattr(row, "error", None) and row.aic is not None


def threshold_effect(line: FamilyLine, fmt) -> str:
    """What allowing a threshold does to this family's fit, in words.

    ``fmt(value, digits)`` formats a number (each surface passes its own).
    """
    if line.shifted is None:
        return LABELS["no_variant"]
    if not _fitted(line.shifted):
        return LABELS["not_fitted"].format(why=line.shifted.error or line.shifted.note or "—")
    if not _fitted(line.plain):
        return (
            LABELS["not_fitted"]
            .format(why=(line.plain.error if line.plain is not None else None) or "—")
            .replace("not fitted", "without threshold not fitted")
        )
    d = line.plain.aic - line.shifted.aic
    if d <= 0:
        return LABELS["worse"].format(d=fmt(-d, 1))
    p = line.shifted.lrt_p_value
    if p is None:
        return LABELS["better_no_lrt"].format(d=fmt(d, 1))
    p_text = "< 0.001" if p < 1e-3 else f"= {fmt(p, 3)}"
    verdict = LABELS["helps"] if p < 0.05 else LABELS["not_needed"]
    return LABELS["better"].format(d=fmt(d, 1), p=p_text, verdict=verdict)
