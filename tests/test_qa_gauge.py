"""Quality review: gauge study files with blank lines, mixed decimal signs, one column for two
roles (defects found through `studykit gauge`)."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest
from study_helpers import waive_open_verdicts

from studykit.cli import main

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data" / "gauge_flange_thickness.csv"
ROLES = ["--part", "part", "--appraiser", "appraiser", "--value", "value", "--trial", "trial"]


def demo_rows() -> tuple[list[str], list[list[str]]]:
    with open(DEMO, newline="") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def run(capsys, path, *extra) -> tuple[int, str, str]:
    code = main(["gauge", str(path), *ROLES, *map(str, extra)])
    out, err = capsys.readouterr()
    return code, out, err


def test_blank_line_keeps_row_numbers(tmp_path, capsys):
    # defect: pandas skipped the blank line, so the error named row 10 for a bad cell on line 11
    header, body = demo_rows()
    lines = [",".join(header)] + [",".join(r) for r in body]
    lines.insert(3, "")  # a blank line after the second data row
    lines[10] = lines[10].rsplit(",", 1)[0] + ",abc"  # file line 11
    path = tmp_path / "g.csv"
    path.write_text("\n".join(lines) + "\n")
    code, _, err = run(capsys, path)
    assert code == 2
    assert "row 11, column 'value': 'abc' is not a number" in err


def test_blank_line_alone_is_harmless(tmp_path, capsys):
    header, body = demo_rows()
    lines = [",".join(header)] + [",".join(r) for r in body]
    lines.insert(5, "")
    path = tmp_path / "g.csv"
    path.write_text("\n".join(lines) + "\n")
    code, out, _ = run(capsys, path, "--json")
    code_ref, out_ref, _ = run(capsys, DEMO, "--json")
    assert code == code_ref == 0
    got, ref = json.loads(out), json.loads(out_ref)
    assert got["n_values"] == ref["n_values"] == 90
    assert got["ndc"] == ref["ndc"]


def test_mixed_decimal_signs_refused(tmp_path, capsys):
    # defect: '8,081' in a file that uses '.' was read as 8.081 without a word; with a
    # thousands separator ('1,234') that reading is wrong by a factor of 1000
    header, body = demo_rows()
    body[5][3] = body[5][3].replace(".", ",")
    path = tmp_path / "g.csv"
    with open(path, "w", newline="") as fh:
        csv.writer(fh).writerows([header, *body])
    code, _, err = run(capsys, path)
    assert code == 2
    assert "row 7, column 'value'" in err and "mixes the decimal signs" in err


def test_german_export_semicolon_decimal_comma_same_result(tmp_path, capsys):
    header, body = demo_rows()
    path = tmp_path / "g.csv"
    path.write_text(
        ";".join(header)
        + "\n"
        + "".join(";".join([*r[:3], r[3].replace(".", ",")]) + "\n" for r in body)
    )
    code, out, _ = run(capsys, path, "--json")
    _, out_ref, _ = run(capsys, DEMO, "--json")
    assert code == 0
    assert json.loads(out)["ndc"] == json.loads(out_ref)["ndc"]
    assert json.loads(out)["ndc_ratio"] == pytest.approx(
        json.loads(out_ref)["ndc_ratio"], rel=1e-12
    )


def test_same_column_for_two_roles(capsys):
    # defect: --appraiser naming the part column gave a baffling "unbalanced" message
    code = main(["gauge", str(DEMO), "--part", "part", "--appraiser", "part", "--value", "value"])
    err = capsys.readouterr().err
    assert code == 2
    assert "--part and --appraiser both name column 'part'" in err


# -- a gauge result attached to an approved study ------------------------------------------------


@pytest.fixture
def approved(tmp_path):
    import shutil

    path = tmp_path / "pilot.study"
    shutil.copyfile(ROOT / "demo_data" / "pump_housing_pilot.study", path)
    waive_open_verdicts(path)  # the lock is under test here, not the approval gate
    assert (
        main(
            [
                "study",
                "sign",
                str(path),
                "--role",
                "approved",
                "--decision",
                "approve",
                "--who",
                "Q. Lead",
            ]
        )
        == 0
    )
    return path


def test_gauge_result_refused_on_approved_study(approved, capsys):
    # defect: the result was stored and changed the study's findings (gauge checked/failed)
    # while the approval stayed valid, because results are outside the content digest
    from studykit.store import StudyFile

    capsys.readouterr()
    before = len(StudyFile(approved).results("gauge_rr"))
    code, _, err = run(capsys, DEMO, "--study", approved, "--characteristic", "flange_thickness")
    assert code == 2 and "approved" in err and "--override-lock" in err
    assert len(StudyFile(approved).results("gauge_rr")) == before
    assert StudyFile(approved).load().is_locked


def test_gauge_result_with_override_voids_approval(approved, capsys):
    from studykit.store import StudyFile

    capsys.readouterr()
    code, out, _ = run(
        capsys,
        DEMO,
        "--study",
        approved,
        "--characteristic",
        "flange_thickness",
        "--override-lock",
        "gauge repaired, new study",
    )
    assert code == 0 and "Stored as result" in out
    study = StudyFile(approved).load()
    assert not study.is_locked
    (state,) = study.signoff_state()
    assert not state.valid and "gauge repaired" in state.why


def test_design_error_names_the_file(tmp_path, capsys):
    # defect: "the study is unbalanced ..." without the file it is about
    header, body = demo_rows()
    path = tmp_path / "short.csv"
    with open(path, "w", newline="") as fh:
        csv.writer(fh).writerows([header, *body[:-1]])
    code, _, err = run(capsys, path)
    assert code == 2
    assert err.startswith("studykit gauge: error: file 'short.csv': the study is unbalanced")
