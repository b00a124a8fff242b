"""The lognormal family and its 3-parameter (threshold) variant."""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from studykit.stats.families.base import (
    LOG_2PI,
    Family,
    ThresholdVariant,
    ad_from_logs,
    ad_p_normal,
    threshold_of,
)
from studykit.stats.lazy import PositiveFrozen
from studykit.stats.solvers import (
    mean_sd,
    rowsum,
)


def _exp(v):
    return math.exp(v) if isinstance(v, float) else np.exp(v)


class Lognormal(Family):
    id, label = "lognormal", "Lognormal"
    param_names: tuple[str, ...] = ("log_mean", "log_sd")
    order = 2
    support = "positive"
    ad_p_source: str | None = (
        "D'Agostino & Stephens (1986) Table 4.9, case 3, on log(x - threshold)"
    )

    def _estimate(self, x):
        ly = np.log(x)
        m, sd = mean_sd(ly)
        return {"log_mean": m, "log_sd": sd}, True, None

    def frozen(self, p):
        return PositiveFrozen(
            "lognorm", p["log_sd"], loc=threshold_of(p), scale=math.exp(p["log_mean"])
        )

    def _loc_scale(self, p):
        return threshold_of(p), math.exp(p["log_mean"])

    def _standard_draws(self, p, size, rng):
        return np.exp(p["log_sd"] * rng.standard_normal(size))

    def _z(self, x, p):
        return (np.log(x - threshold_of(p)) - p["log_mean"]) / p["log_sd"]

    def _logpdf(self, x, p):
        ly = np.log(x - threshold_of(p))
        z = (ly - p["log_mean"]) / p["log_sd"]
        return -0.5 * z * z - math.log(p["log_sd"]) - 0.5 * LOG_2PI - ly

    def _logcdf(self, x, p):
        return special.log_ndtr(self._z(x, p))

    def _logsf(self, x, p):
        return special.log_ndtr(-self._z(x, p))

    def _ad(self, xs, p):
        ly = np.log(xs - threshold_of(p))
        m, sd = mean_sd(ly, 1)
        z = (ly - m) / sd
        return ad_from_logs(special.log_ndtr(z), special.log_ndtr(-z))

    def _ad_p(self, a2, n, xs, p):
        return ad_p_normal(a2, n)

    def quantile(self, q, p):
        return np.exp(p["log_sd"] * special.ndtri(q)) * _exp(p["log_mean"]) + threshold_of(p)

    @staticmethod
    def fit_rows(ys, start=None, *, rough=False):
        ly = np.log(ys)
        n = ys.shape[1]
        sly = rowsum(ly)
        mu = sly / n
        c = ly - mu[:, None]
        var = rowsum(c * c) / n
        with np.errstate(divide="ignore"):
            ll = -sly - 0.5 * n * (LOG_2PI + np.log(var)) - 0.5 * n
        return ll, {"log_mean": mu, "log_sd": np.sqrt(var)}, None

    @staticmethod
    def dtheta_rows(ys, p):
        r = 1.0 / ys
        return rowsum(r) + rowsum((np.log(ys) - p["log_mean"][:, None]) * r) / p["log_sd"] ** 2

    def refit_rows(self, block, shared=None):  # closed form, all samples at once
        ok = block.max(axis=1) > block.min(axis=1)
        ok &= block.min(axis=1) > 0
        ly = np.log(np.where(ok[:, None], block, 1.0))
        return {"log_mean": ly.mean(axis=1), "log_sd": ly.std(axis=1)}, ok, ()


class Lognormal3(ThresholdVariant, Lognormal):
    id, label = "lognormal3", "Lognormal with threshold"
    order = 3
    param_names = ("log_mean", "log_sd", "threshold")
    support, base_id, ad_p_source, minimum_n = "real", "lognormal", None, 5


FAMILY_OBJECTS = (Lognormal(), Lognormal3())
