"""The specifications table: a CSV of characteristics with limits and criteria, read into
:class:`~studykit.study.Characteristic` and :class:`~studykit.study.Criteria`, and matched to the
names and units of the measurement data.

Moved unchanged from :mod:`studykit.study`, which still answers ``from studykit.study import
read_specs`` (and the other names here).
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Iterable, Mapping

from studykit.errors import SpecError, StudyInputError
from studykit.study import (
    Characteristic,
    Criteria,
    check_chart_fits,
    check_criteria_fits,
    check_model,
)

__all__ = [
    "CORE_SPEC_COLUMNS",
    "SPEC_COLUMNS",
    "match_to_data",
    "match_to_files",
    "read_specs",
    "read_specs_bytes",
]

#: the columns most studies fill (the new-study page's table edits exactly these)
CORE_SPEC_COLUMNS = (
    "characteristic",
    "unit",
    "lsl",
    "usl",
    "target",
    "safety_critical",
    "criterion",
    "threshold",
    "basis",
)
#: columns of a specifications table (CSV); only ``characteristic`` is required
SPEC_COLUMNS = (
    *CORE_SPEC_COLUMNS,
    "confidence",
    "chart",
    "subgroup_size",
    "size_column",
    "model",
    "description",
)
_TRUE = {"1", "yes", "y", "true", "x", "ja", "j", "safety", "sc"}
_FALSE = {"", "0", "no", "n", "false", "nein"}


def read_specs_bytes(
    data: bytes, filename: str = "specs.csv"
) -> tuple[tuple[Characteristic, ...], dict[str, Criteria]]:
    """Read a specifications table (CSV) into characteristics and criteria.

    Columns (header names, any case): ``characteristic`` (required), ``unit``, ``lsl``,
    ``usl``, ``target``, ``safety_critical`` (yes/no), ``criterion`` (cp, cpk, pp, ppk, cpm),
    ``threshold``, ``basis`` (lower_bound, estimate), ``confidence``, ``chart``,
    ``subgroup_size``, ``size_column``, ``model``, ``description``. Separator comma or
    semicolon; with a semicolon a decimal comma is accepted. A row without ``criterion``,
    ``threshold``, ``basis`` and ``confidence`` uses the default :class:`Criteria`.

    Returns
    -------
    (characteristics, criteria)
        A tuple of :class:`Characteristic` in table order and a dict name -> :class:`Criteria`.

    Raises
    ------
    SpecError
        Naming the file, row (header = row 1), column, value and the fix.

    Examples
    --------
    >>> table = b"characteristic,unit,lsl,usl,criterion,threshold\\nbore,mm,11.97,12.03,cpk,1.33\\n"
    >>> chars, crit = read_specs_bytes(table)
    >>> chars[0].usl, crit["bore"].describe()
    (12.03, 'Cpk lower 95% bound >= 1.33')
    """
    header, numbered_rows = _table(data, filename)
    chars: list[Characteristic] = []
    criteria: dict[str, Criteria] = {}
    seen: dict[str, int] = {}
    for r, cell in numbered_rows:
        name = cell.get("characteristic", "")
        if not name:
            raise SpecError(
                "the characteristic name is empty", file=filename, row=r, column="characteristic"
            )
        if name in seen:
            raise SpecError(
                f"'{name}' is listed twice (rows {seen[name]} and {r}): keep one row",
                file=filename,
                row=r,
                column="characteristic",
            )
        seen[name] = r
        c, crit = _spec_of_row(name, cell, filename, r)
        if crit is not None:
            criteria[c.name] = crit
        chars.append(c)
    return tuple(chars), criteria


#: the criterion columns of the table -> the fields of :class:`Criteria`
_CRITERIA_COLUMNS = {
    "criterion": "index",
    "threshold": "threshold",
    "basis": "basis",
    "confidence": "confidence",
}


def _table(data: bytes, filename: str) -> tuple[list[str], list[tuple[int, dict[str, str]]]]:
    """The header (lower case) and the (row number, {column: cell text}) of each data row of
    the table; a decimal comma becomes a point in a semicolon-separated table."""
    import csv

    try:
        text = bytes(data).decode("utf-8-sig")
    except UnicodeDecodeError:
        text = bytes(data).decode("cp1252", errors="replace")
    # (row number as a spreadsheet shows it, text) of each non-blank line
    numbered = [(i, ln) for i, ln in enumerate(text.splitlines(), start=1) if ln.strip()]
    if not numbered:
        raise SpecError(
            "the specifications table is empty: it needs a header row with at least "
            "a 'characteristic' column",
            file=filename,
        )
    first = numbered[0][1]
    sep = ";" if first.count(";") > first.count(",") else ","
    rows = [next(csv.reader([ln], delimiter=sep), []) for _, ln in numbered]
    row_numbers = [i for i, _ in numbered]
    header = [h.strip().lower().replace(" ", "_") for h in rows[0]]
    _check_header(header, filename, row_numbers[0])
    out = []
    for r, cells in zip(row_numbers[1:], rows[1:], strict=True):
        cell = {h: (cells[i].strip() if i < len(cells) else "") for i, h in enumerate(header) if h}
        if sep == ";":
            for key in ("lsl", "usl", "target", "threshold", "confidence"):
                if re.fullmatch(r"[+-]?\d*,\d+", cell.get(key, "")):
                    cell[key] = cell[key].replace(",", ".")
        out.append((r, cell))
    return header, out


def _check_header(header: list[str], filename: str, row: int) -> None:
    unknown = [h for h in header if h and h not in SPEC_COLUMNS]
    if unknown:
        raise SpecError(
            f"unknown column(s) {', '.join(repr(u) for u in unknown)}: the columns are "
            f"{', '.join(SPEC_COLUMNS)}",
            file=filename,
            row=row,
        )
    if "characteristic" not in header:
        raise SpecError(
            "the header needs a 'characteristic' column naming each characteristic",
            file=filename,
            row=row,
        )


def _spec_of_row(
    name: str, cell: dict[str, str], filename: str, r: int
) -> tuple[Characteristic, Criteria | None]:
    """The characteristic of one row and its criterion (None: no criterion column filled)."""
    flag = cell.get("safety_critical", "").lower()
    if flag not in _TRUE | _FALSE:
        raise SpecError(
            f"`safety_critical` ({cell['safety_critical']!r}) must be yes or no",
            file=filename,
            row=r,
            column="safety_critical",
        )
    size = cell.get("subgroup_size", "")
    try:
        size_value = int(size) if size else None
    except ValueError:
        raise SpecError(
            f"`subgroup_size` ({size!r}) must be a whole number",
            file=filename,
            row=r,
            column="subgroup_size",
        ) from None
    try:
        c = Characteristic(
            name,
            unit=cell.get("unit") or None,
            lsl=cell.get("lsl"),
            usl=cell.get("usl"),
            target=cell.get("target"),
            safety_critical=flag in _TRUE,
            chart=cell.get("chart") or "auto",
            subgroup_size=size_value,
            size_column=cell.get("size_column") or None,
            model=check_model(cell.get("model") or "auto"),
            description=cell.get("description", ""),
        )
        if c.chart != "auto":
            check_chart_fits(c, c.chart)
        kw = {f: cell[col] for col, f in _CRITERIA_COLUMNS.items() if cell.get(col, "")}
        if not kw:
            return c, None
        crit = Criteria(**kw)
        check_criteria_fits(c, crit)
        return c, crit
    except SpecError as exc:
        raise SpecError(exc.detail, file=filename, row=r) from None


def read_specs(path) -> tuple[tuple[Characteristic, ...], dict[str, Criteria]]:
    """Read a specifications table from a CSV file; see :func:`read_specs_bytes`."""
    from pathlib import Path

    p = Path(path)
    if not p.is_file():
        raise SpecError("the specifications file does not exist: check the path", file=str(path))
    return read_specs_bytes(p.read_bytes(), p.name)


def match_to_data(
    characteristics: Iterable[Characteristic], criteria: Mapping[str, Criteria], measurements
) -> tuple[tuple[Characteristic, ...], dict[str, Criteria]]:
    """Check that every specified characteristic is in the data; adopt the data's names/units.

    ``measurements`` is a :class:`studykit.data.Measurements` (anything with ``names`` and
    ``get(name)`` returning an object with ``name`` and ``unit``). A spec without a unit takes
    the data's unit; two different units are an error.

    Returns
    -------
    (characteristics, criteria)
        Renamed to the data's spelling of each name.
    """
    out, crit_out = [], {}
    for c in characteristics:
        try:
            found = measurements.get(c.name)
        except StudyInputError:
            raise SpecError(
                f"the specifications name '{c.name}', which is not in the data (the data have: "
                f"{', '.join(repr(n) for n in measurements.names)}): correct the name",
                column="characteristic",
                value=c.name,
            ) from None
        unit = c.unit
        if unit and found.unit and unit.strip().casefold() != found.unit.strip().casefold():
            raise SpecError(
                f"characteristic '{c.name}': the specifications give unit '{unit}' but the data "
                f"say '{found.unit}': convert one of them so both agree",
                column="unit",
            )
        new = dataclasses.replace(c, name=found.name, unit=unit or found.unit)
        if c.size_column is not None and c.size_column not in measurements.names:
            raise SpecError(
                f"characteristic '{c.name}': the size column '{c.size_column}' is not in the "
                f"data (the data have: {', '.join(repr(n) for n in measurements.names)}): "
                "correct the name",
                column="size_column",
                value=c.size_column,
            )
        _check_chart_against_counts(new, found)
        out.append(new)
        if c.name in criteria:
            crit_out[found.name] = criteria[c.name]
    return tuple(out), crit_out


def match_to_files(
    characteristics: Iterable[Characteristic],
    criteria: Mapping[str, Criteria],
    readings: list,
    file_names: list[str],
    *,
    source: str,
    rows: list[int] | None = None,
) -> tuple[tuple[Characteristic, ...], dict[str, Criteria]]:
    """:func:`match_to_data` for a study over several data files: each characteristic is
    matched in the file that holds it (``readings[i]`` read from ``file_names[i]``; the first
    file whose names hold it, else the first that holds it ignoring case, else the first file)
    and records that file as its ``source`` when it is not the first. An error names the table
    ``source`` and the row of the characteristic (``rows[k]``; default k + 2, under a header)."""
    chars, crit_out = [], {}
    for k, c in enumerate(characteristics):
        home = next((i for i, m in enumerate(readings) if c.name in m.names), None)
        if home is None:
            folded = c.name.casefold()
            home = next(
                (i for i, m in enumerate(readings) if folded in {n.casefold() for n in m.names}),
                0,
            )
        try:
            one, crit = match_to_data(
                [c], {n: v for n, v in criteria.items() if n == c.name}, readings[home]
            )
        except SpecError as exc:
            row = (rows[k] if k < len(rows) else None) if rows is not None else k + 2
            raise SpecError(
                exc.detail, file=source, row=row, column=exc.column, value=exc.value
            ) from None
        c2 = one[0]
        if home:
            c2 = dataclasses.replace(c2, source=file_names[home])
        chars.append(c2)
        crit_out.update(crit)
    return tuple(chars), crit_out


def _check_chart_against_counts(c: Characteristic, found) -> None:
    """Refuse an individuals chart for subgrouped data and an X-bar chart for individuals
    (``found`` is the data of ``c``, with ``subgroup_counts``); a subgroup size in the spec
    makes subgroups of individual values."""
    counts = getattr(found, "subgroup_counts", None)
    if c.chart not in ("imr", "xbar_r", "xbar_s") or counts is None or not len(counts):
        return
    largest = int(max(counts))
    if c.chart == "imr" and largest > 1:
        raise SpecError(
            f"characteristic '{c.name}': the data have subgroups of up to {largest} values; the "
            "individuals chart (imr) needs one value per subgroup. Use auto, xbar_r or xbar_s",
            column="chart",
            value=c.chart,
        )
    if c.chart in ("xbar_r", "xbar_s") and largest == 1 and not (c.subgroup_size or 1) > 1:
        raise SpecError(
            f"characteristic '{c.name}': the data hold one value per subgroup; the {c.chart} "
            "chart needs subgroups of 2 or more. Use auto or imr, or give a subgroup_size",
            column="chart",
            value=c.chart,
        )
