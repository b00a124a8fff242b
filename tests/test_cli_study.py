"""`studykit study new|show|exclude|sign|log` from the command line (in process)."""

from __future__ import annotations

import json

import pytest

from studykit.cli import main
from studykit.errors import SpecError, StudyInputError
from studykit.store import StudyFile
from studykit.study import read_specs_bytes

DATA = (
    "subgroup,timestamp,note,bore [mm],runout [mm]\n"
    "1,2026-03-02 06:00,,12.001,0.010\n1,2026-03-02 06:00,,12.003,0.011\n"
    "2,2026-03-02 06:30,,11.999,0.012\n2,2026-03-02 06:30,,12.000,0.014\n"
)
SPECS = (
    "characteristic,unit,lsl,usl,target,safety_critical,criterion,threshold,basis\n"
    "bore,mm,11.97,12.03,12.0,yes,cpk,1.33,lower_bound\n"
    "Runout,,,0.05,,no,,,\n"
)


@pytest.fixture
def files(tmp_path):
    (tmp_path / "pilot.csv").write_text(DATA)
    (tmp_path / "specs.csv").write_text(SPECS)
    return tmp_path


def new(files, *extra):
    return main(
        [
            "study",
            "new",
            str(files / "a.study"),
            "--data",
            str(files / "pilot.csv"),
            "--specs",
            str(files / "specs.csv"),
            "--title",
            "Pilot",
            "--part",
            "P1",
            "--who",
            "A. Ruiz",
            *extra,
        ]
    )


def test_new_then_show(files, capsys):
    assert new(files) == 0
    assert "created" in capsys.readouterr().out
    study = StudyFile(files / "a.study").load()
    assert list(study.characteristics) == ["bore", "runout"]  # data's spelling of 'Runout'
    assert study.characteristics["runout"].unit == "mm"  # unit taken from the data header
    assert study.characteristics["bore"].safety_critical
    assert study.criteria_for("bore").describe() == "Cpk lower 95% bound >= 1.33"
    assert study.data == DATA.encode()
    assert main(["study", "show", str(files / "a.study")]) == 0
    out = capsys.readouterr().out
    assert "Study     Pilot" in out and "Cpk lower 95% bound >= 1.33" in out
    assert study.content_digest() in out
    assert main(["study", "show", str(files / "a.study"), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["content_digest"] == study.content_digest()
    assert [c["name"] for c in d["characteristics"]] == ["bore", "runout"]


def test_exclude_sign_lock_override_log(files, capsys):
    new(files)
    path = str(files / "a.study")
    assert (
        main(["study", "exclude", path, "bore", "2", "--reason", "setup part", "--who", "B"]) == 0
    )
    # two subgroups cannot be analysed; the lock is under test here, not the approval gate
    assert (
        main(
            [
                "study",
                "rules",
                path,
                "--approval-needs-verdicts",
                "off",
                "--reason",
                "lock test on a tiny file",
                "--who",
                "B",
            ]
        )
        == 0
    )
    assert (
        main(
            [
                "study",
                "sign",
                path,
                "--role",
                "Approver",  # the role's name as shown (names.ROLES); the id "approved" works too
                "--decision",
                "approve",
                "--who",
                "M. Brandt",
            ]
        )
        == 0
    )
    capsys.readouterr()
    assert main(["study", "exclude", path, "bore", "1", "--reason", "x", "--who", "B"]) == 2
    assert "--override-lock REASON" in capsys.readouterr().err
    assert (
        main(
            [
                "study",
                "exclude",
                path,
                "bore",
                "1",
                "--reason",
                "x",
                "--who",
                "B",
                "--override-lock",
                "customer request",
            ]
        )
        == 0
    )
    assert main(["study", "comment", path, "kept for the record", "--who", "B"]) == 0
    capsys.readouterr()
    assert main(["study", "show", path]) == 0
    out = capsys.readouterr().out
    assert "VOIDED (voided on" in out and "customer request" in out
    assert main(["study", "log", path, "--json"]) == 0
    log = json.loads(capsys.readouterr().out)
    assert [e["what"].split()[0] for e in log] == [
        "create",
        "remove",
        "change",
        "sign-off:",
        "void",
        "remove",
        "comment",
    ]


def test_new_refuses_unknown_name_and_existing_file(files, capsys):
    (files / "bad.csv").write_text(SPECS + "flatness,mm,,0.02,,no,,,\n")
    rc = main(
        [
            "study",
            "new",
            str(files / "b.study"),
            "--data",
            str(files / "pilot.csv"),
            "--specs",
            str(files / "bad.csv"),
        ]
    )
    err = capsys.readouterr().err
    assert rc == 2 and "'flatness', which is not in the data" in err and "bad.csv" in err
    assert not (files / "b.study").exists()
    assert new(files) == 0
    assert new(files) == 2
    assert "already exists" in capsys.readouterr().err
    assert new(files, "--force") == 0


def test_unit_mismatch_is_an_error(files, capsys):
    (files / "specs.csv").write_text(SPECS.replace("bore,mm", "bore,um"))
    assert new(files) == 2
    assert "unit 'um' but the data say 'mm'" in capsys.readouterr().err


def test_show_on_a_data_file_is_a_clear_error(files, capsys):
    assert main(["study", "show", str(files / "pilot.csv")]) == 2
    assert "not a studykit study file" in capsys.readouterr().err


def test_specs_table_errors_name_row_and_column():
    with pytest.raises(SpecError, match=r"row 3: characteristic 'b': `usl` \(1\) must be greater"):
        read_specs_bytes(b"characteristic,lsl,usl\na,0,1\nb,2,1\n", "s.csv")
    with pytest.raises(SpecError, match=r"row 1: unknown column\(s\) 'tol'"):
        read_specs_bytes(b"characteristic,tol\na,1\n", "s.csv")
    with pytest.raises(SpecError, match=r"row 2, column 'safety_critical'.*must be yes or no"):
        read_specs_bytes(b"characteristic,usl,safety_critical\na,1,maybe\n", "s.csv")
    with pytest.raises(SpecError, match=r"'a' is listed twice \(rows 2 and 3\)"):
        read_specs_bytes(b"characteristic,usl\na,1\na,2\n", "s.csv")
    with pytest.raises(SpecError, match="'cp' needs both limits"):
        read_specs_bytes(b"characteristic,usl,criterion\na,1,cp\n", "s.csv")
    # semicolon tables may use a decimal comma
    chars, _ = read_specs_bytes(b"characteristic;lsl;usl\na;11,97;12,03\n", "s.csv")
    assert (chars[0].lsl, chars[0].usl) == (11.97, 12.03)


def _load_make_demo(repo_root):
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "make_demo", repo_root / "demo_data" / "make_demo.py"
    )
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_demo_check_detects_a_changed_byte_and_a_changed_decision(tmp_path, repo_root):
    md = _load_make_demo(repo_root)
    md.generate(tmp_path)
    assert md.check(tmp_path) == []
    study = StudyFile(tmp_path / md.STUDY_FILE).load()
    assert sorted(study.excluded_subgroups("flange_thickness")) == ["17", "18"]
    assert study.model_for("face_runout") == "lognormal"
    assert [c.name for c in study.characteristics.values() if c.safety_critical] == [
        "bore_diameter",
        "pull_off_force",
    ]
    pull = tmp_path / md.PULL_CSV
    pull.write_bytes(pull.read_bytes().replace(b"\n2,", b"\n3,", 1))
    StudyFile(tmp_path / md.STUDY_FILE).exclude("bore_diameter", 3, reason="test", who="A")
    problems = md.check(tmp_path)
    assert any(p.startswith(md.PULL_CSV) for p in problems)
    assert any("'decisions' differs" in p for p in problems)
    assert md.main(["--check", "--out", str(tmp_path)]) == 1


def test_exclude_refuses_a_subgroup_the_data_do_not_have(files, capsys):
    new(files)
    path = str(files / "a.study")
    assert main(["study", "exclude", path, "bore", "7", "--reason", "x", "--who", "B"]) == 2
    assert (
        "'bore' has no subgroup '7' in pilot.csv (its subgroups are 1, 2)"
        in capsys.readouterr().err
    )
    assert main(["study", "exclude", path, "flatness", "1", "--reason", "x", "--who", "B"]) == 2
    assert "no characteristic 'flatness'" in capsys.readouterr().err


def test_set_records_each_change_with_the_reason(files, capsys):
    new(files)
    path = str(files / "a.study")
    assert (
        main(
            [
                "study",
                "set",
                path,
                "runout",
                "--usl",
                "0.04",
                "--criterion",
                "ppk",
                "--threshold",
                "1.33",
                "--model",
                "lognormal",
                "--reason",
                "customer PPAP manual",
                "--who",
                "B",
            ]
        )
        == 0
    )
    study = StudyFile(files / "a.study").load()
    assert study.characteristics["runout"].usl == 0.04
    assert study.criteria_for("runout").threshold == 1.33
    assert study.model_for("runout") == "lognormal"
    assert [d.action for d in study.decisions] == ["set_spec", "set_criteria", "set_model"]
    assert {d.reason for d in study.decisions} == {"customer PPAP manual"}
    assert main(["study", "set", path, "bore", "--target", "none", "--reason", "r"]) == 0
    assert StudyFile(files / "a.study").load().characteristics["bore"].target is None
    capsys.readouterr()
    assert main(["study", "set", path, "bore", "--lsl", "12.1", "--reason", "typo"]) == 2
    assert "`usl` (12.03) must be greater than `lsl` (12.1)" in capsys.readouterr().err
    assert main(["study", "set", path, "bore", "--reason", "r"]) == 2
    assert "nothing to change" in capsys.readouterr().err


def test_study_over_several_files_takes_each_characteristic_from_its_file(tmp_path, capsys):
    a = tmp_path / "dims.csv"
    a.write_text("subgroup,width [mm]\n1,10.0\n1,10.1\n2,10.2\n2,9.9\n3,10.0\n3,10.1\n")
    b = tmp_path / "lab.csv"
    b.write_text("sample,force [N]\n1,250\n2,244\n3,251\n4,248\n")
    specs = tmp_path / "specs.csv"
    specs.write_text("characteristic,unit,lsl,usl\nwidth,mm,9,11\nforce,N,180,\n")
    out = tmp_path / "two.study"
    assert (
        main(
            [
                "study",
                "new",
                str(out),
                "--data",
                str(a),
                "--data",
                str(b),
                "--specs",
                str(specs),
                "--who",
                "T. Test",
            ]
        )
        == 0
    )
    study = StudyFile(out).load()
    assert [f.filename for f in study.extra_files] == ["lab.csv"]
    assert study.source_of("width") == "dims.csv" and study.source_of("force") == "lab.csv"
    from studykit.analysis import read_study_measurements

    m = read_study_measurements(study)
    assert list(m.get("force").values) == [250, 244, 251, 248]
    assert m.get("width").n_subgroups == 3
    # the extra file is part of the content digest: another lab file gives another digest
    from studykit.study import DataFile

    changed = study._replace(extra_files=(DataFile("lab.csv", b"sample,force [N]\n1,1\n"),))
    assert changed.content_digest() != study.content_digest()


def test_two_data_files_with_one_name_are_refused(tmp_path):
    a = tmp_path / "x" / "d.csv"
    b = tmp_path / "y" / "d.csv"
    for p in (a, b):
        p.parent.mkdir()
        p.write_text("v [mm]\n1\n2\n")
    with pytest.raises(StudyInputError, match="two data files are named 'd.csv'"):
        import argparse

        from studykit.cli.study import run_new

        run_new(
            argparse.Namespace(
                data=[str(a), str(b)],
                specs=None,
                studyfile=str(tmp_path / "s"),
                force=False,
                title=None,
                part="",
                supplier="",
                who="T",
            )
        )
