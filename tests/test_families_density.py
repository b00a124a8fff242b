"""The fitted models' densities, distribution and survival functions without ``scipy.stats``
(``fitted_pdf``, ``fitted_cdf``, ``fitted_sf``).

Reference library: scipy.stats, the frozen distribution of each fitted model (``pdf``, ``cdf``,
``sf`` of ``model.dist``:
``norm``, ``lognorm``, ``weibull_min``, ``gamma``, ``expon``, ``logistic``, ``fisk``,
``gumbel_l``, ``gumbel_r``, ``halfnorm``). Exact equality, element for element, on grids that
reach below the threshold / support and beyond the data, and at NaN and +-inf.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from studykit.stats.families import FAMILIES
from studykit.stats.families.density import fitted_pdf


def _fits(family, rng, wanted: int = 6):
    """Fits of ``family`` to seeded samples (invented data, checks only): skewed, shifted."""
    fits = []
    for _ in range(60):
        x = rng.lognormal(rng.normal(1, 1), rng.uniform(0.1, 1.2), int(rng.integers(8, 150)))
        x = x + (rng.normal(0, 3) if family.support in ("real", "above_threshold") else 0.0)
        try:
            fits.append(family.fit(x))
        except Exception:  # noqa: BLE001 - data unsuitable for this family: try another sample
            continue
        if len(fits) == wanted:
            break
    return fits


def _grid(m):
    """400 points from below the 0.1 % point to beyond the 99.9 % point, then NaN, +-inf, the
    threshold and 0."""
    v = np.asarray(m.family.quantile(np.array([0.001, 0.999]), m.parameters), dtype=float)
    lo, hi = float(v[0]), float(v[1])
    grid = np.linspace(lo - 0.5 * (hi - lo), hi + 0.5 * (hi - lo), 400)
    edges = [np.nan, np.inf, -np.inf, m.parameters.get("threshold", 0.0), 0.0]
    return np.concatenate([grid, edges])


@pytest.mark.parametrize("fid", list(FAMILIES))
def test_fitted_pdf_equals_scipy_frozen_pdf(fid):
    rng = np.random.default_rng(sum(map(ord, fid)))
    fits = _fits(FAMILIES[fid], rng)
    assert len(fits) >= 3, f"{fid}: too few fits to compare"
    for m in fits:
        grid = _grid(m)
        with np.errstate(all="ignore"):
            ours, ref = fitted_pdf(m, grid), m.pdf(grid)
        assert ours.dtype == ref.dtype and ours.shape == ref.shape
        assert np.array_equal(ours, ref, equal_nan=True), (fid, m.parameters)
        assert fitted_pdf(m, grid[200]) == m.pdf(grid[200])  # a scalar too


def test_fitted_pdf_imports_no_scipy_stats():
    # the point of the helper: a figure worker draws a fitted curve without scipy.stats
    code = (
        "import sys, numpy as np\n"
        "from studykit.stats.families import FAMILIES\n"
        "from studykit.stats.families.density import fitted_pdf\n"
        "from studykit.stats.families.base import FittedModel\n"
        "for fid, p in [('gamma3', dict(shape=2.5, scale=0.4, threshold=1.0)),\n"
        "               ('lev', dict(location=3.0, scale=0.5)),\n"
        "               ('loglogistic3', dict(shape=3.0, scale=2.0, threshold=-1.0))]:\n"
        "    m = FittedModel(FAMILIES[fid], fid, p, 10, 0.0, 0.0, 0.0, 0.0, None, None)\n"
        "    assert np.isfinite(fitted_pdf(m, np.linspace(0, 9, 50))).all()\n"
        "print('scipy.stats' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False", out.stderr


@pytest.mark.parametrize("fid", list(FAMILIES))
@pytest.mark.parametrize("which", ["cdf", "sf"])
def test_fitted_cdf_and_sf_equal_scipy_frozen(fid, which):
    # scipy.stats' frozen distribution of each fit (model.dist.cdf / .sf), element for element
    from studykit.stats.families.density import fitted_cdf, fitted_sf

    ours_of = {"cdf": fitted_cdf, "sf": fitted_sf}[which]
    rng = np.random.default_rng(sum(map(ord, fid + which)))
    fits = _fits(FAMILIES[fid], rng)
    assert len(fits) >= 3, f"{fid}: too few fits to compare"
    for m in fits:
        grid = _grid(m)
        ref_of = getattr(m.dist, which)
        with np.errstate(all="ignore"):
            ours, ref = ours_of(m, grid), ref_of(grid)
            inside = grid[np.isfinite(grid)][50:60]  # every point inside: scipy's ravel route
            assert np.array_equal(ours_of(m, inside), ref_of(inside), equal_nan=True)
        assert ours.dtype == ref.dtype and ours.shape == ref.shape
        assert np.array_equal(ours, ref, equal_nan=True), (fid, which, m.parameters)
        assert ours_of(m, grid[200]) == ref_of(grid[200])  # a scalar too
        assert ours_of(m, list(grid[:5])).tolist() == ref_of(list(grid[:5])).tolist()


@pytest.mark.parametrize("fid", list(FAMILIES))
def test_fitted_ppf_equals_scipy_frozen(fid):
    # scipy.stats' frozen distribution of each fit (model.dist.ppf), element for element
    from studykit.stats.families.density import fitted_ppf

    rng = np.random.default_rng(sum(map(ord, fid + "ppf")))
    fits = _fits(FAMILIES[fid], rng)
    assert len(fits) >= 3, f"{fid}: too few fits to compare"
    q = np.concatenate(
        [np.linspace(0.0, 1.0, 201), [0.00135, 0.99865, 1e-12, 1 - 1e-12, -0.1, 1.1, np.nan]]
    )
    for m in fits:
        with np.errstate(all="ignore"):
            ours, ref = fitted_ppf(m, q), m.dist.ppf(q)
            assert np.array_equal(fitted_ppf(m, q[1:200]), m.dist.ppf(q[1:200]))  # all inside
        assert ours.dtype == ref.dtype and ours.shape == ref.shape
        assert np.array_equal(ours, ref, equal_nan=True), (fid, m.parameters)
        assert fitted_ppf(m, 0.00135) == m.dist.ppf(0.00135)  # a scalar too
        assert fitted_ppf(m, [0.5, 0.9]).tolist() == m.dist.ppf([0.5, 0.9]).tolist()
