"""Speed of studykit.stats.fit.fit_all against the generic scipy route.

Run: .venv/bin/python tests/bench/bench_fit.py [--repeat 40]

Prints the median of repeated warm runs of fit_all on 125 readings over all families, the
median of the same fits by scipy.stats.<dist>.fit (one call per family, same data, same run),
their ratio, and per-family figures. Targets: fit_all <= 20 ms, ratio >= 20.
"""

from __future__ import annotations

import argparse
import statistics
import time
import warnings

import numpy as np
from scipy import stats

from studykit.stats import fit, transform

# family id -> (scipy distribution, fixed arguments): the generic route
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

DATASETS = {
    "shifted Weibull": lambda rng: stats.weibull_min(2.2, loc=10, scale=3).rvs(
        125, random_state=rng
    ),
    "lognormal": lambda rng: stats.lognorm(0.4, scale=5).rvs(125, random_state=rng),
    "normal": lambda rng: stats.norm(50, 2).rvs(125, random_state=rng),
}


def _median_ms(fn, repeat):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return 1e3 * statistics.median(times)


def _generic(x):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for dist, kw in GENERIC.values():
            dist.fit(x, **kw)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=40)
    args = ap.parse_args(argv)
    assert set(GENERIC) == set(fit.FAMILIES)  # noqa: S101 - a script, not library code
    print("fit_all on 125 readings, all families, warm runs (ms). One run of each route in turn")
    print("(interleaved, so machine load hits both alike); median and minimum (the minimum is")
    print("the least disturbed by other processes on a shared machine).\n")
    for label, make in DATASETS.items():
        x = make(np.random.default_rng(2026))
        fit.fit_all(x)  # warm up
        _generic(x)
        ours, generic = [], []
        for i in range(args.repeat):
            ours.append(_median_ms(lambda x=x: fit.fit_all(x), 1))
            if i % 4 == 0:
                generic.append(_median_ms(lambda x=x: _generic(x), 1))
        om, gm = statistics.median(ours), statistics.median(generic)
        o0, g0 = min(ours), min(generic)
        print(
            f"{label:16s} median: ours {om:6.2f}  scipy {gm:7.1f}  ratio {gm / om:5.1f}x | "
            f"min: ours {o0:6.2f}  scipy {g0:7.1f}  ratio {g0 / o0:5.1f}x"
        )
    print("targets: fit_all <= 20 ms, ratio >= 20x")
    x = DATASETS["shifted Weibull"](np.random.default_rng(2026))
    print("\nper family (shifted Weibull data), ms: ours / scipy.stats.<dist>.fit")
    for fid, (dist, kw) in GENERIC.items():
        ours = _median_ms(lambda fid=fid: fit.FAMILIES[fid].fit(x), args.repeat)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = _median_ms(lambda dist=dist, kw=kw: dist.fit(x, **kw), max(3, args.repeat // 8))
        print(f"  {fid:14s} {ours:7.3f} / {ref:8.2f}")
    print(f"\nbox_cox  {_median_ms(lambda: transform.box_cox(x), args.repeat):7.2f} ms")
    print(f"johnson  {_median_ms(lambda: transform.johnson(x), max(3, args.repeat // 4)):7.2f} ms")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
