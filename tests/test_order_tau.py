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


def _pairwise_count(r: np.ndarray) -> int:
    """Discordant pairs by comparing every pair (the definition: i < j and r[i] > r[j])."""
    return int(np.count_nonzero(np.triu(r[:, None] > r[None, :], 1)))


@pytest.mark.parametrize(
    "ranks",
    [
        [],
        [0],
        [0, 0],
        [1, 0],
        [0, 1],
        [0, 0, 0, 0],
        [3, 2, 1, 0],
        [0, 1, 2, 3, 4],
        [4, 3, 2, 1, 0],  # m = 5: one past a power of two
        [2, 0, 1, 1, 0],
        [1, 1, 0, 0, 1, 0],
    ],
)
def test_discordant_pairs_edge_cases(ranks):
    r = np.array(ranks, dtype=np.intp)
    assert order.discordant_pairs(r) == _pairwise_count(r)


@pytest.mark.parametrize("m", [1, 2, 3, 4, 5, 7, 8, 9, 16, 17, 255, 256, 257, 1500])
def test_discordant_pairs_match_the_pairwise_count(m):
    """Random dense ranks with ties (m distinct values among 1,500), against the count by
    definition."""
    rng = np.random.default_rng(m)
    raw = rng.integers(0, m, 1500)
    r = np.unique(raw, return_inverse=True)[1].reshape(-1)
    assert order.discordant_pairs(r) == _pairwise_count(r)


@pytest.mark.parametrize("m", [2, 50, 4096, 100_000])
def test_discordant_pairs_match_scipys_counter(m):
    """100,000 dense ranks against the merge-sort counter behind ``scipy.stats.kendalltau``
    (``scipy.stats._stats._kendall_dis``, reference library, with position as the sorted
    first variable as kendalltau calls it)."""
    from scipy.stats._stats import _kendall_dis

    rng = np.random.default_rng(m + 1)
    r = np.unique(rng.integers(0, m, 100_000), return_inverse=True)[1].reshape(-1)
    n = r.size
    ref = int(_kendall_dis(np.arange(1, n + 1, dtype=np.intp), (r + 1).astype(np.intp)))
    assert order.discordant_pairs(r) == ref
    trend = np.argsort(np.argsort(np.arange(n) + rng.normal(0, 50, n), kind="stable"))
    ref = int(_kendall_dis(np.arange(1, n + 1, dtype=np.intp), (trend + 1).astype(np.intp)))
    assert order.discordant_pairs(trend) == ref


def test_long_route_needs_no_scipy_stats():
    """The order check of a long series imports nothing of scipy.stats (its import costs
    about 0.6 s): run in a fresh interpreter."""
    import subprocess
    import sys

    code = (
        "import sys, numpy as np\n"
        "from studykit.stats.order import check_order\n"
        "x = np.round(np.random.default_rng(3).normal(10, 0.01, 20000), 4)\n"
        "r = check_order(x)\n"
        "print(r.status, 'scipy.stats' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["in_order", "False"]
