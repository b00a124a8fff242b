"""Quality review: `studykit study ...` misuse through the command line (the demo study copied).

Each test was written against a defect found by trying to break the command as a user would.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from studykit.cli import main
from studykit.errors import SpecError, StudyInputError
from studykit.store import StudyFile
from studykit.study import Characteristic, Criteria, Decision, Study, read_specs_bytes

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data" / "pump_housing_pilot.study"
STUDYKIT = [sys.executable, "-m", "studykit"]


@pytest.fixture
def study(tmp_path) -> Path:
    path = tmp_path / "pilot.study"
    shutil.copyfile(DEMO, path)
    return path


def cli(*argv) -> int:
    return main([str(a) for a in argv])


# -- exclude/restore on characteristics of the study's second and third data files ------------


def test_exclude_on_characteristic_of_second_data_file(study, capsys):
    # defect: the subgroup check read only the first data file, so 'pull_off_force' (from
    # pull_off_force.csv) could not be excluded at all ("there is no characteristic named ...")
    assert (
        cli(
            "study",
            "exclude",
            study,
            "pull_off_force",
            "3",
            "--reason",
            "dropped part",
            "--who",
            "QA",
        )
        == 0
    )
    assert "3" in StudyFile(study).load().excluded_subgroups("pull_off_force")


def test_exclude_lot_of_attribute_characteristic(study):
    assert (
        cli(
            "study",
            "exclude",
            study,
            "leak_test_defectives",
            "L003",
            "--reason",
            "test rig leak",
            "--who",
            "QA",
        )
        == 0
    )
    assert "L003" in StudyFile(study).load().excluded_subgroups("leak_test_defectives")


def test_exclude_unknown_subgroup_of_second_file_names_that_file(study, capsys):
    assert (
        cli("study", "exclude", study, "pull_off_force", "999", "--reason", "x", "--who", "QA") == 2
    )
    err = capsys.readouterr().err
    assert "no subgroup '999' in pull_off_force.csv" in err
    assert "Traceback" not in err


# -- restore what is not excluded, exclude twice ------------------------------------------------


def test_restore_of_subgroup_not_excluded_is_refused(study, capsys):
    # defect: `study restore` of a subgroup that was never excluded printed "restored ..." and
    # wrote a meaningless decision into the audit log
    before = len(StudyFile(study).load().decisions)
    assert (
        cli("study", "restore", study, "flange_thickness", "4", "--reason", "x", "--who", "QA") == 2
    )
    err = capsys.readouterr().err
    assert "subgroup '4' of 'flange_thickness' is not excluded" in err
    assert "excluded now: 17, 18" in err
    assert len(StudyFile(study).load().decisions) == before


def test_exclude_twice_is_refused(study, capsys):
    # defect: a second exclusion of subgroup 17 was recorded silently (two reasons, one in force)
    before = len(StudyFile(study).load().decisions)
    assert (
        cli("study", "exclude", study, "flange_thickness", "17", "--reason", "again", "--who", "QA")
        == 2
    )
    assert "already excluded (by R. Okonkwo" in capsys.readouterr().err
    assert len(StudyFile(study).load().decisions) == before


def test_restore_then_exclude_again_works(study):
    assert (
        cli(
            "study",
            "restore",
            study,
            "flange_thickness",
            "17",
            "--reason",
            "re-measured",
            "--who",
            "QA",
        )
        == 0
    )
    assert "17" not in StudyFile(study).load().excluded_subgroups("flange_thickness")
    assert (
        cli(
            "study", "exclude", study, "flange_thickness", " 17 ", "--reason", "chip", "--who", "QA"
        )
        == 0
    )
    assert "17" in StudyFile(study).load().excluded_subgroups("flange_thickness")


# -- settings that the analysis would refuse later --------------------------------------------


def test_set_unknown_model_is_refused_when_set(study, capsys):
    # defect: `study set --model garbage` was saved; every later `analyze --study` then failed
    assert (
        cli(
            "study",
            "set",
            study,
            "bore_diameter",
            "--model",
            "garbage",
            "--reason",
            "x",
            "--who",
            "QA",
        )
        == 2
    )
    err = capsys.readouterr().err
    assert "`model` ('garbage') is not a model studykit knows" in err and "weibull" in err
    assert StudyFile(study).load().model_for("bore_diameter") == "auto"


def test_set_known_model_any_case(study):
    assert (
        cli(
            "study",
            "set",
            study,
            "bore_diameter",
            "--model",
            "Weibull",
            "--reason",
            "x",
            "--who",
            "QA",
        )
        == 0
    )
    assert StudyFile(study).load().model_for("bore_diameter") == "weibull"


def test_set_confidence_below_half_is_refused(study, capsys):
    # defect: `study set --confidence 0.3` was saved (Criteria took any level in (0, 1)), then
    # `analyze --study` failed with "`level` (0.3) must be a confidence level in [0.5, 1)"
    assert (
        cli(
            "study",
            "set",
            study,
            "flange_thickness",
            "--confidence",
            "0.3",
            "--reason",
            "x",
            "--who",
            "QA",
        )
        == 2
    )
    assert "at 0.5 or above" in capsys.readouterr().err


def test_criteria_confidence_range():
    with pytest.raises(SpecError, match=r"`confidence` \(0.3\) must lie between 0 and 1, at 0.5"):
        Criteria(confidence=0.3)
    assert Criteria(confidence=0.5).confidence == 0.5


def test_specs_table_with_unknown_model_names_row():
    table = b"characteristic,usl,model\nbore,12,weibul\n"
    with pytest.raises(SpecError, match=r"row 2.*`model` \('weibul'\) is not a model"):
        read_specs_bytes(table, "specs.csv")


def test_python_api_set_model_checked():
    s = Study(
        title="t",
        data=b"x\n1\n2\n",
        data_filename="x.csv",
        characteristics=[Characteristic("x", usl=3)],
    )
    with pytest.raises(StudyInputError, match=r"`model` \('lognorm'\) is not a model"):
        s.with_decision(
            Decision("x", "set_model", who="A", reason="r", payload={"model": "lognorm"})
        )
    with pytest.raises(SpecError, match=r"`model` \('x'\) is not a model"):
        s.with_spec("x", who="A", reason="r", model="x")


def test_reason_message_grammar(study, capsys):
    assert cli("study", "exclude", study, "bore_diameter", "3", "--reason", " ", "--who", "QA") == 2
    assert "an exclude decision made by a person needs a non-empty `reason`" in (
        capsys.readouterr().err
    )


# -- two processes at once ----------------------------------------------------------------------


def test_two_exclude_processes_at_once_both_recorded(study):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    procs = [
        subprocess.Popen(
            [
                *STUDYKIT,
                "study",
                "exclude",
                str(study),
                "bore_diameter",
                str(sg),
                "--reason",
                f"parallel {sg}",
                "--who",
                "QA",
            ],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            env=env,
            text=True,
        )
        for sg in (5, 6)
    ]
    outs = [p.communicate(timeout=120) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outs
    loaded = StudyFile(study).load()
    assert {"5", "6"} <= set(loaded.excluded_subgroups("bore_diameter"))
    whats = [e.what for e in StudyFile(study).audit_log()]
    assert whats.count("remove subgroup 5 of 'bore_diameter'") == 1
    assert whats.count("remove subgroup 6 of 'bore_diameter'") == 1
    assert StudyFile(study).integrity_check() == "ok"


# -- a CSV passed where a study file belongs -----------------------------------------------------


def test_csv_as_study_is_one_clear_line():
    csv = ROOT / "demo_data" / "pump_housing_pilot.csv"
    r = subprocess.run(
        [*STUDYKIT, "study", "show", str(csv)],
        capture_output=True,
        text=True,
        env=dict(os.environ, PYTHONPATH=str(ROOT)),
        timeout=120,
    )
    assert r.returncode == 2
    assert "is not a studykit study file" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1


def test_new_without_specs_is_refused_and_lists_the_data(tmp_path, capsys):
    # defect: `study new` without --specs made a study with no characteristics, which can never
    # gain any (the characteristics of a study file are fixed when it is created)
    data = ROOT / "demo_data" / "pump_housing_pilot.csv"
    assert cli("study", "new", tmp_path / "x.study", "--data", data, "--who", "QA") == 2
    err = capsys.readouterr().err
    assert "give the specifications with --specs SPECS.csv" in err
    assert "'bore_diameter', 'face_runout', 'flange_thickness'" in err
    assert not (tmp_path / "x.study").exists()


# -- charts that the characteristic's data cannot use (defect: saved, then every analysis failed)


@pytest.mark.parametrize(
    "name, chart, message",
    [
        (
            "bore_diameter",
            "p",
            "'bore_diameter' has specification limits, so it holds measured "
            "values; the p chart is for counted data",
        ),
        (
            "leak_test_defectives",
            "xbar_r",
            "'leak_test_defectives' has no specification limits, so it holds counted data",
        ),
        ("bore_diameter", "imr", "'bore_diameter' has subgroups of up to 5 values"),
        ("pull_off_force", "xbar-s", "'pull_off_force' has one value per subgroup"),
    ],
)
def test_set_chart_that_cannot_work_is_refused(study, capsys, name, chart, message):
    before = StudyFile(study).load().chart_for(name)
    assert cli("study", "set", study, name, "--chart", chart, "--reason", "x", "--who", "QA") == 2
    assert message in capsys.readouterr().err
    assert StudyFile(study).load().chart_for(name) == before


@pytest.mark.parametrize(
    "name, chart",
    [
        ("bore_diameter", "xbar-s"),
        ("pull_off_force", "auto"),
        ("leak_test_defectives", "np"),
        ("leak_test_defectives", "c"),
    ],
)
def test_set_chart_that_fits_is_saved_and_analyses(study, capsys, name, chart):
    assert cli("study", "set", study, name, "--chart", chart, "--reason", "x", "--who", "QA") == 0
    assert StudyFile(study).load().chart_for(name) == chart.replace("-", "_")
    capsys.readouterr()
    assert cli("analyze", "--study", study, "-c", name, "--json") == 0


def test_python_api_attribute_chart_needs_size_column():
    s = Study(
        title="t",
        data=b"lot,d\n1,2\n2,3\n",
        data_filename="x.csv",
        characteristics=[Characteristic("d", chart="c")],
    )
    with pytest.raises(SpecError, match=r"the p chart of 'd' needs the subgroup sizes"):
        s.with_decision(Decision("d", "set_chart", who="A", reason="r", payload={"chart": "p"}))


# -- specs tables that would make every analysis fail (defect: accepted by `study new`) ---------


@pytest.mark.parametrize(
    "table, message",
    [
        (
            "characteristic,lsl,usl,chart\n\nface_runout,,0.05,\nbore_diameter,11.97,12.03,imr\n",
            "row 4, column 'chart': characteristic 'bore_diameter': the data have subgroups of up to 5",
        ),
        (
            "characteristic,lsl,usl,chart\nbore_diameter,11.97,12.03,p\n",
            "row 2: 'bore_diameter' has specification limits, so it holds measured values",
        ),
        (
            "characteristic,chart,size_column\nleak_test_defectives,p,lot_sz\n",
            "row 2, column 'size_column': characteristic 'leak_test_defectives': the size column "
            "'lot_sz' is not in the data",
        ),
        (
            "characteristic,chart\nleak_test_defectives,p\n",
            "the p chart of 'leak_test_defectives' needs the subgroup sizes",
        ),
    ],
)
def test_new_refuses_specs_the_data_cannot_use(tmp_path, capsys, table, message):
    specs = tmp_path / "specs.csv"
    specs.write_text(table)
    assert (
        cli(
            "study",
            "new",
            tmp_path / "x.study",
            "--data",
            ROOT / "demo_data" / "pump_housing_pilot.csv",
            "--data",
            ROOT / "demo_data" / "leak_test_lots.csv",
            "--specs",
            specs,
            "--who",
            "QA",
        )
        == 2
    )
    assert message in capsys.readouterr().err
    assert not (tmp_path / "x.study").exists()


def test_specs_row_numbers_count_blank_lines():
    # defect: blank lines were dropped before numbering, so errors named the wrong row
    table = b"characteristic,usl,safety_critical\n\n\nbore,12,maybe\n"
    with pytest.raises(SpecError, match=r"row 4, column 'safety_critical'"):
        read_specs_bytes(table, "specs.csv")


def test_empty_who_does_not_become_the_login_name(study, capsys):
    # defect: --who "" silently signed with the login name
    assert (
        cli("study", "sign", study, "--role", "approved", "--decision", "approve", "--who", " ")
        == 2
    )
    assert "`--who` is empty" in capsys.readouterr().err
    assert StudyFile(study).load().signoffs == ()
