"""Is the order of the values the order of production? Checks made before any run rule.

Control charts and their run rules read the values in the order they were made. A file sorted
by value (as life tests and many lab reports list their results: shortest life first) has lost
that order: a sorted series makes the moving ranges tiny, puts every extreme value at one end
and turns the run and trend rules into statements about the sorting. Phase I on such data
removes values for no reason and proves nothing about stability.

:func:`check_order` flags

* ``sorted``: the values never decrease (or never increase) over the whole series, with at
  least :data:`MIN_VALUES` values and not all equal;
* ``nearly_sorted``: Kendall's rank correlation between value and position is at least
  :data:`TAU_SORTED` in size (fewer than 5 % of all pairs out of order) and the trend test
  rejects "no trend" at :data:`ALPHA`. Kendall's tau as a test of trend against time order:
  H. B. Mann (1945), "Nonparametric tests against trend", *Econometrica* 13(3), 245-259;
  M. G. Kendall, *Rank Correlation Methods* (1975); computed as ``scipy.stats.kendalltau``
  computes it, bit for bit (:func:`kendall_tau_position`; the discordant pairs of long series
  counted by :func:`discordant_pairs`, without importing ``scipy.stats``).
  The threshold 0.9 is ours (common practice, no source): a drifting process that is really in
  time order rarely orders 95 % of its pairs, and if it does, its stability is not shown either;
* ``life_test``: the characteristic is named as a life or endurance result ("cycles to
  failure", "endurance", "life", "time to failure"...) and the file has no time column, so
  nothing says in which order the parts were made (ours, a naming heuristic).

The analysis does not apply run rules to flagged data, removes nothing automatically and
withholds the verdict: stability could not be judged from the order of the data.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
from scipy import special

from studykit.stats.result import Result

__all__ = ["OrderCheck", "check_order", "TAU_SORTED", "ALPHA", "MIN_VALUES", "LIFE_TEST_WORDS"]

#: |Kendall tau| between value and position at or above which a series counts as nearly sorted
#: (ours: at most 5 % of the pairs are out of order; common practice, no source).
TAU_SORTED = 0.9
#: Level of the trend test that must also reject "no trend" (common practice, no source).
ALPHA = 0.001
#: Shorter series are not checked (a short run can be monotone by chance: 2/n! for n values).
MIN_VALUES = 8
#: Words in a characteristic's name or unit that mark a life-test result (ours).
LIFE_TEST_WORDS = (
    "to failure",
    "until failure",
    "failure",
    "endurance",
    "lifetime",
    "life",
    "cycles to",
    "time to",
    "revolutions to",
    "survival",
    "lebensdauer",
    "bis ausfall",
    "ausfall",
    "standzeit",
    "zyklen bis",
)


@dataclass(frozen=True)
class OrderCheck(Result):
    """Outcome of :func:`check_order`.

    Attributes
    ----------
    status : str
        ``"in_order"`` (nothing found), ``"sorted"``, ``"nearly_sorted"``, ``"life_test"`` or
        ``"not_checked"`` (fewer than :data:`MIN_VALUES` values).
    flagged : bool
        True for ``sorted``, ``nearly_sorted`` and ``life_test``: run rules and automatic
        removal do not apply and the verdict is withheld.
    tau, p_value : float or None
        Kendall's tau between value and position and the two-sided p-value of its test.
    direction : str or None
        ``"increasing"`` or ``"decreasing"`` for (nearly) sorted data.
    n : int
        Values checked.
    text : str
        What was found, in plain words.
    method : str
        The test and its source, in words.
    """

    status: str
    flagged: bool
    tau: float | None
    p_value: float | None
    direction: str | None
    n: int
    text: str
    method: str = (
        "monotone check, then Kendall's tau between value and position (Mann 1945; "
        "scipy.stats.kendalltau), |tau| >= 0.9 with p < 0.001"
    )

    def to_dict(self) -> dict:
        """JSON-safe dictionary."""

        def f(v):
            return None if v is None or not math.isfinite(v) else float(v)

        return {
            "status": self.status,
            "flagged": self.flagged,
            "tau": f(self.tau),
            "p_value": f(self.p_value),
            "direction": self.direction,
            "n": int(self.n),
            "text": self.text,
            "method": self.method,
        }


_LIFE_TEST_RE = re.compile(
    "|".join(r"(?<![a-z])" + re.escape(w) + r"(?![a-z])" for w in LIFE_TEST_WORDS)
)


def _life_test_name(name: str, unit: str | None) -> bool:
    text = " ".join(str(t) for t in (name, unit or "") if t).lower().replace("_", " ")
    text = re.sub(r"\s+", " ", text)
    return _LIFE_TEST_RE.search(text) is not None


def check_order(
    values,
    *,
    name: str = "",
    unit: str | None = None,
    has_times: bool = False,
    perm: np.ndarray | None = None,
    ranks: tuple[np.ndarray, np.ndarray] | None = None,
) -> OrderCheck:
    """Check whether the values are in production order or sorted (see the module notes).

    Parameters
    ----------
    values : array_like
        The values in file order (missing values are skipped).
    name, unit : str, optional
        Characteristic name and unit, for the life-test check.
    has_times : bool
        The file gives a time for each value (then a life-test name alone is not flagged).
    perm, ranks : ndarray or (ndarray, ndarray), optional
        ``np.argsort(values)``, or the dense ranks and their counts (see
        :func:`kendall_tau_position`), when the caller has made them (to share the sort with
        other steps); used only when every value is finite, else the sort is made here.

    Returns
    -------
    OrderCheck

    Examples
    --------
    >>> check_order([1.0, 2.0, 2.0, 3.5, 4.0, 7.0, 9.0, 9.5, 12.0]).status
    'sorted'
    >>> check_order([5.1, 4.9, 5.3, 5.0, 4.8, 5.2, 5.1, 4.9, 5.0, 5.2]).status
    'in_order'
    """
    x = np.asarray(values, dtype=float).ravel()
    x = x[np.isfinite(x)]
    n = int(x.size)
    life = _life_test_name(name, unit) and not has_times
    if n < MIN_VALUES:
        if life:
            return OrderCheck("life_test", True, None, None, None, n, _life_text(name))
        return OrderCheck(
            "not_checked",
            False,
            None,
            None,
            None,
            n,
            f"only {n} values: the order was not checked (fewer than {MIN_VALUES}).",
        )
    monotone = _monotone(x, n)
    if monotone is not None:
        return monotone
    tau, p = _tau_with(x, n, perm, ranks)
    if math.isfinite(tau) and abs(tau) >= TAU_SORTED and p < ALPHA:
        direction = "increasing" if tau > 0 else "decreasing"
        return OrderCheck(
            "nearly_sorted",
            True,
            tau,
            p,
            direction,
            n,
            f"the {n} values are nearly sorted ({direction}; Kendall's tau {tau:.2f} against "
            f"their position, p = {p:.2g}): the file is very likely not in production order, so "
            "stability cannot be judged from it. Put the values in the order the parts were made "
            "to judge stability.",
        )
    if life:
        return OrderCheck("life_test", True, tau, p, None, n, _life_text(name))
    return OrderCheck(
        "in_order",
        False,
        tau if math.isfinite(tau) else None,
        p if math.isfinite(p) else None,
        None,
        n,
        f"no sign of sorted data (Kendall's tau against position {tau:.2f}).",
    )


def _tau_with(x: np.ndarray, n: int, perm, ranks) -> tuple[float, float]:
    """:func:`kendall_tau_position` of the ``n`` values ``x`` with the caller's sort, if any."""
    if ranks is not None and ranks[0].size == n:
        return kendall_tau_position(x, ranks=ranks)
    return kendall_tau_position(x, perm=perm if perm is not None and perm.size == n else None)


def _monotone(x: np.ndarray, n: int) -> OrderCheck | None:
    """The check of values that are all equal or sorted throughout; None otherwise."""
    # neighbours compared in place (no array of 10^6 differences): up/down/equal as np.diff's
    # signs would say (the values are finite)
    rising = bool((x[1:] >= x[:-1]).all())
    falling = bool((x[1:] <= x[:-1]).all())
    if rising and falling:
        return OrderCheck("in_order", False, None, None, None, n, "every value is the same.")
    if not (rising or falling):
        return None
    direction = "increasing" if rising else "decreasing"
    return OrderCheck(
        "sorted",
        True,
        1.0 if direction == "increasing" else -1.0,
        None,
        direction,
        n,
        f"the {n} values are sorted ({direction} throughout the file): the file is not in "
        "production order, so stability cannot be judged from it. Put the values in the "
        "order the parts were made (with a time or sequence column) to judge stability.",
    )


#: Up to this many values :func:`kendall_tau_position` counts the discordant pairs by one
#: comparison of every pair (n^2 / 2 comparisons, faster than the sorting route's fixed cost);
#: longer series are ranked with one sort and their discordant pairs counted by
#: :func:`discordant_pairs` (O(n log n), no scipy.stats import).
PAIRWISE_MAX_N = 600


def _discordant_and_ties(
    x: np.ndarray,
    perm: np.ndarray | None = None,
    ranks: tuple[np.ndarray, np.ndarray] | None = None,
) -> tuple[int, np.ndarray]:
    """(discordant pairs between position and value, sizes of the groups of tied values);
    ``perm``: ``np.argsort(x)`` when the caller has it; ``ranks``: the dense ranks of ``x`` in
    position order and the count of each rank, when the caller has them (no sort here)."""
    size = int(x.size)
    if ranks is not None and size > PAIRWISE_MAX_N:
        dense, counts = ranks
        cnt = np.asarray(counts).astype("int64", copy=False)
        return discordant_pairs(dense, int(cnt.size)), cnt
    if size <= PAIRWISE_MAX_N:
        dis = int(np.count_nonzero(np.triu(x[:, None] > x[None, :], 1)))
        cnt = np.unique(x, return_counts=True)[1].astype("int64", copy=False)
        return dis, cnt
    if perm is None:
        perm = np.argsort(x)
    ordered = x[perm]
    dense = np.r_[False, ordered[1:] != ordered[:-1]].cumsum(dtype=np.intp)
    in_order = np.empty(size, dtype=np.int32 if size < 2**31 - 1 else np.intp)
    in_order[perm] = dense  # dense ranks 0, 1, ... of the values, in position order
    cnt = np.bincount(dense).astype("int64", copy=False)  # (in value order: one sweep)
    return discordant_pairs(in_order, int(cnt.size)), cnt


def discordant_pairs(ranks, m: int | None = None) -> int:
    """Number of pairs i < j with ``ranks[i] > ranks[j]`` (tied ranks never count).

    ``ranks`` are dense ranks 0 .. m-1 (every value in between occurs). The count is the one
    merge-sort counters give (scipy's ``_kendall_dis``, behind ``scipy.stats.kendalltau``), here
    by a most-significant-bit-first radix pass over the ranks, O(n log m) in numpy: for each bit
    k from the highest down, the values are kept ordered by (rank >> (k + 1), position); in each
    such group a pair whose highest differing bit is k is discordant when the element with
    bit k set comes first, so the level adds, for every element with bit k clear, the number of
    elements with bit k set before it in its group (running sums over the whole array, with
    each group's offset taken from the rank counts); then a stable partition on bit k (zeros
    first) in each group gives the order of the next level. Tied ranks share every bit and are
    never counted.

    >>> discordant_pairs(np.array([2, 0, 1, 1, 0]))
    6
    >>> discordant_pairs(np.array([0, 1, 2]))
    0
    """
    r = np.asarray(ranks).ravel()
    n = int(r.size)
    if n < 2:
        return 0
    m = int(r.max()) + 1 if m is None else int(m)
    dt = np.int32 if n < 2**31 - 1 and m < 2**31 - 1 else np.int64
    v = r.astype(dt)  # (a copy: the order is rebuilt level by level)
    nbits = max(1, (m - 1).bit_length())
    below = np.zeros((1 << nbits) + 1, dtype=np.int64)  # below[r]: elements with a rank < r
    np.cumsum(np.bincount(v, minlength=1 << nbits), out=below[1:])
    idx = np.arange(n, dtype=dt)
    new, key, ones, bit, at = (np.empty_like(v) for _ in range(5))
    total = 0
    for k in range(nbits - 1, -1, -1):
        below_k = below[:: 1 << k]  # elements with rank >> k below each key w = 0, 1, ...
        per_key = np.diff(below_k)
        c0, c1 = per_key[0::2], per_key[1::2]  # bit k clear / set, per group g = w >> 1
        ones_before = np.zeros(c1.size, dtype=np.int64)  # ones in the groups before g
        np.cumsum(c1[:-1], out=ones_before[1:])
        # new position: a zero at i goes to i - (ones up to i) + ones_before[g]; a one to
        # (ones before i) + (zeros in the groups up to g) = ones up to i - 1 + offset
        offset = np.empty(per_key.size, dtype=dt)
        offset[0::2] = ones_before
        offset[1::2] = below_k[1:-1:2] - ones_before - 1
        np.right_shift(v, k, out=key)
        np.bitwise_and(key, 1, out=bit)
        np.cumsum(bit, out=ones)  # ones up to and including each element
        # sum over the zeros of the ones before them in their group: all running sums, less
        # those of the ones (the j-th one of group g has ones_before[g] + j), less the ones of
        # earlier groups counted for each zero
        total += int(ones.sum(dtype=np.int64))
        total -= int(((c0 + c1) * ones_before + c1 * (c1 + 1) // 2).sum())
        np.subtract(idx, ones, out=at)  # zeros: i - ones
        np.subtract(ones, at, out=ones)  # ones: (ones) = (i - ones) + bit * (2 ones - i)
        np.multiply(ones, bit, out=ones)
        np.add(at, ones, out=at)
        # (keys are in range: "clip" checks nothing; "raise" would copy through a buffer)
        np.take(offset, key, out=bit, mode="clip")
        np.add(bit, at, out=bit)
        new[bit] = v
        v, new = new, v
    return total


def kendall_tau_position(
    x, *, perm: np.ndarray | None = None, ranks: tuple[np.ndarray, np.ndarray] | None = None
) -> tuple[float, float]:
    """Kendall's tau-b between position and ``x`` and its two-sided p-value, as
    ``scipy.stats.kendalltau(np.arange(n), x)`` returns them, bit for bit.

    The discordant pairs and the ties are counted (:func:`_discordant_and_ties`) and scipy's
    arithmetic for tau-b and for the asymptotic p-value (positions have no ties) is repeated
    step by step, without scipy's second sort and argument handling. The cases where scipy
    uses its exact p-value (no ties and n <= 33, or at most one pair out of place either way)
    are passed to scipy itself. ``perm`` is ``np.argsort(x)`` when the caller has made it
    (any order of tied values gives the same counts); ``ranks`` are the dense ranks 0..m-1 of
    ``x`` in position order and the count of each rank (equal values one rank) when the caller
    has them (then nothing is sorted here).

    >>> x = np.array([5.1, 4.9, 5.3, 5.0, 4.8, 5.2, 5.1, 4.9, 5.0, 5.2, 5.4, 4.7] * 3)
    >>> from scipy import stats
    >>> r = stats.kendalltau(np.arange(x.size), x)
    >>> kendall_tau_position(x) == (float(r.statistic), float(r.pvalue))
    True
    """
    x = np.asarray(x, dtype=float).ravel()
    size = int(x.size)
    if size > 2:
        dis, cnt = _discordant_and_ties(x, perm, ranks)
        tot = (size * (size - 1)) // 2
        cnt = cnt[cnt > 1]
        ytie = int((cnt * (cnt - 1) // 2).sum())
        y0 = int((cnt * (cnt - 1.0) * (cnt - 2)).sum())
        y1 = int((cnt * (cnt - 1.0) * (2 * cnt + 5)).sum())
        xtie, x0, x1, ntie = 0, 0, 0, 0  # positions are all different
        exact = ytie == 0 and (size <= 33 or min(dis, tot - dis) <= 1)
        if ytie != tot and not exact:
            con_minus_dis = tot - xtie - ytie + ntie - 2 * dis
            tau = con_minus_dis / np.sqrt(tot - xtie) / np.sqrt(tot - ytie)
            tau = np.minimum(1.0, max(-1.0, tau))
            m = size * (size - 1.0)
            var = (
                (m * (2 * size + 5) - x1 - y1) / 18
                + (2 * xtie * ytie) / m
                + x0 * y0 / (9 * m * (size - 2))
            )
            z = con_minus_dis / np.sqrt(var)
            pvalue = 2 * special.ndtr(-np.abs(z))
            return float(tau), float(pvalue)
    from scipy import stats

    res = stats.kendalltau(np.arange(size), x)
    return float(res.statistic), float(res.pvalue)


def _life_text(name: str) -> str:
    return (
        f"'{name}' reads as a life-test result and the file has no time column: nothing "
        "says in which order the parts were made, so stability cannot be judged from the "
        "order of the data. Add a time or sequence column in production order to judge it."
    )
