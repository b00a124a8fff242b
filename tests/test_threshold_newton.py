"""The bootstrap's threshold search by Newton's method on the profile slope (Weibull with
threshold) against the regula falsi (Illinois) search it replaced.

``Weibull.dtheta2_rows`` gives the derivative of the profile slope, so
:func:`studykit.stats.solvers.threshold_rows` takes Newton steps inside the grid's bracket
instead of Illinois steps; families without it keep the Illinois search. The reference
here is that Illinois search itself (the same family with ``dtheta2_rows`` removed) and, for
the derivative, the central difference of ``dtheta_rows`` along the profile (its
definition). Checked on many seeds, shapes and sample sizes:

* every resample's refit is at least as likely as the Illinois one (log-likelihood not lower
  beyond 1e-9 relative) and the same rows are refitted, left to the one-at-a-time estimator
  or refused;
* the roots are closer to a zero of the profile slope (smaller Newton correction
  |S / S'|) in the median and the 99th percentile;
* the capability bounds from the draws (the 5 % lower percentile of Ppk of 500 resamples)
  move by at most 1e-9 relative (largest seen here 5e-11; the Illinois search stops at a
  bracket 1e-9 wide in u = log(min x - threshold), which alone can move a bound by a few
  1e-9: 1.6e-9 once in the 76 such bounds of tests/bench/bench_batch.py, see the CHANGELOG).
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np
import pytest

from studykit.errors import AnalysisError
from studykit.stats import bootstrap, solvers
from studykit.stats.families import FAMILIES
from studykit.stats.families.weibull import Weibull3

NEW = FAMILIES["weibull3"]


class _IllinoisWeibull3(Weibull3):
    """The same family without the slope's derivative: the Illinois search (reference)."""

    dtheta2_rows = None


OLD = _IllinoisWeibull3()
SHAPES = (1.2, 1.5, 2.0, 3.0, 4.5)
SIZES = (20, 50, 125)


def _model_and_block(seed, m=300):
    """A Weibull-with-threshold fit to invented readings (test fixture: numpy Weibull draws,
    shape and size by seed) and ``m`` resamples from it; None where the fit has no interior
    maximum."""
    rng = np.random.default_rng(seed)
    shape, n = SHAPES[seed % len(SHAPES)], SIZES[seed % len(SIZES)]
    x = 5.0 + rng.weibull(shape, n) * 2.0
    try:
        model = NEW.fit(x)
    except AnalysisError:
        return None
    return model, NEW.sample(model.parameters, (m, n), np.random.default_rng(seed + 1000))


def _case_or_skip(seed):
    case = _model_and_block(seed)
    if case is None:
        pytest.skip("no interior maximum for this sample (checked by tests/test_fit.py)")
    return case


def _logliks(block, params, ok):
    out = np.full(block.shape[0], np.nan)
    for i in np.flatnonzero(ok):
        out[i] = np.sum(NEW._logpdf(block[i], {k: v[i] for k, v in params.items()}))
    return out


@pytest.mark.parametrize("seed", range(40))
def test_newton_refits_at_least_as_likely_as_illinois(seed):
    _, block = _case_or_skip(seed)
    p_new, ok_new, rest_new = NEW.refit_rows(block, {})
    p_old, ok_old, rest_old = OLD.refit_rows(block, {})
    np.testing.assert_array_equal(ok_new, ok_old)
    assert list(rest_new) == list(rest_old)
    assert ok_new.sum() >= 50  # enough rows compared (the others go to the estimator)
    ll_new, ll_old = _logliks(block, p_new, ok_new), _logliks(block, p_old, ok_old)
    assert np.all(ll_new[ok_new] >= ll_old[ok_new] - 1e-9 * np.abs(ll_old[ok_new]))


def test_newton_roots_are_closer_to_a_zero_of_the_slope():
    errors: dict = {"new": [], "old": []}
    for seed in range(15):
        case = _model_and_block(seed)
        if case is None:
            continue
        _, block = case
        xmin = block.min(axis=1)
        at = functools.partial(
            solvers._rows_at,
            block,
            xmin,
            NEW.fit_rows,
            NEW.dtheta_rows,
            curvature=NEW.dtheta2_rows,
        )
        for key, fam in (("new", NEW), ("old", OLD)):
            p, ok, _ = fam.refit_rows(block, {})
            rows = np.flatnonzero(ok)
            u = np.log(xmin[rows] - p["threshold"][rows])
            (s, ds, _), _, _, _ = at(rows, u)
            errors[key].append(np.abs(s / ds) / np.maximum(1.0, np.abs(u)))
    new, old = np.concatenate(errors["new"]), np.concatenate(errors["old"])
    # median and 99th percentile (the last few rows are near-normal samples, shape > 100,
    # whose profile is so flat that the slope there is at rounding level for both searches)
    for q in (0.5, 0.99):
        assert np.quantile(new, q) < np.quantile(old, q)


@pytest.mark.parametrize("seed", range(12))
def test_bounds_move_only_in_the_last_digits(seed):
    model, block = _case_or_skip(seed)
    n = block.shape[1]
    usl = float(model.ppf(0.9999))
    values = {"pp": None, "ppk": 1.0, "ppu": 1.0, "ppl": None}
    bounds = []
    for fam in (NEW, OLD):
        m = dataclasses.replace(model, family=fam)
        draws, failed = bootstrap.percentile_draws(
            m, n, None, usl, 500, np.random.default_rng(seed), values
        )
        bounds.append((np.quantile(draws["ppk"], 0.05), failed))
    (b_new, f_new), (b_old, f_old) = bounds
    assert f_new == f_old
    assert abs(b_new - b_old) <= 1e-9 * abs(b_old)


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("gap", [0.01, 0.5, 3.0])
def test_slope_derivative_is_the_central_difference(shape, gap):
    # reference: the definition, (g(theta + h) - g(theta - h)) / 2h of g = dtheta_rows at the
    # inner solution, and the same for the shape
    x = 10.0 + np.random.default_rng(3).weibull(shape, 125) * 3.0
    theta = x.min() - gap
    h = 1e-5 * gap

    def at(th):
        ys = (x - th)[None, :]
        _, p, _ = NEW.fit_rows(ys)
        return NEW.dtheta_rows(ys, p)[0], p

    (g_hi, p_hi), (g_lo, p_lo), (_, p) = at(theta + h), at(theta - h), at(theta)
    g, d2, dk = NEW.dtheta2_rows((x - theta)[None, :], p)
    assert g[0] == NEW.dtheta_rows((x - theta)[None, :], p)[0]
    assert d2[0] == pytest.approx((g_hi - g_lo) / (2 * h), rel=1e-6)
    assert dk[0] == pytest.approx((p_hi["shape"][0] - p_lo["shape"][0]) / (2 * h), rel=1e-5)
