"""Speed of the batch: many characteristics from one wide CSV, parallel against one process.

Run: .venv/bin/python tests/bench/bench_batch.py [--characteristics 1000] [--readings 125]
     [--skewed 0.1] [--jobs N] [--no-loop]

Writes a wide CSV (one column per characteristic, invented, seeded: most normal, a share
``--skewed`` from shifted Weibull and lognormal shapes) and its specs table to a temporary
folder, then times, in the same run:

* batch: read the file and the specs + ``studykit.batch.run_many`` on ``--jobs`` processes
  (default: every core) - the wall time of ``studykit analyze FILE --all --specs S``;
* loop: the same reading + ``analyze_characteristic`` one after the other in this process.

Both use the default options (bootstrap of fitted non-normal models: 500 resamples). The
rows of both are compared (they must be identical). Target: batch <= 4 s for 1,000 x 125
with 2 jobs on a 2-core machine, and ``--jobs 2`` at least 1.6x ``--jobs 1``.
"""

from __future__ import annotations

import argparse
import os
import resource
import tempfile
import time
from pathlib import Path

import numpy as np


def write_files(folder: Path, k: int, n: int, skewed: float, seed: int = 2026):
    """A wide CSV of k characteristics x n readings and its specs table; returns the paths
    and the number of skewed columns."""
    rng = np.random.default_rng(seed)
    cols, specs = [], []
    n_skewed = int(round(skewed * k))
    skewed_at = set(rng.choice(k, size=n_skewed, replace=False).tolist())
    for j in range(k):
        name = f"c{j:04d}"
        if j in skewed_at:
            if j % 2:
                x = 10.0 + rng.weibull(1.6, n) * 3.0
            else:
                x = 10.0 + rng.lognormal(0.0, 0.5, n)
            specs.append(f"{name},,{float(np.quantile(x, 0.5) * 3.0):.4f}")
        else:
            mean, sd = rng.uniform(5, 50), rng.uniform(0.01, 0.5)
            x = rng.normal(mean, sd, n)
            specs.append(f"{name},{mean - 7 * sd:.5f},{mean + 7 * sd:.5f}")
        cols.append(x)
    table = np.column_stack(cols)
    data = folder / "wide.csv"
    with data.open("w", encoding="utf-8") as f:
        f.write(",".join(f"c{j:04d} [mm]" for j in range(k)) + "\n")
        np.savetxt(f, table, delimiter=",", fmt="%.6g")
    spec_path = folder / "specs.csv"
    spec_path.write_text("characteristic,lsl,usl\n" + "\n".join(specs) + "\n", encoding="utf-8")
    return data, spec_path, n_skewed


def batch(data, specs, jobs):
    from studykit.batch import run_many
    from studykit.data import read_measurements
    from studykit.study import read_specs

    t0 = time.perf_counter()
    m = read_measurements(data)
    chars, crit = read_specs(specs)
    t_load = time.perf_counter() - t0
    res = run_many(m, chars, crit, jobs=jobs)
    return res, t_load, time.perf_counter() - t0


def loop(data, specs):
    from studykit.analysis import analyze_characteristic
    from studykit.batch import result_row
    from studykit.data import read_measurements
    from studykit.study import read_specs

    t0 = time.perf_counter()
    m = read_measurements(data)
    chars, crit = read_specs(specs)
    spec = {c.name: c for c in chars}
    rows = []
    for name in m.names:
        res = analyze_characteristic(m.get(name), spec.get(name), criteria=crit.get(name))
        rows.append(result_row(res))
    return rows, time.perf_counter() - t0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--characteristics", type=int, default=1000)
    ap.add_argument("--readings", type=int, default=125)
    ap.add_argument("--skewed", type=float, default=0.1, help="share of skewed columns")
    ap.add_argument("--jobs", type=int, default=None)
    ap.add_argument("--no-loop", action="store_true", help="skip the one-process loop")
    args = ap.parse_args(argv)
    import studykit.analysis  # noqa: F401 - import time is not part of either figure

    cores = len(os.sched_getaffinity(0))
    load = os.getloadavg()[0]
    with tempfile.TemporaryDirectory() as tmp:
        data, specs, n_skewed = write_files(
            Path(tmp), args.characteristics, args.readings, args.skewed
        )
        size = data.stat().st_size / 1e6
        print(
            f"{args.characteristics} characteristics x {args.readings} readings "
            f"({n_skewed} skewed), CSV {size:.1f} MB; {cores} cores, load average "
            f"{load:.1f} at start"
        )
        cpu0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        res, t_load, t_batch = batch(data, specs, args.jobs)
        cpu1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        workers_cpu = (cpu1.ru_utime + cpu1.ru_stime) - (cpu0.ru_utime + cpu0.ru_stime)
        print(
            f"  batch ({res.backend}, {res.jobs} jobs): {t_batch:6.2f} s wall "
            f"(load {t_load:.2f} s, analyses {res.seconds:.2f} s; workers' CPU "
            f"{workers_cpu:.1f} s = {1e3 * workers_cpu / res.n:.1f} ms per characteristic, "
            f"idle-machine estimate {t_load + workers_cpu / res.jobs:.1f} s); "
            f"{res.n_meeting} meet, {res.n_not_meeting} do not, {res.n_failed} failed"
        )
        models = {}
        for r in res.rows:
            models[r["model"]] = models.get(r["model"], 0) + 1
        print(
            "  models chosen: "
            + ", ".join(f"{k} {v}" for k, v in sorted(models.items(), key=lambda kv: -kv[1]))
        )
        summary = (
            f"batch {t_batch:.1f} s (CPU {workers_cpu:.1f} s, idle estimate "
            f"{t_load + workers_cpu / res.jobs:.1f} s)"
        )
        if not args.no_loop:
            rows, t_loop = loop(data, specs)
            same = [dict(r) for r in res.rows] == rows
            print(
                f"  one-process loop:           {t_loop:6.2f} s wall; ratio loop/batch "
                f"{t_loop / t_batch:4.2f}x; rows identical: {same}"
            )
            summary += f", loop {t_loop:.1f} s ({t_loop / t_batch:.2f}x)"
        print(
            "target: batch <= 4 s for 1000 x 125 with 2 jobs on 2 cores; --jobs 2 >= 1.6x "
            f"--jobs 1; load average {os.getloadavg()[0]:.1f} at the end"
        )
        print(f"summary: {args.characteristics} x {args.readings}: {summary}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
