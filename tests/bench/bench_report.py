"""Benchmark: `studykit report STUDY` against the matplotlib + reportlab floor, at 10 and 100
characteristics (goals: within 1.5x of the floor, memory flat in the number of characteristics,
100 characteristics <= 30 s).

Run: ``.venv/bin/python tests/bench/bench_report.py [--sizes 10 100] [--repeats 1]``

For each size a study is generated in a temporary folder with a seeded generator (invented data,
benchmark only: 25 subgroups of 5 per characteristic, every fifth one skewed). Each measurement
is its own process, timed from process start to exit, its peak RSS read from ``wait4``:

* **report**: the user's command, ``studykit report STUDY -o OUT.pdf`` (default options: the
  characteristics analysed and the figures drawn by as many forked processes as there are
  cores; its CPU time counts those workers too, its peak RSS is the largest of the process and
  each worker);
* **floor**: the least any report of these figures costs with the same libraries: per
  characteristic, the same two figures' worth of matplotlib drawing (a 2-panel chart of the
  125 values and subgroup ranges, a histogram beside a sorted-values plot, same sizes and dpi,
  titles and axis labels), a heading and a small table, laid out by reportlab's platypus with
  each characteristic on a new page; no statistics at all.

Both commands run as they would for a user whose Python caches compiled modules (the default:
``pip install`` compiles them, and every later run reuses them): the environment's
``PYTHONDONTWRITEBYTECODE`` is dropped for the measured processes and their bytecode goes to a
temporary ``PYTHONPYCACHEPREFIX`` (nothing is written into the source tree), filled by one
untimed run of each before the measurements (without it every run compiled studykit's modules
again, about 0.3 s of the report's start-up that no installed copy pays; ``--compile-each-run``
measures that way).

The ratio is report / floor. Prints one line per size, a ``summary:`` line and the figure rows (read by
``run_all.py``). Runs are one after the other (never in parallel), floor and report
interleaved, so both see the same machine load.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve()
sys.path.insert(0, str(HERE.parent))

from figure_rows import row  # noqa: E402

TARGET_RATIO = 1.5
TARGET_100_S = 30.0
SUBGROUPS, SIZE = 25, 5


def make_study(folder: Path, n_chars: int, seed: int) -> Path:
    from studykit.store import StudyFile
    from studykit.study import Characteristic

    rng = np.random.default_rng(seed)
    names = [f"dim_{i + 1:02d}" for i in range(n_chars)]
    cols = []
    specs = []
    for i, name in enumerate(names):
        mean, sd = 10.0 + i, 0.01 * (1 + i % 4)
        if i % 5 == 4:  # some skewed characteristics (non-normal model path)
            x = mean - 3 * sd + rng.lognormal(np.log(2 * sd), 0.5, SUBGROUPS * SIZE)
            specs.append(Characteristic(name, unit="mm", usl=mean + 12 * sd))
        else:
            x = rng.normal(mean, sd, SUBGROUPS * SIZE)
            specs.append(
                Characteristic(
                    name,
                    unit="mm",
                    lsl=mean - 7 * sd,
                    usl=mean + 7 * sd,
                    safety_critical=i % 10 == 0,
                )
            )
        cols.append(x)
    lines = ["subgroup," + ",".join(f"{n} [mm]" for n in names)]
    for r in range(SUBGROUPS * SIZE):
        lines.append(f"{r // SIZE + 1}," + ",".join(f"{c[r]:.5f}" for c in cols))
    path = folder / "bench.study"
    StudyFile.create(
        path,
        data=("\n".join(lines) + "\n").encode(),
        filename="bench.csv",
        title=f"Benchmark study, {n_chars} characteristics",
        characteristics=specs,
        who="bench",
    )
    return path


def floor_report(n_chars: int, out: Path, seed: int = 7) -> None:
    """The floor: the same amount of matplotlib drawing and reportlab layout, no statistics."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from PIL import Image
    from reportlab import rl_config
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.styles import getSampleStyleSheet
    from reportlab.lib.units import mm
    from reportlab.lib.utils import ImageReader
    from reportlab.platypus import Flowable, PageBreak, Paragraph, SimpleDocTemplate, Table

    rl_config.useA85 = 0  # binary streams: the cheapest way reportlab writes images
    rng = np.random.default_rng(seed)
    styles = getSampleStyleSheet()
    width = A4[0] - 36 * mm

    class Picture(Flowable):
        def __init__(self, fig):
            super().__init__()
            fig.set_dpi(150)
            canvas = FigureCanvasAgg(fig)
            canvas.draw()
            rgba = canvas.buffer_rgba()
            self.reader = ImageReader(
                Image.frombuffer(
                    "RGBA", (int(rgba.shape[1]), int(rgba.shape[0])), rgba, "raw", "RGBA", 0, 1
                ).convert("RGB")
            )
            w, h = fig.get_size_inches()
            self.w, self.h = width, width * h / w

        def wrap(self, aw, ah):
            return self.w, self.h

        def draw(self):
            self.canv.drawImage(self.reader, 0, 0, self.w, self.h)

    def section(i):
        x = rng.normal(10.0, 0.01, SUBGROUPS * SIZE)
        g = x.reshape(SUBGROUPS, SIZE)
        fig1 = Figure(figsize=(7.0, 2.3 * 2 + 0.45))
        a1, a2 = fig1.subplots(2, 1)
        a1.plot(np.arange(SUBGROUPS), g.mean(axis=1), marker="o")
        a2.plot(np.arange(SUBGROUPS), np.ptp(g, axis=1), marker="o")
        for ax, t in ((a1, "Subgroup means"), (a2, "Subgroup ranges")):
            ax.set_title(t, loc="left")
            ax.set_xlabel("subgroup")
            ax.set_ylabel("mm")
        fig2 = Figure(figsize=(7.0, 2.9))
        b1, b2 = fig2.subplots(1, 2)
        b1.hist(x, bins=15)
        b2.plot(np.sort(x), np.linspace(0, 1, x.size), marker=".")
        for ax, t in ((b1, "Histogram"), (b2, "Sorted values")):
            ax.set_title(t, loc="left")
            ax.set_xlabel("mm")
        rows = [
            ["Mean", f"{x.mean():.5f}", "SD", f"{x.std(ddof=1):.5f}"],
            ["n", str(x.size), "Subgroups", str(SUBGROUPS)],
        ]
        return [
            PageBreak(),
            Paragraph(f"{i + 1}. dim_{i + 1:02d} [mm]", styles["Heading1"]),
            Table(rows),
            Picture(fig1),
            Picture(fig2),
        ]

    class Doc(SimpleDocTemplate):
        def filterFlowables(self, flowables):  # noqa: N802 - one section at a time
            while flowables and callable(flowables[0]) and not isinstance(flowables[0], Flowable):
                flowables[0:1] = flowables[0]()
            super().filterFlowables(flowables)

    story = [Paragraph("Floor report", styles["Title"])]
    story += [lambda i=i: section(i) for i in range(n_chars)]
    Doc(str(out), pagesize=A4, invariant=1).build(story)


def measure(cmd: list[str], env=None) -> dict:
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, env=env)
    _pid, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - t0
    out = proc.stdout.read().decode(errors="replace")
    proc.stdout.close()
    if status != 0:
        raise RuntimeError(f"{' '.join(map(str, cmd))} failed ({status}):\n{out[-2000:]}")
    # CPU of the process and of the worker processes it waited for (user + system): the
    # figure to read when other work shares the machine
    cpu = usage.ru_utime + usage.ru_stime
    return {"seconds": seconds, "cpu_s": cpu, "rss_mb": usage.ru_maxrss / 1024}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10, 100])
    ap.add_argument("--repeats", type=int, default=1, help="runs of each (the best is kept)")
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument(
        "--compile-each-run",
        action="store_true",
        help="keep the environment's PYTHONDONTWRITEBYTECODE (modules compiled in every run)",
    )
    ap.add_argument(
        "--compare",
        metavar="DIR",
        help="also run the report of the studykit source in DIR (e.g. an export of an earlier "
        "commit; put on PYTHONPATH), interleaved with the others, and print it as 'before'",
    )
    ap.add_argument("--floor-only", type=int, metavar="N", help=argparse.SUPPRESS)
    ap.add_argument("--out", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.floor_only:
        floor_report(args.floor_only, Path(args.out), args.seed)
        return 0
    studykit = Path(sys.executable).with_name("studykit")
    report_cmd = [str(studykit)] if studykit.exists() else [sys.executable, "-m", "studykit"]
    results = {}
    with tempfile.TemporaryDirectory() as d:
        env = dict(os.environ)
        if not args.compile_each_run:
            env.pop("PYTHONDONTWRITEBYTECODE", None)
            env["PYTHONPYCACHEPREFIX"] = str(Path(d) / "bytecode")
        for i, n in enumerate(args.sizes):
            folder = Path(d) / f"n{n}"
            folder.mkdir()
            study = make_study(folder, n, args.seed)
            floor_cmd = [sys.executable, str(HERE), "--floor-only", str(n)]
            floor_cmd += ["--out", str(folder / "floor.pdf")]
            cmd = [*report_cmd, "report", str(study), "-o", str(folder / "r.pdf"), "--quiet"]
            before_env = _before_env(env, args.compare)
            if i == 0:  # untimed: compiles the modules of both into the bytecode folder
                measure(floor_cmd, env)
                measure(cmd, env)
                if before_env is not None:
                    measure(cmd, before_env)
            best = {"report": None, "floor": None, "before": None}
            for _ in range(args.repeats):
                runs = [("floor", measure(floor_cmd, env)), ("report", measure(cmd, env))]
                if before_env is not None:
                    runs.append(("before", measure(cmd, before_env)))
                for key, m in runs:
                    if best[key] is None or m["seconds"] < best[key]["seconds"]:
                        best[key] = m
            pages = _pages(folder / "r.pdf")
            results[n] = best
            rep, flo = best["report"], best["floor"]
            print(
                f"{n:4d} characteristics ({pages} pages): report {rep['seconds']:.2f} s "
                f"({rep['cpu_s']:.2f} s CPU), peak RSS {rep['rss_mb']:.0f} MB | floor "
                f"{flo['seconds']:.2f} s ({flo['cpu_s']:.2f} s CPU), {flo['rss_mb']:.0f} MB | "
                f"ratio {rep['seconds'] / flo['seconds']:.2f} (goal <= {TARGET_RATIO}), "
                f"CPU ratio {rep['cpu_s'] / flo['cpu_s']:.2f} | load average "
                f"{os.getloadavg()[0]:.1f}",
                flush=True,
            )
            if best["before"] is not None:
                b = best["before"]
                print(
                    f"     before ({args.compare}): {b['seconds']:.2f} s ({b['cpu_s']:.2f} s CPU), "
                    f"peak RSS {b['rss_mb']:.0f} MB | ratio to floor "
                    f"{b['seconds'] / flo['seconds']:.2f}, report / before "
                    f"{rep['seconds'] / b['seconds']:.2f}",
                    flush=True,
                )
    sizes = sorted(results)
    lo, hi = sizes[0], sizes[-1]
    rep_hi = results[hi]["report"]
    growth = (rep_hi["rss_mb"] - results[lo]["report"]["rss_mb"]) / (hi - lo) if hi > lo else 0.0
    ratio = rep_hi["seconds"] / results[hi]["floor"]["seconds"]
    summary = {
        "characteristics": hi,
        "report_s": round(rep_hi["seconds"], 2),
        "floor_s": round(results[hi]["floor"]["seconds"], 2),
        "report_cpu_s": round(rep_hi["cpu_s"], 2),
        "floor_cpu_s": round(results[hi]["floor"]["cpu_s"], 2),
        "ratio": round(ratio, 2),
        "peak_rss_mb": {str(n): round(results[n]["report"]["rss_mb"]) for n in sizes},
        "rss_growth_mb_per_characteristic": round(growth, 2),
    }
    print(f"memory growth {growth:.2f} MB per characteristic between {lo} and {hi}")
    print(
        f"summary: `studykit report` ({hi} characteristics) {rep_hi['seconds']:.1f} s, "
        f"floor {results[hi]['floor']['seconds']:.1f} s, ratio {ratio:.2f} (goal <= "
        f"{TARGET_RATIO}); peak RSS "
        + ", ".join(f"{results[n]['report']['rss_mb']:.0f} MB at {n}" for n in sizes)
        + f"; {rep_hi['seconds']:.1f} s vs {TARGET_100_S:.0f} s goal"
    )
    print("json: " + json.dumps(summary))
    for n in sizes:
        rep, flo = results[n]["report"], results[n]["floor"]
        goal = f"<= {TARGET_RATIO}x floor" + (f", <= {TARGET_100_S:g} s" if n == 100 else "")
        row(
            f"PDF report, {n} characteristics",
            "studykit report STUDY",
            rep["seconds"],
            "s",
            baseline_name="floor: the same figures and pages with matplotlib + reportlab",
            baseline=flo["seconds"],
            goal=goal,
            met=rep["seconds"] <= TARGET_RATIO * flo["seconds"]
            and (n != 100 or rep["seconds"] <= TARGET_100_S),
        )
    for n in sizes:
        rep, flo = results[n]["report"], results[n]["floor"]
        row(
            f"PDF report, {n} characteristics: CPU time (user + system, the process and its "
            "workers)",
            "studykit report STUDY",
            rep["cpu_s"],
            "s",
            baseline_name="floor's CPU time",
            baseline=flo["cpu_s"],
            goal="",
        )
    for n in sizes:
        rep, flo = results[n]["report"], results[n]["floor"]
        row(
            f"PDF report, {n} characteristics: peak RSS",
            "studykit report STUDY",
            rep["rss_mb"],
            "MB",
            baseline_name="floor's peak RSS",
            baseline=flo["rss_mb"],
            goal="flat in the number of characteristics" if n == hi else "",
        )
    if hi > lo:
        floor_growth = (results[hi]["floor"]["rss_mb"] - results[lo]["floor"]["rss_mb"]) / (hi - lo)
        row(
            f"PDF report: peak RSS growth per characteristic ({lo} -> {hi})",
            "studykit report STUDY",
            growth,
            "MB",
            baseline_name="floor's growth",
            baseline=floor_growth,
            goal="flat: no more than the floor's",
        )
    return 0


def _before_env(env: dict, source: str | None) -> dict | None:
    """The environment that runs the studykit source in ``source`` (None: no comparison)."""
    if source is None:
        return None
    before = dict(env)
    before["PYTHONPATH"] = str(Path(source).resolve())
    if "PYTHONPYCACHEPREFIX" in env:
        before["PYTHONPYCACHEPREFIX"] = env["PYTHONPYCACHEPREFIX"] + "_before"
    return before


def _pages(pdf: Path) -> int:
    from pypdf import PdfReader

    return len(PdfReader(str(pdf)).pages)


if __name__ == "__main__":
    sys.exit(main())
