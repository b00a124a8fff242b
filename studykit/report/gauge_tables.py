"""The gauge study's tables in words, shared by the PDF and the workbook's gauge step.

Both surfaces take their headers, row names and the sentence about the ANOVA from here, so the
screen and the paper say the same thing. Nothing is computed: the rows are read from a stored
gauge payload (``GaugeResult.to_dict()``) and only formatted by the caller.

The ANOVA shown first is the one the components come from (after pooling the appraiser-by-part
interaction when it is not significant); the full model is offered on request (a toggle on
screen, a reference table in the PDF).

Examples
--------
>>> [h for h in component_headers(6.0)][:4]
['Source', 'Variance', 'Share of variance', 'Spread (σ)']
>>> source_name("appraiser_by_part")
'Appraiser × part'
"""

from __future__ import annotations

from collections.abc import Mapping

__all__ = [
    "LABELS",
    "COMPONENT_NAMES",
    "ANOVA_SOURCES",
    "component_headers",
    "anova_headers",
    "component_name",
    "source_name",
    "anova_note",
    "show_full_anova",
]

#: Every word of the gauge tables (headers, titles, sentences).
LABELS = {
    "source": "Source",
    "variance": "Variance",
    "share_variance": "Share of variance",
    "spread": "Spread (σ)",
    "study_spread": "Study spread ({k:g} σ)",
    "share_study": "Share of study spread",
    "share_tolerance": "Share of tolerance",
    "spread_interval": "Spread, {conf:g} % interval",
    "components_title": "Where the variance comes from",
    "df": "Degrees of freedom",
    "ss": "Sum of squares",
    "ms": "Mean square",
    "f": "F",
    "p": "p",
    "anova_used_title": "Analysis of variance used",
    "anova_full_title": "Full model with the appraiser-by-part interaction (for reference)",
    "anova_full_toggle": "Show the full model (before pooling)",
    "not_tested": "The appraiser-by-part interaction could not be tested.",
    "pooled": (
        "The appraiser-by-part interaction is not significant (p = {p} ≥ {alpha}): it was "
        "pooled into the repeatability error, and the components come from the model "
        "without it."
    ),
    "kept": (
        "The appraiser-by-part interaction is significant (p = {p} < {alpha}): it stays in "
        "the model as its own source; this is the full model."
    ),
}

#: Variance components in words (JSON ids stay as they are).
COMPONENT_NAMES = {
    "gauge_rr": "Gauge R&R (all measurement)",
    "repeatability": "Repeatability (the gauge)",
    "reproducibility": "Reproducibility (the people)",
    "appraiser": "Appraiser",
    "appraiser_by_part": "Appraiser × part",
    "part_to_part": "Part to part",
    "total": "Total",
}

#: ANOVA sources in words.
ANOVA_SOURCES = {
    "part_to_part": "Parts",
    "appraiser": "Appraisers",
    "appraiser_by_part": "Appraiser × part",
    "repeatability": "Repeatability (error)",
    "total": "Total",
}


def component_headers(study_variation: float | None, *, tolerance: bool = True) -> list[str]:
    """Headers of the components table: source, variance, its share, spread, study spread and
    the two shares of spread."""
    k = 6.0 if study_variation is None else float(study_variation)
    out = [
        LABELS["source"],
        LABELS["variance"],
        LABELS["share_variance"],
        LABELS["spread"],
        LABELS["study_spread"].format(k=k),
        LABELS["share_study"],
    ]
    if tolerance:
        out.append(LABELS["share_tolerance"])
    return out


def anova_headers() -> list[str]:
    """Headers of an ANOVA table."""
    return [LABELS["source"], LABELS["df"], LABELS["ss"], LABELS["ms"], LABELS["f"], LABELS["p"]]


def component_name(name: str) -> str:
    """A variance component's id in words."""
    return COMPONENT_NAMES.get(name, name.replace("_", " "))


def source_name(name: str) -> str:
    """An ANOVA source's id in words."""
    return ANOVA_SOURCES.get(name, name.replace("_", " "))


def anova_note(payload: Mapping, fmt) -> str:
    """The sentence that says which ANOVA the components come from.

    ``fmt(value, digits)`` formats a number (each surface passes its own).

    Examples
    --------
    >>> anova_note({"interaction_p": 0.6, "interaction_pooled": True},
    ...            lambda v, d: f"{v:.{d}g}")[:42]
    'The appraiser-by-part interaction is not s'
    """
    p = payload.get("interaction_p")
    alpha = payload.get("alpha_interaction", 0.25)
    if p is None:
        return LABELS["not_tested"]
    key = "pooled" if payload.get("interaction_pooled") else "kept"
    return LABELS[key].format(p=fmt(p, 3), alpha=fmt(alpha, 2))


def show_full_anova(payload: Mapping) -> bool:
    """Whether the full model differs from the one used (it does after pooling)."""
    return bool(payload.get("interaction_pooled")) and bool(payload.get("anova_full"))
