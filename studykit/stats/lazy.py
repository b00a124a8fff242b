"""``scipy.stats``, imported on first use.

Importing ``scipy.stats`` costs about 0.6-0.9 s and 60 MB on this project's machines, and most
runs (the default study of a normal characteristic, the workbook's landing view, ``--help``)
need only ``scipy.special``. Modules that call into ``scipy.stats`` write
``from studykit.stats.lazy import scipy_stats as stats`` and use ``stats.<name>`` as before; the
first attribute read imports the real module (once, through :mod:`importlib`, so the usual
module cache applies).

>>> from studykit.stats.lazy import scipy_stats
>>> float(scipy_stats.norm.cdf(0.0))
0.5
"""

from __future__ import annotations

import contextlib
import importlib
import math
import sys
from collections.abc import Iterator
from types import ModuleType
from typing import Any

__all__ = [
    "LazyModule",
    "PositiveFrozen",
    "beta_ppf",
    "binom_cdf",
    "brentq",
    "chi2_isf",
    "chi2_pdf",
    "chi2_ppf",
    "chi2_sf",
    "f_sf",
    "import_scipy_special",
    "norm_cdf",
    "norm_isf_values",
    "norm_ppf_values",
    "norm_isf",
    "norm_sf",
    "quad_whole_line",
    "scipy_compiled",
    "scipy_stats",
]


class LazyModule:
    """A stand-in for a module that is imported when one of its attributes is first read."""

    __slots__ = ("_name", "_module")

    def __init__(self, name: str) -> None:
        self._name = name
        self._module: ModuleType | None = None

    def __getattr__(self, attr: str) -> Any:
        module = self._module
        if module is None:
            module = importlib.import_module(self._name)
            self._module = module
        return getattr(module, attr)

    def __repr__(self) -> str:
        state = "imported" if self._module is not None else "not imported yet"
        return f"<lazy module {self._name!r} ({state})>"


#: numpy's submodules that numpy loads on the first read of the attribute and that no studykit
#: route uses (``numpy.f2py`` alone took about 60 ms to import, ``ma``, ``testing`` and
#: ``polynomial`` together about 40 ms)
NUMPY_UNUSED_SUBMODULES = ("f2py", "testing", "ma", "polynomial", "ctypeslib", "rec", "char")
_COMPAT = "scipy._lib.array_api_compat.numpy"


@contextlib.contextmanager
def _numpy_without(names: set[str]) -> Iterator[None]:
    """numpy's ``dir()`` and ``__all__`` without ``names`` for the time of the block."""
    import numpy as numpy_module

    numpy: Any = numpy_module  # (its __dir__ is assigned: a module attribute, not a method)
    listed_dir, listed_all = numpy.__dict__.get("__dir__"), numpy.__all__
    numpy.__all__ = [n for n in listed_all if n not in names]
    if listed_dir is not None:
        numpy.__dir__ = lambda: [n for n in listed_dir() if n not in names]
    try:
        yield
    finally:
        numpy.__all__ = listed_all
        if listed_dir is not None:
            numpy.__dir__ = listed_dir


def import_scipy_special() -> ModuleType:
    """``import scipy.special``, without scipy's array-API layer importing numpy's unused
    submodules (:data:`NUMPY_UNUSED_SUBMODULES`).

    That layer (``scipy._lib.array_api_compat.numpy``, imported by ``scipy.special``) copies
    every name ``dir(numpy)`` and ``numpy.__all__`` list into its own namespace, and reading a
    lazily loaded submodule's name imports it: about 60-100 ms of every studykit process's
    start. Here those names are left out of both lists while ``scipy.special`` is first
    imported, and the layer then finds them through numpy on first use (a module
    ``__getattr__``), so ``xp.ma`` and the like still work, imported when read. numpy's lists
    are restored at once; the functions are the same objects, so every number is the same.
    Imported already (by someone else first): nothing changes.

    >>> special = import_scipy_special()
    >>> float(special.ndtr(0.0))
    0.5
    """
    if "scipy.special" in sys.modules:
        return sys.modules["scipy.special"]
    unused = {n for n in NUMPY_UNUSED_SUBMODULES if f"numpy.{n}" not in sys.modules}
    compat_new = _COMPAT not in sys.modules
    with _numpy_without(unused if compat_new else set()):
        import scipy.special
    compat: Any = sys.modules.get(_COMPAT)
    if compat_new and compat is not None and "__getattr__" not in compat.__dict__:
        import numpy

        def forward(name: str) -> Any:
            if name in unused:
                value = getattr(numpy, name)
                setattr(compat, name, value)
                return value
            raise AttributeError(f"module {_COMPAT!r} has no attribute {name!r}")

        compat.__getattr__ = forward  # PEP 562: read by attribute lookup
    return scipy.special


#: ``scipy.stats``, imported on first attribute access.
scipy_stats: Any = LazyModule("scipy.stats")


def scipy_compiled(name: str) -> ModuleType | None:
    """The compiled module ``scipy.<name>`` (e.g. ``"stats._ansari_swilk_statistics"``) loaded
    from its file alone, without running its package's import (``scipy.stats`` costs about
    0.6 s, ``scipy.integrate`` and ``scipy.optimize`` together about 0.3 s), or None when it
    cannot be found or loaded (then call the public scipy function instead). Only for compiled
    modules that import nothing of their package themselves: the Shapiro-Wilk routine behind
    ``scipy.stats.shapiro``, QUADPACK behind ``scipy.integrate.quad`` and the root finder
    behind ``scipy.optimize.brentq``; each is loaded once per process.

    >>> scipy_compiled("optimize._zeros") is scipy_compiled("optimize._zeros")
    True
    """
    import sys

    full = f"scipy.{name}"
    module = sys.modules.get(full) or _COMPILED.get(full)
    if module is not None:
        return module
    try:
        import importlib.machinery
        import importlib.util
        from pathlib import Path

        import scipy

        package, _, leaf = name.rpartition(".")
        folder = Path(scipy.__path__[0]).joinpath(*package.split("."))
        for suffix in importlib.machinery.EXTENSION_SUFFIXES:
            path = folder / f"{leaf}{suffix}"
            if path.is_file():
                loader = importlib.machinery.ExtensionFileLoader(full, str(path))
                spec = importlib.util.spec_from_file_location(full, path, loader=loader)
                if spec is None:
                    return None
                module = importlib.util.module_from_spec(spec)
                loader.exec_module(module)
                _COMPILED[full] = module
                return module
    except Exception:  # noqa: BLE001 - any failure: the caller takes the public route
        return None
    return None


_COMPILED: dict[str, ModuleType] = {}

#: scipy.optimize.brentq's smallest relative tolerance (4 machine epsilons), its default.
_BRENTQ_RTOL = 4 * 2.220446049250313e-16


def quad_whole_line(func, *, epsabs: float, epsrel: float, limit: int) -> tuple[float, float]:
    """``scipy.integrate.quad(func, -inf, inf, epsabs=..., epsrel=..., limit=...)``: the same
    QUADPACK call (``qagie`` on the whole line, as ``quad`` makes it) without importing
    ``scipy.integrate``; any failure, warning case or error goes to ``quad`` itself.

    >>> import math
    >>> value, _ = quad_whole_line(lambda x: math.exp(-x * x), epsabs=1e-12, epsrel=1e-12,
    ...                            limit=50)
    >>> round(value ** 2, 12) == round(math.pi, 12)
    True
    """
    quadpack = scipy_compiled("integrate._quadpack")
    if quadpack is not None:
        try:
            value, abserr, ier = quadpack._qagie(func, 0, 2, (), 0, epsabs, epsrel, limit)
        except Exception:  # noqa: BLE001 - scipy's own call below raises or warns as it does
            ier = -1
        if ier == 0:
            return value, abserr
    from scipy import integrate

    value, abserr = integrate.quad(
        func, -float("inf"), float("inf"), epsabs=epsabs, epsrel=epsrel, limit=limit
    )[:2]
    return value, abserr


def brentq(
    f, a: float, b: float, *, xtol: float, rtol: float = _BRENTQ_RTOL, maxiter: int = 100
) -> float:
    """``scipy.optimize.brentq(f, a, b, xtol=xtol, rtol=rtol, maxiter=maxiter)``: the
    same compiled root finder without importing ``scipy.optimize``; any failure (no sign
    change, a NaN value, ...) goes to ``brentq`` itself, which raises or answers as it does.

    >>> brentq(lambda x: x * x - 2.0, 0.0, 2.0, xtol=1e-12) == 1.4142135623731364
    True
    """
    zeros = scipy_compiled("optimize._zeros")
    if zeros is not None and xtol > 0 and rtol >= _BRENTQ_RTOL:

        def checked(x, *args):
            fx = f(x, *args)
            if fx != fx:  # NaN: scipy's wrapper raises; let it do so below
                raise ValueError("NaN")
            return fx

        try:
            return zeros._brentq(checked, a, b, xtol, rtol, maxiter, (), False, True)
        except Exception:  # noqa: BLE001 - scipy's own call below raises as it does
            pass
    from scipy import optimize

    return optimize.brentq(f, a, b, xtol=xtol, rtol=rtol, maxiter=maxiter)


def f_sf(x: float, dfn: float, dfd: float) -> float:
    """``float(scipy.stats.f.sf(x, dfn, dfd))`` (the F distribution's upper tail), bit for bit:
    for 0 < x < inf and positive degrees of freedom scipy's answer is
    ``scipy.special.fdtrc(dfn, dfd, x)`` (its ``f._sf``; loc 0 and scale 1 change nothing),
    taken here without importing ``scipy.stats``; any other case goes to scipy.stats itself.

    >>> f_sf(2.5, 3, 20) == float(scipy_stats.f.sf(2.5, 3, 20))
    True
    """
    if 0.0 < x < float("inf") and dfn > 0 and dfd > 0:
        from scipy.special import fdtrc

        return float(fdtrc(dfn, dfd, x))
    return float(scipy_stats.f.sf(x, dfn, dfd))


def _special_routine(name: str) -> Any:
    """The compiled routine ``scipy.special._ufuncs.<name>`` that a ``scipy.stats``
    distribution calls (not public: None when this scipy has no such routine, and the caller
    then asks scipy.stats)."""
    from scipy.special import _ufuncs

    return getattr(_ufuncs, name, None)


def beta_ppf(q: float, a: float, b: float) -> float:
    """``float(scipy.stats.beta.ppf(q, a, b))`` for numbers, bit for bit: for 0 < q < 1 and
    positive shapes scipy's answer is its ``beta._ppf`` routine (``scipy.special._ufuncs.
    _beta_ppf``) times scale 1 plus loc 0, taken here without importing ``scipy.stats``; any
    other case goes to scipy.stats itself.

    >>> beta_ppf(0.025, 3, 98) == float(scipy_stats.beta.ppf(0.025, 3, 98))
    True
    """
    routine = _special_routine("_beta_ppf")
    if routine is not None and 0.0 < q < 1.0 and a > 0 and b > 0:
        return float(routine(q, a, b) * 1.0 + 0.0)
    return float(scipy_stats.beta.ppf(q, a, b))


def norm_isf(q: float) -> float:
    """``float(scipy.stats.norm.isf(q))``, bit for bit: ``-ndtri(q)`` (scipy's ``norm._isf``)
    times scale 1 plus loc 0 for 0 < q < 1; any other case goes to scipy.stats itself.

    >>> norm_isf(0.00135) == float(scipy_stats.norm.isf(0.00135))
    True
    """
    if 0.0 < q < 1.0:
        from scipy.special import ndtri

        return float(-ndtri(q) * 1.0 + 0.0)
    return float(scipy_stats.norm.isf(q))


def norm_sf(x: float, loc: float = 0.0, scale: float = 1.0) -> float:
    """``float(scipy.stats.norm.sf(x, loc, scale))``, bit for bit: ``ndtr(-((x - loc) /
    scale))`` (scipy's standardisation and ``norm._sf``) for a finite standardised x and a
    positive scale; any other case goes to scipy.stats itself.

    >>> norm_sf(3.0) == float(scipy_stats.norm.sf(3.0))
    True
    """
    z = (x - loc) / scale if scale > 0 else math.nan
    if -math.inf < z < math.inf:
        from scipy.special import ndtr

        return float(ndtr(-z))
    return float(scipy_stats.norm.sf(x, loc, scale))


def norm_cdf(x: float, loc: float = 0.0, scale: float = 1.0) -> float:
    """``float(scipy.stats.norm.cdf(x, loc, scale))``, bit for bit: ``ndtr((x - loc) / scale)``
    for a finite standardised x and a positive scale; any other case goes to scipy.stats.

    >>> norm_cdf(1.2, 1.0, 0.5) == float(scipy_stats.norm.cdf(1.2, 1.0, 0.5))
    True
    """
    z = (x - loc) / scale if scale > 0 else math.nan
    if -math.inf < z < math.inf:
        from scipy.special import ndtr

        return float(ndtr(z))
    return float(scipy_stats.norm.cdf(x, loc, scale))


def chi2_sf(x, df: float):
    """``scipy.stats.chi2.sf(x, df)`` (a number or an array), bit for bit: ``chdtrc(df, x)``
    (scipy's ``chi2._sf``) when every x is positive and finite and df > 0; any other case goes
    to scipy.stats itself.

    >>> bool(chi2_sf(3.0, 4) == scipy_stats.chi2.sf(3.0, 4))
    True
    """
    import numpy as np

    arr = np.asarray(x, dtype=float)
    if df > 0 and bool(np.all((arr > 0) & (arr < math.inf))):
        from scipy.special import chdtrc

        return chdtrc(df, arr)[()]
    return scipy_stats.chi2.sf(x, df)


def chi2_pdf(x, df: float):
    """``scipy.stats.chi2.pdf(x, df)`` (a number or an array), bit for bit: scipy's
    ``chi2._pdf`` formula, exp(xlogy(df/2 - 1, x) - x/2 - gammaln(df/2) - log(2) df / 2), when
    every x is positive and finite and df > 0; any other case goes to scipy.stats itself.

    >>> bool(chi2_pdf(3.0, 4) == scipy_stats.chi2.pdf(3.0, 4))
    True
    """
    import numpy as np

    arr = np.asarray(x, dtype=float)
    if df > 0 and bool(np.all((arr > 0) & (arr < math.inf))):
        from scipy.special import gammaln, xlogy

        d = np.asarray(df)
        log_pdf = xlogy(d / 2.0 - 1, arr) - arr / 2.0 - gammaln(d / 2.0) - (np.log(2) * d) / 2.0
        return (np.exp(log_pdf) / 1.0)[()]
    return scipy_stats.chi2.pdf(x, df)


def chi2_ppf(q: float, df: float):
    """``scipy.stats.chi2.ppf(q, df)`` for numbers, bit for bit: ``2 gammaincinv(df/2, q)``
    (scipy's ``chi2._ppf``) times scale 1 plus loc 0 for 0 < q < 1 and df > 0; any other case
    goes to scipy.stats itself.

    >>> bool(chi2_ppf(0.05, 7) == scipy_stats.chi2.ppf(0.05, 7))
    True
    """
    import numpy as np

    if 0.0 < q < 1.0 and df > 0:
        from scipy.special import gammaincinv

        return (2 * gammaincinv(np.asarray(df) / 2, np.asarray(q)) * 1.0 + 0.0)[()]
    return scipy_stats.chi2.ppf(q, df)


def chi2_isf(q: float, df: float):
    """``scipy.stats.chi2.isf(q, df)`` for numbers, bit for bit: ``chdtri(df, q)`` (scipy's
    ``chi2._isf``) times scale 1 plus loc 0 for 0 < q < 1 and df > 0; any other case goes to
    scipy.stats itself.

    >>> bool(chi2_isf(0.05, 7) == scipy_stats.chi2.isf(0.05, 7))
    True
    """
    import numpy as np

    if 0.0 < q < 1.0 and df > 0:
        from scipy.special import chdtri

        return (chdtri(np.asarray(df), np.asarray(q)) * 1.0 + 0.0)[()]
    return scipy_stats.chi2.isf(q, df)


def binom_cdf(k: int, n: int, p: float):
    """``scipy.stats.binom.cdf(k, n, p)`` for whole numbers, bit for bit: scipy's
    ``binom._cdf`` routine on floor(k), clipped to [0, 1], for 0 <= k < n and 0 <= p <= 1; any
    other case goes to scipy.stats itself.

    >>> bool(binom_cdf(3, 20, 0.1) == scipy_stats.binom.cdf(3, 20, 0.1))
    True
    """
    import numpy as np

    routine = _special_routine("_binom_cdf")
    whole = isinstance(k, int) and isinstance(n, int)
    if routine is not None and whole and 0 <= k < n and 0.0 <= p <= 1.0:
        return np.clip(routine(np.floor(np.asarray(k)), np.asarray(n), p), 0, 1)[()]
    return scipy_stats.binom.cdf(k, n, p)


class PositiveFrozen:
    """``scipy.stats.<name>(shape, loc=loc, scale=scale)`` for ``"lognorm"`` and ``"gamma"``
    (support x > loc): ``cdf`` and ``sf`` computed as scipy's frozen distribution computes them
    (its standardisation, masks and ``_cdf``/``_sf``: ndtr(+-log(z)/s); gammainc/gammaincc),
    bit for bit, without importing ``scipy.stats``; every other method or attribute is the real
    frozen distribution's, made on first use.

    >>> d = PositiveFrozen("gamma", 2.5, loc=1.0, scale=0.5)
    >>> x = [0.5, 1.0, 1.7, 9.0]
    >>> ref = scipy_stats.gamma(2.5, loc=1.0, scale=0.5)
    >>> bool((d.cdf(x) == ref.cdf(x)).all() and (d.sf(x) == ref.sf(x)).all())
    True
    """

    __slots__ = ("_name", "_shape", "_loc", "_scale", "_real")

    def __init__(self, name: str, shape: float, *, loc: float, scale: float) -> None:
        if name not in ("lognorm", "gamma"):
            raise ValueError(f"no light form of scipy.stats.{name}")
        self._name, self._shape, self._loc, self._scale = name, shape, loc, scale
        self._real: Any = None

    def _frozen(self) -> Any:
        if self._real is None:
            dist = getattr(scipy_stats, self._name)
            self._real = dist(self._shape, loc=self._loc, scale=self._scale)
        return self._real

    def __getattr__(self, attr: str) -> Any:
        if attr.startswith("__"):  # copy/pickle probes: the plain object's behaviour
            raise AttributeError(attr)
        return getattr(self._frozen(), attr)

    def __repr__(self) -> str:
        return f"<{self._name}({self._shape!r}, loc={self._loc!r}, scale={self._scale!r})>"

    def cdf(self, x):
        return self._tail(x, upper=False)

    def sf(self, x):
        return self._tail(x, upper=True)

    def _tail(self, x, *, upper: bool):
        import numpy as np
        from scipy import special

        shape, loc, scale = (np.asarray(v) for v in (self._shape, self._loc, self._scale))
        if not (shape > 0 and scale > 0):  # scipy's own answer (NaN) for invalid parameters
            return (self._frozen().sf if upper else self._frozen().cdf)(x)
        x = np.asarray(x)
        dtyp = np.promote_types(x.dtype, np.float64)
        z = np.asarray((x - loc) / scale, dtype=dtyp)
        inside = (z > 0) & (z < np.inf)
        out = np.zeros(np.shape(inside), dtyp)
        np.place(out, np.isnan(z), np.nan)
        np.place(out, (z <= 0) if upper else (z >= np.inf), 1.0)
        if np.any(inside):
            good = np.extract(inside, z)
            if self._name == "gamma":
                vals = (special.gammaincc if upper else special.gammainc)(shape, good)
            else:
                w = np.log(good) / shape
                vals = special.ndtr(-w) if upper else special.ndtr(w)
            np.place(out, inside, vals)
        return out[()]


def norm_ppf_values(q):
    """``scipy.stats.norm.ppf(q)`` for a number or an array, bit for bit: NaN outside [0, 1],
    -inf at 0, +inf at 1 and ``ndtri(q)`` times scale 1 plus loc 0 in between, as scipy fills
    them.

    >>> import numpy as np
    >>> q = np.array([0.0, 1e-300, 0.3, 0.5, 1.0, 1.5, np.nan])
    >>> bool(np.array_equal(norm_ppf_values(q), scipy_stats.norm.ppf(q), equal_nan=True))
    True
    """
    return _norm_quantile(q, upper=False)


def norm_isf_values(q):
    """``scipy.stats.norm.isf(q)`` for a number or an array, bit for bit (as
    :func:`norm_ppf_values`, with ``-ndtri(q)``, +inf at 0 and -inf at 1).

    >>> import numpy as np
    >>> q = np.array([0.0, 1e-300, 0.3, 0.5, 1.0, 1.5, np.nan])
    >>> bool(np.array_equal(norm_isf_values(q), scipy_stats.norm.isf(q), equal_nan=True))
    True
    """
    return _norm_quantile(q, upper=True)


def _norm_quantile(q, *, upper: bool):
    import numpy as np
    from scipy.special import ndtri

    q = np.asarray(q)
    dtyp = np.promote_types(q.dtype, np.float64)
    inside = (q > 0) & (q < 1)
    out = np.full(np.shape(inside), np.nan, dtype=dtyp)
    np.place(out, q == 0, np.inf if upper else -np.inf)
    np.place(out, q == 1, -np.inf if upper else np.inf)
    if np.any(inside):
        good = np.extract(inside, q)
        vals = (-ndtri(good) if upper else ndtri(good)) * 1.0 + 0.0
        np.place(out, inside, vals)
    return out[()]
