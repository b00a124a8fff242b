"""A new study from the browser (step 1, "New study from these files"), in process.

The files are the demo data (invented, demo_data/make_demo.py). The study made in the page is
compared with the one ``studykit study new`` makes from the same files and specifications: both
must give the same content digest and the same analysis.
"""

from __future__ import annotations

import datetime
import json
import shutil
from pathlib import Path

import pytest

from studykit.analysis import analyze_all
from studykit.app.shell import build_workbook
from studykit.app.steps.newstudy import ENV_NEW_DIR, study_file_name
from studykit.cli import main
from studykit.errors import StudyInputError
from studykit.store import StudyFile

DEMO = Path(__file__).resolve().parents[1] / "demo_data"
SPECS = {  # demo_data/specs.csv and demo_data/specs_pull_off.csv
    "bore_diameter": dict(lsl="11.970", usl="12.030", target="12.000", safety=True),
    "face_runout": dict(lsl="", usl="0.050", target="", safety=False),
    "flange_thickness": dict(lsl="7.900", usl="8.100", target="8.000", safety=False),
    "pull_off_force": dict(lsl="180.000", usl="", target="", safety=True),
}


def upload(step, data: bytes, name: str):
    step._upload.value = (
        {
            "name": name,
            "type": "text/csv",
            "size": len(data),
            "content": memoryview(data),
            "last_modified": datetime.datetime(2026, 1, 1),
        },
    )


@pytest.fixture
def wb(tmp_path, monkeypatch):
    monkeypatch.setenv(ENV_NEW_DIR, str(tmp_path))
    return build_workbook()


def fill(panel, specs=SPECS):
    for row in panel.rows:
        s = specs[row.name]
        row.lsl.value, row.usl.value, row.target.value = s["lsl"], s["usl"], s["target"]
        row.safety.value = s["safety"]
        row.index.value, row.threshold.value, row.basis.value = "ppk", "1.67", "lower_bound"


def confirm(wb, path: Path):
    intake = wb.step("intake")
    upload(intake, path.read_bytes(), path.name)
    intake._confirm.click()


def test_study_made_in_the_page_equals_the_cli_study(wb, tmp_path, capsys):
    intake = wb.step("intake")
    panel = intake._newstudy
    assert panel.form.layout.display == "none"  # nothing confirmed yet
    confirm(wb, DEMO / "pump_housing_pilot.csv")
    confirm(wb, DEMO / "pull_off_force.csv")
    assert [f[0] for f in panel.files] == ["pump_housing_pilot.csv", "pull_off_force.csv"]
    assert [r.name for r in panel.rows] == list(SPECS)
    assert [r.unit.value for r in panel.rows] == ["mm", "mm", "mm", "N"]  # from the data
    assert panel.create.disabled and "name the study file" in panel.hint.value
    fill(panel)
    panel.study_name.value = "pilot-from-browser"
    panel.title.value = "Pilot"
    panel.who.value = "R. Okonkwo"
    assert not panel.create.disabled
    panel.create.click()
    made = tmp_path / "pilot-from-browser.study"
    assert made.is_file(), wb.context.messages.messages
    # the workbook now works on the new study: header, state, every step built on it
    assert wb.context.study_path == made and wb.context.study is not None
    assert wb.current == "limits" and wb.step("limits").ws is not None
    assert wb.step("limits").ws.who.value == "R. Okonkwo"
    wb.select("stability")
    assert wb.step("stability").ws.session.path == made
    assert panel.layout.display == "none"
    # the same study from the command line
    (tmp_path / "specs.csv").write_text(
        (DEMO / "specs.csv").read_text()
        + (DEMO / "specs_pull_off.csv").read_text().splitlines()[1]
        + "\n"
    )
    for name in ("pump_housing_pilot.csv", "pull_off_force.csv"):
        shutil.copy(DEMO / name, tmp_path / name)
    cli = tmp_path / "pilot-from-cli.study"
    assert (
        main(
            [
                "study",
                "new",
                str(cli),
                "--data",
                str(tmp_path / "pump_housing_pilot.csv"),
                "--data",
                str(tmp_path / "pull_off_force.csv"),
                "--specs",
                str(tmp_path / "specs.csv"),
                "--title",
                "Pilot",
                "--who",
                "R. Okonkwo",
            ]
        )
        == 0
    )
    capsys.readouterr()
    a, b = StudyFile(made).load(), StudyFile(cli).load()
    assert a.content_digest() == b.content_digest()
    assert [n for n, _ in a.files] == [n for n, _ in b.files]
    ra, rb = analyze_all(a), analyze_all(b)
    assert json.dumps(
        {n: r.to_dict() for n, r in ra.results.items()}, sort_keys=True
    ) == json.dumps({n: r.to_dict() for n, r in rb.results.items()}, sort_keys=True)


def test_bad_upload_gives_the_command_line_message(wb, tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_bytes(b"subgroup,bore [mm]\n1,12.001\n1,twelve\n2,12.003\n")
    assert main(["check", str(bad)]) == 2
    cli = capsys.readouterr().err.strip()
    upload(wb.step("intake"), bad.read_bytes(), "bad.csv")
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error"
    assert "studykit check: error: " + text == cli  # word for word
    assert "row 3" in text and "Traceback" not in text
    assert wb.step("intake")._newstudy.files == []


def test_bad_table_cell_gives_the_command_line_message(wb, tmp_path, capsys):
    confirm(wb, DEMO / "pull_off_force.csv")
    panel = wb.step("intake")._newstudy
    fill(panel, {"pull_off_force": dict(lsl="180,5x", usl="", target="", safety=True)})
    panel.study_name.value, panel.who.value = "x", "A"
    panel.create.click()
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error" and not (tmp_path / "x.study").exists()
    # the same row in a specs file given to the command line
    (tmp_path / "specs.csv").write_text(
        "characteristic,unit,lsl,usl,target,safety_critical,criterion,threshold,basis\n"
        'pull_off_force,N,"180,5x",,,yes,ppk,1.67,lower_bound\n'
    )
    shutil.copy(DEMO / "pull_off_force.csv", tmp_path / "pull_off_force.csv")
    assert (
        main(
            [
                "study",
                "new",
                str(tmp_path / "y.study"),
                "--data",
                str(tmp_path / "pull_off_force.csv"),
                "--specs",
                str(tmp_path / "specs.csv"),
            ]
        )
        == 2
    )
    cli = capsys.readouterr().err.strip()
    assert "row 2" in text and "`lsl` ('180,5x') is not a number" in text
    # word for word, apart from the name of the table
    assert cli == "studykit study: error: " + text.replace(
        "specification table (in the page)", "specs.csv"
    )


def test_an_existing_study_file_is_never_overwritten(wb, tmp_path):
    (tmp_path / "taken.study").write_bytes(b"precious")
    confirm(wb, DEMO / "pull_off_force.csv")
    panel = wb.step("intake")._newstudy
    fill(panel, {"pull_off_force": SPECS["pull_off_force"]})
    panel.study_name.value, panel.who.value = "taken", "A"
    panel.create.click()
    kind, text, _ = wb.context.messages.messages[0]
    assert kind == "error" and "already exists" in text
    assert (tmp_path / "taken.study").read_bytes() == b"precious"


def test_a_named_new_study_from_serve(tmp_path):
    path = tmp_path / "named.study"
    wb = build_workbook(path)
    panel = wb.step("intake")._newstudy
    assert panel.study_name.value == "named" and panel.study_name.disabled
    assert "does not exist yet" in panel.head.value
    confirm(wb, DEMO / "pull_off_force.csv")
    fill(panel, {"pull_off_force": SPECS["pull_off_force"]})
    panel.who.value = "A"
    panel.create.click()
    assert path.is_file() and wb.context.study is not None


@pytest.mark.parametrize("text", ["", "  ", "a/b", "../x", "/etc/x", "a\\b", "..", ".hidden"])
def test_study_file_name_refuses_paths(text):
    with pytest.raises(StudyInputError):
        study_file_name(text)
