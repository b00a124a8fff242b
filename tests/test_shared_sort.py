"""The sort shared by the production-order check and the normality tests
(``studykit.analysis._SharedSort``; ``perm``/``ordered`` arguments): the same statistics as
each step sorting on its own, checked against the reference library (scipy.stats.kendalltau,
scipy.stats.anderson, scipy.stats.shapiro) on invented data with ties."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from studykit.analysis import _SharedSort
from studykit.stats import normality, order


@pytest.fixture(scope="module")
def values():
    rng = np.random.default_rng(14)
    return np.round(rng.normal(10.0, 0.01, 20_000), 4)  # invented; many ties


def test_order_check_with_the_shared_permutation_matches_scipy(values):
    shared = _SharedSort(values)
    assert shared.perm is not None
    ref = stats.kendalltau(np.arange(values.size), values)
    got = order.kendall_tau_position(values, perm=shared.perm)
    assert got == (float(ref.statistic), float(ref.pvalue))
    res = order.check_order(values, perm=shared.perm)
    assert (res.tau, res.p_value) == got


def test_normality_tests_with_the_shared_sort_match_scipy(values):
    shared = _SharedSort(values)
    ordered = shared.ordered(values.copy())  # equal values, another array: still shared
    assert ordered is not None and np.array_equal(ordered, np.sort(values))
    ad = normality.anderson_darling(values, ordered=ordered)
    assert ad == normality.anderson_darling(values)
    ref = stats.anderson(values, method="interpolate")
    assert ad.a2 == pytest.approx(float(ref.statistic), rel=1e-12)
    before = ordered.copy()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # scipy: p-value may be inaccurate
        sw = normality.shapiro_wilk(values, ordered=ordered)
        ref_sw = stats.shapiro(values)
    assert np.array_equal(ordered, before)  # the shared sort is not changed
    assert (sw.w, sw.p_value) == (float(ref_sw[0]), float(ref_sw[1]))


def test_other_values_are_not_given_the_shared_sort(values):
    shared = _SharedSort(values)
    assert shared.ordered(values[1:]) is None
    other = values.copy()
    other[5] += 1.0
    assert shared.ordered(other) is None
    assert _SharedSort(values[:100]).perm is None  # short series: the pairwise route
    with_nan = values.copy()
    with_nan[3] = np.nan
    assert _SharedSort(with_nan).perm is None


def test_hashed_ranks_give_the_argsort_routes_numbers():
    """From HASHED_MIN_N values on (pandas loaded) the ranks come from a hash factorization:
    the order check, Anderson-Darling and Shapiro-Wilk get the same numbers as with the
    argsort route; tau and its p-value checked against scipy.stats.kendalltau."""
    import pandas  # noqa: F401 - loaded, as after reading a large file

    from studykit.analysis import HASHED_MIN_N

    rng = np.random.default_rng(15)
    values = np.round(rng.normal(10.0, 0.01, HASHED_MIN_N + 5_000), 4)  # invented; many ties
    shared = _SharedSort(values)
    assert shared.perm is None and shared.ranks is not None
    ranks, counts = shared.ranks
    perm = np.argsort(values, kind="stable")
    ordered = values[perm]
    dense = np.r_[False, ordered[1:] != ordered[:-1]].cumsum()
    expected = np.empty(values.size, dtype=np.int64)
    expected[perm] = dense
    assert np.array_equal(ranks, expected)
    assert np.array_equal(counts, np.bincount(dense))
    assert shared.ordered(values).tobytes() == np.sort(values).tobytes()
    ref = stats.kendalltau(np.arange(values.size), values)
    got = order.check_order(values, ranks=shared.ranks)
    assert (got.tau, got.p_value) == (float(ref.statistic), float(ref.pvalue))
    assert order.kendall_tau_position(values, perm=perm) == (got.tau, got.p_value)


def test_hashed_route_keeps_the_sign_of_each_zero():
    """0.0 and -0.0 are one value for the ranks (they compare equal), but the sorted values
    keep each zero's own sign, as np.sort does."""
    import pandas  # noqa: F401

    from studykit.analysis import HASHED_MIN_N

    rng = np.random.default_rng(16)
    values = np.round(rng.normal(0.0, 1.0, HASHED_MIN_N), 1)  # invented; zeros of both signs
    values[::7] = -0.0
    shared = _SharedSort(values)
    assert shared.ranks is not None
    got = shared.ordered(values)
    assert got.tobytes() == np.sort(values).tobytes()
    assert np.signbit(got[got == 0]).sum() == np.signbit(values[values == 0]).sum()
