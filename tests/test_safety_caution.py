"""The safety caution reads the same on every surface (one constant; common practice, no source:
the wording is ours)."""

from __future__ import annotations

import json
from pathlib import Path

from studykit.analysis import SAFETY_CAUTION, SAFETY_SENTENCE
from studykit.app.widgets import SAFETY_NOTE
from studykit.cli import main

DEMO = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.study"


def _words(text: str) -> str:
    return " ".join(text.lower().split())


def test_workbook_and_result_use_the_same_sentence():
    assert SAFETY_NOTE == SAFETY_SENTENCE
    assert _words(SAFETY_CAUTION).endswith(_words(SAFETY_SENTENCE))


def test_terminal_and_json_carry_the_same_sentence(capsys):
    # bore_diameter is marked safety-critical in the invented demo study
    assert main(["analyze", "--study", str(DEMO), "-c", "bore_diameter", "--json"]) == 0
    cautions = json.loads(capsys.readouterr().out)["cautions"]
    assert cautions == [SAFETY_CAUTION]
    assert main(["analyze", "--study", str(DEMO), "-c", "bore_diameter"]) == 0
    assert _words(SAFETY_SENTENCE) in _words(capsys.readouterr().out)
