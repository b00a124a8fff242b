"""Numerical solvers shared by the distribution families of :mod:`studykit.stats.families`.

* small numpy helpers (sums without the methods' Python wrappers, mean/sd, median);
* :func:`ls_fit`: maximum likelihood of a log-concave location-scale family by a safeguarded
  two-parameter Newton iteration;
* :func:`profile_threshold`: the profile likelihood over the threshold of a 3-parameter
  family, built on the family's row-wise two-parameter solver (``fit_rows``,
  ``dtheta_rows``, ``fit_one``);
* :func:`threshold_rows`: the same search for many samples at once (the bootstrap);
* :data:`ROW_CELLS` / :func:`rows_per_group`: the bound on the cells one row-wise evaluation
  holds, which keeps memory O(ROW_CELLS + n); :data:`CACHE_CELLS`: the smaller groups the
  bootstrap's solver calls work on (speed: the work arrays stay in cache; same numbers).

The method notes (sources, convergence rules) are in :mod:`studykit.stats.fit`.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from studykit.errors import AnalysisError

add_reduce = np.add.reduce
# the ufuncs behind ndarray.max/all/any (same results, without the methods' Python wrappers)
max_reduce, all_reduce, any_reduce = np.maximum.reduce, np.logical_and.reduce, np.logical_or.reduce


def mean_sd(x, ddof=0):
    """(mean, standard deviation) of a 1-D array: the sums of x.mean() and x.std(ddof=ddof)
    without their Python wrappers (fit_all calls them many times on small arrays)."""
    n = x.size
    m = float(add_reduce(x)) / n
    c = x - m
    return m, math.sqrt(float(add_reduce(c * c)) / (n - ddof))


def median_1d(x, axis=-1):
    """np.median(x, axis) (same values: the middle element, or the mean of the two middle
    elements) by one partition, without np.median's generic machinery."""
    n = x.shape[axis]
    lo, hi = (n - 1) // 2, n // 2
    part = np.partition(x, (lo, hi), axis=axis)
    a, b = np.take(part, lo, axis=axis), np.take(part, hi, axis=axis)
    return a if lo == hi else (a + b) / 2.0


def rowsum(a):
    # the ufunc directly: same sums as a.sum(axis=1) without the method's Python wrapper
    return add_reduce(a, 1)


def ls_fit(u: np.ndarray, terms, mu0: float, s0: float, *, start=None):
    """ML location and scale of a log-concave location-scale family by Newton's method.

    Works in a = sd/scale, b = (location - mean)/scale on standardised data v, where the
    log-likelihood sum log g(a v - b) + n log a is concave; step halving keeps it increasing.
    Stops when the Newton decrement (the predicted gain of the step) is below 1e-9, or after
    a full Newton step from a decrement below 1e-5 (quadratic convergence: the decrement
    left is of order 1e-10).
    Returns (location, scale, loglik, (a, b), converged).
    """
    n = u.size
    m = float(add_reduce(u)) / n
    c = u - m
    sd = math.sqrt(float(c @ c) / n)
    v = c / sd
    if start is not None:
        a, b = start
    else:
        a, b = sd / s0, (mu0 - m) / s0
    vv = v * v

    def evaluate(a, b):
        lg, d1, d2 = terms(a * v - b)
        return float(add_reduce(lg)) + n * math.log(a), d1, d2

    ll, d1, d2 = evaluate(a, b)
    converged = False
    for _ in range(200):
        ga = float(d1 @ v) + n / a
        gb = -float(add_reduce(d1))
        haa = float(d2 @ vv) - n / (a * a)
        hab = -float(d2 @ v)
        hbb = float(add_reduce(d2))
        det = haa * hbb - hab * hab
        if det > 0 and haa < 0:
            da = -(hbb * ga - hab * gb) / det
            db = -(haa * gb - hab * ga) / det
        else:  # not expected for log-concave families; fall back to a gradient step
            da, db = ga / n, gb / n
        decrement = ga * da + gb * db
        if decrement < 1e-20:
            converged = True
            break
        t = 1.0
        while True:
            an = a + t * da
            if an > 0:
                lln, d1n, d2n = evaluate(an, b + t * db)
                if lln >= ll - 1e-12 * abs(ll):
                    break
            t *= 0.5
            if t < 1e-12:
                break
        if t < 1e-12:
            converged = True
            break
        a, b, ll, d1, d2 = an, b + t * db, lln, d1n, d2n
        if decrement < 1e-5 and t == 1.0:  # the next decrement is of order 1e-10
            converged = True
            break
    scale = sd / a
    loc = m + b * scale
    return loc, scale, ll - n * math.log(sd), (a, b), converged


# ---------------------------------------------------------------------------------------------
# Profile likelihood over the threshold
# ---------------------------------------------------------------------------------------------
GRID_DECADES = np.linspace(-4.0, 3.0, 8)
_REFINE_POINTS = 33
# fractions of the bracket at the points of a pass (np.linspace without its overhead)
_FULL_PASS = np.arange(_REFINE_POINTS) / (_REFINE_POINTS - 1)
_HALF_PASS = np.arange(_REFINE_POINTS // 2 + 1) / (_REFINE_POINTS // 2)
_ZERO_POINTS = 4


#: Most cells (rows x readings) a row-wise evaluation holds in one array: 2**21 doubles, 16 MB.
#: Above it the rows (thresholds of a profile pass, bootstrap samples) are evaluated in groups,
#: so memory is O(ROW_CELLS + n) whatever the number of rows; below it one call as before
#: (identical numbers). The row-wise Newton loops stop each row at its own convergence, so
#: grouped rows give the numbers of one call (bit-identical; tests/test_row_fits.py).
ROW_CELLS = 1 << 21


def rows_per_group(n_cols: int, cells: int | None = None) -> int:
    """Rows of ``n_cols`` readings that fit in ``cells`` (default :data:`ROW_CELLS`); >= 1."""
    return max(1, (ROW_CELLS if cells is None else cells) // max(1, int(n_cols)))


def _slope_zero(us, slopes, k):
    """Zero of the profile slope between us[k] and us[k + 1] (slope > 0 >= next slope).

    Inverse cubic interpolation through the four points around the sign change (u as a
    cubic in the slope, Lagrange form, evaluated at slope 0) when the slope falls strictly
    across them; otherwise, or if the result leaves the bracket, linear interpolation.
    On the 33-point pass the cubic's error (order h^4, h = 0.144) is about that of linear
    interpolation on a pass 16 times finer, which it replaces.
    """
    u0, u1, s0, s1 = float(us[k]), float(us[k + 1]), float(slopes[k]), float(slopes[k + 1])
    lin = u0 + (u1 - u0) * s0 / (s0 - s1)
    p = min(_ZERO_POINTS, us.size)
    j = min(max(k - (p - 2) // 2, 0), us.size - p)
    uu = [float(v) for v in us[j : j + p]]
    ss = [float(v) for v in slopes[j : j + p]]
    if not all(math.isfinite(v) for v in ss) or not all(ss[i] > ss[i + 1] for i in range(p - 1)):
        return lin
    u = 0.0
    for i in range(p):
        w = uu[i]
        for m in range(p):
            if m != i:
                w *= ss[m] / (ss[m] - ss[i])
        u += w
    return u if u0 <= u <= u1 else lin


class _Profile:
    """The profile of one sample at trial thresholds, warm-started from the previous pass."""

    def __init__(self, x: np.ndarray, family):
        self.x = x
        self.xmin = float(x.min())
        self.family = family
        self.warm: dict = {}

    def __call__(self, us, rough=False):
        """(dtheta, log-likelihoods, params) at the thresholds xmin - exp(us)."""
        x, xmin, family, warm = self.x, self.xmin, self.family, self.warm
        gap = np.exp(us)  # min(x) - theta
        at = gap if family.warm_in_theta else us
        start = None
        if warm:  # interpolate the previous pass's solutions: fewer Newton steps
            start = tuple(np.interp(at, warm["at"], c) for c in warm["state"])
        group = rows_per_group(x.size)
        if us.size == 1:  # one threshold: the family's one-row fit (less numpy overhead)
            ys = x[None, :] - (xmin - gap)[:, None]
            ll, params, state = family.fit_one(ys[0], start)
            dt = family.dtheta_rows(ys, params)
        elif us.size <= group:
            ys = x[None, :] - (xmin - gap)[:, None]
            ll, params, state = family.fit_rows(ys, start, rough=rough)
            dt = family.dtheta_rows(ys, params)
        else:  # many readings: the thresholds in groups, memory O(ROW_CELLS + n)
            dt, ll, params, state = self._in_groups(gap, start, group, rough)
        if us.size > 1 and state is not None:
            warm["at"], warm["state"] = at, state
        return dt, np.where(np.isfinite(ll), ll, -np.inf), params

    def _in_groups(self, gap, start, group, rough):
        """The fits at many thresholds, ``group`` thresholds at a time."""
        x, xmin, inner, dtheta = self.x, self.xmin, self.family.fit_rows, self.family.dtheta_rows
        parts = []
        for i in range(0, gap.size, group):
            part = slice(i, i + group)
            ys = x[None, :] - (xmin - gap[part])[:, None]
            ll_p, p_p, st_p = inner(
                ys, None if start is None else tuple(c[part] for c in start), rough=rough
            )
            parts.append((ll_p, p_p, st_p, dtheta(ys, p_p)))
            del ys
        ll = np.concatenate([q[0] for q in parts])
        params = {k: np.concatenate([q[1][k] for q in parts]) for k in parts[0][1]}
        state = (
            None
            if parts[0][2] is None
            else tuple(np.concatenate([q[2][j] for q in parts]) for j in range(len(parts[0][2])))
        )
        dt = np.concatenate([q[3] for q in parts])
        return dt, ll, params, state


def profile_threshold(x: np.ndarray, family):
    """Maximise the profile log-likelihood over theta < min(x).

    ``family.fit_rows(Y) -> (loglik, params, state)`` fits the two-parameter family to every
    row of Y = x - theta > 0 at once (one row per trial threshold; vectorised, so a pass over
    many thresholds costs about as much as one fit); ``family.dtheta_rows(Y, params)`` is the
    derivative of the log-likelihood with respect to theta at fixed other parameters, which at
    the inner maximum is the derivative of the profile (envelope theorem); ``family.fit_one``
    fits one threshold (a scalar estimator where the family has one); the warm starts of a
    pass are interpolated in theta when ``family.warm_in_theta``, else in u.

    Search in u = log(min(x) - theta): a grid of 8 points from 1e-4 s to 1e3 s (inner fits
    to a looser tolerance, ``rough=True``: the grid only picks the bracket and the starting
    values; every value returned comes from a full-precision fit), then one pass across
    the grid step next to the best point where the profile slope changes sign (17 points; 33
    across both steps around the best point when the grid or that pass shows no sign change;
    the Newton iterations start from the grid's solutions), then the root of the profile derivative between the two points
    where it changes sign: inverse cubic interpolation (:func:`_slope_zero`), then, unless
    the slope there puts the root within 1e-6 in u, one secant step; each candidate is kept
    only if it beats the best point of the pass.
    Returns (theta, params, loglik, converged, note).
    """
    xmin = float(x.min())
    sd = mean_sd(x)[1]
    evaluate = _Profile(x, family)
    us = math.log(sd) + GRID_DECADES * math.log(10.0)
    with np.errstate(all="ignore"):  # slopes at rough grid fits, used only when interior
        grid_dt, lls, params = evaluate(us, rough=True)
    best, note = _grid_best(us, lls, family.label, xmin)
    if best == us.size - 1:
        note = (
            "threshold at the search limit (min(x) - 1000 s): the data show no skew for "
            "this family, which tends to its limiting form"
        )
        _, lls, params = evaluate(us[-1:])  # the grid's inner fits are rough: refit
        return (
            xmin - math.exp(us[-1]),
            {k: float(v[0]) for k, v in params.items()},
            float(lls[0]),
            False,
            note,
        )
    us, slopes, lls, params, best = _refine_pass(evaluate, us, grid_dt, best)
    u_best, p_best, ll_best = _slope_root(evaluate, us, slopes, lls, params, best)
    return xmin - math.exp(u_best), p_best, ll_best, True, note


def _grid_best(us, lls, label: str, xmin: float) -> tuple[int, str | None]:
    """The best grid point; an interior local maximum (with a note) when the best is at the
    smallest gap, where the likelihood can be unbounded."""
    best = int(lls.argmax())
    if best != 0:
        return best, None
    interior = [i for i in range(1, us.size - 1) if lls[i] >= lls[i - 1] and lls[i] >= lls[i + 1]]
    if not interior:
        raise AnalysisError(
            f"{label}: the likelihood keeps rising as the threshold approaches the smallest "
            f"reading ({xmin:g}) and has no interior maximum; use the two-parameter family."
        )
    note = (
        "likelihood unbounded at the smallest reading; the interior local maximum is "
        "used (Smith 1985)"
    )
    return max(interior, key=lambda i: lls[i]), note


def _refine_pass(evaluate, us, grid_dt, best):
    """The pass across the grid step where the profile slope changes sign next to the best
    point (17 points), or both steps around it (33 points) when the grid slopes do not show
    that sign change: (us, slopes, lls, params, best) of the pass."""
    grid_slopes = -np.exp(us) * grid_dt
    full = (us[best - 1], us[best + 1], _FULL_PASS)
    if grid_slopes[best] > 0 >= grid_slopes[best + 1]:
        spans = [(us[best], us[best + 1], _HALF_PASS), full]
    elif grid_slopes[best - 1] > 0 >= grid_slopes[best]:
        spans = [(us[best - 1], us[best], _HALF_PASS), full]
    else:
        spans = [full]
    for lo_u, hi_u, frac in spans:  # the full bracket only if the half shows no sign change
        us = lo_u + (hi_u - lo_u) * frac
        dts, lls, params = evaluate(us)
        slopes = -np.exp(us) * dts
        best = min(max(int(lls.argmax()), 1), us.size - 2)
        if slopes[best - 1] > 0 >= slopes[best] or slopes[best] > 0 >= slopes[best + 1]:
            break
    return us, slopes, lls, params, best


def _slope_root(evaluate, us, slopes, lls, params, best) -> tuple[float, dict, float]:
    """The zero of the profile slope next to the pass's best point (interpolated, then one
    secant step), kept only where it beats that point: (u, params, loglik)."""
    u_best, ll_best = float(us[best]), float(lls[best])
    p_best = {k: float(v[best]) for k, v in params.items()}
    for k in (best - 1, best):
        if slopes[k] > 0 >= slopes[k + 1]:
            u = _slope_zero(us, slopes, k)
            for _ in range(2):  # the interpolated zero, then a secant step if needed
                dt1, ll1, p1 = evaluate(np.array([u]))
                if ll1[0] >= ll_best:
                    u_best, ll_best = u, float(ll1[0])
                    p_best = {k: float(v[0]) for k, v in p1.items()}
                s1 = float(-math.exp(u) * dt1[0])
                j = k + 1 if s1 > 0 else k  # the pass point across the zero from u
                if not (math.isfinite(s1) and s1 != float(slopes[j])):
                    break
                u_next = u - s1 * (u - float(us[j])) / (s1 - float(slopes[j]))
                if (
                    not float(us[k]) <= u_next <= float(us[k + 1])
                    or abs(u_next - u) <= 1e-6
                    or abs(s1 * (u_next - u)) <= 2e-10 * max(1.0, abs(float(ll1[0])))
                ):
                    break  # the step would gain ~ s1 (u_next - u) / 2: below rounding
                u = u_next
            break
    return u_best, p_best, ll_best


def threshold_rows(family, block, shared=None):
    """Refits of a threshold family to every row of ``block`` (bootstrap samples) at once.

    Returns (params dict of arrays or None, ok mask, rows left for the family's own
    one-at-a-time estimator).

    Follows :func:`profile_threshold` for all samples at once: the same grid of 8
    thresholds; a sample whose best grid point is at either end goes to the family's own
    estimator (its special cases); otherwise the maximum inside the bracket of the best grid
    point is the root of the profile slope, found by the Illinois variant of regula falsi to
    1e-9 in u = log(min(x) - threshold) instead of two refining passes of 33 points (a
    sample whose slope does not change sign across the bracket goes to the family's own
    estimator too). A family that gives the slope's derivative (``dtheta2_rows``: the
    Weibull) takes safeguarded Newton steps from the best grid point instead
    (:func:`_newton`: about half the evaluations, roots closer to the slope's zero). With
    ``family.shared_grid_start`` the inner solutions on the first
    sample's grid start every sample's iteration (``shared`` keeps them across blocks).
    """
    n_boot = block.shape[0]
    spread = block.max(axis=1) > block.min(axis=1)
    xmin = block.min(axis=1)
    sd = block.std(axis=1)
    evaluate = functools.partial(_rows_at, block, xmin, family.fit_rows, family.dtheta_rows)
    curvature = getattr(family, "dtheta2_rows", None)
    rows = np.flatnonzero(spread & (sd > 0))
    fallback = set(np.flatnonzero(~(spread & (sd > 0))).tolist())
    shared = {} if shared is None else shared
    slopes_at = functools.partial(_slopes_at, block, xmin, family.dtheta_rows)
    rows, bracket, state = _grid_brackets(
        family, block, rows, sd, shared, evaluate, slopes_at, fallback
    )
    if curvature is None:
        root, unsolved = _illinois(evaluate, rows, *bracket, state)
    else:  # Newton steps on the slope from the best grid point, inside the bracket
        newton_at = functools.partial(evaluate, curvature=curvature)
        root, unsolved = _newton(newton_at, rows, *bracket, state)
    fallback.update(rows[unsolved].tolist())
    good = np.isfinite(root)
    rows, root = rows[good], root[good]
    ok = np.zeros(n_boot, dtype=bool)
    params = None
    if rows.size:
        _, p, _, _ = evaluate(rows, root, slopes=False)
        params = {}
        for k, v in {**p, "threshold": xmin[rows] - np.exp(root)}.items():
            params[k] = np.full(n_boot, np.nan)
            params[k][rows] = v
        ok[rows] = np.all([np.isfinite(v[rows]) for v in params.values()], axis=0)
    fallback.update(np.flatnonzero(~ok & spread).tolist())
    rest = sorted(fallback)
    ok[rest] = False
    return params, ok, rest


#: Most cells (rows x readings) one row-wise solver call of the bootstrap works on: its
#: half-dozen work arrays then stay in a core's cache (2**14 doubles, 128 kB each; a 1 MB
#: L2 cache per core is common). The rows are independent (each stops at its own
#: convergence), so groups give the numbers of one call, bit for bit; a 500 x 8 threshold
#: grid of 125 readings in groups ran about 3x faster than in one call on a 2-core server.
#: 2**14 against 2**15 on that server: about as fast when idle, 1.5x faster when the other
#: core's work shares the caches (Weibull-with-threshold refits of 500 samples of 125).
CACHE_CELLS = 1 << 14


def _rows_at(block, xmin, inner, dtheta, rows, u, start=None, *, slopes=True, curvature=None):
    """(profile slope, params, log-likelihood, inner state) of ``rows`` at thresholds
    xmin - exp(u), in groups of at most :data:`CACHE_CELLS` cells (same numbers as one call);
    with ``slopes=False`` the slope is None (not computed); with ``curvature`` (the family's
    ``dtheta2_rows``) the slope is three rows (:func:`_slope_terms`)."""
    group = rows_per_group(block.shape[1], CACHE_CELLS)
    parts = []
    for i in range(0, rows.size, group):
        part = slice(i, i + group)
        ys = _shifted(block, xmin, rows[part], u[part])
        with np.errstate(all="ignore"):
            ll, params, state = inner(ys, None if start is None else tuple(c[part] for c in start))
        if curvature is not None:
            s = _slope_terms(ys, u[part], curvature, params)
        else:
            s = _slope(ys, u[part], dtheta, params) if slopes else None
        parts.append((s, params, np.where(np.isfinite(ll), ll, -np.inf), state))
        del ys
    if len(parts) == 1:
        return parts[0]
    params = {k: np.concatenate([q[1][k] for q in parts]) for k in parts[0][1]}
    states = [q[3] for q in parts]
    state = (
        None if states[0] is None else tuple(np.concatenate(c) for c in zip(*states, strict=True))
    )
    return (
        np.concatenate([q[0] for q in parts], axis=-1) if slopes else None,
        params,
        np.concatenate([q[2] for q in parts]),
        state,
    )


def _shifted(block, xmin, rows, u):
    """The readings of ``rows`` minus their thresholds xmin - exp(u) (a new array)."""
    ys = block.take(rows, axis=0)  # always a new array: shifted in place
    np.subtract(ys, (xmin[rows] - np.exp(u))[:, None], out=ys)
    return ys


def _slope(ys, u, dtheta, params):
    """The profile slope d loglik / du of the rows ``ys`` (shifted readings) at their inner
    solutions ``params``; NaN where not finite."""
    with np.errstate(all="ignore"):
        s = -np.exp(u) * dtheta(ys, params)
    return np.where(np.isfinite(s), s, np.nan)


def _slope_terms(ys, u, curvature, params):
    """The rows (slope, d(slope)/du, d(inner state)/dtheta) of ``ys`` at u, from the
    family's ``curvature`` (``dtheta2_rows``: g, g' and the state's derivative in one pass):
    the slope is S(u) = -exp(u) g(theta) with g the derivative of the profile log-likelihood
    in the threshold theta = xmin - exp(u), so S'(u) = -exp(u) g + exp(2u) g'(theta)
    = S + exp(2u) g'; NaN where not finite."""
    with np.errstate(all="ignore"):
        g, d2, dstate = curvature(ys, params)
        s = -np.exp(u) * g
        ds = s + np.exp(2.0 * u) * d2
    return np.stack(
        (np.where(np.isfinite(s), s, np.nan), np.where(np.isfinite(ds), ds, np.nan), dstate)
    )


def _slopes_at(block, xmin, dtheta, rows, u, params):
    """:func:`_slope` of ``rows`` at u from inner solutions already found (row-wise: the
    numbers of :func:`_rows_at` for these rows), in groups of :data:`CACHE_CELLS` cells."""
    group = rows_per_group(block.shape[1], CACHE_CELLS)
    out = np.empty(rows.size)
    for i in range(0, rows.size, group):
        part = slice(i, i + group)
        ys = _shifted(block, xmin, rows[part], u[part])
        out[part] = _slope(ys, u[part], dtheta, {k: v[part] for k, v in params.items()})
    return out


def _shared_start(family, block, rows, decades, shared: dict):
    """The first sample's grid solutions, which start every sample's grid (or None)."""
    if family.shared_grid_start and rows.size and "k0" not in shared:
        # every sample comes from the same model: the Weibull shapes solved on one sample's
        # grid start the Newton iteration of all the others (fewer steps, same roots); with
        # the samples in blocks, the first block's first sample starts every block
        data = block[rows[0]]
        u0 = math.log(float(np.std(data))) + decades
        ys0 = data[None, :] - (float(np.min(data)) - np.exp(u0))[:, None]
        with np.errstate(all="ignore"):
            _, _, st0 = family.fit_rows(ys0)
        k0 = np.asarray(st0[0])
        shared["k0"] = k0 if np.all(np.isfinite(k0) & (k0 > 0)) else None
    if family.shared_grid_start and rows.size and shared.get("k0") is not None:
        return (np.tile(shared["k0"], rows.size),)
    return None


def _grid_brackets(family, block, rows, sd, shared, evaluate, slopes_at, fallback: set):
    """The grid of :func:`profile_threshold` for every sample at once: the rows whose slope
    changes sign around an interior best point, their brackets (lo_u, hi_u, lo_s, hi_s,
    solve) and inner states; the other rows are added to ``fallback``."""
    decades = GRID_DECADES * math.log(10.0)
    grid = np.log(sd[rows])[:, None] + decades[None, :]
    grid_start = _shared_start(family, block, rows, decades, shared)
    # the fits at every grid point; the slopes only where the bracket needs them
    _, p_grid, ll_grid, state = evaluate(
        np.repeat(rows, decades.size), grid.ravel(), grid_start, slopes=False
    )
    best = np.argmax(ll_grid.reshape(-1, decades.size), axis=1)
    if not family.shared_grid_start:  # warm starts help the Weibull shape's Newton only
        state = None
    if state is not None:  # the inner solutions at the best grid points start the search
        state = tuple(np.asarray(c).reshape(-1, decades.size) for c in state)
    # best at either end of the grid: the family's own estimator (its special cases)
    edge = (best == 0) | (best == decades.size - 1)
    fallback.update(rows[edge].tolist())
    rows, grid, best = rows[~edge], grid[~edge], best[~edge]
    at = np.arange(rows.size)
    lo_u, hi_u = grid[at, best - 1], grid[at, best + 1]
    flat = np.flatnonzero(~edge)[:, None] * decades.size + (best[:, None] + [-1, 1])
    lo_s, hi_s = (
        slopes_at(
            np.repeat(rows, 2),
            np.column_stack((lo_u, hi_u)).ravel(),
            {k: v[flat.ravel()] for k, v in p_grid.items()},
        )
        .reshape(-1, 2)
        .T
    )
    if state is not None:
        state = tuple(c[~edge][at, best] for c in state)
    bracketed = (lo_s > 0) & (hi_s < 0)
    fallback.update(rows[~bracketed].tolist())
    solve = np.flatnonzero(bracketed)
    lo_u, hi_u, lo_s, hi_s = lo_u[solve], hi_u[solve], lo_s[solve], hi_s[solve]
    if state is not None:
        state = tuple(c[solve] for c in state)
    return rows, (lo_u, hi_u, lo_s, hi_s, solve), state


def _newton(evaluate, rows, lo_u, hi_u, lo_s, hi_s, solve, state):
    """Roots of the profile slope in the brackets by Newton's method on the slope, kept
    inside the bracket: (root per row, NaN where none; the positions in ``rows`` still
    unsolved after 100 steps). ``evaluate`` returns the slope, its derivative in u and the
    derivative of the inner state (the shape) in the threshold; ``lo_s``/``hi_s`` (the
    slopes at the bracket's ends) are not needed.

    Starts at the best grid point (the middle of its bracket, where the inner state was
    solved); each evaluation narrows the bracket by the sign of the slope; a Newton step that
    leaves the bracket (or meets a derivative that is not negative) is replaced by the
    bracket's middle; the inner state for the next point is extrapolated along the profile
    (a warm start only). A row stops after a Newton step below 1e-6 max(1, |u|), taking that
    step (quadratic convergence: its error is then of the order of the step squared, far
    below the 1e-9 bracket of the regula falsi), at a zero or non-finite slope (as
    :func:`_illinois`) or when the bracket is narrower than 1e-9 max(1, |u|); each row stops
    at its own convergence."""
    root = np.full(rows.size, np.nan)
    u = 0.5 * (lo_u + hi_u)  # the best grid point (the grid is even in u)
    for _ in range(100):
        if not solve.size:
            break
        (s_u, ds_u, dk), _, _, new_state = evaluate(rows[solve], u, state)
        above = s_u > 0
        lo_u, hi_u = np.where(above, u, lo_u), np.where(above, hi_u, u)
        with np.errstate(all="ignore"):
            step = -s_u / ds_u
            u_new = u + step
        newton = (ds_u < 0) & (u_new > lo_u) & (u_new < hi_u)
        u_next = np.where(newton, u_new, 0.5 * (lo_u + hi_u))
        if state is not None and new_state is not None:
            state = (_next_shape(state[0], new_state[0], dk, u, u_next),)
        tol = 1e-9 * np.maximum(1.0, np.abs(u))
        stop = ~np.isfinite(s_u) | (s_u == 0)
        done = stop | (newton & (np.abs(step) <= 1e3 * tol)) | (hi_u - lo_u <= tol)
        root[solve[done]] = np.where(stop, u, u_next)[done]
        solve, lo_u, hi_u, u = _kept(~done, solve, lo_u, hi_u, u_next)
        if state is not None:
            state = _kept(~done, *state)
    return root, solve


def _next_shape(old, solved, dk, u, u_next):
    """The shape at u_next extrapolated from the one solved at u along the profile
    (dk/dtheta times the change of the threshold), where that is finite and positive; else
    the solved one, else the previous start."""
    with np.errstate(all="ignore"):
        guess = solved - dk * (np.exp(u_next) - np.exp(u))
    solved = np.where(np.isfinite(solved) & (solved > 0), solved, old)
    return np.where(np.isfinite(guess) & (guess > 0), guess, solved)


def _kept(keep, *arrays) -> tuple:
    """The rows ``keep`` of each array (the rows still iterating)."""
    return tuple(a[keep] for a in arrays)


def _illinois(evaluate, rows, lo_u, hi_u, lo_s, hi_s, solve, state):
    """Roots of the profile slope in the brackets by the Illinois variant of regula falsi:
    (root per row, NaN where none; the positions in ``rows`` still unsolved after 100 steps)."""
    root = np.full(rows.size, np.nan)
    side = np.zeros(solve.size)
    for _ in range(100):
        if not solve.size:
            break
        u = (lo_u * hi_s - hi_u * lo_s) / (hi_s - lo_s)
        s_u, _, _, new_state = evaluate(rows[solve], u, state)
        if state is not None and new_state is not None:
            state = tuple(
                np.where(np.isfinite(c) & (c > 0) if i == 0 else np.isfinite(c), c, o)
                for i, (c, o) in enumerate(zip(new_state, state, strict=True))
            )
        same_lo = s_u > 0
        # Illinois: halve the slope kept at the end that stayed put twice in a row
        hi_s = np.where(same_lo & (side == 1), hi_s / 2, hi_s)
        lo_s = np.where(~same_lo & (side == -1), lo_s / 2, lo_s)
        lo_u, lo_s = np.where(same_lo, u, lo_u), np.where(same_lo, s_u, lo_s)
        hi_u, hi_s = np.where(same_lo, hi_u, u), np.where(same_lo, hi_s, s_u)
        side = np.where(same_lo, 1, -1)
        done = (
            (np.abs(hi_u - lo_u) <= 1e-9 * np.maximum(1.0, np.abs(u)))
            | (s_u == 0)
            | ~np.isfinite(s_u)
        )
        root[solve[done]] = u[done]
        solve, lo_u, lo_s, hi_u, hi_s, side = _kept(~done, solve, lo_u, lo_s, hi_u, hi_s, side)
        if state is not None:
            state = _kept(~done, *state)
    return root, solve
