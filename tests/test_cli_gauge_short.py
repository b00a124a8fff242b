"""``studykit gauge FILE --reference VALUE`` (short gauge study) and the ``measurement_error``
block of ``studykit analyze --json`` on the demo study (invented data; the numbers are checked
against plain arithmetic on the stored results, not against the demo)."""

from __future__ import annotations

import json
import math
import shutil

import pytest
from numpy.testing import assert_allclose

from studykit.cli import main

# invented for the test (see tests/test_gauge_type1.py for the hand arithmetic):
# Cg = 5 sqrt(3)/3, Cgk = 4 sqrt(3)/3, t = sqrt(30) with T = 0.1, K = 20 %, L = 6
READINGS = [
    "5.001",
    "5.003",
    "5.002",
    "5.002",
    "5.004",
    "5.000",
    "5.002",
    "5.001",
    "5.003",
    "5.002",
]


@pytest.fixture
def readings_csv(tmp_path):
    path = tmp_path / "reference_part.csv"
    path.write_text("reading\n" + "\n".join(READINGS) + "\n")
    return path


def run(capsys, *argv):
    code = main(["gauge", *map(str, argv)])
    out, err = capsys.readouterr()
    return code, out, err


def test_table(capsys, readings_csv):
    code, out, err = run(
        capsys, readings_csv, "--reference", 5, "--value", "reading", "--tolerance", 0.1
    )
    assert code == 0, err
    assert "10 readings of one reference part" in out
    assert "2.887" in out and "2.309" in out  # 5 sqrt(3)/3, 4 sqrt(3)/3
    assert "t = 5.477" in out and "df = 9" in out  # sqrt(30)
    assert "Verdict: CAPABLE" in out


def test_json_and_options(capsys, readings_csv):
    code, out, err = run(
        capsys,
        readings_csv,
        "--reference",
        5,
        "--value",
        "reading",
        "--lsl",
        4.95,
        "--usl",
        5.05,
        "--k-percent",
        10,
        "--l-sigmas",
        4,
        "--json",
    )
    assert code == 0, err
    d = json.loads(out)
    # hand arithmetic with K = 10, L = 4: Cg = 5 sqrt(3)/4, Cgk = 3 sqrt(3)/4
    assert_allclose([d["cg"], d["cgk"]], [5 * math.sqrt(3) / 4, 3 * math.sqrt(3) / 4], rtol=1e-9)
    assert d["k_percent"] == 10 and d["l_sigmas"] == 4
    assert_allclose(d["t_test"]["statistic"], math.sqrt(30), rtol=1e-9)
    assert d["verdict"]["status"] == "not capable"


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["--reference", 5, "--value", "reading"], "needs the tolerance"),
        (
            ["--reference", 5, "--value", "reading", "--tolerance", 0.1, "--part", "p"],
            "leave out --part",
        ),
        (["--value", "reading"], "needs --part and --appraiser"),
        (["--reference", 5, "--value", "x", "--tolerance", 0.1], "no column named 'x'"),
        (["--reference", 5, "--value", "reading", "--tolerance", 0.1, "--lsl", 1], "not both"),
        (
            ["--reference", 5, "--value", "reading", "--tolerance", 0.1, "--k-percent", 0],
            "k_percent",
        ),
    ],
)
def test_bad_input_one_line(capsys, readings_csv, argv, message):
    code, out, err = run(capsys, readings_csv, *argv)
    assert code == 2
    assert message in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_bad_cell_names_file_row_and_column(capsys, tmp_path):
    path = tmp_path / "r.csv"
    path.write_text("reading\n5.001\n5.0o2\n5.003\n")
    code, _, err = run(capsys, path, "--reference", 5, "--value", "reading", "--tolerance", 0.1)
    assert code == 2
    assert "file" in err and "r.csv" in err and "row 3" in err and "column 'reading'" in err


def _study(tmp_path):
    from studykit.store import StudyFile
    from studykit.study import Characteristic

    path = tmp_path / "s.study"
    StudyFile.create(
        path,
        data=b"x\n1\n",
        filename="x.csv",
        title="t",
        characteristics=[Characteristic("thickness", lsl=4.95, usl=5.05)],
        who="tester",
    )
    return path


def test_store_in_study(capsys, readings_csv, tmp_path):
    from studykit.store import StudyFile

    path = _study(tmp_path)
    code, out, err = run(
        capsys,
        readings_csv,
        "--reference",
        5,
        "--value",
        "reading",
        "--study",
        path,
        "--characteristic",
        "thickness",
        "--who",
        "Q. E.",
    )
    assert code == 0, err
    assert "Tolerance taken from the specification" in out and "Stored as result" in out
    stored = StudyFile(path).results("gauge_short", "thickness")
    assert len(stored) == 1 and stored[0].who == "Q. E."
    p = stored[0].payload
    assert_allclose(p["cg"], 5 * math.sqrt(3) / 3, rtol=1e-9)
    assert p["limits_from"] == "study" and p["source_file"] == "reference_part.csv"
    assert StudyFile(path).results("gauge_rr") == []  # the crossed study's kind is untouched


def test_json_reports_where_it_was_stored(capsys, readings_csv, tmp_path):
    path = _study(tmp_path)
    code, out, _ = run(
        capsys,
        readings_csv,
        "--reference",
        5,
        "--value",
        "reading",
        "--study",
        path,
        "--characteristic",
        "thickness",
        "--json",
    )
    assert code == 0
    d = json.loads(out)
    assert d["stored"]["characteristic"] == "thickness" and d["stored"]["limits_from"] == "study"


# ----------------------------------------------------------------- the analysis JSON block


@pytest.fixture(scope="module")
def demo_study(tmp_path_factory, repo_root_module):
    dst = tmp_path_factory.mktemp("demo") / "demo.study"
    shutil.copy(repo_root_module / "demo_data" / "pump_housing_pilot.study", dst)
    return dst


@pytest.fixture(scope="module")
def repo_root_module():
    from pathlib import Path

    return Path(__file__).resolve().parents[1]


def _analyze(capsys, study, name):
    code = main(["analyze", "--study", str(study), "-c", name, "--json"])
    out, err = capsys.readouterr()
    assert code == 0, err
    return json.loads(out)


def test_measurement_error_block_from_stored_gauge(capsys, demo_study):
    from studykit.store import StudyFile

    d = _analyze(capsys, demo_study, "flange_thickness")
    me = d["measurement_error"]
    g = next(
        c
        for c in StudyFile(demo_study)
        .results("gauge_rr", "flange_thickness")[-1]
        .payload["components"]
        if c["name"] == "gauge_rr"
    )
    assert me["gauge_sigma"] == g["sigma"] and me["gauge_df"] == g["interval_df"]
    cap = d["capability"]
    spec = d["spec"]
    # observed indices are the study's own (normal model); process ones use
    # sqrt(sigma_obs^2 - sigma_gauge^2) -- plain arithmetic
    for basis, sig, names in (
        ("within", d["within_sigma"], ("cp", "cpk")),
        ("overall", d["overall_sigma"], ("pp", "ppk")),
    ):
        b = me[basis]
        assert_allclose([b["observed"][k] for k in names], [cap[k] for k in names], rtol=1e-12)
        ps = math.sqrt(sig**2 - g["sigma"] ** 2)
        assert_allclose(b["process_sigma"], ps, rtol=1e-12)
        assert_allclose(b["process"][names[0]], (spec["usl"] - spec["lsl"]) / (6 * ps), rtol=1e-12)
        assert_allclose(
            b["process"][names[1]],
            min(spec["usl"] - d["mean"], d["mean"] - spec["lsl"]) / (3 * ps),
            rtol=1e-12,
        )
        assert b["variance_lower"] < b["process_variance"] < b["variance_upper"]
    assert me["overall"]["observed_df"] == d["n"] - 1


def test_no_block_without_a_gauge_result(capsys, demo_study):
    d = _analyze(capsys, demo_study, "bore_diameter")
    assert "measurement_error" not in d


def test_large_gauge_share_gives_a_warning_finding():
    import numpy as np

    from studykit.analysis import analyze_characteristic
    from studykit.data import CharacteristicData
    from studykit.study import Characteristic

    x = np.random.default_rng(5).normal(10.0, 0.5, 100)  # invented for the test
    s = float(np.std(x, ddof=1))
    gauge = {
        "verdict": {"status": "not acceptable", "message": "m"},
        "components": [{"name": "gauge_rr", "sigma": 0.8 * s, "interval_df": 20.0}],
    }
    res = analyze_characteristic(
        CharacteristicData("x", None, x), Characteristic("x", lsl=7, usl=13), gauge=gauge
    )
    me = res.to_dict()["measurement_error"]
    assert_allclose(me["overall"]["gauge_share"], 0.64, rtol=1e-12)  # 0.8^2
    codes = [f.code for f in res.findings]
    assert "gauge_error_large" in codes
    text = next(f.text for f in res.findings if f.code == "gauge_error_large")
    assert "64 % of the observed variance" in text


def test_analyze_table_shows_gauge_error_lines(capsys, demo_study):
    code = main(["analyze", "--study", str(demo_study), "-c", "flange_thickness"])
    out, err = capsys.readouterr()
    assert code == 0, err
    d = _analyze(capsys, demo_study, "flange_thickness")["measurement_error"]
    assert "gauge error taken out" in out
    assert f"process only {d['within']['process']['cp']:.3f}" in out
    assert f"process only {d['overall']['process']['ppk']:.3f}" in out
