"""Tests for ``studykit check``: what it prints for a good file, one line for a bad one."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from studykit.cli import main

GOOD = (
    "Stichprobe;Bohrung [mm];Länge (mm);Bemerkung\n"
    "1;10,02;50,1;\n1;10,01;50,2;\n2;9,98;;Werkzeugwechsel\n2;10,00;50,0;\n"
)


@pytest.fixture
def good(tmp_path):
    p = tmp_path / "bohrung.csv"
    p.write_text(GOOD, encoding="utf-8")
    return p


def test_check_prints_what_was_read(good, capsys):
    assert main(["check", str(good)]) == 0
    out = capsys.readouterr().out
    assert "Layout:     wide" in out
    assert "from column 'Stichprobe'" in out
    assert "semicolon-separated, decimal sign ','" in out
    line = next(ln for ln in out.splitlines() if ln.startswith("Länge"))
    assert line.split() == ["Länge", "mm", "3", "1", "2", "1..2", "50", "50.2"]
    assert "! 'Länge': 1 empty cell(s) (row 4)" in out


def test_check_json(good, capsys):
    assert main(["check", str(good), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["layout"] == "wide"
    assert [c["name"] for c in data["characteristics"]] == ["Bohrung", "Länge"]
    assert data["characteristics"][1]["n_missing"] == 1


def test_check_subgroup_size_option(tmp_path, capsys):
    p = tmp_path / "x.csv"
    p.write_text("X\n" + "".join(f"{i}\n" for i in range(10)), encoding="utf-8")
    assert main(["check", str(p), "--subgroup-size", "5"]) == 0
    out = capsys.readouterr().out
    assert "Subgroups:  5 consecutive values each" in out


def test_check_warns_about_too_few_subgroups(tmp_path, capsys):
    p = tmp_path / "x.csv"
    p.write_text("Subgroup,X\n1,5\n1,6\n", encoding="utf-8")
    assert main(["check", str(p)]) == 0
    assert "values in only 1 subgroup(s)" in capsys.readouterr().out


def test_check_bad_file_exit_2_one_line(tmp_path, capsys):
    p = tmp_path / "bad.csv"
    p.write_text("Subgroup;X [mm]\n1;10,1\n1;kaputt\n", encoding="utf-8")
    assert main(["check", str(p)]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith(
        "studykit check: error: file 'bad.csv', row 3, column 'X [mm]': 'kaputt' is not a number"
    )


def test_check_wrong_sheet(tmp_path, capsys):
    import openpyxl

    wb = openpyxl.Workbook()
    wb.active.title = "Werte"
    wb.active.append(["X"])
    wb.active.append([1.0])
    p = tmp_path / "m.xlsx"
    wb.save(p)
    assert main(["check", str(p), "--sheet", "Daten"]) == 2
    assert "no sheet named 'Daten'. Its sheets are: 'Werte'" in capsys.readouterr().err


def _studykit_command() -> list[str]:
    exe = Path(sys.executable).parent / "studykit"
    if exe.exists():
        return [str(exe)]
    found = shutil.which("studykit")
    return [found] if found else [sys.executable, "-m", "studykit"]


def test_check_as_a_program_shows_no_traceback(tmp_path, good):
    bad = tmp_path / "junk.csv"
    bad.write_bytes(bytes(range(256)) * 8)
    result = subprocess.run(
        [*_studykit_command(), "check", str(bad)], capture_output=True, text=True, timeout=120
    )
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    assert result.stderr.count("\n") == 1
    assert "file 'junk.csv': the file does not look like a text table" in result.stderr
    ok = subprocess.run(
        [*_studykit_command(), "check", str(good)], capture_output=True, text=True, timeout=120
    )
    assert ok.returncode == 0, ok.stderr
    assert "Bohrung" in ok.stdout
