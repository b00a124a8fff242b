"""CSV and XLSX export that a spreadsheet cannot mistake for formulas.

A cell whose text starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return may be run
as a formula when the file is opened in a spreadsheet program ("CSV injection" or "formula
injection"). Every text cell written here that starts with one of these characters is prefixed
with a single quote, so it shows as text. Numbers stay numbers (a negative number is a number,
not text, so it is written unchanged).

References
----------
OWASP Foundation, "CSV Injection" (https://owasp.org/www-community/attacks/CSV_Injection):
prefix cells beginning with ``=``, ``+``, ``-``, ``@``, tab (0x09) or carriage return (0x0D)
with a single quote.
"""

from __future__ import annotations

import csv
import io
import math
import os
from collections.abc import Iterable, Sequence
from pathlib import Path

from studykit.errors import StudyInputError

__all__ = ["FORMULA_TRIGGERS", "safe_cell", "write_csv", "csv_text", "write_xlsx"]

#: Leading characters that make a spreadsheet treat text as a formula (OWASP, CSV Injection).
FORMULA_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def safe_cell(value):
    """The value as it is safe to write into a spreadsheet cell.

    Text starting with one of :data:`FORMULA_TRIGGERS` gets a leading single quote; numbers,
    booleans and None pass unchanged (non-finite floats become None).

    Examples
    --------
    >>> safe_cell("=1+1"), safe_cell("-2"), safe_cell(-2.5), safe_cell("bore")
    ("'=1+1", "'-2", -2.5, 'bore')
    """
    if value is None or isinstance(value, bool):
        return value
    if isinstance(value, int | float):
        return value if math.isfinite(value) else None
    text = str(value)
    if text.startswith(FORMULA_TRIGGERS):
        return "'" + text
    return text


def _rows(header: Sequence | None, rows: Iterable[Sequence]):
    if header is not None:
        yield [safe_cell(h) for h in header]
    for row in rows:
        if isinstance(row, str | bytes) or not isinstance(row, Iterable):
            raise StudyInputError(f"each row must be a sequence of cells, got {row!r:.60}")
        yield [safe_cell(v) for v in row]


def csv_text(rows: Iterable[Sequence], *, header: Sequence | None = None) -> str:
    r"""CSV text (comma, CRLF line ends as RFC 4180, so a cell holding a carriage return is
    quoted) with every cell neutralised by :func:`safe_cell`.

    Examples
    --------
    >>> csv_text([["=cmd|' /C calc'!A0", 1.5]], header=["note", "value"])
    "note,value\r\n'=cmd|' /C calc'!A0,1.5\r\n"
    """
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\r\n")
    for row in _rows(header, rows):
        w.writerow(["" if v is None else v for v in row])
    return buf.getvalue()


def write_csv(path, rows: Iterable[Sequence], *, header: Sequence | None = None) -> Path:
    """Write :func:`csv_text` to ``path`` (UTF-8 with BOM so spreadsheets read accents)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    tmp.write_text(csv_text(rows, header=header), encoding="utf-8-sig", newline="")
    os.replace(tmp, path)
    return path


def write_xlsx(
    path, rows: Iterable[Sequence], *, header: Sequence | None = None, sheet: str = "studykit"
) -> Path:
    """Write an XLSX workbook with one sheet; text cells are neutralised and stored as text.

    openpyxl would otherwise store a string starting with ``=`` as a formula; after
    :func:`safe_cell` it starts with a quote, and the cell's data type is forced to text.
    """
    from openpyxl import Workbook

    wb = Workbook()
    ws = wb.active
    # a sheet title may not start with a quote; leading formula characters are dropped
    ws.title = str(sheet).lstrip("".join(FORMULA_TRIGGERS) + "'")[:31] or "studykit"
    for r, row in enumerate(_rows(header, rows), start=1):
        for c, v in enumerate(row, start=1):
            cell = ws.cell(row=r, column=c)
            cell.value = v
            if isinstance(v, str):
                cell.data_type = "s"
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    wb.save(tmp)
    os.replace(tmp, path)
    return path
