"""Benchmark: the evidence PDF of a 30-characteristic study (target <= 20 s on one core).

Generates a study in a temporary folder with a seeded generator (invented data, benchmark only),
builds the report with progress, and prints the time per stage and per characteristic.

    .venv/bin/python tests/bench/bench_report.py [--characteristics 30] [--seed 7]
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import numpy as np

from studykit.report.pdf import build_report
from studykit.store import StudyFile
from studykit.study import Characteristic

TARGET_SECONDS = 20.0


def make_study(folder: Path, n_chars: int, seed: int) -> Path:
    rng = np.random.default_rng(seed)
    subgroups, size = 25, 5
    names = [f"dim_{i + 1:02d}" for i in range(n_chars)]
    cols = []
    specs = []
    for i, name in enumerate(names):
        mean, sd = 10.0 + i, 0.01 * (1 + i % 4)
        if i % 5 == 4:  # some skewed characteristics (non-normal model path)
            x = mean - 3 * sd + rng.lognormal(np.log(2 * sd), 0.5, subgroups * size)
            specs.append(Characteristic(name, unit="mm", usl=mean + 12 * sd))
        else:
            x = rng.normal(mean, sd, subgroups * size)
            specs.append(Characteristic(name, unit="mm", lsl=mean - 7 * sd, usl=mean + 7 * sd,
                                        safety_critical=i % 10 == 0))
        cols.append(x)
    lines = ["subgroup," + ",".join(f"{n} [mm]" for n in names)]
    for r in range(subgroups * size):
        lines.append(f"{r // size + 1}," + ",".join(f"{c[r]:.5f}" for c in cols))
    path = folder / "bench.study"
    StudyFile.create(path, data=("\n".join(lines) + "\n").encode(), filename="bench.csv",
                     title=f"Benchmark study, {n_chars} characteristics", characteristics=specs,
                     who="bench")
    return path


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--characteristics", type=int, default=30)
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as d:
        folder = Path(d)
        study = make_study(folder, args.characteristics, args.seed)
        marks = []
        c0 = time.process_time()
        t0 = time.perf_counter()

        def progress(done, total, what):
            marks.append((time.perf_counter() - t0, what))

        info = build_report(study, folder / "bench.pdf", progress=progress)
        total = time.perf_counter() - t0
        cpu = time.process_time() - c0
        analysed = [t for t, w in marks if w.startswith("analysed")]
        drawn = [t for t, w in marks if w.startswith("drawn")]
        t_analysis = analysed[-1] if analysed else 0.0
        t_draw = (drawn[-1] - t_analysis) if drawn else 0.0
        size = (folder / "bench.pdf").stat().st_size
        n = args.characteristics
        print(f"characteristics      {n}")
        print(f"pages                {info.pages}")
        print(f"PDF size             {size / 1e6:.2f} MB")
        print(f"analysis (approx.)   {t_analysis:6.2f} s  ({t_analysis / n:.3f} s each)")
        print(f"figures + layout     {t_draw:6.2f} s  ({t_draw / n:.3f} s each)")
        print(f"total (wall)         {total:6.2f} s  (target <= {TARGET_SECONDS:g} s, "
              f"ratio {total / TARGET_SECONDS:.2f})")
        print(f"total (CPU, this process) {cpu:6.2f} s  (ratio {cpu / TARGET_SECONDS:.2f}; "
              "fairer on a shared machine)")
        try:
            load = os.getloadavg()[0]
            print(f"load average (1 min) {load:.2f} on {os.cpu_count()} cores")
        except OSError:
            pass


if __name__ == "__main__":
    main()
