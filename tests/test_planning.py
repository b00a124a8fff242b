"""Demonstration planning: closed forms and a seeded simulation of the stated criterion."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from studykit.errors import StudyInputError
from studykit.stats.capability import capability
from studykit.stats.planning import CRITERION, parts_needed, planning_table


def bissell_bound(k, n, level):
    # Bissell (1990): k - z sqrt(1/(9n) + k^2/(2(n-1))), written out independently.
    return k - stats.norm.ppf(level) * math.sqrt(1 / (9 * n) + k * k / (2 * (n - 1)))


def chi2_bound(k, n, level):
    # Chi-square lower bound for Cp/Pp (Montgomery ch. 8): k sqrt(chi2_{1-level}(n-1)/(n-1)).
    return k * math.sqrt(stats.chi2.ppf(1 - level, n - 1) / (n - 1))


@pytest.mark.parametrize("k,t", [(2.0, 1.67), (1.67, 1.33), (1.5, 1.33), (2.33, 1.33), (1.4, 1.0)])
@pytest.mark.parametrize("level", [0.9, 0.95, 0.99])
def test_bissell_n_is_ceiling_of_quadratic_root(k, t, level):
    p = parts_needed(k, t, index="ppk", level=level)
    # Closed form: D n^2 - (D + 1/9 + k^2/2) n + 1/9 = 0, D = (k - t)^2 / z^2 (solved by hand from
    # Bissell's bound = t); n is the ceiling of the larger root.
    z = stats.norm.ppf(level)
    d = (k - t) ** 2 / z**2
    b = d + 1 / 9 + k * k / 2
    root = (b + math.sqrt(b * b - 4 * d / 9)) / (2 * d)
    assert p.n == math.ceil(root)
    assert bissell_bound(k, p.n, level) >= t > bissell_bound(k, p.n - 1, level)
    assert p.method == "bissell"


@pytest.mark.parametrize("k,t", [(2.0, 1.67), (1.67, 1.33), (1.5, 1.0)])
def test_chi_square_n_is_smallest_clearing(k, t):
    p = parts_needed(k, t, index="pp")
    assert chi2_bound(k, p.n, 0.95) >= t > chi2_bound(k, p.n - 1, 0.95)
    # Wilson-Hilferty approximation of chi2 quantiles gives the same n within 1.
    z = stats.norm.ppf(0.95)
    wh = next(
        n for n in range(3, 10000)
        if k * math.sqrt((1 - 2 / (9 * (n - 1)) - z * math.sqrt(2 / (9 * (n - 1)))) ** 3) >= t
    )  # fmt: skip
    assert abs(wh - p.n) <= 1
    assert parts_needed(k, t, index="cp").n == p.n


@pytest.mark.parametrize("index", ["ppk", "pp"])
def test_simulated_bound_clears_in_about_half_of_studies(index):
    # Seeded simulation of the expected-value criterion: true index k, n from the plan; the
    # computed lower bound clears t in about half of 3000 simulated studies.
    k, t = 1.67, 1.33
    n = parts_needed(k, t, index=index).n
    rng = np.random.default_rng(99)
    x = rng.normal(size=(3000, n))
    m, s = x.mean(axis=1), x.std(axis=1, ddof=1)
    if index == "ppk":
        usl = 3 * k  # one-sided: true PPU = k with mean 0, sigma 1
        est = (usl - m) / (3 * s)
        bound = est - stats.norm.ppf(0.95) * np.sqrt(1 / (9 * n) + est**2 / (2 * (n - 1)))
    else:
        est = (6 * k) / (6 * s)
        bound = est * math.sqrt(stats.chi2.ppf(0.05, n - 1) / (n - 1))
    share = np.mean(bound >= t)
    assert 0.45 < share < 0.65
    # The module's bound on one simulated study agrees with the hand formula used above.
    r = capability(x[0], usl=3 * k) if index == "ppk" else capability(x[0], lsl=-3 * k, usl=3 * k)
    assert math.isclose(r.lower_bound(index), float(bound[0]), rel_tol=1e-10)


def test_not_demonstrable_and_table():
    p = parts_needed(1.33, 1.67)
    assert p.n is None and "no number of parts" in p.text
    assert parts_needed(1.6700001, 1.67).n is None  # margin too small: more than MAX_PARTS
    t = planning_table([1.5, 2.0], [1.33, 1.67], index="ppk")
    assert t.n[0][1] is None
    assert t.n[1][1] == parts_needed(2.0, 1.67).n
    assert t.to_dict()["criterion"] == CRITERION and "half" in CRITERION
    # More margin needs fewer parts; a higher level needs more.
    assert parts_needed(2.33, 1.67).n < parts_needed(2.0, 1.67).n
    assert parts_needed(2.0, 1.67, level=0.99).n > parts_needed(2.0, 1.67, level=0.9).n


def test_errors():
    with pytest.raises(StudyInputError, match="`index`"):
        parts_needed(2.0, 1.67, index="cpm")
    with pytest.raises(StudyInputError, match="`assumed`"):
        parts_needed(-1, 1.67)
    with pytest.raises(StudyInputError, match="`level`"):
        parts_needed(2.0, 1.67, level=1.5)
    with pytest.raises(StudyInputError, match="at least one value"):
        planning_table([], [1.33])
