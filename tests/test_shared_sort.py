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
