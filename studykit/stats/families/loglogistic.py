"""The loglogistic family and its 3-parameter (threshold) variant."""

from __future__ import annotations

import math

import numpy as np

from studykit.stats.families.base import (
    AD_LOGISTIC,
    Family,
    ThresholdVariant,
    ad_from_logs,
    ad_p_table,
    refit_by_fit_rows,
    threshold_of,
)
from studykit.stats.families.logistic import logistic_logpdf, logistic_start, logistic_terms
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.solvers import (
    add_reduce,
    all_reduce,
    any_reduce,
    ls_fit,
    median_1d,
    rowsum,
)


class Loglogistic(Family):
    id, label = "loglogistic", "Loglogistic"
    param_names: tuple[str, ...] = ("shape", "scale")
    order = 11
    support = "positive"
    ad_p_source: str | None = (
        "Stephens (1979); D'Agostino & Stephens (1986) Table 4.22 on log x, interpolated"
    )

    def _estimate(self, x):
        ly = np.log(x)
        loc, s, _, _, conv = ls_fit(ly, logistic_terms, *logistic_start(ly))
        return {"shape": 1.0 / s, "scale": math.exp(loc)}, conv, None

    def frozen(self, p):
        return stats.fisk(p["shape"], loc=threshold_of(p), scale=p["scale"])

    def _standard_draws(self, p, size, rng):  # scipy's inverse-cdf default (fisk = burr d=1)
        q = rng.uniform(size=size)
        return (q ** (-1.0 / 1.0) - 1) ** (-1.0 / p["shape"])

    def _w(self, x, p):
        return p["shape"] * (np.log(x - threshold_of(p)) - math.log(p["scale"]))

    def _logpdf(self, x, p):
        ly = np.log(x - threshold_of(p))
        w = p["shape"] * (ly - math.log(p["scale"]))
        return logistic_logpdf(w) + math.log(p["shape"]) - ly

    def _logcdf(self, x, p):
        return -np.logaddexp(0.0, -self._w(x, p))

    def _logsf(self, x, p):
        return -np.logaddexp(0.0, self._w(x, p))

    def _ad(self, xs, p):  # _logcdf and _logsf from one log
        w = self._w(xs, p)
        return ad_from_logs(-np.logaddexp(0.0, -w), -np.logaddexp(0.0, w))

    def _ad_p(self, a2, n, xs, p):
        return ad_p_table(a2, n, AD_LOGISTIC)

    def quantile(self, q, p):
        return (q ** (-1.0 / 1.0) - 1) ** (-1.0 / p["shape"]) * p["scale"] + threshold_of(p)

    @staticmethod
    def fit_rows(ys, start=None, *, rough=False):
        """Row-wise loglogistic ML: logistic Newton iteration (see :func:`studykit.stats.solvers.ls_fit`) per row;
        ``rough=True`` (the profile grid) stops after a full step from a decrement below 1e-3
        instead of 1e-5.

        Each row stops at its own convergence (a converged row takes no further step), so a
        row's result does not depend on the other rows of ``ys``: a row stops after its full Newton
        step from a decrement below the tolerance, after its step from a decrement of at most
        1e-9, or at a decrement of at most 1e-20 (no step); a step that lowers its likelihood is
        halved (at most 39 times) for that row alone."""
        n = ys.shape[1]
        ly = np.log(ys)
        m = rowsum(ly) / n
        c = ly - m[:, None]
        sd = np.sqrt(rowsum(c * c) / n)
        v_all = c / sd[:, None]
        vv_all = v_all * v_all
        a_all, b_all = _row_start(v_all, n, start)  # updated in place

        # sums of v and v^2 per row (n and 0 up to rounding): the Hessian sums below use
        # sum (1 - t^2) w = sum w - sum t^2 w, with t = tanh(z/2)
        s_v_all, s_vv_all = rowsum(v_all), rowsum(vv_all)
        tol = 1e-3 if rough else 1e-5

        def ev(v, a, b):
            return _row_terms(v, a, b, n)

        ll_all, t1, q1 = ev(v_all, a_all, b_all)
        active = np.arange(a_all.size)
        v, vv, s_v, s_vv = v_all, vv_all, s_v_all, s_vv_all
        a, b, ll = a_all, b_all, ll_all
        for _ in range(100):
            da, db, dec = _newton_step(n, a, t1, q1, v, vv, s_v, s_vv)
            done = ~(dec > 1e-20)  # (NaN included) no step left to take
            # the full Newton step, halved (at most 39 times) for each row whose likelihood
            # it lowers; a row's values change in place once its step is accepted
            t = np.ones_like(a)
            good = np.zeros(a.size, dtype=bool)
            trying = np.flatnonzero(~done)
            for _ in range(40):
                if not trying.size:
                    break
                whole = trying.size == a.size
                a_t, b_t, ll_t = (a, b, ll) if whole else (a[trying], b[trying], ll[trying])
                t_t = t if whole else t[trying]
                an = a_t + t_t * (da if whole else da[trying])
                an_ok = an > 0
                bn = b_t + t_t * (db if whole else db[trying])
                lln, t1n, q1n = ev(v if whole else v[trying], np.where(an_ok, an, a_t), bn)
                g = an_ok & (lln >= ll_t - 1e-12 * np.abs(ll_t))
                if whole and all_reduce(g):  # every row takes its step: no copies
                    a, b, ll, t1, q1 = an, bn, lln, t1n, q1n
                    good[:] = True
                    break
                ok = trying[g]
                a[ok], b[ok], ll[ok] = an[g], bn[g], lln[g]
                t1[ok], q1[ok] = t1n[g], q1n[g]
                good[ok] = True
                trying = trying[~g]
                t[trying] *= 0.5
            # a full Newton step from a decrement below the tolerance leaves ~1e-10
            # a step from a decrement of at most 1e-9 is the last one
            done |= (good & (t == 1.0) & (dec < tol)) | (dec <= 1e-9)
            a_all[active], b_all[active], ll_all[active] = a, b, ll
            if all_reduce(done):
                break
            if any_reduce(done):  # freeze the converged rows: only the others iterate on
                keep = ~done
                active = active[keep]
                a, b, ll, t1, q1 = a[keep], b[keep], ll[keep], t1[keep], q1[keep]
                v, vv = v_all.take(active, axis=0), vv_all.take(active, axis=0)
                s_v, s_vv = s_v_all[active], s_vv_all[active]
        a, b, ll = a_all, b_all, ll_all
        scale = sd / a
        loc = m + b * scale
        ll_orig = ll - n * np.log(sd) - rowsum(ly)
        return ll_orig, {"shape": 1.0 / scale, "scale": np.exp(loc)}, (a, b)

    @staticmethod
    def dtheta_rows(ys, p):
        c = p["shape"][:, None]
        z = c * (np.log(ys) - np.log(p["scale"])[:, None])
        return rowsum((1.0 + c * np.tanh(0.5 * z)) / ys)

    @staticmethod
    def fit_one(y, start=None):
        """:meth:`Loglogistic.fit_rows` for one row by the scalar :func:`studykit.stats.solvers.ls_fit` (same root)."""
        ly = np.log(y)
        if start is None:
            loc, s, ll, ab, _ = ls_fit(ly, logistic_terms, *logistic_start(ly))
        else:
            loc, s, ll, ab, _ = ls_fit(
                ly, logistic_terms, 0.0, 1.0, start=(float(start[0][0]), float(start[1][0]))
            )
        return (
            np.array([ll - float(add_reduce(ly))]),
            {"shape": np.array([1.0 / s]), "scale": np.array([math.exp(loc)])},
            (np.array([ab[0]]), np.array([ab[1]])),
        )

    def refit_rows(self, block, shared=None):
        return refit_by_fit_rows(self, block)


class Loglogistic3(ThresholdVariant, Loglogistic):
    id, label = "loglogistic3", "Loglogistic with threshold"
    order = 12
    param_names = ("shape", "scale", "threshold")
    support, base_id, ad_p_source, minimum_n = "real", "loglogistic", None, 5


FAMILY_OBJECTS = (Loglogistic(), Loglogistic3())


def _row_start(v_all, n, start):
    """Starting (a, b) per row: location = median, scale = mean absolute deviation from the
    median / (2 ln 2) (the logistic's E|X - mu| = 2 s ln 2; less swayed than the sd by the one far
    reading of a threshold close to min(x): half the Newton steps on the profile grid), or the
    given ``start`` (copied)."""
    if start is None:
        med = median_1d(v_all, axis=1)
        a_all = (2.0 * math.log(2.0) * n) / rowsum(np.abs(v_all - med[:, None]))
        return a_all, med * a_all
    a_all, b_all = (np.array(x, dtype=float) for x in start)
    return a_all, b_all


def _row_terms(v, a, b, n):
    """Log-likelihood (standardised units), t = tanh(z/2) and t^2 at z = a v - b; the
    log-density derivatives of :func:`logistic_terms` are -t and -(1 - t^2)/2."""
    z = a[:, None] * v - b[:, None]
    az = np.abs(z)
    t = np.tanh(0.5 * z)
    lg = rowsum(az) + 2.0 * rowsum(np.log1p(np.exp(-az)))
    return n * np.log(a) - lg, t, t * t


def _newton_step(n, a, t1, q1, v, vv, s_v, s_vv):
    """The Newton step (da, db) in (a, b) per row and its decrement."""
    ga = n / a - rowsum(t1 * v)
    gb = rowsum(t1)
    haa = -0.5 * (s_vv - rowsum(q1 * vv)) - n / (a * a)
    hab = 0.5 * (s_v - rowsum(q1 * v))
    hbb = -0.5 * (n - rowsum(q1))
    det = haa * hbb - hab * hab
    da = -(hbb * ga - hab * gb) / det
    db = -(haa * gb - hab * ga) / det
    return da, db, ga * da + gb * db
