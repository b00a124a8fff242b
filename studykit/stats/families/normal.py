"""The normal family (closed-form maximum likelihood)."""

from __future__ import annotations

import math

from scipy import special

from studykit.stats.families.base import (
    LOG_2PI,
    Family,
    ad_from_logs,
    ad_p_normal,
)
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.solvers import (
    mean_sd,
)


class Normal(Family):
    id, label, param_names = "normal", "Normal", ("mean", "sd")
    order = 1
    ad_p_source = "D'Agostino & Stephens (1986) Table 4.9, case 3"

    def _estimate(self, x):
        m, sd = mean_sd(x)
        return {"mean": m, "sd": sd}, True, None

    def frozen(self, p):
        return stats.norm(p["mean"], p["sd"])

    def _loc_scale(self, p):
        return p["mean"], p["sd"]

    def _standard_draws(self, p, size, rng):
        return rng.standard_normal(size)

    def _logpdf(self, x, p):
        z = (x - p["mean"]) / p["sd"]
        return -0.5 * z * z - math.log(p["sd"]) - 0.5 * LOG_2PI

    def _logcdf(self, x, p):
        return special.log_ndtr((x - p["mean"]) / p["sd"])

    def _logsf(self, x, p):
        return special.log_ndtr((p["mean"] - x) / p["sd"])

    def _ad(self, xs, p):
        m, sd = mean_sd(xs, 1)
        z = (xs - m) / sd
        return ad_from_logs(special.log_ndtr(z), special.log_ndtr(-z))

    def _ad_p(self, a2, n, xs, p):
        return ad_p_normal(a2, n)

    def quantile(self, q, p):
        return special.ndtri(q) * p["sd"] + p["mean"]

    def refit_rows(self, block, shared=None):  # closed form, all samples at once
        ok = block.max(axis=1) > block.min(axis=1)
        return {"mean": block.mean(axis=1), "sd": block.std(axis=1)}, ok, ()


FAMILY_OBJECTS = (Normal(),)
