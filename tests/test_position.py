"""Positional tolerance: PPM outside the circular zone against closed forms, scipy and simulation.

Sources: the Rayleigh law of the distance of a centred circular normal, Pr{R > r} =
exp(-r^2 / (2 sigma^2)) (Papoulis 1991, Rayleigh distribution; equivalently chi-square with 2
degrees of freedom: `scipy.stats.chi2.sf(r**2 / sigma**2, 2)`); the bivariate normal integrated
over the disc with `scipy.integrate.dblquad`; the noncentral chi-square law of the squared
distance of an offset circular normal (`scipy.stats.ncx2.sf(R**2 / s**2, 2, |mu|**2 / s**2)`);
seeded Monte Carlo.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from studykit.errors import StudyInputError
from studykit.stats.position import position_study, ppm_index, prob_outside_circle


@pytest.mark.parametrize("radius_in_sigmas", [0.5, 1.0, 2.0, 3.0, 4.5, 6.0])
def test_centred_circular_normal_is_rayleigh(radius_in_sigmas):
    sigma = 0.03
    r = radius_in_sigmas * sigma
    exact = math.exp(-(r**2) / (2 * sigma**2))  # Rayleigh tail, exact
    got = prob_outside_circle([0.0, 0.0], [[sigma**2, 0.0], [0.0, sigma**2]], r)
    assert got == pytest.approx(exact, rel=1e-9)
    assert got == pytest.approx(stats.chi2.sf(radius_in_sigmas**2, 2), rel=1e-9)


@pytest.mark.parametrize("offset", [(0.5, 0.0), (1.0, -1.5), (-2.0, 2.5)])
def test_offset_circular_normal_is_noncentral_chi_square(offset):
    s, radius = 1.0, 3.0
    nc = (offset[0] ** 2 + offset[1] ** 2) / s**2
    exact = stats.ncx2.sf(radius**2 / s**2, 2, nc)  # scipy.stats.ncx2.sf(R^2/s^2, 2, |mu|^2/s^2)
    got = prob_outside_circle(offset, [[s * s, 0], [0, s * s]], radius)
    assert got == pytest.approx(exact, rel=1e-8)


CASES = [
    # mean, sd_x, sd_y, rho, radius
    ((0.02, -0.03), 0.02, 0.035, 0.5, 0.1),
    ((0.0, 0.0), 0.01, 0.04, 0.0, 0.1),
    ((0.05, 0.01), 0.015, 0.02, -0.7, 0.1),
    ((-0.01, 0.02), 0.03, 0.03, 0.3, 0.12),
]


def _cov(sx, sy, rho):
    return np.array([[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]])


@pytest.mark.parametrize("mean,sx,sy,rho,radius", CASES)
def test_against_scipy_dblquad(mean, sx, sy, rho, radius):
    cov = _cov(sx, sy, rho)
    mvn = stats.multivariate_normal(mean, cov)
    inside, _ = integrate.dblquad(
        lambda y, x: mvn.pdf([x, y]),
        -radius,
        radius,
        lambda x: -math.sqrt(radius * radius - x * x),
        lambda x: math.sqrt(radius * radius - x * x),
        epsabs=1e-13,
        epsrel=1e-12,
    )
    got = prob_outside_circle(mean, cov, radius)
    assert got == pytest.approx(1.0 - inside, abs=1e-9)


@pytest.mark.parametrize("mean,sx,sy,rho,radius", CASES)
def test_against_seeded_monte_carlo(mean, sx, sy, rho, radius):
    rng = np.random.default_rng(12345)
    trials = 400_000
    pts = rng.multivariate_normal(mean, _cov(sx, sy, rho), size=trials)
    frac = np.mean(np.hypot(pts[:, 0], pts[:, 1]) > radius)
    got = prob_outside_circle(mean, _cov(sx, sy, rho), radius)
    se = math.sqrt(max(got * (1 - got), 1.0 / trials) / trials)
    assert frac == pytest.approx(got, abs=4 * se)


def test_small_tail_keeps_relative_accuracy():
    # far tail: a centred circular normal at 7 sigma; 1 - inside would lose every digit
    got = prob_outside_circle([0, 0], [[1, 0], [0, 1]], 7.0)
    assert got == pytest.approx(math.exp(-24.5), rel=1e-8)


def test_rotation_and_swap_invariance():
    cov = _cov(0.02, 0.04, 0.6)
    p1 = prob_outside_circle([0.01, 0.02], cov, 0.1)
    swapped = np.array([[cov[1, 1], cov[0, 1]], [cov[0, 1], cov[0, 0]]])
    assert prob_outside_circle([0.02, 0.01], swapped, 0.1) == pytest.approx(p1, rel=1e-10)
    a = 0.7
    rot = np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
    assert prob_outside_circle(rot @ [0.01, 0.02], rot @ cov @ rot.T, 0.1) == pytest.approx(
        p1, rel=1e-9
    )


def test_ppm_index_convention():
    # Phi^-1(1 - p)/3: p = Phi(-3) -> 1.0; p = Phi(-4.5) -> 1.5 (scipy.stats.norm.cdf)
    assert ppm_index(stats.norm.cdf(-3.0)) == pytest.approx(1.0, rel=1e-12)
    assert ppm_index(stats.norm.cdf(-4.5)) == pytest.approx(1.5, rel=1e-12)
    assert ppm_index(0.0) is None


def test_position_study_fits_and_compares_with_the_shortcut():
    rng = np.random.default_rng(8)
    n = 200
    mean, cov = [0.02, -0.01], _cov(0.025, 0.035, 0.4)
    pts = rng.multivariate_normal(mean, cov, size=n)
    res = position_study(pts[:, 0], pts[:, 1], tolerance=0.2)
    # the fitted parameters are the textbook estimates (numpy mean/std ddof=1/corrcoef)
    assert res.mean_x == pytest.approx(pts[:, 0].mean())
    assert res.sd_y == pytest.approx(pts[:, 1].std(ddof=1))
    assert res.correlation == pytest.approx(np.corrcoef(pts.T)[0, 1])
    assert res.ppm_expected == pytest.approx(
        1e6 * prob_outside_circle([res.mean_x, res.mean_y], res.covariance, 0.1), rel=1e-12
    )
    assert res.index == pytest.approx(stats.norm.ppf(1 - res.ppm_expected / 1e6) / 3, rel=1e-10)
    r = 2 * np.hypot(pts[:, 0], pts[:, 1])
    assert res.shortcut_mean == pytest.approx(r.mean())
    assert res.shortcut_index == pytest.approx((0.2 - r.mean()) / (3 * r.std(ddof=1)))
    assert res.shortcut_ppm == pytest.approx(1e6 * stats.norm.sf(3 * res.shortcut_index))
    assert res.observed_outside == int(np.sum(r > 0.2))
    # the two models give different answers here (the point of showing both)
    assert abs(res.ppm_expected - res.shortcut_ppm) > 0.1 * res.ppm_expected
    d = res.to_dict()
    assert d["shortcut"]["ppm"] == pytest.approx(res.shortcut_ppm)
    assert len(d["outside_parts"]) == res.observed_outside
    # ellipse: semi-axes^2 = chi2.ppf(0.9973, 2) * eigenvalues of the covariance
    lam = np.linalg.eigvalsh(res.covariance)
    q = stats.chi2.ppf(0.9973, 2)
    assert sorted(res.ellipse_axes) == pytest.approx(sorted(np.sqrt(q * lam)), rel=1e-12)


def test_shortcut_overstates_a_centred_process():
    # A centred circular process: true fraction outside exp(-R^2/(2 s^2)); the shortcut applies
    # a normal upper tail to a Rayleigh variable and misses it (seeded sample, large n)
    rng = np.random.default_rng(21)
    s = 0.03
    pts = rng.normal(0.0, s, size=(5000, 2))
    res = position_study(pts[:, 0], pts[:, 1], tolerance=0.2)
    true = 1e6 * math.exp(-(0.1**2) / (2 * s * s))
    assert res.ppm_expected == pytest.approx(true, rel=0.15)
    assert res.shortcut_ppm < 0.5 * true


def test_absolute_coordinates_get_a_note():
    rng = np.random.default_rng(2)
    res = position_study(12.0 + rng.normal(0, 0.01, 40), rng.normal(0, 0.01, 40), tolerance=0.2)
    assert res.ppm_expected == pytest.approx(1e6)
    assert any("deviations from nominal" in n for n in res.notes)


@pytest.mark.parametrize(
    "dx,dy,tol,match",
    [
        ([0.1, 0.2, 0.3, 0.1, 0.2], [0.1, 0.2, 0.3, 0.0, 0.1, 0.2], 0.5, "paired"),
        ([0.1, 0.2, 0.3], [0.1, 0.2, 0.3], 0.5, "at least 5"),
        ([0.1, 0.2, 0.3, 0.1, 0.2], [0.1, 0.2, 0.3, 0.0, 0.1], -1, "positive"),
        ([0.1, 0.2, 0.3, 0.4, 0.5], [0.2, 0.4, 0.6, 0.8, 1.0], 0.5, "line"),
        ([0.1, 0.1, 0.1, 0.1, 0.1], [0.1, 0.2, 0.3, 0.0, 0.1], 0.5, "zero spread"),
    ],
)
def test_bad_input(dx, dy, tol, match):
    with pytest.raises(StudyInputError, match=match):
        position_study(dx, dy, tolerance=tol)


def test_figure_draws_the_zone_and_the_fitted_ellipse():
    from studykit.report.position_figures import position_figure

    rng = np.random.default_rng(30)
    pts = rng.multivariate_normal([0.03, 0.0], _cov(0.02, 0.04, 0.5), size=80)
    res = position_study(pts[:, 0], pts[:, 1], tolerance=0.2)
    fig = position_figure(res, unit="mm")
    ax = fig.axes[0]
    lines = {ln.get_label(): ln for ln in ax.get_lines()}
    zone = lines["Position zone, diameter 0.2"]
    assert np.hypot(zone.get_xdata(), zone.get_ydata()) == pytest.approx(0.1, rel=1e-12)
    ell = lines["Fitted ellipse (99.73 %)"]
    d = np.column_stack([ell.get_xdata() - res.mean_x, ell.get_ydata() - res.mean_y])
    # every ellipse point sits on the 99.73 % contour: d' S^-1 d = chi2.ppf(0.9973, 2)
    q = np.einsum("ij,jk,ik->i", d, np.linalg.inv(res.covariance), d)
    assert q == pytest.approx(stats.chi2.ppf(0.9973, 2), rel=1e-9)
    # parts outside the zone are drawn as a separate, labelled series
    labels = [c.get_label() for c in ax.collections]
    assert ("Outside the zone" in labels) == bool(res.outside)
    assert ax.get_xlabel() == "X deviation from nominal [mm]"
