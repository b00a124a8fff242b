"""Speed check: individuals chart limits + run rules on 1,000,000 values.

Run: ``.venv/bin/python tests/bench/bench_charts.py [--n 1000000] [--naive-n 100000]``

Prints the seconds for ``control_chart`` (limits, zones, Nelson rules 1-8 on the individuals,
rules 1-2 on the moving range; and a second run with all eight on both) and for a naive route
(plain Python loops over the points for the same limits and Nelson rules). The naive route runs
on ``--naive-n`` values and is scaled linearly to ``--n`` (every step is O(n)); pass
``--naive-n`` equal to ``--n`` to time it in full. Target: <= 0.5 s for 1,000,000 values.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from studykit.stats.charts import control_chart


def naive_imr(x):
    """Limits and Nelson 1-8 with Python loops: the route a spreadsheet macro would take."""
    n = len(x)
    mean = sum(x) / n
    mrs = [abs(x[i] - x[i - 1]) for i in range(1, n)]
    mr_bar = sum(mrs) / len(mrs)
    s = mr_bar / 1.128379
    ucl, lcl = mean + 3 * s, mean - 3 * s
    hits = 0
    side_run = up_run = down_run = alt_run = hug_run = mix_run = 0
    last_diff = 0.0
    for i, v in enumerate(x):
        z = (v - mean) / s
        if v > ucl or v < lcl:  # 1
            hits += 1
        side = 1 if z > 0 else (-1 if z < 0 else 0)  # 2
        prev_side = 0 if i == 0 else (1 if x[i - 1] > mean else (-1 if x[i - 1] < mean else 0))
        side_run = side_run + 1 if side != 0 and side == prev_side else (1 if side else 0)
        if side_run >= 9:
            hits += 1
        if i:
            d = v - x[i - 1]
            up_run = up_run + 1 if d > 0 else 0  # 3
            down_run = down_run + 1 if d < 0 else 0
            if up_run >= 5 or down_run >= 5:
                hits += 1
            alt_run = alt_run + 1 if d * last_diff < 0 else (1 if d else 0)  # 4
            if alt_run >= 13:
                hits += 1
            last_diff = d
        for k, m, lim in ((2, 3, 2.0), (4, 5, 1.0)):  # 5, 6
            lo = max(0, i - m + 1)
            w = [(x[j] - mean) / s for j in range(lo, i + 1)]
            if sum(1 for t in w if t > lim) >= k or sum(1 for t in w if t < -lim) >= k:
                hits += 1
        hug_run = hug_run + 1 if abs(z) < 1 else 0  # 7
        if hug_run >= 15:
            hits += 1
        mix_run = mix_run + 1 if abs(z) > 1 else 0  # 8 (both-sides check on the window)
        if mix_run >= 8:
            w = [(x[j] - mean) for j in range(i - 7, i + 1)]
            if max(w) > 0 > min(w):
                hits += 1
    return lcl, ucl, hits


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--naive-n", type=int, default=100_000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    rng = np.random.default_rng(12345)
    x = rng.normal(10.0, 1.0, args.n)
    control_chart(x[:1000])  # warm caches (constants, imports)

    def best(fn):
        times = []
        for _ in range(args.repeat):
            t0 = time.perf_counter()
            out = fn()
            times.append(time.perf_counter() - t0)
        return min(times), out

    t_limits, _ = best(lambda: control_chart(x, evaluate=False))
    t_fast, ch = best(lambda: control_chart(x))
    t_all, ch_all = best(lambda: control_chart(x, dispersion_rules="nelson"))
    xs = x[: args.naive_n].tolist()
    t0 = time.perf_counter()
    naive_imr(xs)
    t_naive = (time.perf_counter() - t0) * args.n / args.naive_n
    print(f"values: {args.n:,}")
    print(f"control_chart, limits and zones only:        {t_limits:.3f} s")
    print(f"control_chart (Nelson 1-8 on I, 1-2 on MR): {t_fast:.3f} s  (target <= 0.5 s)")
    print(f"control_chart (Nelson 1-8 on both):          {t_all:.3f} s")
    print(f"signals found: {len(ch.signals)} / {len(ch_all.signals)}")
    scaled = "" if args.naive_n == args.n else f" (timed on {args.naive_n:,}, scaled)"
    print(f"naive Python loops{scaled}: {t_naive:.2f} s")
    print(f"ratio naive / control_chart: {t_naive / t_fast:.0f}x")


if __name__ == "__main__":
    main()
