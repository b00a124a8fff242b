"""`studykit analyze`: the JSON field names the README documents, human output, errors."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from numpy.testing import assert_allclose

from studykit.cli import main

# NIST/SEMATECH e-Handbook 6.3.2.2, individuals chart example.
NIST_IMR = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]

ISSUE_FIELDS = {
    "characteristic",
    "n",
    "subgroups",
    "subgroup_size",
    "mean",
    "within_sigma",
    "overall_sigma",
    "chart",
    "phase1",
    "normality",
    "model",
    "capability",
    "verdict",
}
CAPABILITY_FIELDS = {
    "cp",
    "cpk",
    "cpu",
    "cpl",
    "cpm",
    "pp",
    "ppk",
    "ppu",
    "ppl",
    "cp_lower_95",
    "cpk_lower_95",
    "pp_lower_95",
    "ppk_lower_95",
    "ppm_within",
    "ppm_overall",
    "ppm_observed",
}


@pytest.fixture
def imr_csv(tmp_path):
    p = tmp_path / "nist.csv"
    p.write_text(
        "sample,thickness [mm]\n" + "".join(f"{i + 1},{v}\n" for i, v in enumerate(NIST_IMR))
    )
    return p


def run_json(capsys, *argv):
    assert main(list(argv)) == 0
    return json.loads(capsys.readouterr().out)


def test_json_fields_have_exactly_the_documented_names(imr_csv, capsys):
    d = run_json(
        capsys,
        "analyze",
        str(imr_csv),
        "--characteristic",
        "thickness",
        "--lsl",
        "40",
        "--usl",
        "60",
        "--target",
        "50",
        "--phase1",
        "off",
        "--json",
    )
    assert ISSUE_FIELDS <= set(d)
    assert set(d["chart"]) >= {"kind", "location", "dispersion", "signals"}
    assert set(d["chart"]["location"]) == {"center", "lcl", "ucl"}
    assert set(d["phase1"]) >= {"removed_subgroups", "iterations"}
    assert set(d["normality"]) == {"anderson_darling", "shapiro_wilk"}
    assert {"statistic", "p_value"} <= set(d["normality"]["anderson_darling"])
    assert set(d["model"]) >= {"name", "parameters"}
    assert CAPABILITY_FIELDS <= set(d["capability"])
    assert {"criterion", "threshold", "basis", "meets", "text"} <= set(d["verdict"])
    assert d["unit"] == "mm" and d["subgroup_size"] == 1  # individuals
    # NIST 6.3.2.2: UCL 55.8024 with the exact d2 (tests/reference/check_values.md)
    assert_allclose(d["chart"]["location"]["ucl"], 55.8024, atol=5e-5)
    # Cpm with target 50 by its definition (Chan, Cheng & Spiring 1988), using the overall s
    import numpy as np

    x = np.array(NIST_IMR)
    cpm = 20 / (6 * np.sqrt(x.var(ddof=1) + (x.mean() - 50) ** 2))
    assert_allclose(d["capability"]["cpm"], cpm, rtol=1e-12)


def test_attribute_fields(tmp_path, capsys):
    # NIST e-Handbook 6.3.3.2 fractions of 50 chips (first ten wafers are enough here)
    fr = [0.24, 0.30, 0.16, 0.20, 0.08, 0.14, 0.32, 0.18, 0.28, 0.20]
    p = tmp_path / "lots.csv"
    p.write_text(
        "lot,size,bad\n" + "".join(f"W{i + 1},50,{round(f * 50)}\n" for i, f in enumerate(fr))
    )
    d = run_json(
        capsys, "analyze", str(p), "-c", "bad", "--chart", "p", "--size-column", "size", "--json"
    )
    assert {"defective_rate", "defective_rate_upper_95", "ppm_defective", "z_process"} <= set(d)
    assert len(d["chart"]["limits"]) == 10
    assert d["chart"]["limits"][0]["subgroup"] == "W1"
    p_bar = sum(round(f * 50) for f in fr) / 500
    assert_allclose(d["chart"]["location"]["center"], p_bar, rtol=1e-12)


def test_human_output_names_the_verdict(imr_csv, capsys):
    assert main(["analyze", str(imr_csv), "-c", "thickness", "--lsl", "40", "--usl", "60"]) == 0
    out = capsys.readouterr().out
    assert "verdict:" in out and "Ppk" in out and "UCL" in out


def test_unknown_characteristic_exits_2_with_one_line(imr_csv):
    proc = subprocess.run(
        [sys.executable, "-m", "studykit", "analyze", str(imr_csv), "-c", "nope", "--lsl", "1"],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert proc.stderr.count("\n") == 1 and "nope" in proc.stderr


def test_study_file_route_uses_recorded_exclusions(repo_root, capsys):
    study = repo_root / "demo_data" / "pump_housing_pilot.study"
    assert study.exists(), "committed demo file missing"
    from studykit.store import StudyFile

    s = StudyFile(study).load()
    name = next(n for n in s.characteristic_names if s.excluded_subgroups(n))
    d = run_json(capsys, "analyze", "--study", str(study), "-c", name, "--json")
    assert set(s.excluded_subgroups(name)) <= set(d["phase1"]["removed_subgroups"])
    manual = [r for r in d["phase1"]["removals"] if r["rule"] == "manual"]
    assert all(r["reason"] for r in manual)
