"""The Weibull family and its 3-parameter (threshold) variant."""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from studykit.stats.families.base import (
    AD_EV,
    Family,
    ThresholdVariant,
    ad_from_logs,
    ad_p_table,
    refit_by_fit_rows,
    shape_scale_row,
    threshold_of,
)
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.solvers import (
    add_reduce,
    all_reduce,
    any_reduce,
    max_reduce,
    rowsum,
)


def _weibull_fit(logy: np.ndarray, k0: float | None = None) -> tuple[float, float, float]:
    """ML shape and scale of a two-parameter Weibull from log data; returns (k, scale, loglik).

    Root of g(k) = sum(w z)/sum(w) - 1/k, z = log y - mean(log y), w = exp(k z) (g increases
    in k), by Newton steps kept inside a bracket.
    """
    n = logy.size
    slog = float(add_reduce(logy))
    mlog = slog / n
    z = logy - mlog
    zmax = max_reduce(z)
    zs = z - zmax
    if k0 is None or not (k0 > 0):
        sd = math.sqrt(float(z @ z) / n)
        k0 = 1.2825 / sd if sd > 0 else 1.0
    k = k0
    lo, hi = 0.0, math.inf
    for _ in range(100):
        w = np.exp(k * zs)
        sw = add_reduce(w)
        wz = w @ z
        mz = wz / sw
        g = mz - 1.0 / k
        vz = (w @ (z * z)) / sw - mz * mz
        if g < 0:
            lo = k
        else:
            hi = k
        dg = vz + 1.0 / (k * k)
        k_new = k - g / dg
        newton = lo <= k_new <= hi
        if not newton:
            k_new = 0.5 * (lo + hi) if math.isfinite(hi) else 2.0 * k
        step = abs(k_new - k)
        k = k_new
        # a Newton step below 1e-7 k leaves an error of order step^2 (quadratic convergence:
        # below 1e-13 k), any step below 1e-12 k ends the bisection
        if step <= 1e-12 * k or (newton and step <= 1e-7 * k):
            break
    w = np.exp(k * zs)
    log_scale = mlog + zmax + math.log(float(add_reduce(w)) / n) / k
    loglik = n * math.log(k) - n * k * log_scale + (k - 1.0) * slog - n
    return k, math.exp(log_scale), loglik


class Weibull(Family):
    id, label = "weibull", "Weibull"
    param_names: tuple[str, ...] = ("shape", "scale")
    order = 4
    warm_in_theta = True  # the shape is close to linear in theta across a grid step
    support = "positive"
    ad_p_source: str | None = (
        "Stephens (1977); D'Agostino & Stephens (1986) Table 4.17 (extreme value "
        "on log x), interpolated"
    )

    def _estimate(self, x):
        k, scale, _ = _weibull_fit(np.log(x))
        return {"shape": k, "scale": scale}, True, None

    def frozen(self, p):
        return stats.weibull_min(p["shape"], loc=threshold_of(p), scale=p["scale"])

    def _standard_draws(self, p, size, rng):  # scipy's inverse-cdf default
        return pow(-special.log1p(-rng.uniform(size=size)), 1.0 / p["shape"])

    def _t(self, x, p):
        return ((x - threshold_of(p)) / p["scale"]) ** p["shape"]

    def _logpdf(self, x, p):
        k, lam = p["shape"], p["scale"]
        ly = np.log((x - threshold_of(p)) / lam)
        return math.log(k / lam) + (k - 1.0) * ly - np.exp(k * ly)

    def _logcdf(self, x, p):
        t = self._t(x, p)
        return np.log(-np.expm1(-t))

    def _logsf(self, x, p):
        return -self._t(x, p)

    def _ad(self, xs, p):  # _logcdf and _logsf from one power
        t = self._t(xs, p)
        return ad_from_logs(np.log(-np.expm1(-t)), -t)

    def _ad_p(self, a2, n, xs, p):
        return ad_p_table(a2, n, AD_EV)

    def quantile(self, q, p):
        return pow(-special.log1p(-q), 1.0 / p["shape"]) * p["scale"] + threshold_of(p)

    @staticmethod
    def fit_rows(ys, start=None, *, rough=False):
        """Row-wise Weibull ML (same root as :func:`_weibull_fit`); ``rough=True`` (the profile
        grid) stops at a relative Newton step of 1e-2 instead of 1e-6 (quadratic convergence: the
        shape is then within about 1e-4 of the root, the log-likelihood within n 1e-8: ample to
        rank grid points a decade apart).

        Each row stops at its own convergence (a converged row takes no further step), so a
        row's result does not depend on the other rows of ``ys``."""
        n = ys.shape[1]
        ly = np.log(ys)
        slog = rowsum(ly)
        z = ly - (slog / n)[:, None]
        zmax = max_reduce(z, 1)
        zs = z - zmax[:, None]
        k_all = (1.2825 / np.sqrt(rowsum(z * z) / n) if start is None else start[0]).copy()
        tol = 1e-2 if rough else 1e-6
        k = k_all
        lo = np.zeros_like(k)
        hi = np.full_like(k, np.inf)
        active = None  # row numbers of the working rows (None: all, in order)
        frozen = None  # working rows already converged (they take no further step)
        zs_a, z_a = zs, z
        # two work arrays for the whole iteration (the same element-wise operations as
        # w = exp(k zs), wz = w z, wz z: same bits, without three new row blocks per step);
        # their first rows hold the rows still iterating
        w_buf, wz_buf = np.empty_like(zs), np.empty_like(zs)
        for _ in range(100):
            m = k.size
            w, wz = w_buf[:m], wz_buf[:m]
            np.exp(np.multiply(k[:, None], zs_a, out=w), out=w)
            sw = rowsum(w)
            np.multiply(w, z_a, out=wz)
            mz = rowsum(wz) / sw
            g = mz - 1.0 / k
            vz = rowsum(np.multiply(wz, z_a, out=w)) / sw - mz * mz
            below = g < 0
            lo = np.where(below, k, lo)
            hi = np.where(below, hi, k)
            k_new = k - g / (vz + 1.0 / (k * k))
            bad = ~((k_new >= lo) & (k_new <= hi))
            # converged: a step below 1e-10 k, or a Newton step below 1e-6 k (the next correction
            # is of order step^2, below 1e-11 k)
            k_new = np.where(bad, np.where(np.isfinite(hi), 0.5 * (lo + hi), 2.0 * k), k_new)
            step = np.abs(k_new - k)
            done = (step <= 1e-10 * k) | (~bad & (step <= tol * k))
            if frozen is not None:  # converged earlier: keeps its shape
                k_new = np.where(frozen, k, k_new)
                done |= frozen
            k = k_new
            if active is None:
                k_all = k.copy()
            else:
                k_all[active] = k
            if all_reduce(done):
                break
            # the converged rows leave the working arrays once a quarter of them has
            # converged (a copy of the rest); until then they stay in, frozen
            if 4 * np.count_nonzero(done) >= k.size:
                keep = ~done
                active = np.flatnonzero(keep) if active is None else active[keep]
                k, lo, hi = k[keep], lo[keep], hi[keep]
                zs_a, z_a = zs.take(active, axis=0), z.take(active, axis=0)
                frozen = None
            elif any_reduce(done):
                frozen = done
        k = k_all
        w = np.exp(k[:, None] * zs)
        log_scale = slog / n + zmax + np.log(rowsum(w) / n) / k
        ll = n * np.log(k) - n * k * log_scale + (k - 1.0) * slog - n
        return ll, {"shape": k, "scale": np.exp(log_scale)}, (k,)

    @staticmethod
    def dtheta_rows(ys, p):
        k, lam = p["shape"][:, None], p["scale"][:, None]
        r = np.divide(1.0, ys)
        # t = (ys / lam) ** k, then t * r, in one work array (same element-wise operations)
        t = np.power(np.divide(ys, lam), k)
        return p["shape"] * rowsum(np.multiply(t, r, out=t)) - (p["shape"] - 1.0) * rowsum(r)

    @staticmethod
    def dtheta2_rows(ys, p):
        """:meth:`dtheta_rows` g (the same arithmetic), its derivative along the profile with
        respect to the threshold and that of the shape, in one pass over ``ys``: (g, g', dk/dtheta).

        g'(theta) = l_tt - l_kt^2 / l_kk of the log-likelihood with the scale concentrated out
        (lambda^k = sum y^k / n), at the inner solution ``p``: the Schur complement of the
        inner block of the Hessian (implicit function theorem; what Newton's method on the
        profile slope needs); dk/dtheta = -l_kt / l_kk (a warm start of the shape at the next
        threshold). With t = (y/lambda)^k, T = sum t, r = 1/y, l = log y:
        l_tt = n k (k (sum t r)^2 - (k-1) sum t r^2 T) / T^2 - (k-1) sum r^2,
        l_kk = -n/k^2 - n (sum t l^2 T - (sum t l)^2) / T^2,
        l_kt = n ((k sum t l r + sum t r) T - k sum t r sum t l) / T^2 - sum r."""
        n = ys.shape[1]
        k = p["shape"]
        r = np.divide(1.0, ys)
        t = np.power(np.divide(ys, p["scale"][:, None]), k[:, None])
        tr = t * r
        s_r, s_tr = rowsum(r), rowsum(tr)
        g = k * s_tr - (k - 1.0) * s_r  # dtheta_rows
        ly = np.log(ys)
        tl = t * ly
        s_t, s_tl = rowsum(t), rowsum(tl)
        s_trr, s_tll, s_tlr = rowsum(tr * r), rowsum(tl * ly), rowsum(tl * r)
        s_rr = rowsum(r * r)
        t2 = s_t * s_t
        l_tt = n * k * (k * s_tr * s_tr - (k - 1.0) * s_trr * s_t) / t2 - (k - 1.0) * s_rr
        l_kk = -n / (k * k) - n * (s_tll * s_t - s_tl * s_tl) / t2
        l_kt = n * ((k * s_tlr + s_tr) * s_t - k * s_tr * s_tl) / t2 - s_r
        return g, l_tt - l_kt * l_kt / l_kk, -l_kt / l_kk

    @staticmethod
    def fit_one(y, start=None):
        """:meth:`Weibull.fit_rows` for one row by the scalar :func:`_weibull_fit` (same root)."""
        k, scale, ll = _weibull_fit(np.log(y), None if start is None else float(start[0][0]))
        return shape_scale_row(k, scale, ll)

    def refit_rows(self, block, shared=None):
        return refit_by_fit_rows(self, block)


class Weibull3(ThresholdVariant, Weibull):
    id, label = "weibull3", "Weibull with threshold"
    order = 5
    shared_grid_start = True
    param_names = ("shape", "scale", "threshold")
    support, base_id, ad_p_source, minimum_n = "real", "weibull", None, 5


FAMILY_OBJECTS = (Weibull(), Weibull3())
