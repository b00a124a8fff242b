"""Run every benchmark script in tests/bench/ and print the README's performance table.

Run: .venv/bin/python tests/bench/run_all.py [--only NAME ...] [--timeout 900] [--quiet]
     .venv/bin/python tests/bench/run_all.py --from-logs LOG ...   (table from saved outputs)

Each ``bench_*.py`` runs in its own process (one after the other, so they do not compete for
the cores) with the interpreter running this script. Its full output is printed unless
``--quiet``. Then two tables:

* **the figures** (Markdown, the README's "Performance" table): every ``row:`` line the scripts
  printed (:mod:`figure_rows`): figure, the exact command it was measured on, the figure, the
  floor or baseline measured in the same run, the ratio and the goal. A script that prints no
  rows gets one row with its ``summary:`` line (or its last line) and its own command;
* **the runs**: each script's exit status and wall time.

The machine's cores and load average are printed first: on a shared machine, figures taken
under load are slower than on an idle one (ratios to a baseline of the same run much less so).
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
sys.path.insert(0, str(HERE))

from figure_rows import parse, table  # noqa: E402


def summary_line(output: str) -> str:
    lines = [
        ln.strip()
        for ln in output.splitlines()
        if ln.strip() and not ln.strip().startswith(("row: ", "json: "))
    ]
    for ln in reversed(lines):
        if ln.lower().startswith("summary:"):
            return ln.split(":", 1)[1].strip()
    return lines[-1] if lines else ""


def rows_of(script: str, status: str, output: str) -> list[dict]:
    """The figure rows of one script's output (one fallback row when it printed none)."""
    rows = parse(output)
    if rows:
        return rows
    text = summary_line(output) or "(no output)"
    if status != "0":
        text = f"status {status}: {text}"
    return [
        {
            "figure": text.replace("|", "/"),
            "command": f"python tests/bench/{script}.py",
            "value": None,
            "unit": "",
            "baseline_name": "",
            "baseline": None,
            "ratio": None,
            "goal": "",
            "met": None,
        }
    ]


def machine_line() -> str:
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    return (
        f"{platform.python_implementation()} {platform.python_version()} on "
        f"{platform.machine()}, {cores} cores, load average {os.getloadavg()[0]:.1f}"
    )


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", nargs="*", help="script names (without .py) to run")
    ap.add_argument("--timeout", type=float, default=900.0, help="seconds per script")
    ap.add_argument("--quiet", action="store_true", help="print the tables only")
    ap.add_argument(
        "--from-logs",
        nargs="+",
        metavar="LOG",
        help="make the tables from saved outputs of bench scripts (no runs)",
    )
    args = ap.parse_args(argv)
    print(machine_line())
    runs = []
    if args.from_logs:
        for log in args.from_logs:
            runs.append((Path(log).stem, "0", "—", Path(log).read_text(errors="replace")))
    else:
        scripts = sorted(HERE.glob("bench_*.py"))
        if args.only:
            wanted = {n.removesuffix(".py") for n in args.only}
            scripts = [s for s in scripts if s.stem in wanted]
        for script in scripts:
            t = time.perf_counter()
            try:
                proc = subprocess.run(
                    [sys.executable, str(script)],
                    capture_output=True,
                    text=True,
                    timeout=args.timeout,
                    cwd=HERE.parent.parent,
                )
                status, out = str(proc.returncode), proc.stdout + proc.stderr
            except subprocess.TimeoutExpired as exc:
                status = "timeout"
                out = (
                    (exc.stdout or b"").decode()
                    if isinstance(exc.stdout, bytes)
                    else (exc.stdout or "")
                )
            seconds = time.perf_counter() - t
            if not args.quiet:
                print(f"\n=== {script.name} ({seconds:.1f} s, status {status})")
                print(out.rstrip())
            runs.append((script.stem, status, f"{seconds:.1f}", out))
    figures = [r for name, status, _s, out in runs for r in rows_of(name, status, out)]
    print("\n" + table(figures))
    print()
    head = ("script", "status", "seconds")
    widths = [
        max(len(h), *(len(r[i]) for r in runs)) if runs else len(h) for i, h in enumerate(head)
    ]
    print("  ".join(h.ljust(w) for h, w in zip(head, widths, strict=True)))
    for r in runs:
        print("  ".join(c.ljust(w) for c, w in zip(r[:3], widths, strict=True)))
    return 0 if all(r[1] == "0" for r in runs) else 1


if __name__ == "__main__":
    raise SystemExit(main())
