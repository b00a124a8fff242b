"""Run every benchmark script in tests/bench/ and print one table.

Run: .venv/bin/python tests/bench/run_all.py [--only NAME ...] [--timeout 900] [--quiet]

Each ``bench_*.py`` runs in its own process (one after the other, so they do not compete for
the cores) with the interpreter running this script. Its full output is printed unless
``--quiet``; the table lists the exit status, the wall time and the script's ``summary:``
line (or its last line when it prints none). The machine's cores and load average are printed
first: on a shared machine, figures taken under load are slower than on an idle one.
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def summary_line(output: str) -> str:
    lines = [ln.strip() for ln in output.splitlines() if ln.strip()]
    for ln in reversed(lines):
        if ln.lower().startswith("summary:"):
            return ln.split(":", 1)[1].strip()
    return lines[-1] if lines else ""


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", nargs="*", help="script names (without .py) to run")
    ap.add_argument("--timeout", type=float, default=900.0, help="seconds per script")
    ap.add_argument("--quiet", action="store_true", help="print the table only")
    args = ap.parse_args(argv)
    scripts = sorted(HERE.glob("bench_*.py"))
    if args.only:
        wanted = {n.removesuffix(".py") for n in args.only}
        scripts = [s for s in scripts if s.stem in wanted]
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    print(f"{platform.python_implementation()} {platform.python_version()} on "
          f"{platform.machine()}, {cores} cores, load average {os.getloadavg()[0]:.1f}")
    rows = []
    for script in scripts:
        t = time.perf_counter()
        try:
            proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                                  timeout=args.timeout, cwd=HERE.parent.parent)
            status, out = str(proc.returncode), proc.stdout + proc.stderr
        except subprocess.TimeoutExpired as exc:
            status = "timeout"
            out = (exc.stdout or b"").decode() if isinstance(exc.stdout, bytes) else (
                exc.stdout or "")
        seconds = time.perf_counter() - t
        if not args.quiet:
            print(f"\n=== {script.name} ({seconds:.1f} s, status {status})")
            print(out.rstrip())
        rows.append((script.stem, status, f"{seconds:.1f}", summary_line(out)))
    head = ("script", "status", "seconds", "figures")
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(head[:3])]
    print()
    print("  ".join(h.ljust(w) for h, w in zip(head[:3], widths, strict=True)) + "  " + head[3])
    for r in rows:
        print("  ".join(c.ljust(w) for c, w in zip(r[:3], widths, strict=True)) + "  " + r[3])
    return 0 if all(r[1] == "0" for r in rows) else 1


if __name__ == "__main__":
    raise SystemExit(main())
