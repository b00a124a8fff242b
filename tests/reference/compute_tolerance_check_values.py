"""Recompute the COMPUTED values of tolerance_check_values.md with scipy (never studykit).

Run: ``.venv/bin/python tests/reference/compute_tolerance_check_values.py``; exits 1 if a value
disagrees with the one written there at the printed digits.
"""

from __future__ import annotations

import math
import sys

from scipy import integrate, optimize, stats

failures = 0


def check(label: str, value: float, printed: float, digits: int) -> None:
    global failures
    ok = round(value, digits) == round(printed, digits)
    failures += not ok
    print(f"{'ok ' if ok else 'BAD'} {label}: {value:.{digits + 2}f} (written {printed})")


def two_sided_k(n: int, p: float, c: float) -> float:
    nu = n - 1

    def r_of(x):
        return optimize.brentq(
            lambda r: stats.norm.cdf(x + r) - stats.norm.cdf(x - r) - p, 0.0, x + 10.0, xtol=1e-14
        )

    def conf(k):
        def f(x):
            return stats.chi2.sf(nu * r_of(x) ** 2 / k**2, nu) * stats.norm.pdf(
                x, 0, 1 / math.sqrt(n)
            )

        return 2 * integrate.quad(f, 0, 10 / math.sqrt(n), epsabs=1e-12)[0]

    return optimize.brentq(lambda k: conf(k) - c, 1.0, 50.0, xtol=1e-10)


check("two-sided exact k (10, .95, .95)", two_sided_k(10, 0.95, 0.95), 3.393429, 6)
check("two-sided exact k (43, .90, .99)", two_sided_k(43, 0.90, 0.99), 2.222825, 6)

zp, zc = stats.norm.ppf(0.90), stats.norm.ppf(0.99)
check(
    "one-sided exact k (43, .90, .99), scipy.stats.nct.ppf",
    stats.nct.ppf(0.99, 42, zp * math.sqrt(43)) / math.sqrt(43),
    1.873954,
    6,
)
a = 1 - zc**2 / (2 * 42)
b = zp**2 - zc**2 / 43
k1 = (zp + math.sqrt(zp**2 - a * b)) / a
check("NIST 7.2.6.3 k1 (approximation)", k1, 1.8752, 4)
chi = stats.chi2.ppf(0.01, 42)
check("NIST 7.2.6.3 chi2_{0.01; 42}", chi, 23.650, 3)
k2 = stats.norm.ppf(0.95) * math.sqrt(42 * (1 + 1 / 43) / chi)
check("NIST 7.2.6.3 k2 (Howe)", k2, 2.2173, 4)
check("NIST 7.2.6.3 upper one-sided limit", 97.07 + k1 * 0.0268, 97.1203, 4)


def smallest_n(conf_of_n, c):
    n = 1
    while conf_of_n(n) < c:
        n += 1
    return n


for p, c, one, two in [(0.95, 0.95, 59, 93), (0.90, 0.90, 22, 38), (0.99, 0.95, 299, 473)]:
    check(
        f"distribution-free one-sided n ({p}, {c})", smallest_n(lambda n, p=p: 1 - p**n, c), one, 0
    )
    check(
        f"distribution-free two-sided n ({p}, {c})",
        smallest_n(lambda n, p=p: 1 - p**n - n * p ** (n - 1) * (1 - p), c),
        two,
        0,
    )
check("distribution-free one-sided n (0.90, 0.99)", smallest_n(lambda n: 1 - 0.9**n, 0.99), 44, 0)

check("Rayleigh Pr{R > 3 sigma}", math.exp(-4.5), 0.011109, 6)
check("chi2.sf(9, 2)", stats.chi2.sf(9, 2), 0.011109, 6)
check("ncx2.sf(9, 2, 3.25)", stats.ncx2.sf(9, 2, 1 + 1.5**2), 0.164112, 6)
check("index at Phi(-3)", stats.norm.ppf(1 - stats.norm.cdf(-3)) / 3, 1.0, 6)

if failures:
    print(f"{failures} value(s) disagree")
    sys.exit(1)
print("all agree")
