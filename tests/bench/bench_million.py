"""One characteristic with 1,000,000 individual readings: stability + capability, time and memory.

Run: .venv/bin/python tests/bench/bench_million.py [--n 1000000]

What a quality engineer runs on a million readings (our decision): the individuals chart
(I-MR limits, the eight Nelson tests on the values, limits on the moving range) to see
stability, and normal-theory capability (Cp/Cpk from the chart's MR-bar/d2 sigma, Pp/Ppk,
bounds, PPM) plus the Anderson-Darling statistic for information. Not run, on purpose:

* automatic phase-I removal: about 2,700 of 10^6 in-control readings fall beyond 3 sigma by
  chance alone, so removing "signals" round after round would only trim the tails; the
  signals are shown and the engineer investigates them;
* the distribution ranking, Shapiro-Wilk and probability-plot bands: at this n every
  goodness-of-fit test rejects any real process, scipy's Shapiro-Wilk p-value is not valid
  beyond 5,000 readings, and the ranking's bootstrap bounds would be narrower than the
  model error. Fit a chosen model explicitly when the data are known to be non-normal.

Prints wall time and peak memory (tracemalloc: Python/numpy allocations; ru_maxrss: the
whole process) of each step and in total. Targets: <= 1 s and <= 1 GB.
"""

from __future__ import annotations

import argparse
import resource
import time
import tracemalloc

import numpy as np

from studykit.stats import normality
from studykit.stats.capability import capability, effective_df_moving_range
from studykit.stats.charts import control_chart


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    x = np.random.default_rng(2026).normal(10.0, 0.1, args.n)  # invented, seeded
    control_chart(x[:1000], kind="imr")  # warm up imports and caches
    capability(x[:1000], lsl=9.4, usl=10.6)
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

    def run():
        steps = []
        t = time.perf_counter()
        chart = control_chart(x, kind="imr", rules="nelson")
        steps.append(("I-MR chart + Nelson 1-8", time.perf_counter() - t))
        t = time.perf_counter()
        cap = capability(
            x, lsl=9.4, usl=10.6, within_sigma=chart.within_sigma,
            df_within=effective_df_moving_range(x.size),
        )
        steps.append(("capability (normal, bounds)", time.perf_counter() - t))
        t = time.perf_counter()
        ad = normality.anderson_darling(x)
        steps.append(("Anderson-Darling", time.perf_counter() - t))
        signals = sum(len(s.signals) for s in (chart.location, chart.dispersion)
                      if s is not None)
        return steps, (cap.ppk, cap.ppk_lower, cap.cpk, signals, ad.a2)

    runs = [run() for _ in range(args.repeat)]  # timing runs, without tracing
    totals = [sum(sec for _, sec in r[0]) for r in runs]
    best = runs[int(np.argsort(totals)[len(totals) // 2])]
    steps, (ppk, ppk_lower, cpk, signals, a2) = best
    del runs
    tracemalloc.start()  # memory run (tracing slows allocation: not timed)
    run()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    total = float(np.median(totals))
    print(f"{args.n:,} individual readings, one characteristic (median of {args.repeat} runs)")
    for name, sec in steps:
        print(f"  {name:30s} {sec:6.3f} s")
    print(f"  {'total':30s} {total:6.3f} s (fastest run {min(totals):.3f} s); peak traced "
          f"memory {peak / 1e6:.0f} MB; process max RSS {rss:.0f} MB ({rss0:.0f} MB before)")
    print(f"  Ppk {ppk:.3f} (lower 95% {ppk_lower:.3f}), Cpk {cpk:.3f}; "
          f"{signals} signal(s) on the chart; AD A2 {a2:.2f}")
    print("targets: <= 1 s, <= 1 GB")
    print(f"summary: 1e6 readings {total:.2f} s, peak {peak / 1e6:.0f} MB traced, "
          f"{rss:.0f} MB RSS")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
