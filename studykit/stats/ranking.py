"""Fitting several distribution families to one sample and ranking them (:func:`fit_all`).

Ranking rule: fitted models by AIC (smallest first); models flagged ``converged=False`` after
all converged ones; families that could not be fitted come last with their reason; ties in
AIC broken by the smaller Anderson-Darling statistic (see :mod:`studykit.stats.fit`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from studykit.errors import AnalysisError, StudyInputError
from studykit.stats.families import FAMILIES
from studykit.stats.families.base import FittedModel, clean_sample
from studykit.stats.result import Result
from studykit.stats.result import json_float as _f

__all__ = ["FitRow", "Ranking", "fit_all", "ROW_FIELDS", "RANKING_RULE"]


RANKING_RULE = (
    "AIC ascending among converged fits, then fits at a search limit "
    "(converged=False), then families that could not be fitted; ties broken by the "
    "smaller Anderson-Darling statistic"
)


@dataclass(frozen=True)
class FitRow(Result):
    """One line of the ranking table (numbers None when the family could not be fitted).

    ``lrt_p_value`` compares a threshold variant with its two-parameter base (``lrt_against``):
    chi-square with 1 degree of freedom on 2 (loglik3 - loglik2). The reference distribution
    is approximate: threshold estimation is non-regular for small shapes (Smith 1985).
    """

    rank: int
    id: str
    label: str
    n_params: int
    loglik: float | None
    aic: float | None
    bic: float | None
    ad_statistic: float | None
    ad_p_value: float | None
    ad_p_text: str | None
    lrt_p_value: float | None
    lrt_against: str | None
    converged: bool
    error: str | None
    note: str | None

    def to_dict(self) -> dict:
        out = {}
        for name in ROW_FIELDS:
            v = getattr(self, name)
            out[name] = _f(v) if isinstance(v, float) else v
        out["converged"] = bool(self.converged)
        return out


#: Column names of the ranking table, defined once for the JSON, the table and the report.
ROW_FIELDS = (
    "rank",
    "id",
    "label",
    "n_params",
    "loglik",
    "aic",
    "bic",
    "ad_statistic",
    "ad_p_value",
    "ad_p_text",
    "lrt_p_value",
    "lrt_against",
    "converged",
    "error",
    "note",
)


@dataclass(frozen=True)
class Ranking(Result):
    """Result of :func:`fit_all`.

    Attributes
    ----------
    rows : tuple of FitRow
        One per requested family, best first (see ``rule``).
    models : dict
        Family id -> FittedModel, for the families that could be fitted.
    n : int
        Number of readings.
    rule : str
        The ranking rule in words.
    """

    rows: tuple
    models: dict
    n: int
    rule: str = RANKING_RULE

    @property
    def best(self) -> FittedModel | None:
        """The first-ranked fitted model (None when nothing could be fitted)."""
        if self.rows and self.rows[0].id in self.models:
            return self.models[self.rows[0].id]
        return None

    def to_dict(self) -> dict:
        return {
            "n": int(self.n),
            "rule": self.rule,
            "best": None if self.best is None else self.best.name,
            "rows": [r.to_dict() for r in self.rows],
            "models": {k: m.to_dict() for k, m in self.models.items()},
        }


def fit_all(x, *, families=None) -> Ranking:
    """Fit several distribution families to one sample and rank them.

    Parameters
    ----------
    x : array_like
        Finite readings, at least 3.
    families : sequence of str, optional
        Family ids from :data:`FAMILIES`; all of them by default.

    Returns
    -------
    Ranking
        ``rows`` (rank, id, label, n_params, loglik, aic, bic, ad_statistic, ad_p_value,
        ad_p_text, lrt_p_value, lrt_against, converged, error, note), ``models``, ``best``,
        ``n``, ``rule``.

    Notes
    -----
    AIC = 2p - 2 ln L, BIC = p ln n - 2 ln L (p estimated parameters). Likelihood-ratio test of
    a threshold variant against its two-parameter base: 2 (ln L3 - ln L2) ~ chi-square(1); the
    base fixes the threshold at 0, an interior point when min(x) > 0, but the reference
    distribution is only approximate because threshold estimation is non-regular for small
    shapes (Smith 1985); for exponential2 the estimate is not the likelihood maximum (see the
    module notes) and the statistic is floored at 0. Families needing positive data are
    skipped, with the reason in ``error``, when a reading is <= 0.

    References
    ----------
    D'Agostino, R. B. & Stephens, M. A. (1986). Goodness-of-Fit Techniques. Dekker. Tables 4.9,
    4.14, 4.17, 4.22.
    Smith, R. L. (1985). Maximum likelihood estimation in a class of nonregular cases.
    Biometrika 72, 67-90.
    Cheng, R. C. H. & Amin, N. A. K. (1983). Estimating parameters in continuous univariate
    distributions with a shifted origin. JRSS B 45, 394-403.
    Minka, T. (2002). Estimating a gamma distribution. Technical note, Microsoft Research.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(1).weibull(2.0, size=100) * 10.0
    >>> r = fit_all(x, families=["normal", "weibull", "lognormal"])
    >>> [row.id for row in r.rows]
    ['weibull', 'lognormal', 'normal']
    >>> round(r.best.parameters["shape"], 3)
    1.893
    """
    x = np.sort(clean_sample(x))
    ids = _family_ids(families)
    models: dict[str, FittedModel] = {}
    errors: dict[str, str] = {}
    for fid in ids:
        try:
            models[fid] = FAMILIES[fid]._fit_sorted(x)
        except AnalysisError as exc:
            errors[fid] = str(exc)
    rows = [_row(fid, models, errors) for fid in ids]
    rows.sort(key=_rank_key)
    out = tuple(FitRow(rank=i + 1, **r) for i, r in enumerate(rows))
    return Ranking(rows=out, models=models, n=int(x.size))


def _family_ids(families) -> list[str]:
    """The family ids to fit: all, or the ones named (each must be known)."""
    if families is None:
        return list(FAMILIES)
    if isinstance(families, str):
        families = [families]
    ids = list(families)
    unknown = [f for f in ids if f not in FAMILIES]
    if unknown:
        raise StudyInputError(
            f"`families` contains unknown id(s) {unknown}; choose from {list(FAMILIES)}."
        )
    return ids


def _row(fid: str, models: dict, errors: dict) -> dict:
    """One ranking row: the fit's criteria and its likelihood-ratio test against its base
    family, or the error that stopped the fit."""
    fam = FAMILIES[fid]
    m = models.get(fid)
    if m is None:
        return dict(
            id=fid,
            label=fam.label,
            n_params=fam.n_params,
            loglik=None,
            aic=None,
            bic=None,
            ad_statistic=None,
            ad_p_value=None,
            ad_p_text=None,
            lrt_p_value=None,
            lrt_against=None,
            converged=False,
            error=errors[fid],
            note=None,
        )
    lrt = None
    against = None
    base = models.get(fam.base_id) if fam.base_id else None
    if base is not None:
        stat = max(0.0, 2.0 * (m.loglik - base.loglik))
        lrt = float(special.chdtrc(1.0, stat))
        against = base.name
    return dict(
        id=fid,
        label=fam.label,
        n_params=fam.n_params,
        loglik=m.loglik,
        aic=m.aic,
        bic=m.bic,
        ad_statistic=m.ad_statistic,
        ad_p_value=m.ad_p_value,
        ad_p_text=m.ad_p_text,
        lrt_p_value=lrt,
        lrt_against=against,
        converged=m.converged,
        error=None,
        note=m.note,
    )


def _rank_key(r: dict) -> tuple:
    """Sort key: converged fits first, then by AIC, then by the Anderson-Darling statistic."""
    if r["error"] is not None:
        return (2, 0.0, 0.0)
    ad = r["ad_statistic"] if math.isfinite(r["ad_statistic"]) else math.inf
    return (0 if r["converged"] else 1, r["aic"], ad)
