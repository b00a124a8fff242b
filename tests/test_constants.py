"""Control-chart constants against the published table and independent integrals."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, special

from studykit.errors import StudyInputError
from studykit.stats.constants import c4, chart_constants, d2, d3

# Montgomery, Introduction to Statistical Quality Control, Appendix VI (FOUND, as listed in the
# project's tests/reference/check_values.md "Control-chart constants" table). Columns: n, d2, d3, c4, A2, A3, D3, D4,
# B3, B4, printed to the digits shown.
MONTGOMERY_APPENDIX_VI = [
    (2, "1.128", "0.853", "0.7979", "1.880", "2.659", "0", "3.267", "0", "3.267"),
    (3, "1.693", "0.888", "0.8862", "1.023", "1.954", "0", "2.574", "0", "2.568"),
    (4, "2.059", "0.880", "0.9213", "0.729", "1.628", "0", "2.282", "0", "2.266"),
    (5, "2.326", "0.864", "0.9400", "0.577", "1.427", "0", "2.114", "0", "2.089"),
    (6, "2.534", "0.848", "0.9515", "0.483", "1.287", "0", "2.004", "0.030", "1.970"),
    (7, "2.704", "0.833", "0.9594", "0.419", "1.182", "0.076", "1.924", "0.118", "1.882"),
    (8, "2.847", "0.820", "0.9650", "0.373", "1.099", "0.136", "1.864", "0.185", "1.815"),
    (9, "2.970", "0.808", "0.9693", "0.337", "1.032", "0.184", "1.816", "0.239", "1.761"),
    (10, "3.078", "0.797", "0.9727", "0.308", "0.975", "0.223", "1.777", "0.284", "1.716"),
    (25, "3.931", "0.708", "0.9896", "0.153", "0.606", "0.459", "1.541", "0.565", "1.435"),
]
FIELDS = ("d2", "d3", "c4", "A2", "A3", "D3", "D4", "B3", "B4")


def _half_unit(text: str) -> float:
    """Half a unit in the last printed digit (a printed "0" is an exact zero)."""
    if "." not in text:
        return 1e-12
    return 0.5 * 10.0 ** -len(text.split(".")[1])


@pytest.mark.parametrize("row", MONTGOMERY_APPENDIX_VI, ids=lambda r: f"n={r[0]}")
def test_constants_match_montgomery_appendix_vi_to_printed_digits(row):
    n, *printed = row
    k = chart_constants(n)
    for field, text in zip(FIELDS, printed, strict=True):
        got = getattr(k, field)
        if n == 3 and field == "D4":
            # The printed D4(3) = 2.574 was derived from the rounded d2 = 1.693, d3 = 0.888
            # (1 + 3 * 0.888 / 1.693 = 2.57354); exact 2.57459 (tests/reference/check_values.md note). Check both.
            assert abs(1 + 3 * 0.888 / 1.693 - float(text)) <= _half_unit(text)
            assert abs(got - 2.57459) <= 5e-6
            continue
        # Half a unit of the last printed digit, plus 1e-9 for floating point.
        assert abs(got - float(text)) <= _half_unit(text) + 1e-9, (n, field, got, text)


# Exact d2, COMPUTED with scipy.integrate.quad (tests/reference/check_values.md, "Exact d2").
EXACT_D2 = {
    2: 1.128379,
    3: 1.692569,
    4: 2.058751,
    5: 2.325929,
    6: 2.534413,
    7: 2.704357,
    8: 2.847201,
    9: 2.970026,
    10: 3.077505,
    25: 3.930629,
}


@pytest.mark.parametrize("n", sorted(EXACT_D2))
def test_d2_matches_exact_values(n):
    assert abs(d2(n) - EXACT_D2[n]) <= 5e-7  # six printed decimals


def test_d2_and_d3_closed_forms_for_two_values():
    # R = |X1 - X2| with X1 - X2 ~ N(0, 2): E[R] = 2 / sqrt(pi), Var R = 2 - 4 / pi
    # (half-normal moments; standard result, from memory).
    assert_allclose(d2(2), 2 / math.sqrt(math.pi), rtol=1e-10)
    assert_allclose(d3(2), math.sqrt(2 - 4 / math.pi), rtol=1e-9)


@pytest.mark.parametrize("n", [3, 5, 12, 30])  # 30: computed, not tabled
def test_d3_matches_independent_double_integral(n):
    # E[R^2] = 2 * double integral over x < y of
    #   1 - Phi(y)^n - (1 - Phi(x))^n + (Phi(y) - Phi(x))^n
    # (P(min <= x, max > y)), by scipy.integrate.dblquad with y = x + r: a different route from
    # the module's Gauss-Legendre evaluation of P(R > r).
    def g(r, x):
        fx, fy = special.ndtr(x), special.ndtr(x + r)
        return 1 - fy**n - (1 - fx) ** n + (fy - fx) ** n

    second, _ = integrate.dblquad(g, -9, 9, 0, 14, epsabs=1e-10, epsrel=1e-10)
    assert_allclose(d3(n), math.sqrt(2 * second - d2(n) ** 2), rtol=1e-7)


def test_range_constants_against_simulation_at_large_n():
    # Monte Carlo check of the definitions at n = 60 (outside the printed table):
    # 200,000 subgroups, standard errors about 0.0015 (d2) and 0.001 (d3).
    rng = np.random.default_rng(20240601)
    x = rng.standard_normal((200_000, 60))
    r = x.max(axis=1) - x.min(axis=1)
    assert abs(d2(60) - r.mean()) < 0.006
    assert abs(d3(60) - r.std(ddof=1)) < 0.004


@pytest.mark.parametrize("n", [2, 3, 7, 30, 500])
def test_c4_equals_mean_of_chi_distribution(n):
    # E[s] / sigma = E[chi_{n-1}] / sqrt(n - 1): scipy.stats.chi(n - 1).mean() / sqrt(n - 1)
    from scipy import stats

    assert_allclose(c4(n), stats.chi(n - 1).mean() / math.sqrt(n - 1), rtol=1e-12)


def test_e2_is_three_over_d2():
    # E2 for the individuals chart (moving range of two): 2.660 printed as 3 / 1.128 in
    # Montgomery ch. 6 (from memory); exact 3 / d2(2) = 2.65868.
    assert_allclose(chart_constants(2).E2, 3 / d2(2), rtol=1e-15)
    assert abs(chart_constants(2).E2 - 2.659) < 5e-4


def test_to_dict_is_plain():
    out = chart_constants(4).to_dict()
    assert out["n"] == 4 and isinstance(out["D4"], float)


@pytest.mark.parametrize("bad", [1, 101, 0, -3])
def test_size_out_of_range(bad):
    with pytest.raises(StudyInputError, match=r"`n` \(-?\d+\) must be between 2 and 100"):
        d2(bad)


@pytest.mark.parametrize("bad", [2.5, "5", True])
def test_size_must_be_integer(bad):
    with pytest.raises(StudyInputError, match="must be a whole number"):
        chart_constants(bad)


def test_tabled_range_constants_equal_their_computation():
    """The kept d2/d3 table is exactly what the quadrature gives (repr round-trip), for every
    tabled size; sizes outside it are computed (the definitions' check is the tests above:
    Montgomery Appendix VI and the independent scipy double integral)."""
    from studykit.stats import constants

    assert list(constants._D2_TABLE) == list(constants.TABLED_SIZES)
    assert list(constants._D3_TABLE) == list(constants.TABLED_SIZES)
    for n in constants.TABLED_SIZES:
        assert repr(constants._d2_computed(n)) == repr(constants._D2_TABLE[n]), n
        assert repr(constants._d3_computed(n)) == repr(constants._D3_TABLE[n]), n
        assert d2(n) == constants._D2_TABLE[n] and d3(n) == constants._D3_TABLE[n]
    # the module's table text is what _table_text() writes now
    source = Path(constants.__file__).read_text(encoding="utf-8")
    assert constants._table_text() in source
    # a size outside the table (30) is computed: test_d3_matches_independent_double_integral
    assert 30 not in constants.TABLED_SIZES
