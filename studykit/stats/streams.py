"""Processes of several streams (mould cavities, spindles, nests, fixtures, heads).

A multiple-stream process makes the same characteristic in parallel: a four-cavity tool gives
four parts per shot. The study then asks three things beyond the capability of the mix:

* **Do the streams differ in location?** One-way analysis of variance (Fisher's F test of equal
  stream means), :func:`location_test`. Source: R. A. Fisher, *Statistical Methods for Research
  Workers* (1925); the computation as in NIST/SEMATECH e-Handbook of Statistical Methods,
  section 7.4.3 ("Are the means equal?"). Checked against ``scipy.stats.f_oneway``.
* **Do the streams differ in spread?** The Brown-Forsythe test (Levene's test with the group
  medians as centres), :func:`spread_test`. Sources: H. Levene (1960), "Robust tests for
  equality of variances", in *Contributions to Probability and Statistics*, Stanford Univ.
  Press, 278-292; M. B. Brown & A. B. Forsythe (1974), "Robust tests for the equality of
  variances", *JASA* 69(346), 364-367; NIST e-Handbook section 1.3.5.10 (Levene test, median
  variant). Checked against ``scipy.stats.levene(..., center='median')``.
* **Which stream is off?** The group chart, :func:`group_chart`: per subgroup, the largest and
  the smallest stream mean against one pair of limits of a stream mean. Source: D. F. Boyd
  (1950), "Applying the group chart for X and R", *Industrial Quality Control* 7(3), 22-25;
  D. C. Montgomery, *Introduction to Statistical Quality Control*, section on multiple-stream
  processes (group control charts). The limits (grand mean +- 3 sigma_within / sqrt(n)) and
  the longest run of one stream at the top or bottom are as we recall them from these
  descriptions ("from memory"); no run-length rule is applied.

Both tests use every reading of each stream (the subgroups are ignored), at
:data:`ALPHA` (common practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from studykit.errors import StudyInputError
from studykit.stats.constants import d2
from studykit.stats.lazy import f_sf

__all__ = [
    "ALPHA",
    "StreamTest",
    "GroupChart",
    "location_test",
    "spread_test",
    "group_chart",
    "stream_order",
    "RUN_RULE_ARL",
    "run_rule_arl",
    "run_rule_length",
]

#: Significance level of the location and spread tests (common practice, no source).
ALPHA = 0.05


def _f(v):
    if v is None:
        return None
    v = float(v)
    return v if np.isfinite(v) else None


@dataclass(frozen=True)
class StreamTest:
    """One test of "the streams do not differ".

    Attributes
    ----------
    name : str
        ``"one_way_anova"`` (location) or ``"brown_forsythe"`` (spread).
    statistic, df_between, df_within, p_value : float
        F statistic, its degrees of freedom, and the p-value.
    alpha : float
        Level at which ``differ`` is decided.
    differ : bool
        p-value below ``alpha``.
    text : str
        The result in words.
    """

    name: str
    statistic: float
    df_between: int
    df_within: int
    p_value: float
    alpha: float
    differ: bool
    text: str

    def to_dict(self) -> dict:
        return {
            "test": self.name,
            "statistic": _f(self.statistic),
            "df_between": self.df_between,
            "df_within": self.df_within,
            "p_value": _f(self.p_value),
            "alpha": self.alpha,
            "differ": self.differ,
            "text": self.text,
        }


def stream_order(streams) -> list[str]:
    """Distinct stream labels in order of first appearance."""
    out: dict[str, None] = {}
    for s in np.asarray(streams).astype(str).tolist():
        out.setdefault(s, None)
    return list(out)


def _groups(values, streams, what):
    x = np.asarray(values, dtype=float)
    s = np.asarray(streams).astype(str)
    if x.shape != s.shape:
        raise StudyInputError(
            f"{what}: {x.size} values but {s.size} stream labels; give one label per value."
        )
    keep = np.isfinite(x)
    x, s = x[keep], s[keep]
    names = stream_order(s)
    groups = [x[s == k] for k in names]
    if len(groups) < 2:
        raise StudyInputError(f"{what} needs at least 2 streams; the data have {len(groups)}.")
    small = [k for k, g in zip(names, groups, strict=True) if g.size < 2]
    if small:
        raise StudyInputError(
            f"{what} needs at least 2 values per stream; stream(s) {', '.join(small)} have fewer."
        )
    return names, groups


def _anova(groups):
    """Fisher's one-way F from the between- and within-group sums of squares."""
    n = np.array([g.size for g in groups], dtype=float)
    means = np.array([g.mean() for g in groups])
    grand = np.concatenate(groups).mean()
    ss_between = float(np.sum(n * (means - grand) ** 2))
    ss_within = float(sum(np.sum((g - m) ** 2) for g, m in zip(groups, means, strict=True)))
    k, total = len(groups), int(n.sum())
    df1, df2 = k - 1, total - k
    if ss_within == 0:
        f = np.inf if ss_between > 0 else np.nan
        p = 0.0 if ss_between > 0 else np.nan
    else:
        f = (ss_between / df1) / (ss_within / df2)
        p = f_sf(f, df1, df2)
    return float(f), df1, df2, p


def location_test(values, streams, *, alpha: float = ALPHA) -> StreamTest:
    """One-way ANOVA: do the stream means differ?

    >>> t = location_test([1, 2, 3, 2, 3, 4], ["a", "a", "a", "b", "b", "b"])
    >>> round(t.statistic, 4), t.df_between, t.df_within
    (1.5, 1, 4)
    """
    _, groups = _groups(values, streams, "the location test of the streams")
    f, df1, df2, p = _anova(groups)
    differ = bool(np.isfinite(p) and p < alpha)
    text = (
        f"one-way ANOVA: F = {f:.3g} on {df1} and {df2} degrees of freedom, p = {p:.3g}: "
        + ("the stream means differ" if differ else "no difference between the stream means shown")
        + f" (at {alpha:g})"
    )
    return StreamTest("one_way_anova", f, df1, df2, p, alpha, differ, text)


def spread_test(values, streams, *, alpha: float = ALPHA, word: str = "stream") -> StreamTest:
    """Brown-Forsythe test (Levene's test about the stream medians): do the spreads differ?

    ``word`` names the groups in the text ("stream", "subgroup").

    >>> t = spread_test([1, 2, 3, 2, 3, 4, 0, 5, 9], list("aaabbbccc"))
    >>> t.name, t.df_between, t.df_within
    ('brown_forsythe', 2, 6)
    """
    _, groups = _groups(values, streams, "the spread test of the streams")
    dev = [np.abs(g - np.median(g)) for g in groups]
    f, df1, df2, p = _anova(dev)
    differ = bool(np.isfinite(p) and p < alpha)
    text = (
        f"Brown-Forsythe test: W = {f:.3g} on {df1} and {df2} degrees of freedom, "
        f"p = {p:.3g}: "
        + (
            f"the {word} spreads differ"
            if differ
            else f"no difference between the {word} spreads shown"
        )
        + f" (at {alpha:g})"
    )
    return StreamTest("brown_forsythe", f, df1, df2, p, alpha, differ, text)


@dataclass(frozen=True, eq=False)
class GroupChart:
    """Largest and smallest stream mean of each subgroup, with the limits of a stream mean.

    Attributes
    ----------
    labels : ndarray of str
        Subgroup labels in order.
    high, low : ndarray of float
        Largest / smallest stream mean of each subgroup.
    high_stream, low_stream : ndarray of str
        The stream that gave it.
    center, lcl, ucl : float
        Grand mean of the stream means and the limits grand mean +- 3 sigma / sqrt(n).
    sigma_within : float
        Mean of R/d2(n) over the (subgroup, stream) cells with n >= 2; with one reading per
        cell, the mean moving range of each stream / d2(2), averaged over the streams.
    n : int
        Readings per stream and subgroup (median), the n of the limits.
    beyond : tuple of (label, stream, side)
        Stream means outside the limits.
    longest_run : dict
        Longest run of one stream as the highest (``high``) and lowest (``low``) mean:
        ``{"stream", "length"}``.
    run_length : int
        r of the run rule (:func:`run_rule_length` for the number of streams).
    n_streams : int
        Streams on the chart.
    runs : tuple of dict
        Run-rule signals: one stream gave the highest (``side`` "high") or lowest ("low") mean
        in r or more successive subgroups; ``{"side", "stream", "first", "last", "length"}``.
    """

    labels: np.ndarray
    high: np.ndarray
    low: np.ndarray
    high_stream: np.ndarray
    low_stream: np.ndarray
    center: float
    lcl: float
    ucl: float
    sigma_within: float
    n: int
    beyond: tuple
    longest_run: dict
    run_length: int = 0
    runs: tuple = ()
    n_streams: int = 0

    def to_dict(self) -> dict:
        return {
            "center": _f(self.center),
            "lcl": _f(self.lcl),
            "ucl": _f(self.ucl),
            "sigma_within": _f(self.sigma_within),
            "n": self.n,
            "points": [
                {
                    "subgroup": str(lab),
                    "high": _f(h),
                    "high_stream": str(hs),
                    "low": _f(lo),
                    "low_stream": str(ls),
                }
                for lab, h, hs, lo, ls in zip(
                    self.labels.tolist(),
                    self.high.tolist(),
                    self.high_stream.tolist(),
                    self.low.tolist(),
                    self.low_stream.tolist(),
                    strict=True,
                )
            ],
            "beyond": [
                {"subgroup": str(a), "stream": str(b), "side": c} for a, b, c in self.beyond
            ],
            "longest_run": {k: dict(v) for k, v in self.longest_run.items()},
            "run_rule": {
                "streams": self.n_streams,
                "length": self.run_length,
                "arl": _f(run_rule_arl(self.n_streams, self.run_length))
                if self.n_streams >= 2 and self.run_length
                else None,
                "signals": [dict(r) for r in self.runs],
            },
        }


def _longest_run(seq) -> dict:
    best, best_len, cur, cur_len = None, 0, None, 0
    for s in seq:
        cur_len = cur_len + 1 if s == cur else 1
        cur = s
        if cur_len > best_len:
            best, best_len = s, cur_len
    return {"stream": best, "length": best_len}


#: In-control average run length the run rule aims at: at least that of one point beyond
#: 3-sigma limits, 1 / 0.0027 = 370 (common practice, no source).
RUN_RULE_ARL = 370.0


def run_rule_arl(streams: int, length: int) -> float:
    """In-control average number of subgroups until one stream is the highest (or, separately,
    the lowest) in ``length`` successive subgroups, when each subgroup's highest stream is any
    of ``streams`` with equal chance, independently: (s^r - 1) / (s - 1) (the waiting time for
    a run of r equal outcomes among s equally likely ones; plain probability, checked in the
    tests by a Monte Carlo).

    >>> run_rule_arl(2, 2), run_rule_arl(4, 6)
    (3.0, 1365.0)
    """
    s, r = int(streams), int(length)
    if s < 2 or r < 1:
        raise StudyInputError("the run rule needs at least 2 streams and a run of 1 or more.")
    return float((s**r - 1) // (s - 1))


def run_rule_length(streams: int, arl: float = RUN_RULE_ARL) -> int:
    """The shortest run r whose in-control ARL (:func:`run_rule_arl`) is at least ``arl``.

    The rule of the group chart: one stream giving the highest (or the lowest) mean in r
    successive subgroups signals that the stream differs (Boyd 1950 describes reading such
    runs; Nelson, J. Quality Technology 18 (1986) 255-256 tabulates r by the number of
    streams; both from memory, not checked against the texts). r here is ours, from the ARL:
    9, 7, 6, 5, 5 for 2 to 6 streams and 4 for 7 to 10 streams. Two sides (highest, lowest)
    are watched, so the chart's in-control ARL of the rule is about half that of one side.

    >>> [run_rule_length(s) for s in (2, 3, 4, 5, 6, 7, 10)]
    [9, 7, 6, 5, 5, 4, 4]
    """
    s = int(streams)
    if s < 2:
        raise StudyInputError("the run rule needs at least 2 streams.")
    r = 1
    while run_rule_arl(s, r) < arl:
        r += 1
    return r


def _runs(seq, labels, side: str, r: int) -> list[dict]:
    """Every maximal run of one stream of length >= r in ``seq``."""
    out = []
    start = 0
    for i in range(1, len(seq) + 1):
        if i == len(seq) or seq[i] != seq[start]:
            if i - start >= r:
                out.append(
                    {
                        "side": side,
                        "stream": str(seq[start]),
                        "first": str(labels[start]),
                        "last": str(labels[i - 1]),
                        "length": i - start,
                    }
                )
            start = i
    return out


def group_chart(values, subgroups, streams) -> GroupChart:
    """The group chart of a multiple-stream process (Boyd 1950).

    A subgroup where some stream has no reading uses the streams it has. The run rule
    (:func:`run_rule_length`) flags one stream giving the highest or the lowest mean in r
    successive subgroups (``runs``).

    >>> g = group_chart([1, 3, 2, 4, 1, 3, 2, 4], list("11112222"), list("abababab"))
    >>> g.high.tolist(), g.high_stream.tolist(), g.low_stream.tolist()
    ([3.5, 3.5], ['b', 'b'], ['a', 'a'])
    """
    x = np.asarray(values, dtype=float)
    sg = np.asarray(subgroups).astype(str)
    st = np.asarray(streams).astype(str)
    if not (x.shape == sg.shape == st.shape):
        raise StudyInputError("the group chart needs one subgroup and one stream label per value.")
    keep = np.isfinite(x)
    x, sg, st = x[keep], sg[keep], st[keep]
    labels = stream_order(sg)
    names = stream_order(st)
    if len(names) < 2:
        raise StudyInputError(
            f"the group chart needs at least 2 streams; the data have {len(names)}."
        )
    li = {k: i for i, k in enumerate(labels)}
    si = {k: i for i, k in enumerate(names)}
    r = np.array([li[v] for v in sg.tolist()])
    c = np.array([si[v] for v in st.tolist()])
    shape = (len(labels), len(names))
    count = np.zeros(shape)
    total = np.zeros(shape)
    np.add.at(count, (r, c), 1)
    np.add.at(total, (r, c), x)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = total / count
    hi_m = np.where(count > 0, means, -np.inf)
    lo_m = np.where(count > 0, means, np.inf)
    hi_i, lo_i = hi_m.argmax(axis=1), lo_m.argmin(axis=1)
    rows = np.arange(len(labels))
    high, low = hi_m[rows, hi_i], lo_m[rows, lo_i]
    n = int(np.median(count[count > 0]))
    sigma = _group_sigma(x, r, c, count, n)
    center = float(np.nanmean(means))
    half = 3 * sigma / np.sqrt(n)
    lcl, ucl = center - half, center + half
    names_arr = np.asarray(names)
    beyond = _beyond(labels, names, count, means, lcl, ucl)
    high_stream, low_stream = names_arr[hi_i], names_arr[lo_i]
    r_len = run_rule_length(len(names))
    return GroupChart(
        labels=np.asarray(labels),
        high=high,
        low=low,
        high_stream=high_stream,
        low_stream=low_stream,
        center=center,
        lcl=lcl,
        ucl=ucl,
        sigma_within=sigma,
        n=n,
        beyond=tuple(beyond),
        longest_run={
            "high": _longest_run(high_stream.tolist()),
            "low": _longest_run(low_stream.tolist()),
        },
        run_length=r_len,
        runs=tuple(
            _runs(high_stream.tolist(), labels, "high", r_len)
            + _runs(low_stream.tolist(), labels, "low", r_len)
        ),
        n_streams=len(names),
    )


def _group_sigma(x, r, c, count, n) -> float:
    """Within sigma of the group chart: mean of cell range / d2 (cells of 2 or more readings),
    or with cells of one reading the mean moving range of each stream / d2(2)."""
    if n >= 2:
        ratios = []
        for i in range(count.shape[0]):
            for j in range(count.shape[1]):
                k = int(count[i, j])
                if k >= 2:
                    cell = x[(r == i) & (c == j)]
                    ratios.append((cell.max() - cell.min()) / d2(k))
        return float(np.mean(ratios))
    per_stream = []
    for j in range(count.shape[1]):
        s = x[c == j]
        if s.size >= 2:
            per_stream.append(np.mean(np.abs(np.diff(s))) / d2(2))
    return float(np.mean(per_stream))


def _beyond(labels, names, count, means, lcl, ucl) -> list:
    """``(subgroup, stream, "above"|"below")`` of every stream mean beyond the limits."""
    out = []
    for i, lab in enumerate(labels):
        for j in range(len(names)):
            if count[i, j] and means[i, j] > ucl:
                out.append((lab, names[j], "above"))
            elif count[i, j] and means[i, j] < lcl:
                out.append((lab, names[j], "below"))
    return out
