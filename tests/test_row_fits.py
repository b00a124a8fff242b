"""Row-wise solvers: a row's fit does not depend on the other rows of its block.

The row-wise Newton iterations (``fit_rows`` of the Weibull, gamma and loglogistic families)
and the bootstrap's threshold search (:func:`studykit.stats.solvers.threshold_rows`) stop each
row at its own convergence, so fitting a row alone, in a block, in another order or with rows
of other data sets gives bit-identical numbers (what lets the batch refit many
characteristics' bootstrap samples as one block). The values themselves are checked against
scipy.stats' maximum-likelihood fits (reference, as in tests/test_fit.py).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from scipy import stats

from studykit.stats import solvers
from studykit.stats.fit import FAMILIES

N = 125
# family -> scipy.stats distribution of the two-parameter family (reference fits, floc=0)
ROW_FAMILIES = {"weibull": stats.weibull_min, "gamma": stats.gamma, "loglogistic": stats.fisk}


def _rows(seed, m=60):
    """Positive samples drawn by scipy.stats (test fixture): three shapes, scales 0.5-3, and
    a third of the rows moved close to zero (the hard rows of a threshold grid: one reading
    far out in log y), so rows need different numbers of Newton steps."""
    rng = np.random.default_rng(seed)
    parts = [
        stats.weibull_min(1.5).rvs(size=(m // 3, N), random_state=rng),
        stats.gamma(3.0).rvs(size=(m // 3, N), random_state=rng),
        stats.fisk(4.0).rvs(size=(m - 2 * (m // 3), N), random_state=rng),
    ]
    ys = np.concatenate(parts) * rng.uniform(0.5, 3.0, (m, 1))
    near = rng.uniform(size=m) < 1 / 3
    ys[near] -= ys[near].min(axis=1, keepdims=True) * (1 - 1e-4)
    return ys


def _equal(a, b):
    ll_a, p_a, _ = a
    ll_b, p_b, _ = b
    assert_array_equal(ll_a, ll_b)
    assert p_a.keys() == p_b.keys()
    for k in p_a:
        assert_array_equal(p_a[k], p_b[k])


def _take(res, idx):
    ll, p, _ = res
    return ll[idx], {k: v[idx] for k, v in p.items()}, None


@pytest.mark.parametrize("fid", list(ROW_FAMILIES))
@pytest.mark.parametrize("rough", [False, True])
def test_row_fit_does_not_depend_on_its_block(fid, rough):
    fit_rows = FAMILIES[fid].fit_rows
    ys = _rows(7)
    block = fit_rows(ys, rough=rough)
    for i in range(ys.shape[0]):  # each row alone
        _equal(_take(block, [i]), fit_rows(ys[i : i + 1], rough=rough))
    order = np.random.default_rng(1).permutation(ys.shape[0])  # another order
    _equal(_take(block, order), fit_rows(ys[order], rough=rough))
    other = _rows(8)  # beside the rows of another data set
    mixed = fit_rows(np.concatenate([other[:17], ys, other[17:]]), rough=rough)
    _equal(block, _take(mixed, np.arange(17, 17 + ys.shape[0])))


@pytest.mark.parametrize("fid", list(ROW_FAMILIES))
def test_row_fits_are_at_least_as_likely_as_scipy(fid):
    # reference: scipy.stats.<dist>.fit(y, floc=0), the log-likelihood at its estimate; ours
    # must not be lower (relative 1e-9: the row fits stop within rounding of the maximum)
    dist = ROW_FAMILIES[fid]
    ys = _rows(9, m=12)
    ll, _, _ = FAMILIES[fid].fit_rows(ys)
    for y, ll_row in zip(ys, ll, strict=True):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = dist.fit(y, floc=0)
        ref_ll = float(dist.logpdf(y, *ref).sum())
        assert ll_row >= ref_ll - 1e-9 * abs(ref_ll), (ref_ll, ll_row)


@pytest.mark.parametrize("fid", ["weibull3", "gamma3", "loglogistic3"])
def test_threshold_refits_do_not_depend_on_their_block(fid):
    # bootstrap samples of a threshold model drawn by scipy.stats (test fixture); the shared
    # grid start (weibull3) is kept in ``shared`` so every call starts from the same values
    family = FAMILIES[fid]
    rng = np.random.default_rng(4)
    dist = {"weibull3": stats.weibull_min(1.8, loc=10.0), "gamma3": stats.gamma(2.5, loc=10.0)}
    block = dist.get(fid, stats.fisk(5.0, loc=10.0)).rvs(size=(40, N), random_state=rng)
    shared: dict = {}
    params, ok, rest = family.refit_rows(block, shared)
    assert ok.sum() > 30  # most samples are solved by the block search (not the fallback)
    for lo, hi in ((0, 1), (1, 2), (5, 23), (23, 40)):
        p_part, ok_part, rest_part = solvers.threshold_rows(family, block[lo:hi], shared)
        assert_array_equal(ok_part, ok[lo:hi])
        assert [r + lo for r in rest_part] == [r for r in rest if lo <= r < hi]
        if p_part is not None:
            for k, v in p_part.items():
                assert_array_equal(v[ok_part], params[k][lo:hi][ok_part])


@pytest.mark.parametrize(
    "fid", ["weibull3", "gamma3", "loglogistic3", "lognormal3", "weibull", "gamma", "loglogistic"]
)
def test_refits_in_cache_groups_equal_one_call(fid, monkeypatch):
    # the bootstrap's row-wise evaluations (threshold search, two-parameter refits) run in
    # groups of CACHE_CELLS cells (speed: the work arrays stay in cache); groups of 7 rows
    # must give the bits of one call for all rows
    family = FAMILIES[fid]
    rng = np.random.default_rng(5)
    dist = {"weibull": stats.weibull_min(1.4, loc=10.0), "gamma": stats.gamma(2.0, loc=10.0)}
    dist = dist.get(fid.rstrip("3"), stats.lognorm(0.5, loc=10.0))
    block = dist.rvs(size=(40, N), random_state=rng)
    monkeypatch.setattr(solvers, "CACHE_CELLS", 1 << 40)  # one call
    one = family.refit_rows(block, {})
    monkeypatch.setattr(solvers, "CACHE_CELLS", 7 * N)  # groups of 7 rows
    grouped = family.refit_rows(block, {})
    assert one[1].sum() > 30  # most samples solved by the block search
    assert_array_equal(one[1], grouped[1])
    assert list(one[2]) == list(grouped[2])
    for k, v in one[0].items():
        assert_array_equal(v, grouped[0][k])
