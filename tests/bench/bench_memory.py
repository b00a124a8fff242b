"""Peak memory of the default study of one characteristic with millions of individual readings.

Run: .venv/bin/python tests/bench/bench_memory.py [--n 4400000] [--shape skewed|normal]

Writes a seeded CSV of ``--n`` individual readings (invented data: a time stamp and one
characteristic per row, about 45 bytes a row, so 4.4 M readings make a 200 MB file) into a
temporary folder, then runs in a child process each

* the floor: ``read_measurements`` of the file plus the mean and standard deviation of the
  values (what any study of the file needs at least);
* the default study: ``studykit analyze FILE -c diameter --lsl L --usl U --json``
  (phase I auto, Nelson rules, model auto with its ranking and, for a fitted model, the
  bootstrap bounds).

and prints each child's peak resident memory (``ru_maxrss`` of the child) and wall time. The
children run under an address-space limit (``--limit-gb``, default 6) so that a regression
cannot exhaust a shared machine: it then fails with "killed/limit" instead.

``--shape skewed`` (default) draws from a shifted Weibull, so the model ranking picks a fitted
non-normal model and its bootstrap runs (the heavy path); ``--shape normal`` draws normal
values. Target (issue 12): the default study of 4.4 M readings within 1.5 GB.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

FLOOR = """
import sys, numpy as np
from studykit.data import read_measurements
m = read_measurements(sys.argv[1])
x = m.get("diameter").valid_values()
print(float(np.mean(x)), float(np.std(x, ddof=1)))
"""


def write_csv(path: Path, n: int, shape: str) -> None:
    rng = np.random.default_rng(2026)  # invented, seeded
    if shape == "normal":
        x = rng.normal(10.0, 0.01, n)
    else:
        x = 9.95 + 0.03 * rng.weibull(1.6, n)
    start = np.datetime64("2026-01-05T06:00:00")
    step = 2  # seconds between readings
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("timestamp,diameter [mm]\n")
        for i in range(0, n, 200_000):
            j = min(n, i + 200_000)
            t = (start + np.arange(i, j) * np.timedelta64(step, "s")).astype(str)
            t = np.char.replace(t, "T", " ")
            fh.write("\n".join(f"{a},{b:.6f}" for a, b in zip(t.tolist(), x[i:j].tolist(),
                                                             strict=True)))
            fh.write("\n")


def run_child(cmd: list[str], limit_gb: float) -> tuple[int, float, float, str]:
    limit = int(limit_gb * 1024**3)

    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))

    # ru_maxrss of RUSAGE_CHILDREN is the largest of all children waited for so far: run
    # each measurement through a fresh python that reports its own child's peak
    wrapper = (
        "import resource, subprocess, sys, time\n"
        "t = time.perf_counter()\n"
        "p = subprocess.run(sys.argv[1:], capture_output=True, text=True)\n"
        "dt = time.perf_counter() - t\n"
        "rss = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024\n"
        "sys.stderr.write(p.stderr[-2000:])\n"
        "print(p.returncode, rss, dt)\n"
    )
    p = subprocess.run([sys.executable, "-c", wrapper, *cmd], capture_output=True, text=True,
                       preexec_fn=cap)
    rc, rss, dt = p.stdout.split()
    return int(rc), float(rss), float(dt), p.stderr.strip()


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=4_400_000)
    ap.add_argument("--shape", choices=("skewed", "normal"), default="skewed")
    ap.add_argument("--limit-gb", type=float, default=6.0)
    ap.add_argument("--model", default=None, help="pass --model to analyze (default: auto)")
    args = ap.parse_args(argv)
    studykit = str(Path(sys.executable).with_name("studykit"))
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "readings.csv"
        t = time.perf_counter()
        write_csv(path, args.n, args.shape)
        size = os.path.getsize(path)
        print(f"{args.n:,} individual readings ({args.shape}), CSV {size / 1e6:.0f} MB, "
              f"written in {time.perf_counter() - t:.1f} s; child limit {args.limit_gb:g} GB "
              "address space")
        rc, rss, dt, err = run_child([sys.executable, "-c", FLOOR, str(path)], args.limit_gb)
        print(f"  floor (read + mean/sd)      peak RSS {rss:7.0f} MB  {dt:7.1f} s  exit {rc}")
        if rc:
            print("   ", err.splitlines()[-1] if err else "")
        lsl, usl = (9.94, 10.06) if args.shape == "normal" else (9.94, 10.12)
        cmd = [studykit, "analyze", str(path), "-c", "diameter", "--lsl", str(lsl),
               "--usl", str(usl), "--json"]
        if args.model:
            cmd += ["--model", args.model]
        rc, rss_a, dt, err = run_child(cmd, args.limit_gb)
        print(f"  analyze (default options)   peak RSS {rss_a:7.0f} MB  {dt:7.1f} s  exit {rc}")
        if rc:
            print("   ", err.splitlines()[-1] if err else "(killed or out of memory)")
        print(f"  target: analyze within 1536 MB -> {'met' if rc == 0 and rss_a <= 1536 else 'NOT met'}"
              f" ({rss_a / max(rss, 1):.1f}x the floor)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
