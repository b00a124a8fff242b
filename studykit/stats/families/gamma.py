"""The gamma family and its 3-parameter (threshold) variant."""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from studykit.errors import AnalysisError
from studykit.stats.families.base import (
    TINY,
    Family,
    ThresholdVariant,
    ad_from_logs,
    refit_by_fit_rows,
    shape_scale_row,
    threshold_of,
)
from studykit.stats.lazy import PositiveFrozen
from studykit.stats.solvers import (
    add_reduce,
    rowsum,
)


def _gamma_fit(y: np.ndarray, k0: float | None = None) -> tuple[float, float, float]:
    """ML shape and scale of a gamma distribution; returns (k, scale, loglik).

    Root of log k - digamma(k) = s, s = log(mean y) - mean(log y); Minka (2002) start and
    Newton iteration on 1/k.
    """
    n = y.size
    mean = float(add_reduce(y)) / n
    ly = np.log(y)
    sly = float(add_reduce(ly))
    s = math.log(mean) - sly / n
    if not s > 1e-14:
        raise AnalysisError(
            f"Gamma: the relative spread of the data (sd/mean = {y.std() / mean:.3g}) is too "
            "small to estimate a gamma shape in double precision; the normal family describes "
            "such data (or fit the threshold variant)."
        )
    if s < 1e-4:  # k > ~5000: log k - digamma(k) = 1/(2k) + 1/(12k^2) + O(k^-4), solved for k
        k0 = (math.sqrt(0.25 + s / 3.0) + 0.5) / (2.0 * s)
    elif k0 is None or not (k0 > 0):
        k0 = (3.0 - s + math.sqrt((s - 3.0) ** 2 + 24.0 * s)) / (12.0 * s)
    k = k0
    for _ in range(0 if s < 1e-4 else 100):
        f = math.log(k) - special.digamma(k) - s
        fp = 1.0 / k - special.zeta(2.0, k)
        k_new = 1.0 / (1.0 / k + f / (k * k * fp))
        if not k_new > 0:
            k_new = 0.5 * k
        if abs(k_new - k) <= 1e-12 * k:
            k = k_new
            break
        k = k_new
    scale = mean / k
    loglik = (k - 1.0) * sly - n * k - n * k * math.log(scale) - n * special.gammaln(k)
    return k, scale, float(loglik)


class Gamma(Family):
    id, label = "gamma", "Gamma"
    param_names: tuple[str, ...] = ("shape", "scale")
    order = 6
    support = "positive"

    def _estimate(self, x):
        k, scale, _ = _gamma_fit(x)
        return {"shape": k, "scale": scale}, True, None

    def frozen(self, p):
        return PositiveFrozen("gamma", p["shape"], loc=threshold_of(p), scale=p["scale"])

    def _standard_draws(self, p, size, rng):
        return rng.standard_gamma(p["shape"], size)

    def _logpdf(self, x, p):
        k, s = p["shape"], p["scale"]
        y = x - threshold_of(p)
        return (k - 1.0) * np.log(y) - y / s - k * math.log(s) - special.gammaln(k)

    def _logcdf(self, x, p):
        return np.log(
            np.maximum(special.gammainc(p["shape"], (x - threshold_of(p)) / p["scale"]), TINY)
        )

    def _logsf(self, x, p):
        return np.log(
            np.maximum(special.gammaincc(p["shape"], (x - threshold_of(p)) / p["scale"]), TINY)
        )

    def _ad(self, xs, p):
        # each sorted reading needs one incomplete gamma function, not two: below the
        # median P = gammainc (then ln(1 - F) = log1p(-P)), above it Q = gammaincc (then
        # ln F = log1p(-Q)); both log1p terms stay accurate as P, Q < ~0.6
        k = p["shape"]
        z = (xs - threshold_of(p)) / p["scale"]
        cut = int(np.searchsorted(z, k * (1.0 - 1.0 / (9.0 * k)) ** 3))  # Wilson-Hilferty
        lower, upper = z[:cut], z[cut:]
        pl = special.gammainc(k, lower)
        qu = special.gammaincc(k, upper)
        logcdf = np.concatenate((np.log(np.maximum(pl, TINY)), np.log1p(-qu)))
        logsf = np.concatenate((np.log1p(-pl), np.log(np.maximum(qu, TINY))))
        return ad_from_logs(logcdf, logsf)

    def quantile(self, q, p):
        return special.gammaincinv(p["shape"], q) * p["scale"] + threshold_of(p)

    @staticmethod
    def fit_rows(ys, start=None, *, rough=False):
        """Row-wise gamma ML (same root and iteration as :func:`_gamma_fit`); ``rough=True``
        (the profile grid) stops at a relative Newton step of 1e-2 instead of 1e-5 (the shape is
        then within about 1e-4 of the root, as for :meth:`Weibull.fit_rows`).

        Each row stops at its own convergence (a converged row takes no further step), so a
        row's result does not depend on the other rows of ``ys``."""
        n = ys.shape[1]
        mean = rowsum(ys) / n
        sly = rowsum(np.log(ys))
        s_all = np.log(mean) - sly / n
        s_all = np.where(s_all > 0, s_all, np.nan)
        large = s_all < 1e-4  # asymptotic root, as in _gamma_fit
        k_all = np.where(
            large,
            (np.sqrt(0.25 + s_all / 3.0) + 0.5) / (2.0 * s_all),
            (3.0 - s_all + np.sqrt((s_all - 3.0) ** 2 + 24.0 * s_all)) / (12.0 * s_all),
        )
        # the asymptotic root takes no Newton step; the other rows iterate until each converges
        active = np.flatnonzero(~large)
        k, s = k_all[active], s_all[active]
        for _ in range(50):
            if not active.size:
                break
            f = np.log(k) - special.digamma(k) - s
            fp = 1.0 / k - special.zeta(2.0, k)
            with np.errstate(divide="ignore", invalid="ignore"):
                k_new = 1.0 / (1.0 / k + f / (k * k * fp))
            newton = k_new > 0
            k_new = np.where(newton, k_new, 0.5 * k)
            # rounding noise of s limits very large k to 1e-8; a Newton step below 1e-5 k leaves a
            # correction of order step^2 (quadratic convergence)
            step = np.abs(k_new - k)
            done = (step <= 1e-8 * k) | (newton & (step <= (1e-2 if rough else 1e-5) * k))
            k_all[active] = k = k_new
            keep = ~done
            active, k, s = active[keep], k[keep], s[keep]
        k = k_all
        scale = mean / k
        ll = (k - 1.0) * sly - n * k - n * k * np.log(scale) - n * special.gammaln(k)
        # the shapes start the scalar iteration of single thresholds (Gamma.fit_one); the
        # row-wise iteration itself always starts from Minka's value
        return ll, {"shape": k, "scale": scale}, (k,)

    @staticmethod
    def dtheta_rows(ys, p):
        return ys.shape[1] / p["scale"] - (p["shape"] - 1.0) * rowsum(1.0 / ys)

    @staticmethod
    def fit_one(y, start=None):
        """:meth:`Gamma.fit_rows` for one row by the scalar :func:`_gamma_fit` (same root)."""
        try:
            k, scale, ll = _gamma_fit(y, None if start is None else float(start[0][0]))
        except AnalysisError:  # no spread left in double precision: not a candidate
            k = scale = ll = math.nan
        return shape_scale_row(k, scale, ll)

    def refit_rows(self, block, shared=None):
        return refit_by_fit_rows(self, block)


class Gamma3(ThresholdVariant, Gamma):
    id, label = "gamma3", "Gamma with threshold"
    order = 7
    param_names = ("shape", "scale", "threshold")
    support, base_id, minimum_n = "real", "gamma", 5


FAMILY_OBJECTS = (Gamma(), Gamma3())
