"""Numerics at the edges of double precision, Box-Cox under a change of unit, bounded memory.

Sources of the expected values:

* Box-Cox lambda: scipy.stats.boxcox_normmax(x, method='mle') (the reference implementation
  of Box & Cox 1964's profile likelihood maximum); its optimiser stops at a relative tolerance
  of about 1.5e-8 (scipy.optimize.brent's default), so agreement is asserted to 1e-6.
* Invariance under a change of unit: Box & Cox (1964), section 3 -- for readings c x the
  profile log-likelihood only gains the constant -n log c, so lambda is the same and the
  capability indices on the transformed scale are the same.
* Double precision: IEEE 754 binary64 keeps 53 bits (numpy.spacing gives one unit in the
  last place); 0.1 + 0.2 == 0.30000000000000004 is the textbook example of rounding.
* The memory bound is the project's own target (issue 12); the data are invented and seeded.
"""

from __future__ import annotations

import importlib
import json
import os
import resource
import subprocess
import sys

import numpy as np
import pytest
from scipy import stats

from studykit.analysis import AnalysisOptions, analyze_characteristic
from studykit.cli import main
from studykit.data import CharacteristicData
from studykit.errors import AnalysisError
from studykit.stats._checks import check_resolution
from studykit.stats.capability import capability
from studykit.stats.transform import box_cox
from studykit.study import Characteristic


def _mm_readings() -> np.ndarray:
    """Right-skewed readings near 21 mm with 4 decimals (invented, seeded); before the fix
    Box-Cox failed on them in mm and in um and worked in m."""
    rng = np.random.default_rng(0)
    return np.round(20.0 + rng.lognormal(0.0, 0.35, 120), 4)


# ------------------------------------------------------------------------------------------
# Box-Cox: the same lambda in every unit


def test_box_cox_lambda_same_in_mm_m_and_um():
    x = _mm_readings()
    ref = stats.boxcox_normmax(x, method="mle")  # scipy reference, mm
    r_mm = box_cox(x)
    assert abs(r_mm.lam - ref) <= 1e-6 * max(1.0, abs(ref))
    for factor in (1e-3, 1e3, 1e-6, 1e6):  # m, um, km, nm
        r = box_cox(x * factor)
        assert r.lam == pytest.approx(r_mm.lam, rel=1e-10, abs=1e-12)
        assert abs(r.lam - stats.boxcox_normmax(x * factor, method="mle")) <= 1e-6 * abs(ref)
        assert r.lam_interval[0] == pytest.approx(r_mm.lam_interval[0], rel=1e-9)
        assert r.lam_interval[1] == pytest.approx(r_mm.lam_interval[1], rel=1e-9)
        assert r.original_center == pytest.approx(r_mm.original_center * factor, rel=1e-12)
        # the likelihood of c x is that of x minus n log c (Box & Cox 1964, section 3)
        assert r.loglik == pytest.approx(r_mm.loglik - x.size * np.log(factor), rel=1e-9)


@pytest.mark.parametrize("seed", [1, 2, 5])
def test_box_cox_lambda_matches_scipy_on_ordinary_data(seed):
    x = np.random.default_rng(seed).lognormal(1.0, 0.5, 80)
    assert box_cox(x).lam == pytest.approx(stats.boxcox_normmax(x, method="mle"), abs=1e-6)


def test_box_cox_capability_same_in_every_unit():
    x = _mm_readings()
    results = {}
    for unit, f in (("mm", 1.0), ("m", 1e-3), ("um", 1e3)):
        data = CharacteristicData("d", unit, x * f)
        spec = Characteristic("d", lsl=20.05 * f, usl=23.5 * f)
        res = analyze_characteristic(
            data, spec, options=AnalysisOptions(model="boxcox", phase1="off")
        )
        results[unit] = res
    mm = results["mm"]
    assert mm.capability.ppk is not None
    for unit in ("m", "um"):
        r = results[unit]
        assert r.model.parameters["lambda"] == pytest.approx(
            mm.model.parameters["lambda"], rel=1e-10
        )
        for k in ("pp", "ppk", "cpk"):
            assert getattr(r.capability, k) == pytest.approx(getattr(mm.capability, k), rel=1e-8)
        assert r.verdict.lower_bound == pytest.approx(mm.verdict.lower_bound, rel=1e-8)


# ------------------------------------------------------------------------------------------
# spread at the resolution of double precision


def test_sigma_at_resolution_is_zero_spread_not_a_huge_cp():
    x = np.array([0.3, 0.1 + 0.2] * 30)  # equal up to one unit in the last place
    assert np.std(x) > 0  # float noise: the bug gave Cp ~ 1e13 from this
    with pytest.raises(AnalysisError, match="differ only by rounding.*treated as zero"):
        capability(x, lsl=0.2, usl=0.4)
    with pytest.raises(AnalysisError, match="differ only by rounding"):
        analyze_characteristic(
            CharacteristicData("gap", "mm", x), Characteristic("gap", lsl=0.2, usl=0.4)
        )


def test_sigma_at_resolution_cli_exit_2(tmp_path, capsys):
    path = tmp_path / "gap.csv"
    path.write_text("gap [mm]\n" + "\n".join(["0.3", "0.30000000000000004"] * 30) + "\n")
    code = main(["analyze", str(path), "-c", "gap", "--lsl", "0.2", "--usl", "0.4"])
    out, err = capsys.readouterr()
    assert code == 2 and "differ only by rounding" in err and len(err.strip().splitlines()) == 1


def test_precision_collapse_refused():
    x = 1e6 + np.arange(60) * 1e-8  # spread 1.7e-7: 1.7e-13 of the mean
    with pytest.raises(AnalysisError, match="less than 1e-12 of their mean.*precision collapse"):
        check_resolution(x, name="'f'")
    with pytest.raises(AnalysisError, match="precision collapse"):
        capability(x, lsl=1e6 - 1, usl=1e6 + 1)
    # just above the threshold it is accepted (spread 1e-11 of the mean)
    check_resolution(1e6 + np.arange(60) * 1e-6, name="'f'")


def test_within_sigma_below_resolution_in_user_words():
    x = np.array([10.0, 10.1, 10.2, 10.05, 9.95, 10.15])
    with pytest.raises(AnalysisError, match="within-subgroup sigma.*below the resolution") as e:
        capability(x, lsl=9.0, usl=11.0, within_sigma=1e-17, df_within=5)
    assert "`" not in str(e.value)


def test_overflow_values_refused_in_user_words(tmp_path, capsys):
    path = tmp_path / "huge.csv"
    vals = [1.5e308, -1.7e308, 1e308, 3e307] * 10
    path.write_text("x\n" + "\n".join(repr(v) for v in vals) + "\n")
    for extra in ([], ["--lsl=-1e308", "--usl=1e308"]):
        code = main(["analyze", str(path), "-c", "x", *extra])
        out, err = capsys.readouterr()
        assert code == 2, err
        assert "overflow" in err and "larger unit" in err
        for internal in ("`center`", "index_by_model", "`within_sigma`", "nan"):
            assert internal not in err


def test_large_but_ordinary_values_still_analysed():
    x = 5e6 + np.random.default_rng(4).normal(0, 2.0, 100)  # a 5 km length in mm, sd 2 mm
    r = capability(x, lsl=5e6 - 20, usl=5e6 + 20)
    assert r.pp == pytest.approx(40 / (6 * np.std(x, ddof=1)), rel=1e-12)


# ------------------------------------------------------------------------------------------
# memory: the bootstrap in blocks, under an address-space limit


def test_bootstrap_blocks_give_the_single_block_numbers(monkeypatch):
    """Blocks of samples use the same random stream as one block: with blocks of a few
    samples the percentile draws equal those of one block (closed-form family: the refits
    are row by row, so the numbers are identical)."""
    from studykit.stats import fit, solvers

    x = np.random.default_rng(9).lognormal(0.5, 0.3, 300)
    model = fit.FAMILIES["lognormal"].fit(x)
    one = capability(x, lsl=0.5, usl=5.0, model=model, n_boot=200)
    monkeypatch.setattr(solvers, "ROW_CELLS", 7 * 300)  # blocks of 7 samples
    blocks = capability(x, lsl=0.5, usl=5.0, model=model, n_boot=200)
    assert blocks.bounds == one.bounds


def test_large_sample_bootstrap_is_rescaled(monkeypatch):
    """Above BOOTSTRAP_FULL_N readings the draws come from samples of that size, their spread
    scaled by sqrt(m/n) (Bickel, Goetze & van Zwet 1997): the interval then matches the full
    bootstrap's width to within the bootstrap's own noise."""
    from studykit.stats import fit

    x = np.random.default_rng(12).lognormal(0.5, 0.3, 4000)
    model = fit.FAMILIES["lognormal"].fit(x)
    full = capability(x, lsl=0.5, usl=5.0, model=model, n_boot=1000)
    # the module (studykit.stats.capability as a package attribute is the function)
    capability_module = importlib.import_module("studykit.stats.capability")
    monkeypatch.setattr(capability_module, "BOOTSTRAP_FULL_N", 1000)
    sub = capability(x, lsl=0.5, usl=5.0, model=model, n_boot=1000)
    assert any("samples of 1000 values" in n for n in sub.notes)
    assert sub.bounds["ppk"]["method"] == "rescaled_m_out_of_n_bootstrap_percentile"
    assert full.bounds["ppk"]["method"] == "parametric_bootstrap_percentile"
    w_full = full.bounds["ppk"]["upper"] - full.bounds["ppk"]["lower"]
    w_sub = sub.bounds["ppk"]["upper"] - sub.bounds["ppk"]["lower"]
    assert w_sub == pytest.approx(w_full, rel=0.15)  # Monte-Carlo noise of 1000 draws
    assert sub.bounds["ppk"]["lower_bound"] < sub.ppk < sub.bounds["ppk"]["upper"]


AS_LIMIT = int(1.5 * 1024**3)


def _limit_address_space():
    resource.setrlimit(resource.RLIMIT_AS, (AS_LIMIT, AS_LIMIT))


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="RLIMIT_AS semantics: Linux")
def test_memory_under_resource_limit_200k_weibull(tmp_path):
    """200,000 readings with --model weibull (7.2 GB before the fix, issue 12) finish within
    a 1.5 GiB address-space limit: bootstrap and threshold grid are evaluated in blocks."""
    n = 200_000
    rng = np.random.default_rng(2026)  # invented readings, seeded
    x = 9.95 + 0.03 * rng.weibull(1.6, n)
    path = tmp_path / "readings.csv"
    with open(path, "w") as fh:
        fh.write("diameter [mm]\n")
        fh.write("\n".join(f"{v:.6f}" for v in x))
        fh.write("\n")
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    cmd = [
        sys.executable,
        "-m",
        "studykit",
        "analyze",
        str(path),
        "-c",
        "diameter",
        "--lsl",
        "9.94",
        "--usl",
        "10.12",
        "--model",
        "weibull",
        "--json",
    ]
    p = subprocess.run(
        cmd, capture_output=True, text=True, env=env, timeout=900, preexec_fn=_limit_address_space
    )
    assert p.returncode == 0, p.stderr[-2000:]
    result = json.loads(p.stdout)
    assert result["model"]["name"] == "weibull"
    assert result["capability"]["ppk_lower_95"] < result["capability"]["ppk"]
    assert any("samples of 20000 values" in w for w in result["capability"].get("notes", []))
    assert (
        result["capability"]["bounds"]["ppk"]["method"]
        == "rescaled_m_out_of_n_bootstrap_percentile"
    )
