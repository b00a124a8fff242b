"""Speed of one full characteristic study (125 readings) against the generic scipy route.

Run: .venv/bin/python tests/bench/bench_study.py [--repeat 30]

The full study is ``studykit.analysis.analyze_characteristic`` with default options: phase-I
limits with removals and the eight run rules, normality tests, the probability plot, the
ranking of every distribution family when the normal model is rejected, capability with
bounds, verdict, findings, model band and plan. The generic route fits the same 15 families with ``scipy.stats.<dist>.fit`` alone (no
charts, no bounds): the ratio says how many full studies run in the time the generic route
needs for its fits. For a non-normal characteristic the generic route would also refit the
chosen family with scipy on each of the 500 bootstrap samples of the bounds: that route is
timed on 25 samples and scaled, and printed as a second ratio. Times are CPU times of this process
(``time.process_time``). Runs are interleaved (ours, generic, ours...) so machine load hits both
alike; median and minimum are printed (the minimum is the least disturbed on a shared machine).
Targets: normal characteristic <= 3 ms (median, idle machine), ratio >= 20x. The load average
is printed with the figures (the machine is shared). ``--profile N`` prints where the time of N
normal studies goes instead (cProfile).
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parent))
from figure_rows import row  # noqa: E402

from studykit.analysis import analyze_characteristic
from studykit.data import CharacteristicData
from studykit.stats import fit
from studykit.study import Characteristic

# family id -> (scipy distribution, fixed arguments): the generic route, one fit per family
GENERIC = {
    "normal": (stats.norm, {}),
    "lognormal": (stats.lognorm, {"floc": 0}),
    "lognormal3": (stats.lognorm, {}),
    "weibull": (stats.weibull_min, {"floc": 0}),
    "weibull3": (stats.weibull_min, {}),
    "gamma": (stats.gamma, {"floc": 0}),
    "gamma3": (stats.gamma, {}),
    "exponential": (stats.expon, {"floc": 0}),
    "exponential2": (stats.expon, {}),
    "logistic": (stats.logistic, {}),
    "loglogistic": (stats.fisk, {"floc": 0}),
    "loglogistic3": (stats.fisk, {}),
    "sev": (stats.gumbel_l, {}),
    "lev": (stats.gumbel_r, {}),
    "halfnormal": (stats.halfnorm, {"floc": 0}),
}


def cases(rng_seed=2026):
    """(label, data, spec) of the benchmark (invented, seeded)."""
    rng = np.random.default_rng(rng_seed)
    normal = rng.normal(50.0, 2.0, 125)
    skewed = stats.weibull_min(1.6, loc=10, scale=3).rvs(125, random_state=rng)
    return [
        ("normal, auto model", normal, Characteristic("x", lsl=40.0, usl=60.0)),
        ("skewed, auto model", skewed, Characteristic("x", usl=40.0)),
    ]


def _generic(x):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for dist, kw in GENERIC.values():
            dist.fit(x, **kw)


def _once_ms(fn):
    """CPU time of one call in ms (the process's own CPU time: on a shared machine it
    grows with the load much less than the wall time)."""
    t = time.process_time()
    fn()
    return 1e3 * (time.process_time() - t)


def _profile(repeats: int) -> int:
    """cProfile ``repeats`` studies of the normal case: phase I's share, then the functions
    with the most time of their own (profiling slows small calls, so read shares, not ms)."""
    import cProfile
    import pstats

    _, x, spec = cases()[0]
    data = CharacteristicData("x", None, x)
    analyze_characteristic(data, spec)  # warm up
    prof = cProfile.Profile()
    prof.enable()
    for _ in range(repeats):
        analyze_characteristic(data, spec)
    prof.disable()
    st = pstats.Stats(prof)
    cum = {f"{Path(k[0]).name}:{k[2]}": v[3] for k, v in st.stats.items()}
    total = cum.get("analysis.py:analyze_characteristic", float("nan"))
    for name in ("analysis.py:_run_phase1", "charts.py:control_chart", "rules.py:evaluate"):
        print(f"{name:40s} {cum.get(name, 0.0) / total:6.1%} of the study")
    st.sort_stats("tottime").print_stats(25)
    return 0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=30)
    ap.add_argument(
        "--boot-sample",
        type=int,
        default=25,
        help="scipy bootstrap refits timed (scaled to n_boot)",
    )
    ap.add_argument(
        "--profile",
        type=int,
        default=0,
        metavar="N",
        help="instead of timing: cProfile N studies of the normal case and print where the "
        "time goes (phase I's share first)",
    )
    args = ap.parse_args(argv)
    if args.profile:
        return _profile(args.profile)
    if set(GENERIC) != set(fit.FAMILIES):
        raise SystemExit("the generic route must list every family of studykit.stats.fit")
    print("Full study of one characteristic, 125 readings, warm runs (ms)")
    summary = []
    for label, x, spec in cases():
        data = CharacteristicData("x", None, x)
        res = analyze_characteristic(data, spec)  # warm up
        _generic(x)
        ours, generic = [], []
        for i in range(args.repeat):
            ours.append(_once_ms(lambda d=data, s=spec: analyze_characteristic(d, s)))
            if i % 3 == 0:
                generic.append(_once_ms(lambda x=x: _generic(x)))
        om, gm = statistics.median(ours), statistics.median(generic)
        o0, g0 = min(ours), min(generic)
        print(
            f"  {label:20s} model {res.model.name:11s} median: ours {om:6.1f}  scipy fits "
            f"{gm:7.1f}  ratio {gm / om:5.1f}x | min: ours {o0:6.1f}  scipy {g0:7.1f}  "
            f"ratio {g0 / o0:5.1f}x"
        )
        summary.append(f"{label.split(',')[0]} {om:.1f} ms ({gm / om:.1f}x)")
        normal = label.startswith("normal")
        row(
            f"One study, 125 readings, {label} (the study `studykit analyze` runs, default "
            f"options): CPU time, median of {args.repeat} warm runs "
            f"(min {o0:.1f} ms; load average {os.getloadavg()[0]:.1f})",
            "analyze_characteristic(data, spec)",
            om,
            "ms",
            baseline_name="scipy.stats fits of the 15 families alone, median",
            baseline=gm,
            goal="<= 3 ms median" if normal else "",
            met=om <= 3.0 if normal else None,
        )
        if res.model.fitted is not None:
            # the generic route of the bounds: refit the chosen family with scipy on every
            # bootstrap sample (timed on --boot-sample samples, scaled to n_boot)
            dist, kw = GENERIC[res.model.name]
            frozen = res.model.fitted.dist
            rng = np.random.default_rng(0)
            n_boot = res.options.n_boot
            t = time.perf_counter()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                for _ in range(args.boot_sample):
                    dist.fit(frozen.rvs(x.size, random_state=rng), **kw)
            per = (time.perf_counter() - t) / args.boot_sample
            full = gm + 1e3 * per * n_boot
            print(
                f"  {'':20s} with the bootstrap by scipy refits ({n_boot} x "
                f"{1e3 * per:.1f} ms, timed on {args.boot_sample}): generic {full:7.0f} ms, "
                f"ratio {full / om:5.1f}x"
            )
            summary[-1] += f", {full / om:.0f}x with a scipy bootstrap"
    print(
        f"targets: normal characteristic <= 3 ms median (idle machine), ratio >= 20x; load "
        f"average {os.getloadavg()[0]:.1f}"
    )
    print("summary: full study, median: " + "; ".join(summary))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
