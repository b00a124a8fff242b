"""Speed check: a removal or a spec change refreshes every workbook panel, server-side.

Run: ``.venv/bin/python tests/bench/bench_panels.py [--repeat 7]``

Builds the workbook on a copy of the demo study with every study panel opened (limits and
overview, stability, shape, capability, review, export), then times, for each of the changes
below, the whole round trip on the server: write the decision to the study file, read the
study back, re-analyse the changed characteristic, and refresh every built panel (charts'
sources, tables, overview). The browser's drawing is not included. Printed per change: the
median and worst seconds over ``--repeat`` runs, the share spent in the analysis itself, and
the ratio to the 0.150 s target.

* removal   exclude one more subgroup of flange_thickness (normal model, X-bar/R)
* restore   bring it back
* spec      change the USL of flange_thickness (with a reason)
* removal (fitted model)   exclude a subgroup of face_runout (lognormal fit and its
            bootstrap bounds: the analysis alone dominates)
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import tempfile
import time
from pathlib import Path

TARGET = 0.150


def build(path):
    from studykit.app.shell import build_workbook
    from studykit.app.steps.capability import CapabilityStep
    from studykit.app.steps.export import ExportStep
    from studykit.app.steps.intake import IntakeStep
    from studykit.app.steps.limits import LimitsStep
    from studykit.app.steps.shape import ShapeStep
    from studykit.app.steps.signoff import SignoffStep
    from studykit.app.steps.stability import StabilityStep

    steps = [
        IntakeStep(),
        LimitsStep(),
        StabilityStep(),
        ShapeStep(),
        CapabilityStep(),
        SignoffStep(),
        ExportStep(),
    ]
    wb = build_workbook(path, steps=steps)
    for s in steps[1:]:
        wb.select(s.key)
    ws = wb.context.extra["studykit.workspace"]
    ws.who.value = "Bench"
    wb.step("limits").overview.analyse.click()
    return wb, ws


def timed(fn, session, name):
    start = time.perf_counter()
    fn()
    total = time.perf_counter() - start
    return total, session.timings.get(name, 0.0)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args(argv)
    from studykit.app.session import demo_study_path

    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "bench.study"
        shutil.copy(demo_study_path(), path)
        t0 = time.perf_counter()
        wb, ws = build(path)
        print(f"build workbook with every panel and analyse all: {time.perf_counter() - t0:.2f} s")
        s = ws.session
        rows = []

        def run(label, name, make, undo=None):
            ws.picker.value = name
            totals, analyses = [], []
            for i in range(args.repeat):
                total, analysis = timed(lambda i=i: make(i), s, name)
                totals.append(total)
                analyses.append(analysis)
                if undo is not None:
                    undo(i)
            rows.append(
                (label, statistics.median(totals), max(totals), statistics.median(analyses))
            )

        flange = "flange_thickness"
        run(
            "removal",
            flange,
            lambda i: s.exclude(flange, str(i + 1), reason="bench", who="Bench"),
            lambda i: s.restore(flange, str(i + 1), reason="bench", who="Bench"),
        )
        for i in range(args.repeat):
            s.exclude(flange, str(i + 1), reason="bench", who="Bench")
        run("restore", flange, lambda i: s.restore(flange, str(i + 1), reason="bench", who="Bench"))
        usl = s.study.characteristic(flange).usl
        run(
            "spec change",
            flange,
            lambda i: s.update_characteristic(
                flange, who="Bench", reason="bench", spec={"usl": usl + 0.001 * (i + 1)}
            ),
        )
        runout = "face_runout"
        run(
            "removal (fitted model)",
            runout,
            lambda i: s.exclude(runout, str(i + 1), reason="bench", who="Bench"),
            lambda i: s.restore(runout, str(i + 1), reason="bench", who="Bench"),
        )

    print(
        f"{'change':<24}{'median s':>10}{'worst s':>10}{'analysis s':>12}{'panels+file s':>15}"
        f"{'median/target':>15}"
    )
    for label, med, worst, analysis in rows:
        print(
            f"{label:<24}{med:>10.3f}{worst:>10.3f}{analysis:>12.3f}{med - analysis:>15.3f}"
            f"{med / TARGET:>15.2f}"
        )
    print(f"target: every panel refreshed within {TARGET:.3f} s of a removal or spec change")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
