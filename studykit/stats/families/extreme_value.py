"""The smallest and largest extreme value families (Newton iteration of
:func:`studykit.stats.solvers.ls_fit`)."""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from studykit.stats.families.base import (
    AD_EV,
    Family,
    ad_from_logs,
    ad_p_table,
)
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.solvers import (
    ls_fit,
    mean_sd,
)


def _sev_terms(z):
    e = np.exp(z)
    return z - e, 1.0 - e, -e


def _lev_terms(z):
    e = np.exp(-z)
    return -z - e, e - 1.0, -e


def _sev_start(x):
    m, sd = mean_sd(x)
    s = sd * math.sqrt(6.0) / math.pi
    return m + 0.5772156649 * s, s


def _lev_start(x):
    m, sd = mean_sd(x)
    s = sd * math.sqrt(6.0) / math.pi
    return m - 0.5772156649 * s, s


class SEV(Family):
    id, label, param_names = "sev", "Smallest extreme value", ("location", "scale")
    order = 13
    ad_p_source = "Stephens (1977); D'Agostino & Stephens (1986) Table 4.17, interpolated"

    def _estimate(self, x):
        loc, s, _, _, conv = ls_fit(x, _sev_terms, *_sev_start(x))
        return {"location": loc, "scale": s}, conv, None

    def frozen(self, p):
        return stats.gumbel_l(p["location"], p["scale"])

    def _loc_scale(self, p):
        return p["location"], p["scale"]

    def _standard_draws(self, p, size, rng):  # scipy's inverse-cdf default
        return np.log(-special.log1p(-rng.uniform(size=size)))

    def _z(self, x, p):
        return (x - p["location"]) / p["scale"]

    def _logpdf(self, x, p):
        z = self._z(x, p)
        return z - np.exp(z) - math.log(p["scale"])

    def _logcdf(self, x, p):
        return np.log(-np.expm1(-np.exp(self._z(x, p))))

    def _logsf(self, x, p):
        return -np.exp(self._z(x, p))

    def _ad(self, xs, p):  # _logcdf and _logsf from one exponential
        e = np.exp(self._z(xs, p))
        return ad_from_logs(np.log(-np.expm1(-e)), -e)

    def _ad_p(self, a2, n, xs, p):
        return ad_p_table(a2, n, AD_EV)

    def quantile(self, q, p):
        return np.log(-special.log1p(-q)) * p["scale"] + p["location"]


class LEV(SEV):
    id, label = "lev", "Largest extreme value"
    order = 14

    def _estimate(self, x):
        loc, s, _, _, conv = ls_fit(x, _lev_terms, *_lev_start(x))
        return {"location": loc, "scale": s}, conv, None

    def frozen(self, p):
        return stats.gumbel_r(p["location"], p["scale"])

    def _standard_draws(self, p, size, rng):  # scipy's inverse-cdf default
        return -np.log(-np.log(rng.uniform(size=size)))

    def _logpdf(self, x, p):
        z = self._z(x, p)
        return -z - np.exp(-z) - math.log(p["scale"])

    def _logcdf(self, x, p):
        return -np.exp(-self._z(x, p))

    def _logsf(self, x, p):
        return np.log(-np.expm1(-np.exp(-self._z(x, p))))

    def _ad(self, xs, p):  # _logcdf and _logsf from one exponential
        e = np.exp(-self._z(xs, p))
        return ad_from_logs(-e, np.log(-np.expm1(-e)))

    def quantile(self, q, p):
        return -np.log(-np.log(q)) * p["scale"] + p["location"]


FAMILY_OBJECTS = (SEV(), LEV())
