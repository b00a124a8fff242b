"""Conventions chosen by an option: capability of a Box-Cox model, moving-range removal.

Sources:

* ``tests/reference/microwave_door_closed.csv``: R. A. Johnson & D. W. Wichern, *Applied
  Multivariate Statistical Analysis* (6th ed.), Table 4.1, radiation through the closed door of
  42 microwave ovens (see tests/reference/README.md). USL 0.5 is set by these tests.
* Percentile method: ISO 22514-2:2017 -- Pp = (USL - LSL)/(X_99.865 - X_0.135),
  PPU = (USL - X_50)/(X_99.865 - X_50). For a Box-Cox model the points are the Box-Cox normal
  model's quantiles carried back to the original scale; the hand computation below uses
  ``scipy.stats.boxcox(x, lmbda=lam)`` for the transformed values, ``numpy`` mean and sd
  (ddof=1), ``scipy.stats.norm.ppf(0.99865)`` for the 99.865 % normal point (2.99998, the
  exact ISO tail 0.135 %, not 3) and ``scipy.special.inv_boxcox`` to go back.
* Moving-range removal: a small constructed series (a test input, invented for this test, not a
  published data set): a pair 8.9 -> 12.1 whose moving range is beyond its upper limit while
  both readings lie inside the individuals limits.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy import special, stats

from studykit.analysis import AnalysisOptions, analyze_characteristic
from studykit.cli import main
from studykit.data import CharacteristicData
from studykit.errors import StudyInputError
from studykit.stats.phase1 import phase1
from studykit.study import Characteristic

REF = Path(__file__).parent / "reference"
MICROWAVE = REF / "microwave_door_closed.csv"
USL = 0.5  # set by the test

# constructed test input (not published data): a repeating pattern, then the pair 8.9 -> 12.1
_BASE = [10.0, 10.6, 10.2, 10.8, 10.4, 10.0, 10.5, 10.9, 10.3, 10.7]
PAIR_SERIES = _BASE + [8.9, 12.1] + _BASE


def _microwave():
    return np.loadtxt(MICROWAVE, delimiter=",", skiprows=1)[:, 1]


def _boxcox(transform_indices):
    x = _microwave()
    return analyze_characteristic(
        CharacteristicData("radiation", None, x),
        Characteristic("radiation", usl=USL),
        options=AnalysisOptions(model="boxcox", phase1="off", transform_indices=transform_indices),
    )


def _analyze_json(capsys, *args):
    capsys.readouterr()
    rc = main(["analyze", *map(str, args), "--json"])
    out = capsys.readouterr().out
    assert rc == 0, out
    return json.loads(out)


def test_percentile_convention_matches_hand_computation_with_scipy():
    res = _boxcox("percentile")
    lam = res.model.parameters["lambda"]
    assert res.model.parameters["shift"] == 0  # positive data: plain Box-Cox
    x = _microwave()
    y = stats.boxcox(x, lmbda=lam)  # scipy.stats.boxcox with the model's lambda
    m, s = float(np.mean(y)), float(np.std(y, ddof=1))
    z = stats.norm.ppf(1 - 0.00135)  # ISO 22514-2 upper 99.865 % point of N(0, 1)
    x_mid = special.inv_boxcox(m, lam)  # scipy.special.inv_boxcox: back to mW/cm^2
    x_hi = special.inv_boxcox(m + z * s, lam)
    ppu = (USL - x_mid) / (x_hi - x_mid)
    cap = res.capability
    assert cap.method == "percentile"
    assert cap.ppk == pytest.approx(ppu, rel=1e-9)
    assert cap.ppu == pytest.approx(ppu, rel=1e-9)
    assert cap.pp is None and cap.ppl is None  # one-sided specification
    assert cap.cpk is None  # no within index for the original-scale model
    q = cap.alternatives["quantiles"]
    assert q["x_median"] == pytest.approx(x_mid, rel=1e-12)
    assert q["x_upper"] == pytest.approx(x_hi, rel=1e-12)
    # expected share above the USL: the transformed normal model's tail
    # (scipy.stats.norm.sf((boxcox(USL) - m) / s))
    p_above = stats.norm.sf((stats.boxcox(np.array([USL]), lmbda=lam)[0] - m) / s)
    assert cap.ppm_overall_above == pytest.approx(p_above * 1e6, rel=1e-9)
    b = cap.bounds["ppk"]
    assert b["method"] == "parametric_bootstrap_percentile"
    assert b["lower_bound"] < cap.ppk < b["upper"]


def test_transformed_convention_is_the_default_and_differs():
    default = _boxcox("transformed")
    lam = default.model.parameters["lambda"]
    y = stats.boxcox(_microwave(), lmbda=lam)  # scipy.stats.boxcox
    m, s = float(np.mean(y)), float(np.std(y, ddof=1))
    usl_t = stats.boxcox(np.array([USL]), lmbda=lam)[0]
    # normal-theory PPU of the transformed values against the transformed USL
    assert default.capability.method == "normal"
    assert default.capability.ppk == pytest.approx((usl_t - m) / (3 * s), rel=1e-9)
    assert AnalysisOptions().transform_indices == "transformed"
    assert _boxcox("percentile").capability.ppk != pytest.approx(default.capability.ppk, rel=1e-3)


def test_cli_names_the_convention(capsys):
    d = _analyze_json(
        capsys,
        MICROWAVE,
        "-c",
        "radiation",
        "--usl",
        USL,
        "--model",
        "boxcox",
        "--phase1",
        "off",
        "--transform-indices",
        "percentile",
    )
    assert d["capability"]["method"] == "percentile"
    assert d["capability"]["model"] == "boxcox"
    d0 = _analyze_json(
        capsys, MICROWAVE, "-c", "radiation", "--usl", USL, "--model", "boxcox", "--phase1", "off"
    )
    assert d0["capability"]["method"] == "normal"
    capsys.readouterr()
    assert (
        main(
            [
                "analyze",
                str(MICROWAVE),
                "-c",
                "radiation",
                "--usl",
                str(USL),
                "--model",
                "boxcox",
                "--phase1",
                "off",
                "--transform-indices",
                "percentile",
            ]
        )
        == 0
    )
    text = capsys.readouterr().out
    assert "convention: ISO 22514-2 percentile method on the original scale" in text
    assert "--transform-indices percentile" in text
    assert (
        main(
            [
                "analyze",
                str(MICROWAVE),
                "-c",
                "radiation",
                "--usl",
                str(USL),
                "--model",
                "boxcox",
                "--phase1",
                "off",
            ]
        )
        == 0
    )
    text = capsys.readouterr().out
    assert "convention: indices of the transformed values" in text


def test_bad_convention_values_are_refused():
    with pytest.raises(StudyInputError, match="transform_indices"):
        AnalysisOptions(transform_indices="raw")
    with pytest.raises(StudyInputError, match="mr_removal"):
        AnalysisOptions(mr_removal="earlier")
    with pytest.raises(StudyInputError, match="mr_removal"):
        phase1(PAIR_SERIES, mr_removal="first")


@pytest.mark.parametrize("mode, removed", [("later", [12]), ("both", [11, 12])])
def test_moving_range_removal_convention(mode, removed):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = phase1(PAIR_SERIES, mr_removal=mode)
    trial = res.trial_chart
    # the test input: the pair's moving range (position 12, |12.1 - 8.9| = 3.2) is beyond the
    # moving-range limit, both readings are inside the individuals limits
    assert abs(PAIR_SERIES[11] - PAIR_SERIES[10]) > trial.dispersion.ucl[11]
    assert trial.location.lcl[0] < 8.9 and 12.1 < trial.location.ucl[0]
    assert [r.label for r in res.removals] == removed
    assert all(r.chart == "dispersion" and r.iteration == 1 for r in res.removals)
    assert all(f"--mr-removal {mode}" in r.reason for r in res.removals)
    assert res.mr_removal == mode and res.to_dict()["mr_removal"] == mode
    assert res.stopped == "stable"


def test_moving_range_removal_through_the_cli(tmp_path, capsys):
    path = tmp_path / "pair.csv"  # the constructed test input above
    path.write_text("x\n" + "\n".join(f"{v:g}" for v in PAIR_SERIES) + "\n")
    # --model normal: phase I on the raw scale, as in the phase1() test above
    for mode, removed in (("later", ["12"]), ("both", ["11", "12"])):
        d = _analyze_json(
            capsys,
            path,
            "-c",
            "x",
            "--lsl",
            5,
            "--usl",
            15,
            "--model",
            "normal",
            "--mr-removal",
            mode,
        )
        assert d["phase1"]["mr_removal"] == mode
        assert [str(r["label"]) for r in d["phase1"]["removals"]] == removed
    d = _analyze_json(capsys, path, "-c", "x", "--lsl", 5, "--usl", 15, "--model", "normal")
    assert [str(r["label"]) for r in d["phase1"]["removals"]] == ["12"]
    assert d["phase1"]["mr_removal"] == "later"


def test_convention_words_for_each_method():
    from studykit.analysis import capability_method_text

    boxcox = {"name": "boxcox", "label": "Box-Cox transformed normal"}
    assert "indices of the transformed values" in capability_method_text(
        {"method": "normal"}, boxcox
    )
    assert "--transform-indices percentile" in capability_method_text(
        {"method": "percentile"}, boxcox
    )
    assert "fitted model's 0.135 %" in capability_method_text(
        {"method": "percentile"}, {"name": "weibull", "label": "Weibull"}
    )
    assert capability_method_text({"method": "normal"}, {"name": "normal"}).startswith(
        "normal theory"
    )
    assert capability_method_text(None, None) is None


def _skewed(seed):
    # constructed test input (not published data): a left-skewed sample drawn with
    # scipy.stats.skewnorm.rvs(-4, loc=12.0, scale=0.005, size=140, random_state=seed); its
    # Box-Cox lambda is in the hundreds
    return stats.skewnorm.rvs(-4, loc=12.0, scale=0.005, size=140, random_state=seed)


def _percentile_boxcox(x):
    return analyze_characteristic(
        CharacteristicData("d", None, x),
        Characteristic("d", lsl=11.97, usl=12.03),
        options=AnalysisOptions(model="boxcox", phase1="off", transform_indices="percentile"),
    )


def test_percentile_convention_with_a_large_lambda():
    x = _skewed(0)
    res = _percentile_boxcox(x)
    lam = res.model.parameters["lambda"]
    assert lam > 100  # x ** lam overflows: the unit-free form (x / geometric mean) is needed
    g = stats.gmean(x)  # scipy.stats.gmean
    y = stats.boxcox(x / g, lmbda=lam)  # scipy.stats.boxcox of the unit-free values
    m, s = float(np.mean(y)), float(np.std(y, ddof=1))
    z = stats.norm.ppf(1 - 0.00135)
    lo, mid, hi = special.inv_boxcox(np.array([m - z * s, m, m + z * s]), lam) * g
    ppk = min((12.03 - mid) / (hi - mid), (mid - 11.97) / (mid - lo))
    assert res.capability.ppk == pytest.approx(ppk, rel=1e-6)
    assert res.capability.bounds["ppk"]["lower_bound"] < res.capability.ppk


def test_percentile_convention_refuses_a_quantile_beyond_the_transformation():
    # lambda > 0: the transformed normal model's 0.135 % point lies below -1/lambda, where
    # the Box-Cox transformation has no inverse (the original scale has no such quantile)
    with pytest.raises(StudyInputError, match="beyond the range of the transformation"):
        _percentile_boxcox(_skewed(2))
