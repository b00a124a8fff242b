"""Control-chart constants computed from their definitions, not copied from a table.

The range constants ``d2`` and ``d3`` are the mean and standard deviation of the range of ``n``
independent standard normal values; ``c4`` is the mean of the sample standard deviation of ``n``
standard normal values. Every other constant is a closed form of these three. Values are cached
per subgroup size.

References
----------
D. C. Montgomery, *Introduction to Statistical Quality Control*, Appendix VI (table of factors
for constructing variables control charts) and chapter 6 (the formulas for A2, A3, D3, D4, B3,
B4 from d2, d3 and c4).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from functools import cache

import numpy as np
from scipy import special

from studykit.errors import StudyInputError
from studykit.stats.lazy import quad_whole_line
from studykit.stats.result import Result

__all__ = [
    "MAX_SUBGROUP_SIZE",
    "ChartConstants",
    "chart_constants",
    "gauss_legendre",
    "d2",
    "d3",
    "c4",
]

#: Largest subgroup size for which the range constants are computed.
MAX_SUBGROUP_SIZE = 100


#: Subgroup sizes whose d2 and d3 are kept below (the sizes studies use); any other size is
#: computed when first asked for.
TABLED_SIZES = range(2, 26)

# d2(n) and d3(n) for n in TABLED_SIZES, exactly as _d2_computed and _d3_computed return them on
# the machine that wrote them (``_table_text()`` prints these lines; tests/test_constants.py
# recomputes every entry and asserts equality of the repr). They spare each process (and each
# worker of a parallel report or batch) the quadrature: tens of milliseconds per size.
_D2_TABLE = {
    2: 1.1283791670955123,
    3: 1.6925687506432687,
    4: 2.058750746007928,
    5: 2.325928947281039,
    6: 2.5344127212229424,
    7: 2.7043567512138087,
    8: 2.8472006120905546,
    9: 2.9700263244184737,
    10: 3.077505461670345,
    11: 3.1728727038159996,
    12: 3.258455279743825,
    13: 3.335980354098254,
    14: 3.406763108199952,
    15: 3.471826889882074,
    16: 3.5319827861095745,
    17: 3.5878839617653804,
    18: 3.640063757937442,
    19: 3.688963023207648,
    20: 3.7349501195966397,
    21: 3.7783358298426193,
    22: 3.8193846433628305,
    23: 3.8583234232850048,
    24: 3.8953481484513546,
    25: 3.930629219507111,
}
_D3_TABLE = {
    2: 0.8525024664234415,
    3: 0.8883680040414214,
    4: 0.8798082028212257,
    5: 0.8640819410957333,
    6: 0.848039686113668,
    7: 0.8332053356184304,
    8: 0.8198314897880636,
    9: 0.8078342745494077,
    10: 0.7970506735154682,
    11: 0.7873146205463505,
    12: 0.7784783411993862,
    13: 0.7704162020597272,
    14: 0.7630230956207394,
    15: 0.7562114297238861,
    16: 0.7499080894058281,
    17: 0.744051783956631,
    18: 0.7385908533740612,
    19: 0.7334814955147284,
    20: 0.7286863457031578,
    21: 0.7241733407133405,
    22: 0.7199148084300439,
    23: 0.7158867354876306,
    24: 0.712068175143738,
    25: 0.7084407658844489,
}


def _check_size(n, *, name="n", low=2, high=MAX_SUBGROUP_SIZE) -> int:
    if isinstance(n, bool) or not isinstance(n, int | np.integer):
        raise StudyInputError(
            f"`{name}` ({n!r}) must be a whole number of values per subgroup; "
            f"pass an integer from {low} to {high}."
        )
    n = int(n)
    if n < low or n > high:
        raise StudyInputError(
            f"`{name}` ({n}) must be between {low} and {high}; control-chart constants are "
            f"defined for subgroups of {low} to {high} values."
        )
    return n


def _range_cdf_tail(r: np.ndarray, n: int, nodes: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """P(R > r) for the range of n standard normal values, by Gauss-Legendre quadrature.

    P(R <= r) = n * integral phi(x) [Phi(x + r) - Phi(x)]^(n-1) dx.
    """
    x = nodes[None, :]
    inner = np.exp(-0.5 * x * x) / math.sqrt(2.0 * math.pi)
    diff = special.ndtr(x + r[:, None]) - special.ndtr(x)
    cdf = n * np.sum(weights[None, :] * inner * diff ** (n - 1), axis=1)
    return 1.0 - cdf


@cache
def d2(n: int) -> float:
    """Mean of the range of ``n`` standard normal values (the constant d2).

    Parameters
    ----------
    n : int
        Subgroup size, 2 to 100.

    Returns
    -------
    float
        d2(n) = E[R] for R = max - min of n independent N(0, 1) values.

    Notes
    -----
    d2(n) = integral over the real line of 1 - Phi(x)^n - (1 - Phi(x))^n dx, evaluated with
    ``scipy.integrate.quad`` (absolute error below 1e-10). For n in :data:`TABLED_SIZES` the
    value is read from a table written by that same computation (tests recompute each entry).

    References
    ----------
    Montgomery, *Introduction to Statistical Quality Control*, Appendix VI (printed to three
    decimals).

    Examples
    --------
    >>> round(d2(5), 6)
    2.325929
    """
    n = _check_size(n)
    return _D2_TABLE[n] if n in _D2_TABLE else _d2_computed(n)


def _d2_computed(n: int) -> float:
    """d2(n) by quadrature (see :func:`d2`), for ``n`` already checked."""

    def integrand(x):
        p = special.ndtr(x)
        return 1.0 - p**n - (1.0 - p) ** n

    value, _ = quad_whole_line(integrand, epsabs=1e-12, epsrel=1e-12, limit=200)  # quad(-inf, inf)
    return float(value)


@cache
def gauss_legendre(k: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights of the k-point Gauss-Legendre rule on [-1, 1]
    (``numpy.polynomial.legendre.leggauss``), computed once per process (read-only arrays):
    the eigenvalue problem behind it takes tens of milliseconds at k = 400. A parallel batch
    computes it before its worker processes start."""
    nodes, weights = np.polynomial.legendre.leggauss(k)
    nodes.flags.writeable = False
    weights.flags.writeable = False
    return nodes, weights


@cache
def d3(n: int) -> float:
    """Standard deviation of the range of ``n`` standard normal values (the constant d3).

    Parameters
    ----------
    n : int
        Subgroup size, 2 to 100.

    Returns
    -------
    float
        d3(n) = sqrt(E[R^2] - d2(n)^2).

    Notes
    -----
    E[R^2] = 2 * integral_0^inf r P(R > r) dr with
    P(R <= r) = n * integral phi(x) [Phi(x + r) - Phi(x)]^(n-1) dx.
    Both integrals use 400-point Gauss-Legendre rules (r on [0, 16], x on [-10, 10]); the
    integrands are smooth and negligible outside these ranges for n <= 100. For n = 2 the
    result equals the closed form sqrt(2 - 4/pi). For n in :data:`TABLED_SIZES` the value is
    read from a table written by that same computation (tests recompute each entry).

    References
    ----------
    Montgomery, *Introduction to Statistical Quality Control*, Appendix VI.

    Examples
    --------
    >>> round(d3(2), 6)
    0.852502
    """
    n = _check_size(n)
    return _D3_TABLE[n] if n in _D3_TABLE else _d3_computed(n)


def _d3_computed(n: int) -> float:
    """d3(n) by Gauss-Legendre quadrature (see :func:`d3`), for ``n`` already checked."""
    x_nodes, x_weights = gauss_legendre(400)
    x_nodes = 10.0 * x_nodes
    x_weights = 10.0 * x_weights
    r_nodes, r_weights = gauss_legendre(400)
    r_nodes = 8.0 * (r_nodes + 1.0)
    r_weights = 8.0 * r_weights
    tail = _range_cdf_tail(r_nodes, n, x_nodes, x_weights)
    second_moment = 2.0 * float(np.sum(r_weights * r_nodes * tail))
    return float(math.sqrt(second_moment - d2(n) ** 2))


def _table_text() -> str:
    """The source lines of ``_D2_TABLE`` and ``_D3_TABLE``, computed afresh (to rewrite them)."""
    d2_rows = "".join(f"    {n}: {_d2_computed(n)!r},\n" for n in TABLED_SIZES)
    d3_rows = "".join(f"    {n}: {_d3_computed(n)!r},\n" for n in TABLED_SIZES)
    return f"_D2_TABLE = {{\n{d2_rows}}}\n_D3_TABLE = {{\n{d3_rows}}}\n"


@cache
def c4(n: int) -> float:
    """Mean of the sample standard deviation of ``n`` standard normal values (the constant c4).

    Parameters
    ----------
    n : int
        Number of values, 2 or more (any size; not limited to 100).

    Returns
    -------
    float
        c4(n) = sqrt(2 / (n - 1)) * Gamma(n / 2) / Gamma((n - 1) / 2).

    Notes
    -----
    Computed with ``scipy.special.gammaln`` so that large n does not overflow.

    References
    ----------
    Montgomery, *Introduction to Statistical Quality Control*, chapter 6 and Appendix VI.

    Examples
    --------
    >>> round(c4(5), 4)
    0.94
    """
    n = _check_size(n, high=10**9)
    return float(
        math.sqrt(2.0 / (n - 1))
        * math.exp(special.gammaln(n / 2.0) - special.gammaln((n - 1) / 2.0))
    )


@dataclass(frozen=True)
class ChartConstants(Result):
    """All factors for variables control charts at one subgroup size.

    Fields are the usual trade symbols: ``d2, d3, c4`` (from the definitions) and
    ``A, A2, A3, D1, D2, D3, D4, B3, B4, B5, B6, E2``.
    """

    n: int
    d2: float
    d3: float
    c4: float
    A: float
    A2: float
    A3: float
    D1: float
    D2: float
    D3: float
    D4: float
    B3: float
    B4: float
    B5: float
    B6: float
    E2: float

    def to_dict(self) -> dict:
        """Plain dictionary of every field (JSON-safe)."""
        return asdict(self)


@cache
def chart_constants(n: int) -> ChartConstants:
    """Every variables-chart factor for subgroup size ``n``.

    Parameters
    ----------
    n : int
        Subgroup size, 2 to 100.

    Returns
    -------
    ChartConstants
        ``n, d2, d3, c4`` and the factors below.

    Notes
    -----
    A = 3 / sqrt(n); A2 = 3 / (d2 sqrt(n)); A3 = 3 / (c4 sqrt(n));
    D1 = max(0, d2 - 3 d3); D2 = d2 + 3 d3; D3 = max(0, 1 - 3 d3 / d2); D4 = 1 + 3 d3 / d2;
    B3 = max(0, 1 - 3 sqrt(1 - c4^2) / c4); B4 = 1 + 3 sqrt(1 - c4^2) / c4;
    B5 = max(0, c4 - 3 sqrt(1 - c4^2)); B6 = c4 + 3 sqrt(1 - c4^2);
    E2 = 3 / d2 (limits of an individuals chart are x-bar +- E2 * MR-bar when the moving range
    spans ``n`` values; the usual span of two gives E2 = 3 / d2(2) = 2.659).

    References
    ----------
    Montgomery, *Introduction to Statistical Quality Control*, chapter 6 and Appendix VI.

    Examples
    --------
    >>> k = chart_constants(5)
    >>> round(k.A2, 3), round(k.D4, 3), round(k.B4, 3)
    (0.577, 2.114, 2.089)
    """
    n = _check_size(n)
    dd2, dd3, cc4 = d2(n), d3(n), c4(n)
    root = math.sqrt(n)
    s_ratio = math.sqrt(1.0 - cc4 * cc4)
    return ChartConstants(
        n=n,
        d2=dd2,
        d3=dd3,
        c4=cc4,
        A=3.0 / root,
        A2=3.0 / (dd2 * root),
        A3=3.0 / (cc4 * root),
        D1=max(0.0, dd2 - 3.0 * dd3),
        D2=dd2 + 3.0 * dd3,
        D3=max(0.0, 1.0 - 3.0 * dd3 / dd2),
        D4=1.0 + 3.0 * dd3 / dd2,
        B3=max(0.0, 1.0 - 3.0 * s_ratio / cc4),
        B4=1.0 + 3.0 * s_ratio / cc4,
        B5=max(0.0, cc4 - 3.0 * s_ratio),
        B6=cc4 + 3.0 * s_ratio,
        E2=3.0 / dd2,
    )
