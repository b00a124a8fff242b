"""The half-normal (zero-bounded) family (closed-form maximum likelihood)."""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from studykit.stats.families.base import (
    TINY,
    Family,
)
from studykit.stats.lazy import scipy_stats as stats


class Halfnormal(Family):
    id, label, param_names = "halfnormal", "Half-normal (zero-bounded)", ("scale",)
    order = 15
    support = "nonnegative"

    def _estimate(self, x):
        return {"scale": math.sqrt(float(x @ x) / x.size)}, True, None

    def frozen(self, p):
        return stats.halfnorm(0.0, p["scale"])

    def _loc_scale(self, p):
        return 0.0, p["scale"]

    def _standard_draws(self, p, size, rng):
        return abs(rng.standard_normal(size=size))

    def _logpdf(self, x, p):
        z = x / p["scale"]
        return 0.5 * math.log(2.0 / math.pi) - math.log(p["scale"]) - 0.5 * z * z

    def _logcdf(self, x, p):
        return np.log(np.maximum(special.erf(x / (p["scale"] * math.sqrt(2.0))), TINY))

    def _logsf(self, x, p):
        return math.log(2.0) + special.log_ndtr(-x / p["scale"])

    def quantile(self, q, p):
        return special.ndtri((1 + q) / 2.0) * p["scale"] + 0.0

    def refit_rows(self, block, shared=None):  # closed form, all samples at once
        n = block.shape[1]
        ok = block.max(axis=1) > block.min(axis=1)
        ok &= block.min(axis=1) >= 0
        return {"scale": np.sqrt(np.einsum("ij,ij->i", block, block) / n)}, ok, ()


FAMILY_OBJECTS = (Halfnormal(),)
