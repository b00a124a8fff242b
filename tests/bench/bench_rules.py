"""Speed of the run rules: vectorised ``evaluate`` against the plain-Python reference.

Run: ``.venv/bin/python tests/bench/bench_rules.py [n]`` (default n = 1,000,000).

Prints the best of several runs of ``evaluate`` on n in-control normal points (all Nelson rules,
then the Western Electric set, then per-point centre/sigma arrays with 5 % missing points), and
the time of the plain-Python, point-by-point reference from tests/test_rules.py on a smaller
series, scaled linearly to n (both are O(n)), measured in the same run. The two implementations
are also checked to agree on the smaller series.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/, for the reference

from test_rules import reference_evaluate  # noqa: E402

from studykit.stats.rules import evaluate  # noqa: E402

TARGET_SECONDS = 0.5  # the brief: all rules on 1,000,000 points well under half a second


def best_of(func, repeats=5):
    """Best wall-clock and best CPU (process) time of ``repeats`` calls, and the last result.

    The CPU time is what the code costs; the wall time also shows what other processes on a
    shared machine took from us."""
    walls, cpus = [], []
    result = None
    for _ in range(repeats):
        wall, cpu = time.perf_counter(), time.process_time()
        result = func()
        cpus.append(time.process_time() - cpu)
        walls.append(time.perf_counter() - wall)
    return min(walls), min(cpus), result


def main(n: int = 1_000_000, n_reference: int = 20_000) -> int:
    rng = np.random.default_rng(12345)
    x = rng.standard_normal(n)
    center = rng.normal(0.0, 0.01, n)
    sigma = rng.uniform(0.9, 1.1, n)
    x_missing = x.copy()
    x_missing[rng.random(n) < 0.05] = np.nan

    cases = [
        ("nelson, scalar centre/sigma", lambda: evaluate(x, center=0.0, sigma=1.0, rules="nelson")),
        (
            "western_electric, scalar",
            lambda: evaluate(x, center=0.0, sigma=1.0, rules="western_electric"),
        ),
        (
            "nelson, per-point arrays, 5% NaN",
            lambda: evaluate(x_missing, center=center, sigma=sigma, rules="nelson"),
        ),
    ]
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(
        f"run rules on n = {n:,} in-control N(0, 1) points; best of 5; "
        f"{os.cpu_count()} cores, load average {load:.1f}"
    )
    print(f"  {'case':36s} {'wall':>9s} {'cpu':>9s}  signals")
    worst = 0.0
    for name, func in cases:
        wall, cpu, signals = best_of(func)
        worst = max(worst, cpu)
        print(f"  {name:36s} {wall * 1000:6.1f} ms {cpu * 1000:6.1f} ms  {len(signals):6d}")

    small = x[:n_reference]
    _, ref_cpu, ref = best_of(
        lambda: reference_evaluate(small, center=0.0, sigma=1.0, rules="nelson"), 1
    )
    _, vec_cpu, vec = best_of(lambda: evaluate(small, center=0.0, sigma=1.0, rules="nelson"))
    agree = ref == [(s.rule, s.points, s.triggers) for s in vec]
    scaled = ref_cpu * n / n_reference
    full_cpu = best_of(lambda: evaluate(x, center=0.0, sigma=1.0, rules="nelson"))[1]
    print(
        f"plain-Python reference, nelson, n = {n_reference:,}: cpu {ref_cpu:.2f} s "
        f"(vectorised {vec_cpu * 1000:.1f} ms; results agree: {agree})"
    )
    print(
        f"reference scaled to n = {n:,}: {scaled:.1f} s; vectorised {full_cpu:.3f} s; "
        f"ratio x{scaled / full_cpu:,.0f}"
    )
    verdict = "OK" if worst < TARGET_SECONDS else "SLOWER THAN TARGET"
    print(f"slowest case, cpu {worst:.3f} s against a target of {TARGET_SECONDS} s: {verdict}")
    return 0 if agree else 1


if __name__ == "__main__":
    sys.exit(main(int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000))
