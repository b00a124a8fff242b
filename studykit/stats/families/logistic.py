"""The logistic family (Newton iteration of :func:`studykit.stats.solvers.ls_fit`)."""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from studykit.stats.families.base import (
    AD_LOGISTIC,
    Family,
    ad_p_table,
)
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.solvers import (
    ls_fit,
    mean_sd,
    median_1d,
)


def logistic_terms(z):
    t = np.tanh(0.5 * z)
    az = np.abs(z)
    return -az - 2.0 * np.log1p(np.exp(-az)), -t, -0.5 * (1.0 - t * t)


def logistic_logpdf(z):
    """The first term of :func:`logistic_terms` alone (same expression)."""
    az = np.abs(z)
    return -az - 2.0 * np.log1p(np.exp(-az))


def logistic_start(x):
    return float(median_1d(x)), mean_sd(x)[1] * math.sqrt(3.0) / math.pi


class Logistic(Family):
    id, label, param_names = "logistic", "Logistic", ("location", "scale")
    order = 10
    ad_p_source = "Stephens (1979); D'Agostino & Stephens (1986) Table 4.22, interpolated"

    def _estimate(self, x):
        loc, s, _, _, conv = ls_fit(x, logistic_terms, *logistic_start(x))
        return {"location": loc, "scale": s}, conv, None

    def frozen(self, p):
        return stats.logistic(p["location"], p["scale"])

    def _loc_scale(self, p):
        return p["location"], p["scale"]

    def _standard_draws(self, p, size, rng):
        return rng.logistic(size=size)

    def _logpdf(self, x, p):
        return logistic_logpdf((x - p["location"]) / p["scale"]) - math.log(p["scale"])

    def _logcdf(self, x, p):
        return -np.logaddexp(0.0, -(x - p["location"]) / p["scale"])

    def _logsf(self, x, p):
        return -np.logaddexp(0.0, (x - p["location"]) / p["scale"])

    def _ad_p(self, a2, n, xs, p):
        return ad_p_table(a2, n, AD_LOGISTIC)

    def quantile(self, q, p):
        return special.logit(q) * p["scale"] + p["location"]


FAMILY_OBJECTS = (Logistic(),)
