"""The density, distribution and survival functions of a fitted model without importing
``scipy.stats``.

:func:`fitted_pdf` gives ``model.pdf(x)`` (the scipy.stats frozen distribution's ``pdf``) bit
for bit: scipy's own steps (standardise, parameter and support masks, the distribution's
``_pdf`` on the points inside, divided by the scale) with the formulas of the scipy.stats
distribution each family maps to, so a process that only draws the fitted curve (a figure
worker of the PDF report) does not import ``scipy.stats`` (about 0.5 s and 60 MB).
:func:`fitted_cdf`, :func:`fitted_sf` and :func:`fitted_ppf` do the same for ``cdf``, ``sf``
and ``ppf`` (scipy's ``rv_continuous`` steps and each distribution's ``_cdf``, ``_sf``,
``_ppf``); the fitted model's own ``cdf``, ``sf`` and ``ppf`` use them, so a study of a fitted family (its model-scale chart,
expected PPM, bootstrap bounds) runs without ``scipy.stats`` too: a batch or report worker
never loads it for the families.
``tests/test_families_density.py`` compares each with ``scipy.stats`` for every family.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy import special

from studykit.stats.families.base import threshold_of

__all__ = ["fitted_cdf", "fitted_pdf", "fitted_ppf", "fitted_sf"]

#: sqrt(2 pi), as scipy.stats' normal density divides by it.
_NORM_C = np.sqrt(2 * np.pi)


def _norm(x):
    return np.exp(-(x**2) / 2.0) / _NORM_C


def _lognorm(x, s):
    # scipy: apply_where(x != 0, (x, s), ..., fill_value=-inf), then exp; x > 0 here
    x, s = np.broadcast_arrays(x, s)
    out = np.full(x.shape, -np.inf)
    nz = x != 0
    xs, ss = x[nz], s[nz]
    out[nz] = -(np.log(xs) ** 2) / (2 * ss**2) - np.log(ss * xs * np.sqrt(2 * np.pi))
    return np.exp(out)


def _weibull(x, c):
    return c * pow(x, c - 1) * np.exp(-pow(x, c))


def _gamma(x, a):
    return np.exp(special.xlogy(a - 1.0, x) - x - special.gammaln(a))


def _expon(x):
    return np.exp(-x)


def _gumbel_l(x):
    return np.exp(x - np.exp(x))


def _gumbel_r(x):
    return np.exp(-x - np.exp(-x))


def _halfnorm(x):
    return np.sqrt(2.0 / np.pi) * np.exp(-x * x / 2.0)


def _logistic(x):
    y = -np.abs(x)
    return np.exp(y - 2.0 * special.log1p(np.exp(y)))


def _fisk(x, c):
    # scipy: burr._pdf(x, c, 1.0), an apply_where over the broadcast (x, c, d)
    x, c, d = np.broadcast_arrays(x, c, np.asarray(1.0))
    out = np.empty(x.shape)
    zero = x == 0
    xz, cz, dz = x[zero], c[zero], d[zero]
    out[zero] = cz * dz * (xz ** (cz * dz - 1)) / (1 + xz**cz)
    xo, co, do = x[~zero], c[~zero], d[~zero]
    out[~zero] = co * do * (xo ** (-co - 1.0)) / ((1 + xo ** (-co)) ** (do + 1.0))
    return out


def _forms(p: dict):
    """family id -> (standard density, shape parameters, location, scale, lower end of the
    support or None for the whole line, open support): the scipy.stats distribution each
    family's ``frozen`` makes."""
    t = threshold_of(p)
    return {
        "normal": lambda: (_norm, (), p["mean"], p["sd"], None, False),
        "lognormal": lambda: (
            _lognorm,
            (p["log_sd"],),
            t,
            math.exp(p["log_mean"]),
            0.0,
            True,
        ),
        "weibull": lambda: (_weibull, (p["shape"],), t, p["scale"], 0.0, False),
        "gamma": lambda: (_gamma, (p["shape"],), t, p["scale"], 0.0, False),
        "exponential": lambda: (_expon, (), t, p["scale"], 0.0, False),
        "logistic": lambda: (_logistic, (), p["location"], p["scale"], None, False),
        "loglogistic": lambda: (_fisk, (p["shape"],), t, p["scale"], 0.0, False),
        "sev": lambda: (_gumbel_l, (), p["location"], p["scale"], None, False),
        "lev": lambda: (_gumbel_r, (), p["location"], p["scale"], None, False),
        "halfnormal": lambda: (_halfnorm, (), 0.0, p["scale"], 0.0, False),
    }


def fitted_pdf(model, x):
    """``model.pdf(x)`` of a :class:`~studykit.stats.families.base.FittedModel`, bit for bit,
    without importing ``scipy.stats``: the same standardisation ``(x - loc) / scale``, zero
    outside the support (``[a, inf]``; ``(a, inf)`` for the lognormal), NaN where the
    standardised value is NaN, and the scipy distribution's ``_pdf`` divided by the scale
    inside. A family without a form here, or parameters scipy would reject, go to
    ``model.pdf`` itself.

    >>> from studykit.stats.families import FAMILIES
    >>> m = FAMILIES["weibull3"].fit([2.1, 3.4, 1.7, 2.8, 3.9, 2.2, 3.1, 2.6, 3.3])
    >>> x = np.linspace(0.0, 5.0, 11)
    >>> bool(np.array_equal(fitted_pdf(m, x), m.pdf(x)))
    True
    """
    make = _forms(model.parameters).get(model.family.base_id or model.name)  # variant: its base
    if make is None:
        return model.pdf(x)
    standard, shapes, loc, scale, lower, open_support = make()
    if not (scale > 0 and all(s > 0 for s in shapes)):
        return model.pdf(x)  # scipy's own answer (NaN) for invalid parameters
    x = np.asarray(x)
    z = np.asarray(
        (x - np.asarray(loc)) / np.asarray(scale), dtype=np.promote_types(x.dtype, float)
    )
    with np.errstate(invalid="ignore"):
        if lower is None:
            inside = (-np.inf <= z) & (z <= np.inf)
        elif open_support:
            inside = (lower < z) & (z < np.inf)
        else:
            inside = (lower <= z) & (z <= np.inf)
    out = np.zeros(z.shape, z.dtype)
    np.putmask(out, np.isnan(z), np.nan)
    if np.any(inside):
        args = [np.asarray(s) for s in shapes]
        np.place(out, inside, standard(np.extract(inside, z), *args) / np.asarray(scale))
    return out[()]


# -- distribution function and survival function ------------------------------------------------
#: family id -> (scipy's ``_cdf``, ``_sf``) of the standard form (``scipy/stats/_continuous_
#: distns.py``, scipy 1.17: the same expressions, the same special functions).
_TAILS: dict[str, tuple[Callable[..., Any], Callable[..., Any]]] = {
    "normal": (lambda z: special.ndtr(z), lambda z: special.ndtr(-z)),
    "lognormal": (
        lambda z, s: special.ndtr(np.log(z) / s),
        lambda z, s: special.ndtr(-(np.log(z) / s)),
    ),
    "weibull": (lambda z, c: -special.expm1(-pow(z, c)), lambda z, c: np.exp(-pow(z, c))),
    "gamma": (lambda z, a: special.gammainc(a, z), lambda z, a: special.gammaincc(a, z)),
    "exponential": (lambda z: -special.expm1(-z), lambda z: np.exp(-z)),
    "logistic": (lambda z: special.expit(z), lambda z: special.expit(-z)),
    "loglogistic": (
        lambda z, c: (1 + z ** (-c)) ** (-1.0),
        lambda z, c: np.exp(np.log1p(-((1 + z ** (-c)) ** (-1.0)))),
    ),
    "sev": (lambda z: -special.expm1(-np.exp(z)), lambda z: np.exp(-np.exp(z))),
    "lev": (lambda z: np.exp(-np.exp(-z)), lambda z: -special.expm1(-np.exp(-z))),
    "halfnormal": (lambda z: special.erf(z / np.sqrt(2)), lambda z: 2 * special.ndtr(-z)),
}


def _tail(model, x, upper: bool):
    """scipy.stats' ``rv_continuous.cdf`` (``upper`` False) or ``sf`` (True) of the model's
    frozen distribution, step for step: standardise, NaN where the standardised value is NaN,
    the open support ``(a, inf)`` evaluated, 1 at or beyond the far end (``x >= inf`` for the
    cdf, ``x <= a`` for the sf); None where this module has no form (the caller asks scipy)."""
    fid = model.family.base_id or model.name
    tails = _TAILS.get(fid)
    if tails is None:
        return None
    _standard, shapes, loc, scale, lower, _open = _forms(model.parameters)[fid]()
    if not (scale > 0 and all(s > 0 for s in shapes)):
        return None  # scipy's own answer (NaN) for invalid parameters
    a = -np.inf if lower is None else lower
    x = np.asarray(x)
    z = np.asarray(
        (x - np.asarray(loc)) / np.asarray(scale), dtype=np.promote_types(x.dtype, float)
    )
    with np.errstate(invalid="ignore"):
        inside = (a < z) & (z < np.inf)
        far = (z <= a) if upper else (z >= np.inf)
    out = np.zeros(z.shape, z.dtype)
    np.place(out, np.isnan(z), np.nan)
    np.place(out, far, 1.0)
    if np.any(inside):
        args = [np.atleast_1d(np.asarray(s)) for s in shapes]  # as scipy's argsreduce
        zs = z.ravel() if np.all(inside) else np.extract(inside, z)
        np.place(out, inside, tails[1 if upper else 0](zs, *args))
    return out[()]


def fitted_cdf(model, x):
    """``model.dist.cdf(x)`` bit for bit without importing ``scipy.stats`` (scipy's steps, see
    :func:`_tail`); scipy itself for a family without a form here or invalid parameters.

    >>> from studykit.stats.families import FAMILIES
    >>> m = FAMILIES["lognormal3"].fit([2.1, 3.4, 1.7, 2.8, 3.9, 2.2, 3.1, 2.6, 3.3, 5.2])
    >>> x = np.linspace(0.0, 6.0, 13)
    >>> bool(np.array_equal(fitted_cdf(m, x), m.dist.cdf(x)))
    True
    """
    out = _tail(model, x, upper=False)
    return model.dist.cdf(x) if out is None else out


def fitted_sf(model, x):
    """``model.dist.sf(x)`` bit for bit without importing ``scipy.stats`` (see
    :func:`fitted_cdf`)."""
    out = _tail(model, x, upper=True)
    return model.dist.sf(x) if out is None else out


#: family id -> scipy's ``_ppf`` of the standard form (scipy 1.17, the same expressions).
_QUANTILES: dict[str, Callable[..., Any]] = {
    "normal": lambda q: special.ndtri(q),
    "lognormal": lambda q, s: np.exp(s * special.ndtri(q)),
    "weibull": lambda q, c: pow(-special.log1p(-q), 1.0 / c),
    "gamma": lambda q, a: special.gammaincinv(a, q),
    "exponential": lambda q: -special.log1p(-q),
    "logistic": lambda q: special.logit(q),
    "loglogistic": lambda q, c: (q ** (-1.0 / 1.0) - 1) ** (-1.0 / c),
    "sev": lambda q: np.log(-special.log1p(-q)),
    "lev": lambda q: -np.log(-np.log(q)),
    "halfnormal": lambda q: special.ndtri((1 + q) / 2.0),
}


def fitted_ppf(model, q):
    """``model.dist.ppf(q)`` bit for bit without importing ``scipy.stats``: scipy's
    ``rv_continuous.ppf`` steps (NaN outside [0, 1], the support's ends at 0 and 1, the
    distribution's ``_ppf`` times the scale plus the location inside); scipy itself for a
    family without a form here or invalid parameters.

    >>> from studykit.stats.families import FAMILIES
    >>> m = FAMILIES["weibull"].fit([2.1, 3.4, 1.7, 2.8, 3.9, 2.2, 3.1, 2.6, 3.3])
    >>> q = np.array([0.0, 0.00135, 0.5, 0.99865, 1.0])
    >>> bool(np.array_equal(fitted_ppf(m, q), m.dist.ppf(q)))
    True
    """
    fid = model.family.base_id or model.name
    quantile = _QUANTILES.get(fid)
    if quantile is None:
        return model.dist.ppf(q)
    _standard, shapes, loc, scale, lower, _open = _forms(model.parameters)[fid]()
    if not (scale > 0 and all(s > 0 for s in shapes) and loc == loc):
        return model.dist.ppf(q)  # scipy's own answer (NaN) for invalid parameters
    q = np.asarray(q)
    loc_a, scale_a = np.asarray(loc), np.asarray(scale)
    with np.errstate(invalid="ignore"):
        inside = (0 < q) & (q < 1)
    out = np.full(np.shape(inside), fill_value=np.nan)
    a = -np.inf if lower is None else lower
    np.place(out, q == 0, np.atleast_1d(a * scale_a + loc_a))
    np.place(out, q == 1, np.atleast_1d(np.inf * scale_a + loc_a))
    if np.any(inside):
        args = [np.atleast_1d(np.asarray(s)) for s in shapes]  # as scipy's argsreduce
        qs = q.ravel() if np.all(inside) else np.extract(inside, q)
        values = quantile(qs, *args) * np.atleast_1d(scale_a) + np.atleast_1d(loc_a)
        np.place(out, inside, values)
    return out[()]
