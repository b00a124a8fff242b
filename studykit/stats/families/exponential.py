"""The exponential family and its 2-parameter (threshold) variant."""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from studykit.stats.families.base import (
    AD_EXPON,
    Family,
    ad_p_table,
    threshold_of,
)
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.solvers import (
    add_reduce,
)


class Exponential(Family):
    id, label = "exponential", "Exponential"
    param_names: tuple[str, ...] = ("scale",)
    order = 8
    support = "positive"
    ad_p_source: str | None = (
        "D'Agostino & Stephens (1986) Table 4.14 (scale estimated), interpolated"
    )

    def _estimate(self, x):
        return {"scale": float(add_reduce(x)) / x.size}, True, None

    def frozen(self, p):
        return stats.expon(loc=threshold_of(p), scale=p["scale"])

    def _standard_draws(self, p, size, rng):
        return rng.standard_exponential(size)

    def _logpdf(self, x, p):
        return -math.log(p["scale"]) - (x - threshold_of(p)) / p["scale"]

    def _logcdf(self, x, p):
        return np.log(-np.expm1(-(x - threshold_of(p)) / p["scale"]))

    def _logsf(self, x, p):
        return -(x - threshold_of(p)) / p["scale"]

    def _ad_p(self, a2, n, xs, p):
        return ad_p_table(a2, n, AD_EXPON)

    def quantile(self, q, p):
        return -special.log1p(-q) * p["scale"] + threshold_of(p)

    def refit_rows(self, block, shared=None):  # closed form, all samples at once
        ok = block.max(axis=1) > block.min(axis=1)
        ok &= block.min(axis=1) > 0
        return {"scale": block.mean(axis=1)}, ok, ()


class Exponential2(Exponential):
    id, label = "exponential2", "Exponential with threshold"
    order = 9
    param_names = ("scale", "threshold")
    support, base_id, ad_p_source = "real", "exponential", None

    def _estimate(self, x):
        n = x.size
        x1 = float(x.min())
        scale = n * (float(add_reduce(x)) / n - x1) / (n - 1)
        note = (
            "unbiased estimates (the likelihood maximum puts the threshold at the smallest reading)"
        )
        return {"scale": scale, "threshold": x1 - scale / n}, True, note

    def _ad_p(self, a2, n, xs, p):
        return None, None

    def refit_rows(self, block, shared=None):  # closed form, all samples at once
        n = block.shape[1]
        ok = block.max(axis=1) > block.min(axis=1)
        x1 = block.min(axis=1)
        scale = n * (block.mean(axis=1) - x1) / (n - 1)
        return {"scale": scale, "threshold": x1 - scale / n}, ok, ()


FAMILY_OBJECTS = (Exponential(), Exponential2())
