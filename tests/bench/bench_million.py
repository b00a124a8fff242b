"""The default study of one characteristic with 1,000,000 individual readings: time and memory.

Run: .venv/bin/python tests/bench/bench_million.py [--n 1000000] [--repeat 3] [--compare DIR]

Measures what a user runs, with default options, on a seeded CSV of normal readings (invented
data, written to a temporary folder):

    studykit analyze FILE -c diameter --lsl 9.94 --usl 10.06 --json

(automatic phase I with its removal limits for long charts, the Nelson rules, the normal model
kept when Anderson-Darling does not reject it, capability with bounds, verdict, the full JSON),
each run in a fresh process, next to the floor measured in the same run: the generic route,
``pandas.read_csv`` of the file plus numpy's mean, standard deviation and mean moving range
(no studykit code; see ``bench_memory.FLOOR``). Prints wall time, CPU
time (user + system) and peak RSS of both and the ratios. Targets (issue 14): <= 2 s and
<= 1 GB, i.e. within 5x the floor's time and 10x its memory. The runs alternate floor and
study ``--repeat`` times after one untimed warm-up run of each; the fastest time and the
largest RSS are printed. The study runs this tree's code; with ``--compare DIR`` it runs once
more per round on the studykit source tree ``DIR`` (e.g. a checkout of the code before a
change), and the ratios to it and whether both write the same JSON are printed. The children run as a user's shell runs them: without
``PYTHONDONTWRITEBYTECODE`` (set in this project's shells), so Python writes and reuses compiled
bytecode as it does for a user (see ``bench_memory.user_env``).
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_memory import measure, report, write_csv  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--limit-gb", type=float, default=6.0)
    ap.add_argument("--compare", metavar="DIR", help="another studykit source tree, run beside")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "readings.csv"
        t = time.perf_counter()
        write_csv(path, args.n, "normal")
        print(
            f"{args.n:,} individual readings (normal), CSV {os.path.getsize(path) / 1e6:.0f} "
            f"MB, written in {time.perf_counter() - t:.1f} s; best of {args.repeat}"
        )
        res = measure(
            path, shape="normal", limit_gb=args.limit_gb, repeat=args.repeat, compare=args.compare
        )
        report(res, n=args.n, time_target=2.0, rss_target=1024)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
