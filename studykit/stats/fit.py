"""Fitted distribution models and their ranking, fast enough to run on every redraw.

Each family is fitted by maximum likelihood with closed forms or one-dimensional roots where
they exist, a safeguarded two-parameter Newton iteration for the log-concave location-scale
families, and a profile likelihood over the threshold for the three-parameter variants. The
shared base :class:`Family` turns the estimates into a :class:`FittedModel` with the
log-likelihood, AIC, BIC and the Anderson-Darling statistic (with a p-value where the
literature gives one); :func:`fit_all` fits several families and ranks them.

Family ids (:data:`FAMILIES`)
-----------------------------
``normal``, ``lognormal``, ``lognormal3``, ``weibull``, ``weibull3``, ``gamma``, ``gamma3``,
``exponential``, ``exponential2``, ``logistic``, ``loglogistic``, ``loglogistic3``,
``sev`` (smallest extreme value), ``lev`` (largest extreme value), ``halfnormal``.

Estimation
----------
normal, lognormal, exponential, halfnormal
    Closed-form maximum likelihood (standard deviation with divisor n).
weibull
    Shape k from the 1-D root of the profile score
    ``sum(y^k log y)/sum(y^k) - 1/k - mean(log y) = 0`` (increasing in k), by safeguarded
    Newton steps; scale ``(mean(y^k))^(1/k)``.
gamma
    Shape k from ``log k - digamma(k) = log(mean y) - mean(log y)`` (Minka's starting value and
    Newton iteration on 1/k); scale ``mean/k``.
logistic, loglogistic, sev, lev
    Newton iteration with analytic gradient and Hessian in the parametrisation
    ``a = 1/scale, b = location/scale``, where the log-likelihood of a log-concave density is
    concave, with step halving so the likelihood never decreases. Loglogistic is the logistic
    fit to ``log x``.
threshold variants (lognormal3, weibull3, gamma3, loglogistic3)
    Profile likelihood ``l(theta) = max over the other parameters`` as a function of the
    distance ``d = min(x) - theta`` on a logarithmic grid from ``1e-4 s`` to ``1e3 s``
    (s = sample standard deviation), then one finer vectorised pass around the best grid
    point and the root of the profile slope (envelope theorem: the partial derivative in theta
    at the inner maximum); see :func:`studykit.stats.solvers.profile_threshold`.
    The likelihood of these families is unbounded as theta approaches min(x) when the shape
    lets the density go to infinity at the threshold (Smith 1985). We take the largest
    *interior* local maximum of the profile (the "local maximum likelihood" estimate of
    Smith 1985 and Cheng & Amin 1983); if the profile only rises towards min(x), the family is
    reported as not fitted. If the profile keeps rising towards the far end of the grid, the
    data show no skew for this family (it tends to its two-parameter limit, e.g. lognormal3 to
    normal): the fit is kept at the grid end and flagged ``converged=False``.
exponential2
    The maximum likelihood threshold is min(x) itself, which puts one reading at F = 0 and
    makes the Anderson-Darling statistic infinite, so we use the unbiased estimates
    ``theta = x(1) - (mean - x(1))/(n-1)``, ``scale = n (mean - x(1))/(n-1)``
    (Johnson, Kotz & Balakrishnan 1994, ch. 19).

Ranking rule (:func:`fit_all`)
------------------------------
Fitted models are sorted by AIC (smallest first); models flagged ``converged=False`` come
after all converged ones; families that could not be fitted (unsuitable data, no interior
maximum) come last with their reason. Ties in AIC are broken by the smaller Anderson-Darling
statistic. AIC is used because it exists for every family and charges for the threshold.

Where the code lives
--------------------
This module is the public face of the fitting code; it holds no family itself.

* :mod:`studykit.stats.families`: one module per family (its :class:`Family` subclass with
  the estimator, distribution mapping, quantiles, random draws, row-wise solver and
  bootstrap refit); :data:`FAMILIES` collects them;
* :mod:`studykit.stats.solvers`: the shared numerical solvers (location-scale Newton,
  profile likelihood over the threshold, its many-sample version, the row-cell bound);
* :mod:`studykit.stats.ranking`: :func:`fit_all` and its table;
* :mod:`studykit.stats.bootstrap`: the parametric bootstrap of a fitted model's indices.
"""

from __future__ import annotations

from studykit.stats.families import FAMILIES
from studykit.stats.families.base import (  # noqa: F401 - used by the tests
    AD_EXPON,
    Family,
    FittedModel,
    ad_p_table,
    clean_sample,
)
from studykit.stats.ranking import RANKING_RULE, ROW_FIELDS, FitRow, Ranking, fit_all
from studykit.stats.solvers import GRID_DECADES, ROW_CELLS, rows_per_group  # noqa: F401

__all__ = [
    "FAMILIES",
    "Family",
    "FittedModel",
    "FitRow",
    "Ranking",
    "fit_all",
    "ROW_FIELDS",
    "RANKING_RULE",
]

# the row-wise two-parameter solvers by their former names (tests/test_fit.py checks them)
_inner_weibull = FAMILIES["weibull"].fit_rows
_inner_gamma = FAMILIES["gamma"].fit_rows
_inner_loglogistic = FAMILIES["loglogistic"].fit_rows
