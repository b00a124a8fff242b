"""Benchmark: capability indices with confidence bounds on 125 readings.

Run with ``.venv/bin/python tests/bench/bench_capability.py``. Prints the median warm time of
each case and its ratio to the normal-theory case; it asserts nothing about speed.
"""

from __future__ import annotations

import statistics
import time

import numpy as np

from studykit.stats.capability import capability, judge


def median_time(fn, repeat):
    fn()  # warm-up
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> None:
    rng = np.random.default_rng(2026)  # demo data for timing only
    x = rng.normal(10.0, 0.2, 125)
    xl = rng.lognormal(0.0, 0.5, 125)

    def normal_case():
        judge(capability(x, lsl=9.0, usl=11.0, target=10.0), index="ppk", threshold=1.33)

    cases = [("normal theory, all bounds + verdict", normal_case, 200)]
    try:
        from studykit.stats.fit import FAMILIES

        model = FAMILIES["lognormal"].fit(xl)
        for b in (200, 1000):
            cases.append(
                (
                    f"lognormal percentile, bootstrap B={b}",
                    lambda b=b: capability(
                        xl, lsl=0.2, usl=5.0, model=model, n_boot=b, random_state=1
                    ),
                    5,
                )
            )
    except ImportError:  # fit module not available
        pass
    base = None
    for name, fn, repeat in cases:
        t = median_time(fn, repeat)
        base = base or t
        print(f"{name:45s} median {t * 1e3:9.2f} ms   ratio {t / base:8.1f}")


if __name__ == "__main__":
    main()
