"""Kendall's tau against position (``studykit.stats.order.kendall_tau_position``) equals
``scipy.stats.kendalltau(np.arange(n), x)`` bit for bit (reference library: scipy.stats,
kendalltau with its default tau-b and automatic p-value method), on invented series with and
without ties, nearly sorted ones and ones where scipy uses its exact p-value."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from studykit.stats import order


def _series(n: int, kind: int, rng) -> np.ndarray:
    if kind == 0:
        return rng.normal(size=n)
    if kind == 1:
        return rng.integers(0, 5, n).astype(float)  # many ties
    if kind == 2:
        return np.round(rng.normal(size=n) + 0.2 * np.arange(n), 1)  # a trend with ties
    x = np.sort(rng.normal(size=n))  # one pair out of place: scipy's exact p-value
    i = int(rng.integers(0, n - 1))
    x[[i, i + 1]] = x[[i + 1, i]]
    return x


@pytest.mark.parametrize("n", [3, 8, 20, 33, 34, 35, 60, 125, 140, 333, 600, 601, 2000])
@pytest.mark.parametrize("kind", [0, 1, 2, 3])
def test_tau_matches_scipy_bit_for_bit(n, kind):
    rng = np.random.default_rng(1000 * n + kind)
    for _ in range(5):
        x = _series(n, kind, rng)
        ref = stats.kendalltau(np.arange(n), x)
        tau, p = order.kendall_tau_position(x)
        assert (tau, p) == (float(ref.statistic), float(ref.pvalue))


def test_pairwise_route_is_taken_and_scipy_is_not_called(monkeypatch):
    """Up to PAIRWISE_MAX_N values the counts are our own (scipy.stats.kendalltau unused)."""
    x = np.random.default_rng(7).normal(size=125)
    expected = stats.kendalltau(np.arange(125), x)

    def forbidden(*a, **k):
        raise AssertionError("scipy.stats.kendalltau called")

    monkeypatch.setattr(stats, "kendalltau", forbidden)
    assert order.kendall_tau_position(x) == (float(expected.statistic), float(expected.pvalue))


@pytest.mark.parametrize("kind", [0, 1, 2, 3])
def test_long_series_match_scipy_bit_for_bit(kind):
    """The sorting route (beyond PAIRWISE_MAX_N values), 100,000 values."""
    rng = np.random.default_rng(99 + kind)
    x = _series(100_000, kind, rng)
    ref = stats.kendalltau(np.arange(x.size), x)
    assert order.kendall_tau_position(x) == (float(ref.statistic), float(ref.pvalue))
