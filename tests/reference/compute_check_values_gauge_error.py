"""Recompute the COMPUTED values of check_values_gauge_error.md with scipy/numpy (never studykit).

Run: ``.venv/bin/python tests/reference/compute_check_values_gauge_error.py``; exits 1 if a value
disagrees with the one written at its printed digits.
"""

from __future__ import annotations

import math
import sys

import numpy as np
from scipy import stats

failures = 0


def check(label: str, value: float, printed: float, digits: int) -> None:
    global failures
    ok = round(value, digits) == round(printed, digits)
    failures += not ok
    print(f"{'ok ' if ok else 'BAD'} {label}: {value:.{digits + 2}f} (written {printed})")


x = np.array([5.001, 5.003, 5.002, 5.002, 5.004, 5.000, 5.002, 5.001, 5.003, 5.002])
s = x.std(ddof=1)
bias = x.mean() - 5.0
check("s", s, 0.00115470, 8)
check("Cg K20 L6", (0.2 * 0.1) / (6 * s), 2.886751, 6)
check("Cgk K20 L6", (0.1 * 0.1 - abs(bias)) / (3 * s), 2.309401, 6)
check("Cg K10 L4", (0.1 * 0.1) / (4 * s), 2.165064, 6)
check("Cgk K10 L4", (0.05 * 0.1 - abs(bias)) / (2 * s), 1.299038, 6)
tt = stats.ttest_1samp(x, 5.0)
check("t", tt.statistic, 5.477226, 6)
check("p", tt.pvalue, 0.000392, 6)
ci = tt.confidence_interval(0.95)
check("bias lower", ci.low - 5.0, 0.001174, 6)
check("bias upper", ci.high - 5.0, 0.002826, 6)

check("chi-square limit lower", 99 * 4 / stats.chi2.ppf(0.975, 99) - 1, 2.083584, 6)
check("chi-square limit upper", 99 * 4 / stats.chi2.ppf(0.025, 99) - 1, 4.397958, 6)


def mls(s1, d1, s2, d2, a=0.025):
    f = stats.f.ppf
    g1, h1 = 1 - 1 / stats.chi2.ppf(1 - a, d1) * d1, d1 / stats.chi2.ppf(a, d1) - 1
    g2, h2 = 1 - 1 / stats.chi2.ppf(1 - a, d2) * d2, d2 / stats.chi2.ppf(a, d2) - 1
    fh, fl = f(1 - a, d1, d2), f(a, d1, d2)
    g12 = ((fh - 1) ** 2 - g1**2 * fh**2 - h2**2) / fh
    h12 = ((1 - fl) ** 2 - h1**2 * fl**2 - g2**2) / fl
    lo = s1 - s2 - math.sqrt(g1**2 * s1**2 + h2**2 * s2**2 + g12 * s1 * s2)
    hi = s1 - s2 + math.sqrt(h1**2 * s1**2 + g2**2 * s2**2 + h12 * s1 * s2)
    return lo, hi


lo, hi = mls(4.0, 99, 1.0, 30)
check("MLS lower (4, 99; 1, 30)", lo, 1.815429, 6)
check("MLS upper (4, 99; 1, 30)", hi, 4.448935, 6)

print("all agree" if not failures else f"{failures} disagree")
sys.exit(1 if failures else 0)
