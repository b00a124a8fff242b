"""Safe CSV/XLSX export: text a spreadsheet would run as a formula is neutralised.

Source of the rule: OWASP Foundation, "CSV Injection" (owasp.org/www-community/attacks/
CSV_Injection): cells beginning with =, +, -, @, tab (0x09) or carriage return (0x0D) are
prefixed with a single quote.
"""

from __future__ import annotations

import csv
import io

import pytest
from hypothesis import given
from hypothesis import strategies as st
from openpyxl import load_workbook

from studykit.errors import StudyInputError
from studykit.export import FORMULA_TRIGGERS, csv_text, safe_cell, write_csv, write_xlsx

# every trigger character named by the OWASP CSV Injection page
OWASP_TRIGGERS = ["=", "+", "-", "@", "\t", "\r"]
PAYLOADS = [
    "=cmd|' /C calc'!A0",
    "+1+1",
    "-2+3",
    "@SUM(1+1)",
    "\t=1",
    "\r=1",
    '=HYPERLINK("http://x","y")',
]


def test_trigger_set_is_owasps():
    assert sorted(FORMULA_TRIGGERS) == sorted(OWASP_TRIGGERS)


@pytest.mark.parametrize("payload", PAYLOADS)
def test_payloads_are_quoted(payload):
    assert safe_cell(payload) == "'" + payload


@pytest.mark.parametrize("value", ["bore", "12.5 mm", "", " =not first", "a=b"])
def test_plain_text_unchanged(value):
    assert safe_cell(value) == value


@pytest.mark.parametrize("value", [-2.5, 0, 3, True, None])
def test_numbers_stay_numbers(value):
    assert safe_cell(value) == value


def test_nonfinite_becomes_empty():
    assert safe_cell(float("nan")) is None and safe_cell(float("inf")) is None


@given(st.text())
def test_no_cell_starts_with_a_trigger(text):
    out = safe_cell(text)
    assert not out.startswith(FORMULA_TRIGGERS)
    assert out in (text, "'" + text)


def test_csv_roundtrip(tmp_path):
    rows = [[p, 1.5] for p in PAYLOADS]
    path = write_csv(tmp_path / "x.csv", rows, header=["note", "value"])
    back = list(csv.reader(io.StringIO(path.read_bytes().decode("utf-8-sig"), newline="")))
    assert back[0] == ["note", "value"]
    for (p, _), row in zip(rows, back[1:], strict=True):
        assert row == ["'" + p, "1.5"]


def test_xlsx_cells_are_text_not_formulas(tmp_path):
    rows = [[p, -1.25] for p in PAYLOADS]
    path = write_xlsx(tmp_path / "x.xlsx", rows, header=["note", "value"], sheet="=evil")
    wb = load_workbook(path)
    ws = wb.active
    assert not ws.title.startswith("=")
    for r, (p, v) in enumerate(rows, start=2):
        cell = ws.cell(row=r, column=1)
        assert cell.data_type == "s" and cell.value == "'" + p
        assert ws.cell(row=r, column=2).value == v


def test_bad_rows_are_refused():
    with pytest.raises(StudyInputError, match="each row must be a sequence"):
        csv_text(["not a row"])
