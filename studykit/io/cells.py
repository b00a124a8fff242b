"""Cell parsing: header names and units, numbers (point or comma decimals), labels, times, and
the messages that name a bad cell.

Part of :mod:`studykit.io` (moved unchanged from ``studykit/data.py``).
"""

from __future__ import annotations

import datetime as _dt
import math
import re

import numpy as np

from studykit.errors import DataFileError, printable
from studykit.io import plain
from studykit.io.source import Fallback, Source, Table
from studykit.io.values import time_text

# ----------------------------------------------------------------------------------------------
# header names that give a column a role (compared after _norm_header)
SUBGROUP_NAMES = {
    "subgroup",
    "sub group",
    "subgroups",
    "sample",
    "samples",
    "lot",
    "batch",
    "group",
    "sample group",
    "subgroup number",
    "stichprobe",
    "stichproben",
    "untergruppe",
    "gruppe",
    "los",
    "charge",
    "teilgruppe",
    "probe",
}
TIME_NAMES = {
    "time",
    "timestamp",
    "time stamp",
    "date",
    "datetime",
    "date time",
    "measured at",
    "measurement time",
    "zeit",
    "zeitstempel",
    "datum",
    "uhrzeit",
    "datum uhrzeit",
    "messzeit",
    "messdatum",
    "zeitpunkt",
}
NOTE_NAMES = {
    "note",
    "notes",
    "comment",
    "comments",
    "remark",
    "remarks",
    "bemerkung",
    "bemerkungen",
    "kommentar",
    "kommentare",
    "notiz",
    "notizen",
    "hinweis",
    "anmerkung",
}
CHARACTERISTIC_NAMES = {
    "characteristic",
    "characteristic name",
    "feature",
    "parameter",
    "variable",
    "measurand",
    "merkmal",
    "merkmalsname",
    "messgrosse",
    "messgröße",
    "kenngrosse",
    "kenngröße",
    "prüfmerkmal",
}
VALUE_NAMES = {
    "value",
    "values",
    "measurement",
    "measured value",
    "reading",
    "result",
    "wert",
    "messwert",
    "istwert",
    "ergebnis",
}
UNIT_NAMES = {"unit", "units", "einheit", "masseinheit", "maßeinheit"}
#: header names of a stream column (cavity, spindle, nest, fixture, head: parallel streams of
#: one process); see :func:`studykit.io.readers._attach_streams`
STREAM_NAMES = {
    "stream",
    "streams",
    "cavity",
    "cavity number",
    "mould cavity",
    "mold cavity",
    "nest",
    "spindle",
    "fixture",
    "head",
    "station",
    "kavität",
    "kavitaet",
    "formnest",
    "werkzeugnest",
    "spindel",
    "vorrichtung",
    "kopf",
}
_TRAILING_TOKENS = {"no", "nr", "number", "num", "id", "nummer", "index"}

_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*(?:\[(?P<u1>[^\[\]]*)\]|\((?P<u2>[^()]*)\))\s*$")
COMMA_DECIMAL_RE = re.compile(r"^[+-]?\d*,\d+(?:[eE][+-]?\d+)?$")
POINT_DECIMAL_RE = re.compile(r"^[+-]?\d*\.\d+(?:[eE][+-]?\d+)?$")
_NONFINITE_RE = re.compile(r"^[+-]?(?:nan|inf|infinity|#?n/?a|#num!?)$", re.IGNORECASE)
_EXCEL_ERROR_RE = re.compile(r"^#(?:DIV/0!|N/A|NAME\?|NULL!|NUM!|REF!|VALUE!|SPILL!|CALC!)$", re.I)


def parse_header(text) -> tuple[str, str | None]:
    """Split a header such as ``'Bore diameter [mm]'`` into name and unit.

    Parameters
    ----------
    text : str
        The header cell.

    Returns
    -------
    tuple of (str, str or None)
        The name without the unit, and the unit (``None`` when the header has none).

    Examples
    --------
    >>> parse_header("Bore diameter [mm]")
    ('Bore diameter', 'mm')
    >>> parse_header("Drehmoment (Nm)")
    ('Drehmoment', 'Nm')
    >>> parse_header("Flatness")
    ('Flatness', None)
    """
    text = str(text).strip()
    m = _UNIT_RE.match(text)
    if m and m.group("name").strip():
        unit = (m.group("u1") if m.group("u1") is not None else m.group("u2")).strip()
        return m.group("name").strip(), (unit or None)
    return text, None


def norm_header(text: str) -> str:
    name, _unit = parse_header(text)
    s = re.sub(r"[\s._:#/\\-]+", " ", name.casefold()).strip()
    tokens = s.split()
    while len(tokens) > 1 and tokens[-1] in _TRAILING_TOKENS:
        tokens.pop()
    return " ".join(tokens)


def col_letter(index: int) -> str:
    """Spreadsheet letter of a 0-based column index (0 -> A, 26 -> AA)."""
    letters = ""
    index += 1
    while index:
        index, rem = divmod(index - 1, 26)
        letters = chr(65 + rem) + letters
    return letters


def show(value) -> str:
    """Cell text for a message: control characters escaped, at most 40 characters."""
    text = printable(value)
    return text if len(text) <= 40 else text[:37] + "..."


def row_word(n: int) -> str:
    return "row" if n == 1 else "rows"


def fmt_rows(rows, limit: int = 5) -> str:
    rows = [int(r) for r in rows]
    shown = ", ".join(str(r) for r in rows[:limit])
    if len(rows) > limit:
        shown += f" and {len(rows) - limit} more"
    return shown


def cell_text(v) -> str:
    if isinstance(v, str):
        return v.strip()
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    if isinstance(v, _dt.datetime):
        return v.isoformat(sep=" ")
    return str(v)


class Ctx:
    def __init__(self, src: Source, table: Table):
        self.file = src.name
        self.decimal = table.decimal
        self.text_cells = table.text_cells
        self.text_numbers: dict[str, int] = {}


#: labels of a spreadsheet's summary rows (totals, means...) that are not measurements
_SUMMARY_WORDS = frozenset(
    {
        "total",
        "totals",
        "grand total",
        "sum",
        "sums",
        "subtotal",
        "mean",
        "average",
        "avg",
        "median",
        "min",
        "max",
        "minimum",
        "maximum",
        "range",
        "std",
        "stdev",
        "std dev",
        "sd",
        "sigma",
        "count",
        "x-bar",
        "xbar",
        "cpk",
        "ppk",
        "summe",
        "gesamt",
        "gesamtsumme",
        "mittelwert",
        "mittel",
        "durchschnitt",
        "anzahl",
        "spannweite",
        "standardabweichung",
    }
)

#: the subset that is unmistakable in any text column (no first names such as 'Max')
_STRONG_SUMMARY_WORDS = frozenset(
    {
        "total",
        "totals",
        "grand total",
        "sum",
        "subtotal",
        "mean",
        "average",
        "summe",
        "gesamt",
        "gesamtsumme",
        "mittelwert",
        "durchschnitt",
    }
)


def _summary_word(text, words=_SUMMARY_WORDS) -> bool:
    """True when a label cell reads like the label of a totals/summary row ('Total:', 'Mean')."""
    if not isinstance(text, str):
        return False
    key = text.strip()
    if not key or len(key) > 24 or key[0].isdigit():  # quick exit for the usual labels
        return False
    key = re.sub(r"\s+", " ", key.rstrip(":.=").strip()).casefold()
    return key in words


def check_text_column(file, cells, rows, column) -> None:
    """A text column (part numbers, operators...) labelling a row 'Total' or 'Mean'."""
    uniq = plain.unique(np.asarray(cells, dtype=object))
    hits = {u for u in uniq.tolist() if _summary_word(u, _STRONG_SUMMARY_WORDS)}
    if hits:
        i = next(i for i, v in enumerate(cells.tolist()) if v in hits)
        raise _summary_row_error(file, rows[i], column, str(cells[i]))


def _summary_row_error(file, row: int, column: str, label: str) -> DataFileError:
    return DataFileError(
        f"'{show(label)}' labels a summary row (totals, means...), not a part or subgroup: its "
        "numbers are results, not measurements, and would be analysed as data. Delete the row "
        "(and any other summary rows) from the export.",
        file=file,
        row=int(row),
        column=column,
        value=label,
    )


def check_summary_rows(src, characteristics, header, sg_idx, t_idx) -> None:
    """Refuse a totals/mean row at the foot of a table (labelled 'Total', 'Mean', 'Summe'...)
    in the subgroup or time column: its numbers would otherwise enter the analysis."""
    seen: set[int] = set()  # arrays shared by several characteristics are looked at once
    for c in characteristics:
        columns = []
        if sg_idx is not None and id(c.subgroup_labels) not in seen:
            seen.add(id(c.subgroup_labels))
            labels = np.asarray(c.subgroup_labels).astype(str)
            if labels.size:  # only labels starting with a letter can be summary words
                first = np.char.lstrip(labels).astype("U1")
                labels = labels[np.char.isalpha(first)]
            columns.append((header[sg_idx], c.subgroups, labels.tolist()))
        if t_idx is not None and c.times is not None and c.times.dtype.kind == "O":
            if id(c.times) not in seen:
                seen.add(id(c.times))
                columns.append((header[t_idx], c.times, plain.unique(c.times).tolist()))
        for column, cells, uniq in columns:
            hits = {str(u) for u in uniq if _summary_word(str(u))}
            if hits:
                i = next(i for i, v in enumerate(cells.tolist()) if str(v) in hits)
                raise _summary_row_error(src.name, c.rows[i], column, str(cells[i]))


def _bad_number(ctx: Ctx, raw, row: int, column: str) -> DataFileError:
    text = str(raw).strip()
    if _summary_word(text):
        return _summary_row_error(ctx.file, row, column, text)
    if _EXCEL_ERROR_RE.match(text):
        why = (
            f"the cell shows the spreadsheet error '{text}' instead of a value. Fix the "
            "formula that produced it, or clear the cell if the part was not measured."
        )
    elif _NONFINITE_RE.match(text):
        why = (
            f"'{text}' is not a measured value. Leave the cell empty where a value is "
            "missing: studykit counts empty cells and reports them."
        )
    elif ctx.decimal == "," and "." in text and re.match(r"^[+-]?[\d.]+(,\d+)?$", text):
        why = (
            f"'{text}' uses '.' but this file uses ',' as decimal sign. Use one decimal sign "
            "throughout and no thousands separators."
        )
    elif ctx.decimal == "." and "," in text and re.match(r"^[+-]?[\d,]+(\.\d+)?$", text):
        why = (
            f"'{text}' uses ',' but this file uses '.' as decimal sign. Use one decimal sign "
            "throughout and no thousands separators."
        )
    elif isinstance(raw, bool):
        why = f"'{text}' is a yes/no value, not a measurement. Enter the measured number."
    elif isinstance(raw, _dt.datetime | _dt.date | _dt.time):
        why = (
            f"the cell holds a date/time ('{text}') where a measurement is expected. If this "
            "column holds times, name it 'Time' or 'Zeit'; otherwise enter the number."
        )
    else:
        why = (
            f"'{show(text)}' is not a number. Measurement cells hold numbers only (no units, "
            "no text; decimal sign '.' or ','). Leave the cell empty for a missing value and "
            "put remarks into a note column (e.g. 'Note' or 'Bemerkung')."
        )
    return DataFileError(why, file=ctx.file, row=int(row), column=column, value=raw)


def numeric(ctx: Ctx, cells: np.ndarray, rows: np.ndarray, column: str):
    """Convert one column of cells to float; return (values, empty mask)."""
    n = len(cells)
    if cells.dtype.kind == "f":  # already parsed by the fast reader
        empty = np.isnan(cells)
        if np.isinf(cells).any():
            raise Fallback
        return cells, empty
    if ctx.text_cells:
        import pandas as pd

        s = pd.Series(cells, dtype=object).str.strip()
        empty = (s == "").to_numpy(dtype=bool)
        t = s.where(~empty, None)
        if ctx.decimal == ",":
            t = t.str.replace(",", ".", regex=False)
            has_point = s.str.contains(".", regex=False).to_numpy(dtype=bool)
        else:
            has_point = np.zeros(n, dtype=bool)
        vals = np.array(pd.to_numeric(t, errors="coerce"), dtype=float)
        bad = ~empty & (~np.isfinite(vals) | has_point)
        if ctx.decimal == ".":
            bad |= ~empty & s.str.contains(",", regex=False).to_numpy(dtype=bool)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise _bad_number(ctx, cells[i], rows[i], column)
        vals[empty] = np.nan
        return vals, empty
    vals = np.full(n, np.nan)
    empty = np.zeros(n, dtype=bool)
    for i, v in enumerate(cells):
        if isinstance(v, str):
            if v == "":
                empty[i] = True
                continue
            x = text_number(v)
            if x is None:
                raise _bad_number(ctx, v, rows[i], column)
            ctx.text_numbers[column] = ctx.text_numbers.get(column, 0) + 1
            vals[i] = x
        elif isinstance(v, bool) or not isinstance(v, int | float):
            raise _bad_number(ctx, v, rows[i], column)
        else:
            x = float(v)
            if not math.isfinite(x):
                raise _bad_number(ctx, v, rows[i], column)
            vals[i] = x
    return vals, empty


def text_number(text: str) -> float | None:
    t = text.strip().replace("\u00a0", "").replace(" ", "")
    if COMMA_DECIMAL_RE.match(t):
        t = t.replace(",", ".")
    elif "," in t:
        return None
    try:
        x = float(t)
    except ValueError:
        return None
    return x if math.isfinite(x) and not _NONFINITE_RE.match(t) else None


#: One plain number per line, spaces or tabs around it (each such line is a number to
#: :func:`text_number`, unless it overflows to infinity); atomic and unambiguous, so a line
#: that does not match fails in time linear in the text)
_PLAIN_LINES_RE = re.compile(
    r"(?>[ \t]*[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?[ \t]*\n)*"
)


def _all_plain_numbers(cells) -> bool:
    """Every cell is a text holding one finite plain number (point decimal sign, no
    thousands separator): one regular-expression match over the joined cells instead of
    one :func:`text_number` per cell."""
    try:
        joined = "\n".join(cells) + "\n"
    except TypeError:  # a cell that is not a text
        return False
    if joined.count("\n") != len(cells) or not _PLAIN_LINES_RE.fullmatch(joined):
        return False
    if "e" not in joined and "E" not in joined and max(map(len, cells)) < 300:
        return True  # no exponent and fewer than 300 digits: finite
    return bool(np.isfinite(np.asarray(cells, dtype=float)).all())


def looks_numeric(ctx: Ctx, cells: np.ndarray) -> tuple[int, int]:
    """(non-empty cells, cells that look like numbers) of a column sample."""
    sample = cells[:2000]
    if len(sample) and _all_plain_numbers(sample):  # the usual column: the same counts
        return len(sample), len(sample)
    return count_cells(sample)


def count_cells(sample) -> tuple[int, int]:
    """:func:`looks_numeric` cell by cell (any column)."""
    n_filled = n_num = 0
    for v in sample:
        if isinstance(v, str):
            t = v.strip()
            if not t:
                continue
            n_filled += 1
            if text_number(t) is not None or _NONFINITE_RE.match(t) or _EXCEL_ERROR_RE.match(t):
                n_num += 1
            elif re.match(r"^[+-]?[\d.,]+$", t):
                n_num += 1
        elif isinstance(v, bool):
            n_filled += 1
        elif isinstance(v, int | float):
            n_filled += 1
            n_num += 1
        else:
            n_filled += 1
    return n_filled, n_num


def label_array(cells: np.ndarray, text_cells: bool) -> np.ndarray:
    if text_cells:
        return np.asarray([c.strip() for c in cells], dtype=object)
    out = np.empty(len(cells), dtype=object)
    out[:] = [cell_text(v) if v != "" else "" for v in cells]
    return out


def filled_mask(cells: np.ndarray, text_cells: bool) -> np.ndarray:
    if cells.dtype.kind == "f":
        return ~np.isnan(cells)
    if text_cells:
        return plain.strip_filled(cells)
    return np.fromiter((not (isinstance(v, str) and v == "") for v in cells), bool, len(cells))


def plain_numbers(times) -> bool:
    """Every non-empty time cell is a plain number (so the column may be a measurement)."""
    if times is None or np.asarray(times).dtype.kind != "O":
        return False
    cells = [str(v).strip() for v in np.asarray(times).tolist() if str(v).strip()]
    if not cells:
        return False
    try:
        for c in cells:
            float(c.replace(",", "."))
    except ValueError:
        return False
    return True


def time_header_hint(header, t_idx, times) -> str:
    """Why a column of numbers was not taken as a characteristic: its header reads as a time."""
    if t_idx is None:
        return ""
    name = header[t_idx]
    numbers = " and its cells are plain numbers" if plain_numbers(times) else ""
    return (
        f" Column '{name}' was read as time stamps, not as measurements, because its header "
        f"is a time or date name (time, Zeit, date, Datum, timestamp...){numbers}. If it "
        "holds measurements, rename the header, e.g. 'cycle time [s]' or 'elapsed [s]' (a time column is "
        "recognised only by an exact time or date name)."
    )


_TIME_FORMATS = (
    "%Y-%m-%d %H:%M:%S",
    "%Y-%m-%dT%H:%M:%S",
    "%Y-%m-%d %H:%M",
    "%Y-%m-%dT%H:%M",
    "%Y-%m-%d",
    "%d.%m.%Y %H:%M:%S",
    "%d.%m.%Y %H:%M",
    "%d.%m.%Y",
    "%d.%m.%y %H:%M",
    "%d.%m.%y",
    "%Y-%m-%d %H:%M:%S.%f",
    "%Y-%m-%dT%H:%M:%S.%f",
)


def times_chunk(cells: np.ndarray, fmt: str | None):
    """(datetime64[ns] array, format) when every filled cell is a date/time, else (None, None)."""
    n = len(cells)
    is_dt = np.fromiter((isinstance(v, _dt.datetime | _dt.date) for v in cells), bool, n)
    is_empty = np.fromiter((isinstance(v, str) and v.strip() == "" for v in cells), bool, n)
    if is_dt[~is_empty].all():
        out = np.full(n, np.datetime64("NaT"), dtype="datetime64[ns]")
        if is_dt.any():
            out[is_dt] = np.array([np.datetime64(v) for v in cells[is_dt]], dtype="datetime64[ns]")
        return out, fmt
    if (is_dt & ~is_empty).any():
        return None, None
    text = np.empty(n, dtype=object)
    text[:] = [v.strip() if isinstance(v, str) else cell_text(v) for v in cells]
    filled = np.fromiter((t != "" for t in text.tolist()), bool, n)
    candidates = [fmt] if fmt else list(_TIME_FORMATS)
    sample = text[filled][:500]
    for f in candidates:
        try:
            plain.to_datetime64(sample, f)
            parsed = plain.to_datetime64(np.where(filled, text, None), f)
        except (ValueError, TypeError):
            continue
        return parsed, f
    return None, None


def times_text(cells: np.ndarray) -> np.ndarray:
    out = np.empty(len(cells), dtype=object)
    if cells.dtype.kind == "M":
        out[:] = [time_text(t) or "" for t in cells]
    else:
        out[:] = [v.strip() if isinstance(v, str) else cell_text(v) for v in cells]
    return out
