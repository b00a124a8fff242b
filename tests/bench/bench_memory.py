"""Peak memory and time of the default study of one characteristic with millions of readings.

Run: .venv/bin/python tests/bench/bench_memory.py [--n 4400000] [--shape normal|skewed]
     [--repeat 1] [--compare DIR]

Writes a seeded CSV of ``--n`` individual readings (invented data: a time stamp and one
characteristic per row, about 45 bytes a row, so 4.4 M readings make a 200 MB file) into a
temporary folder, then runs in a child process each

* the floor: the generic route, ``pandas.read_csv`` of the file plus numpy's mean, standard
  deviation and mean moving range of the column (no studykit code, so a slow reader of ours
  shows in the study, not in the floor);
* the default study: ``studykit analyze FILE -c diameter --lsl L --usl U --json``
  (phase I auto, Nelson rules, model auto with its ranking and, for a fitted model, the
  bootstrap bounds).

(both with this tree's code: its folder first on ``PYTHONPATH``; with ``--compare DIR`` the
study runs once more on the studykit source tree ``DIR``, e.g. a checkout of the code before a
change, interleaved with the others, and the ratios of this tree's figures to it and whether
both write the same JSON are printed) and prints each child's peak resident memory (``ru_maxrss`` of the child), wall time and CPU
time (user + system: on a shared machine the wall time grows with the load, the CPU time much
less), and the ratios of the study to the floor. The children run under an address-space limit
(``--limit-gb``, default 6) so that a regression cannot exhaust a shared machine: it then fails
with "killed/limit" instead.

The children run as a user's shell runs the command: ``PYTHONDONTWRITEBYTECODE`` (set in this
project's shells) is dropped from their environment, so Python writes and reuses the compiled
bytecode of studykit, numpy, pandas and scipy as it does for a user (otherwise each run compiles
studykit's modules again, about 0.17 s), and one untimed warm-up run of each command (the floor
included) comes before the measured ones, so no measured run pays for the first compilation or a
cold file cache.

``--shape normal`` (default) draws normal values (a stable process: phase I keeps them, the
normal model is kept); ``--shape skewed`` draws from a shifted Weibull, so the model ranking
picks a fitted non-normal model and its bootstrap runs (the heavy path, whose memory bound is
the bootstrap's). Targets (issues 12 and 14): the default study of 4.4 M readings within
1.5 GB; of 1 M readings (``bench_million.py``) within 2 s and 1 GB, 5x the floor's time and
10x its memory.
"""

from __future__ import annotations

import argparse
import math
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

#: The generic route, no studykit code: what any program needs at least to read the file and
#: compute the numbers an individuals chart starts from (mean, standard deviation, mean moving
#: range). studykit's own reader is measured inside the study, never as part of the floor.
FLOOR = """
import sys, numpy as np, pandas as pd
x = pd.read_csv(sys.argv[1])["diameter [mm]"].to_numpy(dtype=float)
x = x[~np.isnan(x)]
print(float(np.mean(x)), float(np.std(x, ddof=1)), float(np.mean(np.abs(np.diff(x)))))
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
            fh.write(
                "\n".join(f"{a},{b:.6f}" for a, b in zip(t.tolist(), x[i:j].tolist(), strict=True))
            )
            fh.write("\n")


#: The studykit source tree this script belongs to (its commands run this tree's code).
ROOT = Path(__file__).resolve().parents[2]


def user_env(tree: Path | str | None = None) -> dict[str, str]:
    """This process's environment as a user's shell has it: without ``PYTHONDONTWRITEBYTECODE``
    (Python then writes and reuses compiled bytecode, as it does for a user); with ``tree``,
    that studykit source tree first on ``PYTHONPATH`` (its code is the one run)."""
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    if tree is not None:
        env["PYTHONPATH"] = os.pathsep.join(
            [str(tree)] + [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p]
        )
    return env


def run_child(
    cmd: list[str], limit_gb: float, tree: Path | str | None = None
) -> tuple[int, float, float, float, str]:
    """Exit code, peak RSS (MB), wall seconds, CPU seconds (user + system) and stderr tail of
    ``cmd`` run in a fresh process under an address-space limit (``tree``: see
    :func:`user_env`)."""
    limit = int(limit_gb * 1024**3)

    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))

    # ru_maxrss of RUSAGE_CHILDREN is the largest of all children waited for so far: run
    # each measurement through a fresh python that reports its own child's peak
    wrapper = (
        "import resource, subprocess, sys, time\n"
        "t = time.perf_counter()\n"
        "p = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,\n"
        "                   text=True)\n"
        "dt = time.perf_counter() - t\n"
        "u = resource.getrusage(resource.RUSAGE_CHILDREN)\n"
        "sys.stderr.write(p.stderr[-2000:])\n"
        "print(p.returncode, u.ru_maxrss / 1024, dt, u.ru_utime + u.ru_stime)\n"
    )
    p = subprocess.run(
        [sys.executable, "-c", wrapper, *cmd],
        capture_output=True,
        text=True,
        preexec_fn=cap,
        env=user_env(tree),
    )
    rc, rss, dt, cpu = p.stdout.split()
    return int(rc), float(rss), float(dt), float(cpu), p.stderr.strip()


def json_output(cmd: list[str], tree: Path | str) -> bytes:
    """What ``cmd`` writes to stdout when run on the source tree ``tree``."""
    return subprocess.run(cmd, capture_output=True, env=user_env(tree)).stdout


def measure(
    path: Path,
    *,
    shape: str,
    limit_gb: float,
    model: str | None = None,
    repeat: int = 1,
    compare: str | None = None,
) -> dict:
    """Floor and default study of the CSV at ``path`` (this tree's code; with ``compare``, the
    study once more on that source tree, e.g. a checkout of the code before a change): one
    untimed warm-up run of each, then ``repeat`` measured runs of each (interleaved); the
    fastest wall and CPU time and the largest RSS of each, and with ``compare`` whether the
    two trees write the same JSON."""
    studykit = str(Path(sys.executable).with_name("studykit"))
    lsl, usl = (9.94, 10.06) if shape == "normal" else (9.94, 10.12)
    cmd = [
        studykit,
        "analyze",
        str(path),
        "-c",
        "diameter",
        "--lsl",
        str(lsl),
        "--usl",
        str(usl),
        "--json",
    ]
    if model:
        cmd += ["--model", model]
    out = {
        "command": f"studykit analyze FILE -c diameter --lsl {lsl:g} --usl {usl:g} --json"
        + (f" --model {model}" if model else "")
    }
    commands = [("floor", [sys.executable, "-c", FLOOR, str(path)], None), ("analyze", cmd, ROOT)]
    if compare:
        commands.append(("compare", cmd, compare))
        out["compare_tree"] = str(compare)
        out["same_json"] = json_output(cmd, ROOT) == json_output(cmd, compare)
    for _, c, tree in commands:  # untimed warm-up: bytecode written, file in the page cache
        run_child(c, limit_gb, tree)
    for _ in range(repeat):
        for name, c, tree in commands:
            rc, rss, dt, cpu, err = run_child(c, limit_gb, tree)
            best = out.setdefault(
                name, {"rc": 0, "rss": 0.0, "wall": float("inf"), "cpu": float("inf"), "err": ""}
            )
            best["rc"] = best["rc"] or rc
            best["rss"] = max(best["rss"], rss)
            best["wall"] = min(best["wall"], dt)
            best["cpu"] = min(best["cpu"], cpu)
            if rc:
                best["err"] = err.splitlines()[-1] if err else "(killed or out of memory)"
    return out


def report(res: dict, *, n: int, time_target: float | None, rss_target: float) -> None:
    f, a = res["floor"], res["analyze"]
    print(f"  command: {res['command']}")
    for name, r in (("floor (read_csv + mean/sd/MR)", f), ("analyze (default options)", a)):
        print(
            f"  {name:30s} peak RSS {r['rss']:7.0f} MB  wall {r['wall']:6.1f} s  "
            f"CPU {r['cpu']:6.1f} s  exit {r['rc']}" + (f"  {r['err']}" if r["rc"] else "")
        )
    ok = a["rc"] == 0
    rt, rw, rc_ = (
        a["rss"] / max(f["rss"], 1),
        a["wall"] / max(f["wall"], 1e-9),
        a["cpu"] / max(f["cpu"], 1e-9),
    )
    print(
        f"  ratio to the floor: memory {rt:.1f}x (target <= 10x), wall {rw:.1f}x, CPU "
        f"{rc_:.1f}x (target <= 5x)"
    )
    goals = [
        f"peak RSS <= {rss_target:.0f} MB: {'met' if ok and a['rss'] <= rss_target else 'NOT met'}"
    ]
    if time_target is not None:
        goals.append(
            f"wall <= {time_target:g} s: {'met' if ok and a['wall'] <= time_target else 'NOT met'}"
        )
    goals.append(f"time within 5x: {'met' if ok and min(rw, rc_) <= 5 else 'NOT met'}")
    goals.append(f"memory within 10x: {'met' if ok and rt <= 10 else 'NOT met'}")
    print("  targets: " + "; ".join(goals))
    if "compare" in res:
        c = res["compare"]
        print(
            f"  {res['compare_tree']} (compared, same run): peak RSS {c['rss']:7.0f} MB  wall "
            f"{c['wall']:6.1f} s  CPU {c['cpu']:6.1f} s  exit {c['rc']}; this tree / it: CPU "
            f"{a['cpu'] / max(c['cpu'], 1e-9):.2f}x, wall {a['wall'] / max(c['wall'], 1e-9):.2f}x, "
            f"memory {a['rss'] / max(c['rss'], 1):.2f}x; same JSON: {res['same_json']}"
        )
    from figure_rows import row

    what = f"{n:,} individual readings, default study"
    load = f" (load average {os.getloadavg()[0]:.1f})"
    row(
        f"{what}: CPU time (user + system), fresh process, best of the runs{load}",
        res["command"],
        a["cpu"] if ok else math.inf,
        "s",
        baseline_name="floor: pandas.read_csv + numpy mean/sd/moving range, CPU time",
        baseline=f["cpu"],
        goal=f"<= {time_target:g} s, <= 5x floor" if time_target is not None else "<= 5x floor",
        met=ok and rc_ <= 5 and (time_target is None or a["cpu"] <= time_target),
    )
    row(
        f"{what}: peak RSS",
        res["command"],
        a["rss"] if ok else math.inf,
        "MB",
        baseline_name="floor's peak RSS",
        baseline=f["rss"],
        goal=f"<= {rss_target:.0f} MB, <= 10x floor",
        met=ok and a["rss"] <= rss_target and rt <= 10,
    )
    print(
        f"summary: {n:,} readings analyze {a['wall']:.2f} s wall / {a['cpu']:.2f} s CPU, "
        f"{a['rss']:.0f} MB; floor {f['wall']:.2f} s / {f['cpu']:.2f} s, {f['rss']:.0f} MB"
    )


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=4_400_000)
    ap.add_argument("--shape", choices=("normal", "skewed"), default="normal")
    ap.add_argument("--limit-gb", type=float, default=6.0)
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--model", default=None, help="pass --model to analyze (default: auto)")
    ap.add_argument("--compare", metavar="DIR", help="another studykit source tree, run beside")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "readings.csv"
        t = time.perf_counter()
        write_csv(path, args.n, args.shape)
        size = os.path.getsize(path)
        print(
            f"{args.n:,} individual readings ({args.shape}), CSV {size / 1e6:.0f} MB, "
            f"written in {time.perf_counter() - t:.1f} s; child limit {args.limit_gb:g} GB "
            f"address space; best of {args.repeat}"
        )
        res = measure(
            path,
            shape=args.shape,
            limit_gb=args.limit_gb,
            model=args.model,
            repeat=args.repeat,
            compare=args.compare,
        )
        report(res, n=args.n, time_target=None, rss_target=1536)
    return 0


if __name__ == "__main__":
    sys.exit(main())
