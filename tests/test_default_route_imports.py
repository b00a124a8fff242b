"""The default study of a normal characteristic (``studykit analyze FILE -c NAME --lsl L --usl U
--json``) runs without importing ``scipy.stats``, ``scipy.optimize`` or ``scipy.integrate``
(together about 0.9 s of a 10^6-reading run): the order check counts its discordant pairs
itself, Shapiro-Wilk, d2's quadrature and the effective-df root search call scipy's compiled
routines directly. Their results equal the public scipy functions' bit for bit (reference
library: scipy.stats.shapiro, scipy.integrate.quad, scipy.optimize.brentq)."""

from __future__ import annotations

import json
import math
import subprocess
import sys
import warnings

import numpy as np
import pytest

HEAVY = ("scipy.stats", "scipy.optimize", "scipy.integrate")


def test_default_command_imports_no_heavy_scipy_package(tmp_path):
    rng = np.random.default_rng(14)  # invented readings, seeded
    x = rng.normal(10.0, 0.01, 20_000)
    path = tmp_path / "readings.csv"
    t0 = np.datetime64("2026-01-05T06:00:00")
    stamps = (t0 + np.arange(x.size) * np.timedelta64(2, "s")).astype(str)
    path.write_text(
        "timestamp,diameter [mm]\n"
        + "".join(f"{t.replace('T', ' ')},{v:.6f}\n" for t, v in zip(stamps, x, strict=True)),
        encoding="utf-8",
    )
    code = (
        "import io, json, sys\n"
        "from studykit.cli import main\n"
        "out, sys.stdout = sys.stdout, io.StringIO()\n"
        f"rc = main(['analyze', {str(path)!r}, '-c', 'diameter', '--lsl', '9.94', '--usl',"
        " '10.06', '--json'])\n"
        "text, sys.stdout = sys.stdout.getvalue(), out\n"
        f"print(json.dumps([rc, json.loads(text)['n'], [m in sys.modules for m in {HEAVY!r}]]))\n"
    )
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    rc, n, imported = json.loads(run.stdout.strip().splitlines()[-1])
    assert (rc or 0, n) == (0, 20_000)
    assert dict(zip(HEAVY, imported, strict=True)) == dict.fromkeys(HEAVY, False)


@pytest.mark.parametrize("n", [3, 4, 11, 12, 50, 125, 5000, 5001, 20_000])
def test_shapiro_wilk_equals_scipy(n):
    from scipy import stats

    from studykit.stats.normality import shapiro_wilk

    rng = np.random.default_rng(n)
    for x in (rng.normal(size=n), np.round(rng.weibull(1.5, n), 2)):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # scipy: p-value rough above 5000
            ref = stats.shapiro(x)
        r = shapiro_wilk(x)
        assert (r.w, r.p_value) == (float(ref.statistic), float(ref.pvalue))


def test_quad_and_brentq_equal_scipy():
    from scipy import integrate, optimize, special

    from studykit.stats.lazy import brentq, quad_whole_line

    for n in (2, 3, 5, 10, 25, 100):

        def f(x, n=n):
            p = special.ndtr(x)
            return 1.0 - p**n - (1.0 - p) ** n

        ref = integrate.quad(f, -np.inf, np.inf, epsabs=1e-12, epsrel=1e-12, limit=200)
        assert quad_whole_line(f, epsabs=1e-12, epsrel=1e-12, limit=200) == ref[:2]
    for c in (0.5, 2.0, 5.0, 1e-6):  # g(-20) < 0 < g(5) for each

        def g(t, c=c):
            return math.exp(t) - c * (1.0 + t * t)

        assert brentq(g, -20.0, 5.0, xtol=1e-12) == optimize.brentq(g, -20.0, 5.0, xtol=1e-12)
    with pytest.raises(ValueError):  # no sign change: scipy's own error
        brentq(lambda t: t * t + 1.0, -1.0, 1.0, xtol=1e-12)


def test_scipy_special_without_numpy_unused_submodules():
    """``import studykit.stats`` loads ``scipy.special`` without numpy's f2py, testing and
    polynomial (scipy's array-API layer read every name of ``dir(numpy)``); numpy's own lists
    are restored and the layer still finds those names through numpy when read."""
    code = (
        "import json, sys\n"
        "import studykit.stats\n"
        "import numpy, scipy.special\n"
        "unused = ['numpy.' + n for n in ('f2py', 'testing', 'polynomial', 'ctypeslib')]\n"
        "loaded = [m for m in unused if m in sys.modules]\n"
        "listed = ['f2py' in dir(numpy), 'testing' in numpy.__all__]\n"
        "import scipy._lib.array_api_compat.numpy as xp\n"
        "same = [xp.polynomial is numpy.polynomial, xp.ma is numpy.ma]\n"
        "try:\n"
        "    xp.no_such_name\n"
        "    missing = 'found'\n"
        "except AttributeError:\n"
        "    missing = 'AttributeError'\n"
        "print(json.dumps([loaded, listed, same, missing, float(scipy.special.ndtr(0.0))]))\n"
    )
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    loaded, listed, same, missing, half = json.loads(run.stdout.strip().splitlines()[-1])
    assert loaded == []
    assert listed == [True, True]  # numpy 2.x lists both (restored after the import)
    assert same == [True, True] and missing == "AttributeError" and half == 0.5
