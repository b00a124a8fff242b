"""Positional tolerance: X and Y deviations from nominal against a true-position zone.

A true-position tolerance of diameter T accepts a feature whose centre lies in the circle of
radius T/2 around the nominal position (ISO 1101 / ASME Y14.5 positional tolerance; the zone is
a standard term). The deviations (dx, dy) are modelled as bivariate normal with their own
means (the offset), unequal spreads and correlation. The expected fraction outside the zone is
the bivariate normal probability of the region outside the circle, computed by one-dimensional
numerical integration on the principal axes.

Beside it the common one-dimensional shortcut: the diametral position value
r = 2 sqrt(dx^2 + dy^2) treated as a normal characteristic with the one-sided limit USL = T.
r is not normal (it is a scaled Rice/Hoyt-type distance, never negative), so the shortcut's PPM
can be far from the two-dimensional one; both are shown so the difference is visible.

References
----------
ISO 1101:2017, Geometrical product specifications - Tolerances of form, orientation, location
and run-out (the positional tolerance zone).
Tong, Y. L. (1990). The Multivariate Normal Distribution. Springer (rotation to principal axes).
Papoulis, A. (1991). Probability, Random Variables, and Stochastic Processes, 3rd ed. (Rayleigh
law of the distance of a centred circular normal).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from studykit.errors import AnalysisError, SpecError, StudyInputError
from studykit.stats._checks import check_sample
from studykit.stats.lazy import LazyModule
from studykit.stats.lazy import scipy_stats as stats
from studykit.stats.result import Result
from studykit.stats.result import json_float as _f

# imported on first use: scipy.integrate and scipy.optimize together cost about 0.3 s
integrate = LazyModule("scipy.integrate")

__all__ = ["ELLIPSE_LEVEL", "PositionResult", "prob_outside_circle", "ppm_index", "position_study"]

#: Probability content of the fitted ellipse drawn and reported: 99.73 %, the content of
#: +/- 3 sigma in one dimension (common practice, no source).
ELLIPSE_LEVEL = 0.9973


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


def prob_outside_circle(mean, cov, radius: float) -> float:
    """Probability that a bivariate normal point falls outside the circle |p| <= radius.

    Parameters
    ----------
    mean : array_like, shape (2,)
        Means of (dx, dy) relative to the circle's centre.
    cov : array_like, shape (2, 2)
        Covariance matrix (symmetric, positive definite).
    radius : float
        Circle radius (T/2 for a zone of diameter T).

    Returns
    -------
    float
        1 - Pr{dx^2 + dy^2 <= radius^2}.

    Notes
    -----
    The covariance is diagonalised, cov = V diag(l1, l2) V^T; on the principal axes
    u = V^T (p - 0) the coordinates are independent, u1 ~ N(m1, l1), u2 ~ N(m2, l2), and the
    circle is unchanged. With h(u1) = sqrt(R^2 - u1^2),

        P_out = Pr{|u1| > R} + int_{-R}^{R} f1(u1) [Phi((-h - m2)/s2) + Q((h - m2)/s2)] du1,

    every term positive, so small probabilities keep their relative accuracy. The integral is
    taken with ``scipy.integrate.quad`` after the substitution u1 = R sin(theta) (smooth at the
    ends of the chord).

    References
    ----------
    Tong (1990), ch. 3; ISO 1101 (the zone).

    Examples
    --------
    >>> import math
    >>> p = prob_outside_circle([0, 0], [[1, 0], [0, 1]], 3.0)
    >>> abs(p - math.exp(-4.5)) < 1e-12   # Rayleigh: exp(-R^2 / (2 sigma^2))
    True
    """
    m = np.asarray(mean, dtype=float).reshape(2)
    c = np.asarray(cov, dtype=float).reshape(2, 2)
    if not (np.all(np.isfinite(m)) and np.all(np.isfinite(c))):
        raise StudyInputError("`mean` and `cov` must be finite numbers.")
    if not abs(c[0, 1] - c[1, 0]) <= 1e-12 * max(1.0, abs(c[0, 1])):
        raise StudyInputError("`cov` must be symmetric.")
    radius = float(radius)
    if not (math.isfinite(radius) and radius > 0):
        raise SpecError(f"the zone radius ({radius!r}) must be a positive number.")
    lam, vec = np.linalg.eigh(c)
    if not lam[0] > 0:
        raise AnalysisError(
            "the covariance of dx and dy is singular (the points lie on a "
            "line or coincide); no two-dimensional model can be fitted."
        )
    mu = vec.T @ m
    s1, s2 = math.sqrt(lam[0]), math.sqrt(lam[1])
    # the axis with the larger spread is integrated (outer); the narrower one in closed form
    if s1 > s2:
        s1, s2 = s2, s1
        mu = mu[::-1]
    m_out, s_out, m_in, s_in = mu[1], s2, mu[0], s1
    r = radius
    tail = special.ndtr((-r - m_out) / s_out) + special.ndtr((m_out - r) / s_out)

    def integrand(theta: float) -> float:
        u = r * math.sin(theta)
        h = r * math.cos(theta)
        dens = math.exp(-0.5 * ((u - m_out) / s_out) ** 2) / (s_out * math.sqrt(2 * math.pi))
        out = special.ndtr((-h - m_in) / s_in) + special.ndtr((m_in - h) / s_in)
        return dens * out * h  # du = R cos(theta) dtheta = h dtheta

    pts = [math.asin(max(-1.0, min(1.0, v / r))) for v in (m_out - s_out, m_out, m_out + s_out)]
    inner, _ = integrate.quad(
        integrand, -math.pi / 2, math.pi / 2, points=pts, limit=400, epsabs=0.0, epsrel=1e-11
    )
    return float(min(1.0, max(0.0, tail + inner)))


def ppm_index(p: float) -> float | None:
    """Index equivalent to a fraction outside: Phi^-1(1 - p) / 3 (one-sided Ppk equivalent).

    The Ppk of a one-sided normal characteristic with the same fraction outside its limit
    (the equivalent-PPM convention; common practice, no source). None for p = 0 (unbounded).

    Examples
    --------
    >>> round(ppm_index(0.00135), 4)
    1.0
    """
    if p <= 0:
        return None
    return float(special.ndtri(1.0 - p) / 3.0) if p < 1 else float("-inf")


@dataclass(frozen=True, eq=False)
class PositionResult(Result):
    """Positional capability of (dx, dy) against a true-position zone of diameter T.

    Attributes
    ----------
    n : int
    tolerance : float
        Zone diameter T (radius T/2).
    mean_x, mean_y, sd_x, sd_y, correlation : float
        The fitted bivariate normal (sd with divisor n - 1).
    offset : float
        Distance of the mean point from nominal.
    ppm_expected : float
        Expected parts per million outside the circular zone under the fitted bivariate normal.
    index : float or None
        Phi^-1(1 - p)/3 with p = ppm_expected / 1e6 (one-sided Ppk equivalent; common practice,
        no source). None when p underflows to 0.
    observed_outside : int
        Parts whose position is outside the zone (2 sqrt(dx^2 + dy^2) > T).
    ppm_observed : float
    shortcut_mean, shortcut_sd : float
        Mean and sd of the diametral position value r = 2 sqrt(dx^2 + dy^2).
    shortcut_index : float
        (T - mean(r)) / (3 sd(r)): r treated as a normal one-sided characteristic.
    shortcut_ppm : float
        Expected PPM above T under that normal model.
    ellipse_level : float
    ellipse_axes : tuple of float
        Semi-axes (major, minor) of the fitted ellipse holding ``ellipse_level`` of the
        bivariate normal.
    ellipse_angle : float
        Angle of the major axis from the X axis, degrees.
    dx, dy : ndarray
        The deviations the result was computed from (read-only; for the figure).
    outside : tuple of int
        0-based positions of the parts outside the zone.
    notes : tuple of str
    """

    n: int
    tolerance: float
    mean_x: float
    mean_y: float
    sd_x: float
    sd_y: float
    correlation: float
    offset: float
    ppm_expected: float
    index: float | None
    observed_outside: int
    ppm_observed: float
    shortcut_mean: float
    shortcut_sd: float
    shortcut_index: float | None
    shortcut_ppm: float
    ellipse_level: float
    ellipse_axes: tuple
    ellipse_angle: float
    dx: np.ndarray
    dy: np.ndarray
    outside: tuple = ()
    notes: tuple = ()

    @property
    def covariance(self) -> np.ndarray:
        """2 x 2 covariance matrix of the fitted model."""
        cxy = self.correlation * self.sd_x * self.sd_y
        return np.array([[self.sd_x**2, cxy], [cxy, self.sd_y**2]])

    def to_dict(self) -> dict:
        """JSON-safe fields (see the README table of ``studykit position --json``)."""
        return {
            "n": int(self.n),
            "tolerance": float(self.tolerance),
            "model": "bivariate_normal",
            "mean_x": _f(self.mean_x),
            "mean_y": _f(self.mean_y),
            "sd_x": _f(self.sd_x),
            "sd_y": _f(self.sd_y),
            "correlation": _f(self.correlation),
            "offset": _f(self.offset),
            "ppm_expected": _f(self.ppm_expected),
            "index": _f(self.index),
            "index_convention": "Phi^-1(1 - ppm_expected/1e6) / 3 (one-sided Ppk equivalent)",
            "observed_outside": int(self.observed_outside),
            "ppm_observed": _f(self.ppm_observed),
            "outside_parts": [int(i) + 1 for i in self.outside],
            "shortcut": {
                "value": "2 sqrt(dx^2 + dy^2) against USL = tolerance, normal theory",
                "mean": _f(self.shortcut_mean),
                "sd": _f(self.shortcut_sd),
                "index": _f(self.shortcut_index),
                "ppm": _f(self.shortcut_ppm),
            },
            "ellipse": {
                "level": float(self.ellipse_level),
                "semi_axes": [_f(v) for v in self.ellipse_axes],
                "angle_deg": _f(self.ellipse_angle),
            },
            "notes": list(self.notes),
        }


def position_study(dx, dy, *, tolerance: float) -> PositionResult:
    """Fit the bivariate normal to (dx, dy) and judge it against a true-position zone.

    Parameters
    ----------
    dx, dy : array_like
        Deviations from nominal, paired (same length, at least 5).
    tolerance : float
        Diameter T of the positional tolerance zone.

    Returns
    -------
    PositionResult

    Notes
    -----
    Means, standard deviations (divisor n - 1) and the Pearson correlation are the usual
    estimates of the bivariate normal. The expected fraction outside is
    :func:`prob_outside_circle` at those estimates (a point estimate, no confidence bound).
    The shortcut treats r = 2 sqrt(dx^2 + dy^2) as normal with USL = T (common practice in
    shops, no source); it ignores that r is bounded below by 0 and skewed, so it can over- or
    understate the fraction outside.

    References
    ----------
    ISO 1101 (zone); Tong (1990) (bivariate normal); see :func:`prob_outside_circle`.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> res = position_study(rng.normal(0.01, 0.02, 60), rng.normal(-0.01, 0.03, 60),
    ...                      tolerance=0.2)
    >>> res.n, res.observed_outside
    (60, 0)
    """
    x, y, t = _check_inputs(dx, dy, tolerance)
    n = int(x.size)
    mx, my, sx, sy, rho, cov = _bivariate(x, y)
    p_out = prob_outside_circle([mx, my], cov, t / 2.0)
    pos = 2.0 * np.hypot(x, y)
    out_idx = np.flatnonzero(pos > t)
    outside = int(out_idx.size)
    r_mean, r_sd = float(pos.mean()), float(pos.std(ddof=1))
    sc_index = (t - r_mean) / (3.0 * r_sd) if r_sd > 0 else None
    sc_ppm = 1e6 * float(special.ndtr(-3.0 * sc_index)) if sc_index is not None else 0.0
    axes, angle = _ellipse(cov)
    return PositionResult(
        n=n,
        tolerance=t,
        mean_x=mx,
        mean_y=my,
        sd_x=sx,
        sd_y=sy,
        correlation=rho,
        offset=float(math.hypot(mx, my)),
        ppm_expected=1e6 * p_out,
        index=ppm_index(p_out),
        observed_outside=outside,
        ppm_observed=1e6 * outside / n,
        shortcut_mean=r_mean,
        shortcut_sd=r_sd,
        shortcut_index=sc_index,
        shortcut_ppm=sc_ppm,
        ellipse_level=ELLIPSE_LEVEL,
        ellipse_axes=axes,
        ellipse_angle=angle,
        dx=_readonly(x),
        dy=_readonly(y),
        outside=tuple(int(i) for i in out_idx),
        notes=tuple(_notes(mx, my, t, n)),
    )


def _check_inputs(dx, dy, tolerance) -> tuple[np.ndarray, np.ndarray, float]:
    """The paired deviations (at least 5 each) and the zone diameter, checked."""
    x = check_sample(
        dx, name="dx", minimum=5, before="the position study", needed_for="a position study"
    )
    y = check_sample(
        dy, name="dy", minimum=5, before="the position study", needed_for="a position study"
    )
    if x.size != y.size:
        raise StudyInputError(
            f"`dx` has {x.size} values and `dy` {y.size}; they must be "
            "paired (one X and one Y deviation per part)."
        )
    try:
        t = float(tolerance)
    except (TypeError, ValueError):
        raise SpecError(
            f"the tolerance ({tolerance!r}) must be a number (the zone diameter)."
        ) from None
    if not (math.isfinite(t) and t > 0):
        raise SpecError(f"the tolerance ({tolerance!r}) must be a positive zone diameter.")
    return x, y, t


def _bivariate(x: np.ndarray, y: np.ndarray) -> tuple:
    """Means, sds, correlation and covariance matrix of the deviations (a 2-D spread needed)."""
    mx, my = float(x.mean()), float(y.mean())
    sx, sy = float(x.std(ddof=1)), float(y.std(ddof=1))
    if not (sx > 0 and sy > 0):
        which = "dx" if not sx > 0 else "dy"
        raise AnalysisError(
            f"`{which}` has zero spread; the gauge may be too coarse for a two-dimensional model."
        )
    rho = float(np.corrcoef(x, y)[0, 1])
    cxy = rho * sx * sy
    cov = np.array([[sx * sx, cxy], [cxy, sy * sy]])
    if abs(rho) > 0.999:
        raise AnalysisError(
            f"dx and dy are almost perfectly correlated (r = {rho:.4f}); the "
            "points lie on a line and no two-dimensional model can be fitted."
        )
    return mx, my, sx, sy, rho, cov


def _ellipse(cov: np.ndarray) -> tuple[tuple[float, float], float]:
    """Semi-axes and angle (degrees, -90 to 90) of the fitted ellipse at ELLIPSE_LEVEL."""
    lam, vec = np.linalg.eigh(cov)
    q = stats.chi2.ppf(ELLIPSE_LEVEL, 2)
    axes = (math.sqrt(q * lam[1]), math.sqrt(q * lam[0]))
    angle = math.degrees(math.atan2(vec[1, 1], vec[0, 1]))
    angle = (angle + 90.0) % 180.0 - 90.0
    return axes, angle


def _notes(mx: float, my: float, t: float, n: int) -> list[str]:
    """Cautions: a mean outside the zone, few parts."""
    notes: list[str] = []
    if math.hypot(mx, my) > t / 2.0:
        notes.append(
            "the mean position lies outside the zone: check that the columns hold "
            "deviations from nominal, not absolute coordinates."
        )
    if n < 30:
        notes.append(
            f"only {n} parts: the fitted spreads and correlation are uncertain, and so "
            "is the expected PPM (common practice, no source: 30 or more)."
        )
    return notes
