"""Read measurement tables (CSV or XLSX) into tidy, validated :class:`Measurements`.

A measurement file comes in one of two shapes:

*wide*
    one column per characteristic, one row per part in production order, and optionally a
    subgroup column, a time column and a note column (recognised by their header names in
    English and German, e.g. ``Sample``/``Stichprobe``, ``Time``/``Zeit``, ``Note``/``Bemerkung``);
*long*
    one row per measured value, with a column naming the characteristic (``Characteristic``,
    ``Merkmal``...), a value column (``Value``, ``Messwert``...) and the same optional columns.

``layout="auto"`` tells them apart by the header names and says in ``notes`` what it found.
Separators (comma, semicolon, tab), the decimal sign (point or comma) and the text encoding
(UTF-8 with or without BOM, UTF-16 with BOM, Windows-1252/Latin-1) are detected from the file.
A unit in a header (``Bore diameter [mm]`` or ``Bore diameter (mm)``) is split off.

Empty cells are kept as NaN and counted; they are never dropped here (the analysis drops them
and says how many). Every problem raises :class:`~studykit.errors.DataFileError` whose message
names the file, the row as a spreadsheet numbers it (header = row 1), the column, the offending
value and what to do about it.

CSV files are read in chunks, so a large file needs memory for its numbers, not for its text.
"""

from __future__ import annotations

import codecs
import csv
import datetime as _dt
import hashlib
import io
import math
import os
import re
import stat
import zipfile
import zlib
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field, replace
from functools import cached_property
from pathlib import Path

import numpy as np

from studykit.errors import DataFileError, StudyInputError, printable

__all__ = [
    "CharacteristicData",
    "Measurements",
    "read_measurements",
    "read_measurements_bytes",
    "parse_header",
    "LARGE_SUBGROUP",
    "DEFAULT_MAX_BYTES",
]

#: Subgroups with more values than this are allowed but warned about (range charts lose
#: efficiency; an S chart is the better choice). Common practice, no source.
LARGE_SUBGROUP = 25

#: Default size limit for uploads through the workbook (bytes). The library itself has no
#: limit unless ``max_bytes`` is given.
DEFAULT_MAX_BYTES = 100 * 1024 * 1024

_CHUNK_ROWS = 50_000
_XLSX_CHUNK_ROWS = 20_000
_SAMPLE_BYTES = 64 * 1024
#: The sample read to find the header grows up to this size when its first lines are longer
#: than _SAMPLE_BYTES (a header of thousands of columns); a first line longer than this is
#: refused with a message that says so.
_HEADER_MAX_BYTES = 8 * 1024 * 1024
_READ_BLOCK = 1 << 20

# ----------------------------------------------------------------------------------------------
# header names that give a column a role (compared after _norm_header)
_SUBGROUP_NAMES = {
    "subgroup", "sub group", "subgroups", "sample", "samples", "lot", "batch", "group",
    "sample group", "subgroup number",
    "stichprobe", "stichproben", "untergruppe", "gruppe", "los", "charge", "teilgruppe", "probe",
}
_TIME_NAMES = {
    "time", "timestamp", "time stamp", "date", "datetime", "date time", "measured at",
    "measurement time", "zeit", "zeitstempel", "datum", "uhrzeit", "datum uhrzeit", "messzeit",
    "messdatum", "zeitpunkt",
}
_NOTE_NAMES = {
    "note", "notes", "comment", "comments", "remark", "remarks", "bemerkung", "bemerkungen",
    "kommentar", "kommentare", "notiz", "notizen", "hinweis", "anmerkung",
}
_CHARACTERISTIC_NAMES = {
    "characteristic", "characteristic name", "feature", "parameter", "variable", "measurand",
    "merkmal", "merkmalsname", "messgrosse", "messgröße", "kenngrosse", "kenngröße", "prüfmerkmal",
}
_VALUE_NAMES = {
    "value", "values", "measurement", "measured value", "reading", "result",
    "wert", "messwert", "istwert", "ergebnis",
}
_UNIT_NAMES = {"unit", "units", "einheit", "masseinheit", "maßeinheit"}
#: header names of a stream column (cavity, spindle, nest, fixture, head: parallel streams of
#: one process); see :func:`_attach_streams`
_STREAM_NAMES = {
    "stream", "streams", "cavity", "cavity number", "mould cavity", "mold cavity", "nest",
    "spindle", "fixture", "head", "station",
    "kavität", "kavitaet", "formnest", "werkzeugnest", "spindel", "vorrichtung", "kopf",
}
_TRAILING_TOKENS = {"no", "nr", "number", "num", "id", "nummer", "index"}

_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*(?:\[(?P<u1>[^\[\]]*)\]|\((?P<u2>[^()]*)\))\s*$")
_COMMA_DECIMAL_RE = re.compile(r"^[+-]?\d*,\d+(?:[eE][+-]?\d+)?$")
_POINT_DECIMAL_RE = re.compile(r"^[+-]?\d*\.\d+(?:[eE][+-]?\d+)?$")
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


def _norm_header(text: str) -> str:
    name, _unit = parse_header(text)
    s = re.sub(r"[\s._:#/\\-]+", " ", name.casefold()).strip()
    tokens = s.split()
    while len(tokens) > 1 and tokens[-1] in _TRAILING_TOKENS:
        tokens.pop()
    return " ".join(tokens)


def _col_letter(index: int) -> str:
    """Spreadsheet letter of a 0-based column index (0 -> A, 26 -> AA)."""
    letters = ""
    index += 1
    while index:
        index, rem = divmod(index - 1, 26)
        letters = chr(65 + rem) + letters
    return letters


def _show(value) -> str:
    """Cell text for a message: control characters escaped, at most 40 characters."""
    text = printable(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _row_word(n: int) -> str:
    return "row" if n == 1 else "rows"


def _fmt_rows(rows, limit: int = 5) -> str:
    rows = [int(r) for r in rows]
    shown = ", ".join(str(r) for r in rows[:limit])
    if len(rows) > limit:
        shown += f" and {len(rows) - limit} more"
    return shown


# ----------------------------------------------------------------------------------------------
# result classes


def _frozen_array(a: np.ndarray | None) -> np.ndarray | None:
    if a is None:
        return None
    a = np.asarray(a)
    a.flags.writeable = False
    return a


def _json_float(x) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True, eq=False)
class CharacteristicData:
    """The values of one characteristic as read from a file.

    Only `name`, `unit` and `values` are required; the other fields are derived when left out
    (individuals labelled ``'1'..'n'``, rows ``2..n+1``), so tests and other modules can build
    one directly.

    Attributes
    ----------
    name : str
        Header name without the unit.
    unit : str or None
        Unit from the header (``[mm]`` or ``(mm)``) or from a unit column.
    values : ndarray of float
        Values in file order; NaN where the cell was empty.
    subgroups : ndarray of str
        Subgroup label of each value, in file order. Individuals (no subgrouping) get their
        position ``'1'..'n'``; subgrouping by a fixed size gives ``'1', '1', ..., '2', ...``.
    times : ndarray or None
        ``datetime64[ns]`` when every time cell could be read as a date/time, otherwise the
        cell text (object array); ``None`` when the file has no time column.
    notes : ndarray of str or None
        Note cell text, object array ('' where empty); ``None`` without a note column.
    rows : ndarray of int
        Spreadsheet row number of each value (the header is row 1).
    n_missing : int
        Number of empty cells (NaN values).
    is_integer : bool
        Every non-missing value is a whole number (counts, lot sizes).
    subgroup_labels : ndarray of str
        Distinct subgroup labels in order of first appearance.
    subgroup_counts : ndarray of int
        Non-missing values per label of `subgroup_labels`.
    subgroup_sizes : dict (property)
        Subgroup label -> number of non-missing values, in order of first appearance.
    """

    name: str
    unit: str | None
    values: np.ndarray
    subgroups: np.ndarray | None = None
    times: np.ndarray | None = None
    notes: np.ndarray | None = None
    rows: np.ndarray | None = None
    n_missing: int | None = None
    is_integer: bool | None = None
    subgroup_labels: np.ndarray | None = None
    subgroup_counts: np.ndarray | None = None
    streams: np.ndarray | None = None

    def __post_init__(self):
        put = object.__setattr__
        values = np.asarray(self.values, dtype=float)
        put(self, "values", values)
        n = values.size
        missing = np.isnan(values)
        if self.subgroups is None:
            put(self, "subgroups", (np.arange(n) + 1).astype(str))
        elif np.asarray(self.subgroups).dtype.kind not in "UO":
            put(self, "subgroups", np.asarray(self.subgroups).astype(str))
        if self.rows is None:
            put(self, "rows", np.arange(2, n + 2, dtype=np.int64))
        if self.streams is not None:
            put(self, "streams", np.asarray(self.streams).astype(str))
        for key in ("subgroups", "rows", "times", "notes", "streams"):
            a = getattr(self, key)
            if a is not None and len(a) != n:
                raise StudyInputError(
                    f"`{key}` has {len(a)} entries but `values` has {n}; they must match.",
                    column=self.name,
                )
        if self.n_missing is None:
            put(self, "n_missing", int(missing.sum()))
        if self.is_integer is None:
            valid = values[~missing]
            put(self, "is_integer", bool(valid.size and np.all(np.floor(valid) == valid)))
        if self.subgroup_labels is None or self.subgroup_counts is None:
            import pandas as pd

            codes, uniq = pd.factorize(np.asarray(self.subgroups), sort=False)
            counts = np.bincount(codes, weights=(~missing).astype(float), minlength=len(uniq))
            put(self, "subgroup_labels", np.asarray(uniq).astype(str))
            put(self, "subgroup_counts", counts.astype(np.int64))
        for key in ("values", "subgroups", "times", "notes", "rows", "subgroup_labels",
                    "subgroup_counts", "streams"):
            put(self, key, _frozen_array(getattr(self, key)))

    @cached_property
    def subgroup_sizes(self) -> dict:
        """Subgroup label -> number of non-missing values, in order of first appearance."""
        return dict(zip(self.subgroup_labels.tolist(), self.subgroup_counts.tolist(),
                        strict=True))

    @property
    def n(self) -> int:
        """Number of values including missing ones."""
        return int(self.values.size)

    @property
    def n_valid(self) -> int:
        """Number of non-missing values."""
        return int(self.values.size - self.n_missing)

    @property
    def n_subgroups(self) -> int:
        return int(self.subgroup_labels.size)

    @property
    def label(self) -> str:
        """Name with unit, e.g. ``'Bore diameter [mm]'``."""
        return f"{self.name} [{self.unit}]" if self.unit else self.name

    def valid_values(self) -> np.ndarray:
        """The values without the missing ones (file order kept)."""
        return self.values[~np.isnan(self.values)]

    def check_subgroups(self, *, min_subgroups: int = 2, source: str | None = None) -> None:
        """Raise :class:`DataFileError` when fewer than `min_subgroups` subgroups hold values.

        Call this before a subgrouped analysis (X-bar/R, X-bar/S, within-subgroup sigma).
        """
        filled = int(np.count_nonzero(self.subgroup_counts))
        if filled < min_subgroups:
            raise DataFileError(
                f"'{self.name}' has values in {filled} subgroup(s), but at least "
                f"{min_subgroups} are needed for a subgrouped analysis. Add a subgroup column "
                "that groups the parts (e.g. one subgroup per production hour), give a subgroup "
                "size, or analyse the values as individuals.",
                file=source, column=self.name, value=filled,
            )

    def summary(self) -> dict:
        """Compact JSON-safe description (no values)."""
        valid = self.valid_values()
        sizes, counts = np.unique(self.subgroup_counts, return_counts=True)
        return {
            "name": self.name,
            "unit": self.unit,
            "n": self.n,
            "n_valid": self.n_valid,
            "n_missing": int(self.n_missing),
            "n_subgroups": self.n_subgroups,
            "subgroup_size_min": int(sizes[0]) if sizes.size else None,
            "subgroup_size_max": int(sizes[-1]) if sizes.size else None,
            "subgroup_size_counts": {str(s): int(k) for s, k in zip(sizes.tolist(),
                                                                     counts.tolist(), strict=True)},
            "min": _json_float(valid.min()) if valid.size else None,
            "max": _json_float(valid.max()) if valid.size else None,
            "mean": _json_float(valid.mean()) if valid.size else None,
            "is_integer": bool(self.is_integer),
            "first_row": int(self.rows[0]) if self.rows.size else None,
            "last_row": int(self.rows[-1]) if self.rows.size else None,
        }

    def to_dict(self) -> dict:
        """JSON-safe dict with every value (None for missing)."""
        out = self.summary()
        out["values"] = [None if math.isnan(v) else float(v) for v in self.values.tolist()]
        out["subgroups"] = [str(s) for s in self.subgroups.tolist()]
        out["rows"] = [int(r) for r in self.rows.tolist()]
        out["subgroup_sizes"] = {str(k): int(v) for k, v in self.subgroup_sizes.items()}
        if self.times is not None:
            out["times"] = [_time_text(t) for t in self.times]
        if self.notes is not None:
            out["notes"] = [str(s) for s in self.notes.tolist()]
        return out


def _time_text(t) -> str | None:
    if isinstance(t, np.datetime64):
        return None if np.isnat(t) else str(np.datetime_as_string(t, unit="s"))
    return None if t is None or t == "" else str(t)


@dataclass(frozen=True, eq=False)
class Measurements:
    """Everything read from one measurement file.

    Attributes
    ----------
    source : str
        File name (no directory).
    sha256 : str
        Hex digest of the raw file bytes.
    layout : {'wide', 'long'}
    subgroup_source : {'column', 'size', 'none'}
    characteristics : tuple of CharacteristicData
    warnings : tuple of str
        Things the engineer should look at (missing values, no spread, large subgroups...).
    notes : tuple of str
        What was detected (layout, separator, decimal sign, encoding, sheet, column roles).
    subgroup_column : str or None
    subgroup_size : int or None
    sheet, encoding, separator, decimal : str or None
        How the file was read (sheet for XLSX; encoding, separator and decimal sign for CSV).
    n_rows : int
        Data rows read (after the header, trailing empty rows not counted).
    """

    source: str
    sha256: str
    layout: str
    subgroup_source: str
    characteristics: tuple
    warnings: tuple = ()
    notes: tuple = ()
    subgroup_column: str | None = None
    subgroup_size: int | None = None
    sheet: str | None = None
    encoding: str | None = None
    separator: str | None = None
    decimal: str | None = None
    n_rows: int = 0

    @property
    def names(self) -> tuple[str, ...]:
        """Characteristic names in file order."""
        return tuple(c.name for c in self.characteristics)

    def __len__(self) -> int:
        return len(self.characteristics)

    def __iter__(self) -> Iterator[CharacteristicData]:
        return iter(self.characteristics)

    def get(self, name: str) -> CharacteristicData:
        """The characteristic called `name` (also matches ``'Name [unit]'`` or any case)."""
        for c in self.characteristics:
            if c.name == name or c.label == name:
                return c
        folded = str(name).strip().casefold()
        for c in self.characteristics:
            if c.name.casefold() == folded or c.label.casefold() == folded:
                return c
        raise DataFileError(
            f"there is no characteristic named '{name}'. The file has: "
            + ", ".join(f"'{n}'" for n in self.names)
            + ". Use one of these names exactly as written.",
            file=self.source, value=name,
        )

    def check_subgroups(self, *, min_subgroups: int = 2, name: str | None = None) -> None:
        """Raise :class:`DataFileError` if a characteristic (or `name` only) has too few
        subgroups for a subgrouped analysis."""
        chars = [self.get(name)] if name is not None else self.characteristics
        for c in chars:
            c.check_subgroups(min_subgroups=min_subgroups, source=self.source)

    def to_frame(self):
        """Tidy pandas frame: characteristic, subgroup, value, time, note, row."""
        import pandas as pd

        parts = []
        for c in self.characteristics:
            n = c.values.size
            parts.append(
                pd.DataFrame(
                    {
                        "characteristic": np.full(n, c.name, dtype=object),
                        "subgroup": c.subgroups.astype(object),
                        "value": c.values,
                        "time": c.times if c.times is not None else np.full(n, None, dtype=object),
                        "note": c.notes.astype(object)
                        if c.notes is not None
                        else np.full(n, None, dtype=object),
                        "row": c.rows,
                    }
                )
            )
        if not parts:
            return pd.DataFrame(columns=["characteristic", "subgroup", "value", "time", "note", "row"])
        return pd.concat(parts, ignore_index=True)

    def summary(self) -> dict:
        """Compact JSON-safe description: how the file was read and each characteristic."""
        return {
            "source": self.source,
            "sha256": self.sha256,
            "layout": self.layout,
            "subgroup_source": self.subgroup_source,
            "subgroup_column": self.subgroup_column,
            "subgroup_size": self.subgroup_size,
            "sheet": self.sheet,
            "encoding": self.encoding,
            "separator": self.separator,
            "decimal": self.decimal,
            "n_rows": int(self.n_rows),
            "characteristics": [c.summary() for c in self.characteristics],
            "warnings": list(self.warnings),
            "notes": list(self.notes),
        }

    def to_dict(self) -> dict:
        """JSON-safe dict including every value of every characteristic."""
        out = self.summary()
        out["characteristics"] = [c.to_dict() for c in self.characteristics]
        return out


# ----------------------------------------------------------------------------------------------
# public readers


def read_measurements(
    path,
    *,
    sheet: str | None = None,
    layout: str = "auto",
    subgroup_column: str | None = None,
    subgroup_size: int | None = None,
    characteristic_column: str | None = None,
    value_column: str | None = None,
    time_column: str | None = None,
    note_column: str | None = None,
    encoding: str | None = None,
    max_bytes: int | None = None,
    stream_column: str | None = None,
) -> Measurements:
    """Read a CSV or XLSX measurement file.

    Parameters
    ----------
    path : str or Path
        The file. ``.xlsx``/``.xlsm`` are read as workbooks, anything else as delimited text;
        a workbook saved under a ``.csv`` name is recognised by its content.
    sheet : str, optional
        Worksheet name (XLSX); the first sheet when omitted.
    layout : {'auto', 'wide', 'long'}
        Table shape; ``'auto'`` decides from the header names.
    subgroup_column : str, optional
        Column holding the subgroup label of each row. Detected by name when omitted.
    subgroup_size : int, optional
        Consecutive values form subgroups of this size (exclusive with `subgroup_column`).
    characteristic_column, value_column : str, optional
        Columns of a long table (implies ``layout='long'``).
    time_column, note_column : str, optional
        Columns with the time and a remark of each row; detected by name when omitted.
    stream_column : str, optional
        Column naming the stream of each row (mould cavity, spindle, nest, fixture, head);
        detected by name when omitted ('Cavity', 'Nest', 'Spindle', 'Stream', 'Kavität'...).
        Each characteristic then carries ``streams``, one label per value.
    encoding : str, optional
        Text encoding of a CSV file; detected when omitted.
    max_bytes : int, optional
        Refuse files larger than this.

    Returns
    -------
    Measurements
        See :class:`Measurements` and :class:`CharacteristicData` for the fields.

    Raises
    ------
    DataFileError
        For every problem with the file; the message names the file, row, column and value.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "bore.csv").write_text(
    ...     "Stichprobe;Bohrung [mm];Bemerkung\\n1;10,02;\\n1;10,01;\\n2;9,98;Werkzeugwechsel\\n"
    ...     "2;;\\n", encoding="utf-8")
    >>> m = read_measurements(folder / "bore.csv")
    >>> m.layout, m.subgroup_source, m.names
    ('wide', 'column', ('Bohrung',))
    >>> bore = m.get("Bohrung")
    >>> bore.unit, bore.values.tolist()[:3], bore.n_missing, bore.subgroup_sizes
    ('mm', [10.02, 10.01, 9.98], 1, {'1': 2, '2': 1})
    >>> bore.rows.tolist()
    [2, 3, 4, 5]
    """
    if not isinstance(path, str | os.PathLike):
        raise StudyInputError(
            f"`path` must be the file's path (text or Path), not {type(path).__name__}; for "
            "file content in memory use read_measurements_bytes(data, filename)", value=path,
        )
    p = Path(path)
    if not p.exists():
        raise DataFileError(
            "the file does not exist. Check the path and the file name.", file=str(path)
        )
    if p.is_dir():
        raise DataFileError("this is a folder, not a file. Give the path of a CSV or XLSX file.",
                            file=str(path))
    st = p.stat()  # stat does not open the file: a pipe or device is refused before reading
    if not stat.S_ISREG(st.st_mode):
        kind = ("a named pipe (FIFO)" if stat.S_ISFIFO(st.st_mode) else
                "a device" if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else
                "a socket" if stat.S_ISSOCK(st.st_mode) else "not a regular file")
        raise DataFileError(
            f"this is {kind}, not a measurement file; studykit reads only regular files (a "
            "pipe or device could block or never end). Save the measurements to a CSV or XLSX "
            "file and give its path.",
            file=str(path),
        )
    size = st.st_size
    _check_size(size, max_bytes, p.name)
    src = _Source(name=p.name, path=p, data=None, size=size)
    return _read(src, sheet=sheet, layout=layout, subgroup_column=subgroup_column,
                 subgroup_size=subgroup_size, characteristic_column=characteristic_column,
                 value_column=value_column, time_column=time_column, note_column=note_column,
                 encoding=encoding, stream_column=stream_column)


def read_measurements_bytes(data: bytes, filename: str, **options) -> Measurements:
    """Read measurements from the raw bytes of an uploaded file.

    Parameters
    ----------
    data : bytes
        File content as uploaded.
    filename : str
        The file's name (used for messages and to tell CSV from XLSX).
    **options
        The keyword options of :func:`read_measurements`.

    Returns
    -------
    Measurements

    Examples
    --------
    >>> m = read_measurements_bytes(b"Torque (Nm)\\n5.1\\n5.3\\n5.2\\n", "torque.csv")
    >>> m.get("Torque").values.tolist(), m.subgroup_source
    ([5.1, 5.3, 5.2], 'none')
    """
    if isinstance(data, bytearray | memoryview):
        data = bytes(data)
    if not isinstance(data, bytes):
        raise DataFileError(
            f"expected the file content as bytes, got {type(data).__name__}.", file=filename
        )
    name = Path(str(filename)).name or "upload"
    max_bytes = options.pop("max_bytes", None)
    _check_size(len(data), max_bytes, name)
    src = _Source(name=name, path=None, data=data, size=len(data))
    return _read(src, **options)


def _check_size(size: int, max_bytes: int | None, name: str) -> None:
    if max_bytes is not None and size > max_bytes:
        raise DataFileError(
            f"the file is {_human_size(size)}, more than the limit of {_human_size(max_bytes)}. "
            "Remove columns or rows that the study does not need, or split the file by "
            "characteristic, and load it again.",
            file=name, value=size,
        )


def _human_size(n: int) -> str:
    if n >= 1024 * 1024:
        return f"{n / (1024 * 1024):.1f} MB"
    if n >= 1024:
        return f"{n / 1024:.1f} kB"
    return f"{n} bytes"


# ----------------------------------------------------------------------------------------------
# raw source: hashing, kind, encoding


@dataclass
class _Source:
    name: str
    path: Path | None
    data: bytes | None
    size: int
    sha256: str = ""
    kind: str = "csv"
    encoding: str | None = None
    encoding_label: str = ""
    sample: str = ""
    sample_truncated: bool = False
    encoding_given: bool = False

    def blocks(self) -> Iterator[bytes]:
        if self.data is not None:
            for i in range(0, len(self.data), _READ_BLOCK):
                yield self.data[i : i + _READ_BLOCK]
        else:
            with open(self.path, "rb") as fh:
                while True:
                    b = fh.read(_READ_BLOCK)
                    if not b:
                        return
                    yield b

    def binary(self):
        return io.BytesIO(self.data) if self.data is not None else open(self.path, "rb")  # noqa: SIM115


_UNDEFINED_CP1252 = (b"\x81", b"\x8d", b"\x8f", b"\x90", b"\x9d")


def _inspect(src: _Source, encoding: str | None) -> None:
    """One pass over the bytes: digest, kind, encoding and a decoded sample."""
    digest = hashlib.sha256()
    head = b""
    utf8 = codecs.getincrementaldecoder("utf-8")()
    utf8_ok = True
    has_nul = False
    cp1252_ok = True
    want = _SAMPLE_BYTES
    for block in src.blocks():
        digest.update(block)
        if len(head) < want:
            used = want - len(head)
            head += block[:used]
            if len(head) >= want and want < _HEADER_MAX_BYTES and head.count(b"\n") < 3:
                want = _HEADER_MAX_BYTES  # a very wide header: read on to its end
                head += block[used : used + want - len(head)]
        if utf8_ok:
            try:
                utf8.decode(block)
            except UnicodeDecodeError:
                utf8_ok = False
        if not has_nul and b"\x00" in block:
            has_nul = True
        if cp1252_ok and any(b in block for b in _UNDEFINED_CP1252):
            cp1252_ok = False
    if utf8_ok:
        try:
            utf8.decode(b"", final=True)
        except UnicodeDecodeError:
            utf8_ok = False
    src.sha256 = digest.hexdigest()

    if src.size == 0 or not head.strip(b" \t\r\n\x00\xef\xbb\xbf\xff\xfe"):
        raise DataFileError(
            "the file is empty. Export the measurements again: the first row must name the "
            "columns and each following row holds the values of one part.",
            file=src.name,
        )
    suffix = Path(src.name).suffix.lower()
    if head.startswith(b"PK\x03\x04"):
        src.kind = "xlsx"
        return
    if head.startswith(b"\xd0\xcf\x11\xe0"):
        raise DataFileError(
            "this is an old-style Excel .xls workbook or a password-protected workbook, which "
            "studykit does not read. Open it in the spreadsheet program, remove the password if "
            "there is one, and save it as .xlsx (Excel workbook) or as CSV.",
            file=src.name,
        )
    if suffix in (".xlsx", ".xlsm"):
        raise DataFileError(
            "the file has an Excel name but is not an Excel workbook (it is not a .xlsx "
            "package). Open it in the spreadsheet program and save it again as .xlsx, or "
            "rename it to .csv if it is a text export.",
            file=src.name,
        )
    src.kind = "csv"

    if encoding:
        try:
            codecs.lookup(encoding)
        except LookupError:
            raise DataFileError(
                f"'{encoding}' is not a known text encoding. Use e.g. 'utf-8', 'cp1252' or "
                "'utf-16', or leave the encoding out to have it detected.",
                file=src.name, value=encoding,
            ) from None
        enc, label = encoding, encoding
        src.encoding_given = True
    elif head.startswith(codecs.BOM_UTF8):
        enc, label = "utf-8-sig", "UTF-8 with BOM"
    elif head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        enc, label = "utf-16", "UTF-16 with BOM"
    elif has_nul and _looks_utf16(head):
        enc = "utf-16-le" if head[1:2] == b"\x00" else "utf-16-be"
        label = "UTF-16 without BOM"
    elif has_nul:
        _raise_binary(src, head.index(b"\x00") if b"\x00" in head else None)
    elif utf8_ok:
        enc, label = "utf-8", "UTF-8"
    elif cp1252_ok:
        enc, label = "cp1252", "Windows-1252 (Latin-1)"
    else:
        enc, label = "latin-1", "Latin-1 (ISO-8859-1)"
    src.encoding, src.encoding_label = enc, label

    dec = codecs.getincrementaldecoder(enc)(errors="replace")
    text = dec.decode(head, final=len(head) >= src.size)
    if text.startswith("\ufeff"):
        text = text[1:]
    src.sample = text
    src.sample_truncated = len(head) < src.size
    bad = sum(1 for ch in text if (ord(ch) < 32 and ch not in "\t\r\n") or ch == "\ufffd")
    if text and (bad > max(2, 0.005 * len(text)) or "\x00" in text):
        first = next(i for i, ch in enumerate(text)
                     if (ord(ch) < 32 and ch not in "\t\r\n") or ch == "\ufffd")
        _raise_binary(src, first)


def _looks_utf16(head: bytes) -> bool:
    n = min(len(head), 400) // 2 * 2
    if n < 4:
        return False
    even = head[0:n:2].count(0)
    odd = head[1:n:2].count(0)
    return max(even, odd) > 0.4 * n / 2 and min(even, odd) < 0.05 * n / 2


def _raise_binary(src: _Source, offset) -> None:
    where = f" (unreadable bytes near byte {offset})" if offset is not None else ""
    raise DataFileError(
        f"the file does not look like a text table{where}. It may be damaged, or a program "
        "file or picture saved with a .csv name. Export the measurements from the spreadsheet "
        "as CSV (comma- or semicolon-separated) or save them as .xlsx, and load that file.",
        file=src.name,
    )


# ----------------------------------------------------------------------------------------------
# the table: header + chunks of cells, from CSV or XLSX


@dataclass
class _Table:
    header: list            # header cell texts (stripped)
    header_row: int         # spreadsheet row number of the header
    open_chunks: Callable   # () -> iterator of (rows: int ndarray, columns: list of arrays)
    separator: str | None = None
    decimal: str | None = None
    text_cells: bool = True  # every cell is a str (CSV); XLSX cells are python values
    merged_fill: dict = field(default_factory=dict)  # column index -> list of (r1, r2)
    sheet: str | None = None
    # (float column indices) -> iterator like open_chunks, with those columns already float
    fast_chunks: Callable | None = None
    close: Callable = lambda: None
    title_rows: tuple | None = None  # (first, last) spreadsheet rows skipped above the header


def _sample_lines(src: _Source) -> list[str]:
    lines = src.sample.splitlines()
    if src.sample_truncated and lines:
        lines = lines[:-1]
    return lines


def _csv_rows(lines: list[str], delimiter: str, file=None) -> list[list[str]]:
    """The cells of sample lines; a field may be as long as the sample (a wide header is one
    field for a separator that does not split it), beyond the csv module's 128 KiB default."""
    old = csv.field_size_limit()
    csv.field_size_limit(max(old, _HEADER_MAX_BYTES + 1))
    try:
        return list(csv.reader(lines, delimiter=delimiter))
    except csv.Error as exc:
        raise DataFileError(
            f"the first lines cannot be split into cells ({exc}). Check quotes (\") and "
            "separators, or save the file again from the spreadsheet as CSV.", file=file,
        ) from None
    finally:
        csv.field_size_limit(old)


def _sniff(lines: list[str], start: int, file=None) -> tuple[str, int]:
    """Separator and index of the header line.

    The header is the first line with two or more filled cells when only title lines (one
    filled cell each) stand before it; the separator is the one that splits the header and the
    lines below it into the same number of cells (tab, then semicolon, then comma).
    """
    idx = [i for i in range(start, len(lines)) if lines[i].strip()][:60]
    if not idx:
        return ",", start
    delims = ("\t", ";", ",")
    recs = {d: _csv_rows([lines[i] for i in idx], delimiter=d, file=file) for d in delims}

    def filled(rec):
        return sum(1 for c in rec if c.strip())

    for d in delims:
        r = recs[d]
        k = next((m for m in range(min(10, len(r))) if filled(r[m]) >= 2), None)
        if k is None or any(filled(r[m]) > 1 for m in range(k)):
            continue
        if k > 0 and all(_text_number(c) is not None for c in r[k] if c.strip()):
            continue  # numbers, not a header below a title
        if all(len(x) == len(r[k]) for x in r[k:]):
            return d, idx[k]
    # one column of numbers with decimal commas: nothing to split
    semi = recs[";"]
    if len(recs[","][0]) == 1 and all(len(x) == 1 for x in semi) and any(_COMMA_DECIMAL_RE.match(x[0].strip())
                                               for x in semi[1:]):
        return ";", idx[0]
    best, best_cols = ",", 1
    for d in delims:
        if len(recs[d][0]) > best_cols:
            best, best_cols = d, len(recs[d][0])
    return best, idx[0]


def _open_csv(src: _Source) -> _Table:
    import pandas as pd

    lines = _sample_lines(src)
    if not lines and src.sample_truncated:
        raise DataFileError(
            f"the first line is longer than {_human_size(_HEADER_MAX_BYTES)} without a line "
            "break, so no header row can be found. Check that the file is a table with one "
            "row per line (a file with only carriage returns or no line breaks at all is not), "
            "or save it again from the spreadsheet as CSV.",
            file=src.name, row=1,
        )
    header_index = next((i for i, ln in enumerate(lines) if ln.strip(" \t,;")), None)
    if header_index is None:
        raise DataFileError(
            "the file holds no header and no values (only empty lines or separators). Export "
            "the measurements again with the column names in the first row.",
            file=src.name,
        )
    first_line = header_index
    sep, header_index = _sniff(lines, header_index, src.name)
    header = [h.strip() for h in _csv_rows([lines[header_index]], delimiter=sep, file=src.name)[0]]

    # decimal sign from the sample cells
    n_comma = n_point = 0
    for rec in _csv_rows(lines[header_index + 1 : header_index + 200], delimiter=sep,
                          file=src.name):
        for cell in rec:
            cell = cell.strip()
            if _COMMA_DECIMAL_RE.match(cell):
                n_comma += 1
            elif _POINT_DECIMAL_RE.match(cell):
                n_point += 1
    decimal = "," if n_comma > n_point else "."

    def chunks():
        handle = src.binary()
        try:
            reader = pd.read_csv(
                handle, sep=sep, header=None, skiprows=header_index, dtype=object,
                keep_default_na=False, na_filter=False, skip_blank_lines=False,
                chunksize=_CHUNK_ROWS, encoding=src.encoding, quotechar='"', engine="c",
                encoding_errors="strict",
            )
            start = header_index + 1  # spreadsheet row of the reader's first line (the header)
            first = True
            for frame in reader:
                cols = [frame[c].to_numpy(dtype=object) for c in frame.columns]
                rows = np.arange(start, start + len(frame), dtype=np.int64)
                start += len(frame)
                if first:
                    cols = [c[1:] for c in cols]
                    rows = rows[1:]
                    first = False
                yield rows, cols
        except pd.errors.ParserError as exc:
            raise _translate_parser_error(exc, src, header, sep) from None
        except UnicodeDecodeError as exc:
            raise DataFileError(
                f"the text cannot be read as {src.encoding_label or src.encoding} ({exc.reason}). "
                + ("Leave the encoding out to have it detected, or give the one the file was "
                   "saved with (e.g. 'cp1252' or 'utf-16')." if src.encoding_given else
                   "Save the file as UTF-8 CSV, or give its encoding explicitly."),
                file=src.name,
            ) from None
        finally:
            handle.close()

    def fast_chunks(float_cols):
        """Numbers parsed by pandas' C reader; any doubt raises _Fallback."""
        width = len(header)
        handle = src.binary()
        try:
            reader = pd.read_csv(
                handle, sep=sep, header=None, skiprows=header_index + 1, names=list(range(width)),
                dtype={j: (np.float64 if j in float_cols else object) for j in range(width)},
                decimal=decimal, keep_default_na=False, na_values=[""], na_filter=True,
                skip_blank_lines=False, chunksize=_CHUNK_ROWS, encoding=src.encoding,
                quotechar='"', engine="c", encoding_errors="strict",
            )
            start = header_index + 2
            for frame in reader:
                if frame.shape[1] != width or not frame.index.equals(
                        pd.RangeIndex(start - header_index - 2,
                                      start - header_index - 2 + len(frame))):
                    raise _Fallback
                cols = []
                for j in range(width):
                    if j in float_cols:
                        cols.append(np.array(frame[j], dtype=np.float64))
                    else:
                        cols.append(frame[j].fillna("").to_numpy(dtype=object))
                rows = np.arange(start, start + len(frame), dtype=np.int64)
                start += len(frame)
                yield rows, cols
        except (ValueError, TypeError, OverflowError, pd.errors.ParserError,
                UnicodeDecodeError):
            raise _Fallback from None
        finally:
            handle.close()

    return _Table(header=header, header_row=header_index + 1, open_chunks=chunks,
                  fast_chunks=fast_chunks, separator=sep, decimal=decimal, text_cells=True,
                  title_rows=(first_line + 1, header_index) if header_index > first_line else None)


def _translate_parser_error(exc, src: _Source, header: list, sep: str) -> DataFileError:
    msg = str(exc)
    m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", msg)
    sep_name = {",": "comma", ";": "semicolon", "\t": "tab"}[sep]
    if m:
        row, saw = int(m.group(2)), int(m.group(3))
        hint = (
            " In a comma-separated file a decimal comma splits a number in two: save the file "
            "with ';' as separator, or use '.' as decimal sign."
            if sep == ","
            else " Look for a stray separator inside a value or a note."
        )
        return DataFileError(
            f"this row has {saw} cells but the header has {len(header)} columns "
            f"(separator: {sep_name}).{hint}",
            file=src.name, row=row, value=saw,
        )
    return DataFileError(
        f"the table cannot be split into cells ({msg.strip()}). Check quotes (\") and "
        f"separators ({sep_name}) in the file, or save it again from the spreadsheet as CSV.",
        file=src.name,
    )


#: An XLSX file is a zip package. Before it is parsed, the sizes its members declare are
#: checked (zipfile never unpacks more than a member declares, so the declared sizes bound the
#: work): at most XLSX_MAX_UNPACKED bytes in all (a full sheet of 1,048,576 rows and a few
#: columns unpacks to well under this), at most XLSX_MAX_MEMBERS members, and no member above
#: 1 MiB unpacking more than XLSX_MAX_RATIO times its packed size. Spreadsheet programs pack
#: sheets about 5 to 15 times (measured on workbooks written by openpyxl); a "zip bomb" packs
#: hundreds to a thousand times. Our limits; common practice, no source.
XLSX_MAX_UNPACKED = 1024 * 1024 * 1024
XLSX_MAX_RATIO = 100
XLSX_MAX_MEMBERS = 10_000
_XLSX_RATIO_FROM = 1024 * 1024


def _check_xlsx_package(src: _Source) -> None:
    """Refuse a package whose members would unpack to too much (module constants above)."""
    handle = src.binary()
    try:
        with zipfile.ZipFile(handle) as zf:
            infos = zf.infolist()
    except Exception as exc:  # noqa: BLE001 - any failure of a damaged package is a user error
        raise _xlsx_open_failure(src, exc) from None
    finally:
        handle.close()
    if len(infos) > XLSX_MAX_MEMBERS:
        raise DataFileError(
            f"the workbook package holds {len(infos)} parts, more than the {XLSX_MAX_MEMBERS} "
            "a spreadsheet has; it is not read. Export the measurements as CSV, or save them "
            "in a new workbook.",
            file=src.name, value=len(infos),
        )
    for info in infos:
        if (info.file_size > _XLSX_RATIO_FROM
                and info.file_size > XLSX_MAX_RATIO * max(info.compress_size, 1)):
            ratio = info.file_size / max(info.compress_size, 1)
            raise DataFileError(
                f"part '{_show(info.filename)}' of the workbook unpacks from "
                f"{_human_size(info.compress_size)} to {_human_size(info.file_size)} "
                f"({ratio:.0f} times; spreadsheet programs pack about 5 to 15 times, the limit "
                f"is {XLSX_MAX_RATIO}). A file packed this tightly is built to exhaust memory "
                "(a 'zip bomb') and is not read. If it is a genuine export, save the "
                "measurements as CSV and load that file.",
                file=src.name, value=info.filename,
            )
    total = sum(i.file_size for i in infos)
    if total > XLSX_MAX_UNPACKED:
        raise DataFileError(
            f"the workbook unpacks to {_human_size(total)}, more than the limit of "
            f"{_human_size(XLSX_MAX_UNPACKED)}. Save the measurements as CSV (read in pieces, "
            "without this limit), or split the workbook.",
            file=src.name, value=total,
        )


def _xlsx_reason(exc: BaseException) -> str:
    """Plain words for what a damaged workbook's parser ran into."""
    import xml.parsers.expat
    from xml.etree.ElementTree import ParseError

    text = _show(exc) if str(exc) else type(exc).__name__
    if isinstance(exc, zipfile.BadZipFile | zlib.error | EOFError):
        return f"the zip package is damaged or cut short: {text}"
    if isinstance(exc, ParseError | xml.parsers.expat.ExpatError | SyntaxError):
        return f"its XML is malformed: {text}"
    if isinstance(exc, KeyError):
        return f"a part it refers to is missing: {text}"
    if isinstance(exc, IndexError):
        return f"a cell refers to a shared text or style entry that does not exist: {text}"
    if isinstance(exc, ValueError | TypeError | ArithmeticError):
        return f"a cell, cell reference or style entry holds an invalid value: {text}"
    if isinstance(exc, MemoryError):
        return "it needs more memory than is available"
    return f"{type(exc).__name__}: {text}"


def _xlsx_open_failure(src: _Source, exc: BaseException) -> DataFileError:
    return DataFileError(
        f"the workbook cannot be opened ({_xlsx_reason(exc)}). It may be damaged or protected "
        "with a password. Open it in the spreadsheet program and save it again as .xlsx, or "
        "export the measurements as CSV.",
        file=src.name,
    )


def _xlsx_failure(src: _Source, exc: BaseException, *, sheet=None, row=None) -> DataFileError:
    """Any failure of the workbook parser as one user message (file, sheet and row if known)."""
    if isinstance(exc, StudyInputError):
        return exc
    where = f" near row {row}" if row is not None else ""
    return DataFileError(
        f"the workbook is damaged and cannot be read{where}: {_xlsx_reason(exc)}. Open it in "
        "the spreadsheet program and save it again as .xlsx (or export the measurements as "
        "CSV), then load that file.",
        file=src.name, sheet=sheet,
    )


def _open_xlsx(src: _Source, sheet: str | None, notes: list) -> _Table:
    _check_xlsx_package(src)
    try:
        return _open_xlsx_inner(src, sheet, notes)
    except StudyInputError:
        raise
    except Exception as exc:  # noqa: BLE001 - a damaged workbook can fail anywhere in the parser
        raise _xlsx_failure(src, exc, sheet=sheet) from None


def _open_xlsx_inner(src: _Source, sheet: str | None, notes: list) -> _Table:
    import openpyxl

    handle = src.binary()
    try:
        wb = openpyxl.load_workbook(handle, read_only=True, data_only=True)
        wb_close = wb.close

        def _close():
            wb_close()
            handle.close()

        wb.close = _close
    except Exception as exc:  # noqa: BLE001 - any parser failure on a damaged workbook
        handle.close()
        raise _xlsx_open_failure(src, exc) from None
    names = list(wb.sheetnames)
    if sheet is None:
        if not names:
            wb.close()
            raise DataFileError("the workbook has no worksheets.", file=src.name)
        sheet_name = names[0]
        if len(names) > 1:
            notes.append(
                f"read sheet '{sheet_name}', the first of {len(names)} sheets ("
                + ", ".join(f"'{n}'" for n in names) + "); choose another with `sheet`."
            )
    else:
        matches = [n for n in names if n == sheet] or [
            n for n in names if n.strip().casefold() == str(sheet).strip().casefold()
        ]
        if not matches:
            wb.close()
            raise DataFileError(
                f"the workbook has no sheet named '{sheet}'. Its sheets are: "
                + ", ".join(f"'{n}'" for n in names) + ". Give one of these names.",
                file=src.name, value=sheet,
            )
        sheet_name = matches[0]
    ws = wb[sheet_name]
    if hasattr(ws, "reset_dimensions"):
        ws.reset_dimensions()  # some writers store wrong dimensions; read every cell
    if src.path is not None and Path(src.name).suffix.lower() not in (".xlsx", ".xlsm"):
        notes.append("the file is an Excel workbook despite its name; read it as .xlsx")

    try:
        merged = _merged_ranges(wb, ws)
        header, header_row, first_row = _xlsx_header(ws)
    except Exception as exc:  # noqa: BLE001 - any parser failure on a damaged workbook
        wb.close()
        raise _xlsx_failure(src, exc, sheet=sheet_name) from None
    if header is None:
        wb.close()
        raise DataFileError(
            f"sheet '{sheet_name}' is empty. Put the column names in the first row and the "
            "measurements below them, or choose the sheet that holds them.",
            file=src.name, value=sheet_name,
        )
    while header and header[-1] == "":
        header.pop()
    return _xlsx_table(src, wb, ws, sheet_name, merged, header, header_row, first_row)


def _xlsx_header(ws):
    """(header cells, header row, first filled row) of a sheet; header None when empty."""
    header = None
    header_row = 0
    first_row = None
    for r, values in enumerate(ws.iter_rows(values_only=True), start=1):
        n_filled = sum(1 for v in (values or ()) if v is not None and str(v).strip() != "")
        if n_filled == 0:
            if first_row is not None and r - first_row > 10:
                break
            continue
        if first_row is None:
            first_row = r
            header = [("" if v is None else _cell_text(v)) for v in values]
            header_row = r
        if n_filled >= 2:
            header = [("" if v is None else _cell_text(v)) for v in values]
            header_row = r
            break
        if r - first_row >= 10:
            break
    return header, header_row, first_row


def _xlsx_table(src, wb, ws, sheet_name, merged, header, header_row, first_row) -> _Table:
    fill: dict[int, list] = {}
    for (r1, c1, r2, c2) in merged:
        if r1 <= header_row <= r2 and (c1 != c2 or r1 != r2):
            span = f"{_col_letter(c1 - 1)}{r1}:{_col_letter(c2 - 1)}{r2}"
            wb.close()
            raise DataFileError(
                f"the header cells {span} are merged. Every column needs its own name in the "
                "header row: unmerge these cells and write a name into each column (for example "
                "'Diameter 1', 'Diameter 2'), or put the header in a single row.",
                file=src.name, row=header_row, column=header[c1 - 1] if c1 - 1 < len(header) else None,
                value=span,
            )
        if r1 > header_row and c1 == c2:
            fill.setdefault(c1 - 1, []).append((r1, r2))

    width = len(header)

    def chunks():
        at = [header_row]  # the last row read, for the message if the next one fails
        try:  # a damaged sheet fails while its rows are read: say where
            yield from xlsx_rows(at)
        except StudyInputError:
            raise
        except Exception as exc:  # noqa: BLE001 - any parser failure on a damaged sheet
            raise _xlsx_failure(src, exc, sheet=sheet_name, row=at[0] + 1) from None

    def xlsx_rows(at):
        rows_buf: list[int] = []
        cols_buf: list[list] = [[] for _ in range(width)]
        r = header_row
        for values in ws.iter_rows(min_row=header_row + 1, values_only=True):
            r += 1
            at[0] = r
            rows_buf.append(r)
            nv = len(values)
            for j in range(width):
                v = values[j] if j < nv else None
                if v is None:
                    v = ""
                elif isinstance(v, str):
                    v = v.strip()
                cols_buf[j].append(v)
            if nv > width:
                for j in range(width, nv):
                    v = values[j]
                    if v is not None and str(v).strip() != "":
                        raise DataFileError(
                            f"there is a value ('{_show(v)}') in column "
                            f"{_col_letter(j)}, which has no name in the header row. "
                            "Give the column a name in the header or delete the value.",
                            file=src.name, row=r, column=_col_letter(j), value=v,
                        )
            if len(rows_buf) >= _XLSX_CHUNK_ROWS:
                yield _xlsx_chunk(rows_buf, cols_buf)
                rows_buf = []
                cols_buf = [[] for _ in range(width)]
        if rows_buf:
            yield _xlsx_chunk(rows_buf, cols_buf)

    return _Table(header=header, header_row=header_row, open_chunks=chunks, text_cells=False,
                  merged_fill=fill, sheet=sheet_name, close=wb.close,
                  title_rows=(first_row, header_row - 1) if header_row > first_row else None)


def _xlsx_chunk(rows_buf, cols_buf):
    rows = np.asarray(rows_buf, dtype=np.int64)
    cols = []
    for c in cols_buf:
        a = np.empty(len(c), dtype=object)
        a[:] = c
        cols.append(a)
    return rows, cols


def _merged_ranges(wb, ws) -> list[tuple[int, int, int, int]]:
    """Merged ranges of a read-only worksheet, read from the sheet's XML."""
    from openpyxl.utils.cell import range_boundaries

    archive = getattr(wb, "_archive", None)
    path = getattr(ws, "_worksheet_path", None)
    if archive is None or path is None:
        return []
    out = []
    pattern = re.compile(rb"<(?:\w+:)?mergeCell\s+ref=\"([A-Z]+[0-9]+:[A-Z]+[0-9]+)\"")
    tail = b""
    with archive.open(path) as fh:
        while True:
            block = fh.read(_READ_BLOCK)
            if not block:
                break
            buf = tail + block
            for m in pattern.finditer(buf):
                c1, r1, c2, r2 = range_boundaries(m.group(1).decode())
                out.append((r1, c1, r2, c2))
            tail = buf[-300:]
    return sorted(set(out))


def _cell_text(v) -> str:
    if isinstance(v, str):
        return v.strip()
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    if isinstance(v, _dt.datetime):
        return v.isoformat(sep=" ")
    return str(v)


# ----------------------------------------------------------------------------------------------
# cell conversion


class _Ctx:
    def __init__(self, src: _Source, table: _Table):
        self.file = src.name
        self.decimal = table.decimal
        self.text_cells = table.text_cells
        self.text_numbers: dict[str, int] = {}


#: labels of a spreadsheet's summary rows (totals, means...) that are not measurements
_SUMMARY_WORDS = frozenset({
    "total", "totals", "grand total", "sum", "sums", "subtotal", "mean", "average", "avg",
    "median", "min", "max", "minimum", "maximum", "range", "std", "stdev", "std dev", "sd",
    "sigma", "count", "x-bar", "xbar", "cpk", "ppk",
    "summe", "gesamt", "gesamtsumme", "mittelwert", "mittel", "durchschnitt", "anzahl",
    "spannweite", "standardabweichung",
})


#: the subset that is unmistakable in any text column (no first names such as 'Max')
_STRONG_SUMMARY_WORDS = frozenset({
    "total", "totals", "grand total", "sum", "subtotal", "mean", "average", "summe", "gesamt",
    "gesamtsumme", "mittelwert", "durchschnitt",
})


def _summary_word(text, words=_SUMMARY_WORDS) -> bool:
    """True when a label cell reads like the label of a totals/summary row ('Total:', 'Mean')."""
    if not isinstance(text, str):
        return False
    key = text.strip()
    if not key or len(key) > 24 or key[0].isdigit():  # quick exit for the usual labels
        return False
    key = re.sub(r"\s+", " ", key.rstrip(":.=").strip()).casefold()
    return key in words


def _check_text_column(file, cells, rows, column) -> None:
    """A text column (part numbers, operators...) labelling a row 'Total' or 'Mean'."""
    import pandas as pd

    uniq = pd.unique(np.asarray(cells, dtype=object))
    hits = {u for u in uniq.tolist() if _summary_word(u, _STRONG_SUMMARY_WORDS)}
    if hits:
        i = next(i for i, v in enumerate(cells.tolist()) if v in hits)
        raise _summary_row_error(file, rows[i], column, str(cells[i]))


def _summary_row_error(file, row: int, column: str, label: str) -> DataFileError:
    return DataFileError(
        f"'{_show(label)}' labels a summary row (totals, means...), not a part or subgroup: its "
        "numbers are results, not measurements, and would be analysed as data. Delete the row "
        "(and any other summary rows) from the export.",
        file=file, row=int(row), column=column, value=label,
    )


def _check_summary_rows(src, characteristics, header, sg_idx, t_idx) -> None:
    """Refuse a totals/mean row at the foot of a table (labelled 'Total', 'Mean', 'Summe'...)
    in the subgroup or time column: its numbers would otherwise enter the analysis."""
    import pandas as pd

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
                columns.append((header[t_idx], c.times, pd.unique(c.times).tolist()))
        for column, cells, uniq in columns:
            hits = {str(u) for u in uniq if _summary_word(str(u))}
            if hits:
                i = next(i for i, v in enumerate(cells.tolist()) if str(v) in hits)
                raise _summary_row_error(src.name, c.rows[i], column, str(cells[i]))


def _check_unsaved_formulas(src, table, targets: dict[int, int] | None = None, *,
                            damage_known: bool = False) -> None:
    """See :func:`_check_unsaved_formulas_inner`. A workbook the parser fails on is reported
    as damaged, unless ``damage_known`` (the first reading already failed with a message
    that says where: that message stands)."""
    try:
        _check_unsaved_formulas_inner(src, table, targets)
    except StudyInputError:
        raise
    except Exception as exc:  # noqa: BLE001 - any parser failure on a damaged workbook
        if damage_known:
            return
        raise _xlsx_failure(src, exc, sheet=table.sheet) from None


def _check_unsaved_formulas_inner(src, table, targets: dict[int, int] | None = None) -> None:
    """Refuse formula cells whose results were never saved in the workbook.

    A workbook written by a program that does not calculate (a script, some exports) stores
    formulas without their results; read for values, those cells look empty, so a computed
    column would be skipped as empty or its cells counted as missing. Only called when some
    cells or columns came out empty, since it reads the sheet a second time. ``targets``
    ``{column index: row}`` names the one cell per column to look at (the first empty one):
    then only the rows down to the last target are read, and only for formulas.
    """
    import openpyxl

    if targets:
        handle = src.binary()
        try:
            wb = openpyxl.load_workbook(handle, read_only=True, data_only=False)
        except Exception:  # noqa: BLE001 - the first reading worked; this is only a check
            handle.close()
            return
        try:
            ws = wb[table.sheet]
            width = len(table.header)
            start, stop = table.header_row + 1, max(targets.values())
            rows = ws.iter_rows(min_row=start, max_row=stop, max_col=width, values_only=True)
            for r, formulas in enumerate(rows, start=start):
                for j, row in targets.items():
                    f = formulas[j] if formulas is not None and j < len(formulas) else None
                    if row == r and isinstance(f, str) and f.startswith("="):
                        raise DataFileError(
                            f"the cell holds the formula '{_show(f)}' but no stored result: the "
                            "workbook was saved by a program that does not calculate formulas, "
                            "so the value is unknown. Open the workbook in a spreadsheet "
                            "program, let it calculate, save it, and load it again (or paste "
                            "the values).",
                            file=src.name, row=r, column=table.header[j] or _col_letter(j),
                            value=f,
                        )
        finally:
            wb.close()
            handle.close()
        return

    handle, handle_values = src.binary(), src.binary()
    try:
        wb = openpyxl.load_workbook(handle, read_only=True, data_only=False)
        wb_values = openpyxl.load_workbook(handle_values, read_only=True, data_only=True)
    except Exception:  # noqa: BLE001 - the first reading worked; this is only a check
        handle.close()
        handle_values.close()
        return
    try:
        ws, ws_values = wb[table.sheet], wb_values[table.sheet]
        width = len(table.header)
        start = table.header_row + 1
        pairs = zip(ws.iter_rows(min_row=start, max_col=width, values_only=True),
                    ws_values.iter_rows(min_row=start, max_col=width, values_only=True),
                    strict=False)
        for r, (formulas, values) in enumerate(pairs, start=start):
            for j, f in enumerate(formulas or ()):
                v = values[j] if values is not None and j < len(values) else None
                if v is None and isinstance(f, str) and f.startswith("="):
                    raise DataFileError(
                        f"the cell holds the formula '{_show(f)}' but no stored result: the "
                        "workbook was saved by a program that does not calculate formulas, so "
                        "the value is unknown. Open the workbook in a spreadsheet program, let "
                        "it calculate, save it, and load it again (or paste the values).",
                        file=src.name, row=r, column=table.header[j] or _col_letter(j), value=f,
                    )
    finally:
        wb.close()
        wb_values.close()
        handle.close()
        handle_values.close()


def _bad_number(ctx: _Ctx, raw, row: int, column: str) -> DataFileError:
    text = str(raw).strip()
    if _summary_word(text):
        return _summary_row_error(ctx.file, row, column, text)
    if _EXCEL_ERROR_RE.match(text):
        why = (f"the cell shows the spreadsheet error '{text}' instead of a value. Fix the "
               "formula that produced it, or clear the cell if the part was not measured.")
    elif _NONFINITE_RE.match(text):
        why = (f"'{text}' is not a measured value. Leave the cell empty where a value is "
               "missing: studykit counts empty cells and reports them.")
    elif ctx.decimal == "," and "." in text and re.match(r"^[+-]?[\d.]+(,\d+)?$", text):
        why = (f"'{text}' uses '.' but this file uses ',' as decimal sign. Use one decimal sign "
               "throughout and no thousands separators.")
    elif ctx.decimal == "." and "," in text and re.match(r"^[+-]?[\d,]+(\.\d+)?$", text):
        why = (f"'{text}' uses ',' but this file uses '.' as decimal sign. Use one decimal sign "
               "throughout and no thousands separators.")
    elif isinstance(raw, bool):
        why = f"'{text}' is a yes/no value, not a measurement. Enter the measured number."
    elif isinstance(raw, _dt.datetime | _dt.date | _dt.time):
        why = (f"the cell holds a date/time ('{text}') where a measurement is expected. If this "
               "column holds times, name it 'Time' or 'Zeit'; otherwise enter the number.")
    else:
        why = (f"'{_show(text)}' is not a number. Measurement cells hold numbers only (no units, "
               "no text; decimal sign '.' or ','). Leave the cell empty for a missing value and "
               "put remarks into a note column (e.g. 'Note' or 'Bemerkung').")
    return DataFileError(why, file=ctx.file, row=int(row), column=column, value=raw)


def _numeric(ctx: _Ctx, cells: np.ndarray, rows: np.ndarray, column: str):
    """Convert one column of cells to float; return (values, empty mask)."""
    import pandas as pd

    n = len(cells)
    if cells.dtype.kind == "f":  # already parsed by the fast reader
        empty = np.isnan(cells)
        if np.isinf(cells).any():
            raise _Fallback
        return cells, empty
    if ctx.text_cells:
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
            x = _text_number(v)
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


def _text_number(text: str) -> float | None:
    t = text.strip().replace("\u00a0", "").replace(" ", "")
    if _COMMA_DECIMAL_RE.match(t):
        t = t.replace(",", ".")
    elif "," in t:
        return None
    try:
        x = float(t)
    except ValueError:
        return None
    return x if math.isfinite(x) and not _NONFINITE_RE.match(t) else None


def _looks_numeric(ctx: _Ctx, cells: np.ndarray) -> tuple[int, int]:
    """(non-empty cells, cells that look like numbers) of a column sample."""
    n_filled = n_num = 0
    for v in cells[:2000]:
        if isinstance(v, str):
            t = v.strip()
            if not t:
                continue
            n_filled += 1
            if _text_number(t) is not None or _NONFINITE_RE.match(t) or _EXCEL_ERROR_RE.match(t):
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


def _labels(cells: np.ndarray, text_cells: bool) -> np.ndarray:
    if text_cells:
        return np.asarray([c.strip() for c in cells], dtype=object)
    out = np.empty(len(cells), dtype=object)
    out[:] = [_cell_text(v) if v != "" else "" for v in cells]
    return out


def _filled(cells: np.ndarray, text_cells: bool) -> np.ndarray:
    if cells.dtype.kind == "f":
        return ~np.isnan(cells)
    if text_cells:
        import pandas as pd

        return (pd.Series(cells, dtype=object).str.strip() != "").to_numpy(dtype=bool)
    return np.fromiter((not (isinstance(v, str) and v == "") for v in cells), bool, len(cells))


# ----------------------------------------------------------------------------------------------
# main reader


def _find_column(header, wanted: str, *, what: str, option: str, src_name: str) -> int:
    for i, h in enumerate(header):
        if h == wanted:
            return i
    folded = str(wanted).strip().casefold()
    for i, h in enumerate(header):
        if h.casefold() == folded or parse_header(h)[0].casefold() == folded:
            return i
    raise DataFileError(
        f"there is no column named '{wanted}' (given as `{option}` for the {what}). The header "
        "has: " + ", ".join(f"'{h}'" for h in header if h) + ". Use one of these names.",
        file=src_name, value=wanted,
    )


def _detect(header, names_set) -> int | None:
    for i, h in enumerate(header):
        if h and _norm_header(h) in names_set:
            return i
    return None


def _read(src: _Source, *, sheet=None, layout="auto", subgroup_column=None, subgroup_size=None,
          characteristic_column=None, value_column=None, time_column=None, note_column=None,
          encoding=None, stream_column=None) -> Measurements:
    if layout not in ("auto", "wide", "long"):
        raise StudyInputError(
            f"`layout` must be 'auto', 'wide' or 'long', not '{layout}'.", value=layout
        )
    if subgroup_size is not None:
        if isinstance(subgroup_size, bool) or not isinstance(subgroup_size, int | np.integer):
            try:
                ok = (not isinstance(subgroup_size, bool)
                      and float(subgroup_size).is_integer())
            except (TypeError, ValueError):
                ok = False
            if not ok:
                raise StudyInputError(
                    f"`subgroup_size` must be a whole number, not '{subgroup_size}'.",
                    value=subgroup_size,
                )
        subgroup_size = int(subgroup_size)
        if subgroup_size < 1:
            raise StudyInputError(
                f"`subgroup_size` must be 1 or more, not {subgroup_size}.", value=subgroup_size
            )
        if subgroup_column is not None:
            raise StudyInputError(
                f"give either `subgroup_column` ('{subgroup_column}') or `subgroup_size` "
                f"({subgroup_size}), not both: subgroups come from a column or from a fixed "
                "size.",
            )
    notes: list[str] = []
    warnings_: list[str] = []
    _inspect(src, encoding)
    if src.kind == "xlsx":
        table = _open_xlsx(src, sheet, notes)
    else:
        if sheet is not None:
            notes.append(f"`sheet` ('{sheet}') was ignored: the file is a text table, not a workbook")
        table = _open_csv(src)
        sep_name = {",": "comma", ";": "semicolon", "\t": "tab"}[table.separator]
        notes.append(
            f"text table: {sep_name}-separated, decimal sign '{table.decimal}', "
            f"encoding {src.encoding_label}"
        )
    if table.title_rows:
        a, b = table.title_rows
        span = f"row {a}" if a == b else f"rows {a} to {b}"
        notes.append(f"{span} above the header look like a title and were skipped; the header "
                     f"is row {table.header_row}")
    try:
        return _read_table(src, table, notes, warnings_, layout=layout,
                           subgroup_column=subgroup_column, subgroup_size=subgroup_size,
                           characteristic_column=characteristic_column,
                           value_column=value_column, time_column=time_column,
                           note_column=note_column, stream_column=stream_column)
    finally:
        table.close()


def _read_table(src, table, notes, warnings_, *, layout, subgroup_column, subgroup_size,
                characteristic_column, value_column, time_column, note_column,
                stream_column=None):
    header = table.header
    hrow = table.header_row

    # --- header checks -------------------------------------------------------------------
    named = [h for h in header if h]
    if named and all(_text_number(h) is not None for h in named):
        raise DataFileError(
            f"the first row holds numbers ('{_show(named[0])}'), not column names. Add a header "
            "row that names each column (e.g. 'Diameter [mm]', 'Subgroup') above the values.",
            file=src.name, row=hrow, value=named[0],
        )
    seen: dict[str, int] = {}
    for j, h in enumerate(header):
        if not h:
            continue
        key = parse_header(h)[0].casefold()
        if key in seen:
            i = seen[key]
            raise DataFileError(
                f"columns {_col_letter(i)} ('{header[i]}') and {_col_letter(j)} ('{h}') have the "
                "same name. Every column needs its own name: rename one of them (for example "
                f"'{parse_header(h)[0]} 2').",
                file=src.name, row=hrow, column=h, value=h,
            )
        seen[key] = j

    # --- roles ---------------------------------------------------------------------------
    def find(wanted, what, option):
        return _find_column(header, wanted, what=what, option=option, src_name=src.name)

    role: dict[int, str] = {}
    if characteristic_column is not None or value_column is not None:
        if layout == "wide":
            raise StudyInputError(
                "`characteristic_column`/`value_column` describe a long table, but "
                "`layout='wide'` was given. Leave `layout` at 'auto' or set it to 'long'."
            )
        layout = "long"
    char_idx = value_idx = None
    if layout in ("auto", "long"):
        char_idx = (find(characteristic_column, "characteristic names", "characteristic_column")
                    if characteristic_column is not None else _detect(header, _CHARACTERISTIC_NAMES))
        value_idx = (find(value_column, "values", "value_column")
                     if value_column is not None else _detect(header, _VALUE_NAMES))
        if layout == "long" and (char_idx is None or value_idx is None):
            missing = "a characteristic column" if char_idx is None else "a value column"
            raise DataFileError(
                f"a long table needs {missing}, and none was found. Name the columns e.g. "
                "'Characteristic'/'Merkmal' and 'Value'/'Messwert', or give them with "
                "`characteristic_column` and `value_column`. The header has: "
                + ", ".join(f"'{h}'" for h in header if h) + ".",
                file=src.name, row=hrow,
            )
        if char_idx is not None and value_idx is not None:
            layout = "long"
            why = "given" if characteristic_column or value_column else "detected"
            notes.append(
                f"long layout ({why}): characteristic names in '{header[char_idx]}', values in "
                f"'{header[value_idx]}'"
            )
        else:
            layout = "wide"
            notes.append(
                "wide layout (detected): one column per characteristic, one row per part, "
                "rows in production order"
            )
    else:
        notes.append("wide layout (given): one column per characteristic, one row per part")
    if layout == "long":
        role[char_idx] = "characteristic"
        role[value_idx] = "value"
        unit_idx = _detect(header, _UNIT_NAMES)
        if unit_idx is not None and unit_idx not in role:
            role[unit_idx] = "unit"

    sg_idx = None
    if subgroup_column is not None:
        sg_idx = find(subgroup_column, "subgroup labels", "subgroup_column")
    else:
        cand = _detect(header, _SUBGROUP_NAMES)
        if cand is not None and cand not in role:
            if subgroup_size is not None:
                notes.append(
                    f"column '{header[cand]}' looks like a subgroup column but was not used, "
                    f"because a subgroup size ({subgroup_size}) was given"
                )
                role[cand] = "ignored"
            else:
                sg_idx = cand
    if sg_idx is not None:
        if sg_idx in role and role[sg_idx] in ("characteristic", "value"):
            raise StudyInputError(
                f"column '{header[sg_idx]}' cannot hold both subgroups and "
                f"{role[sg_idx]} names/values; choose another column."
            )
        role[sg_idx] = "subgroup"
    t_idx = _optional_role(header, role, time_column, _TIME_NAMES, "time", find)
    n_idx = _optional_role(header, role, note_column, _NOTE_NAMES, "note", find)
    st_idx = _optional_role(header, role, stream_column, _STREAM_NAMES, "stream", find)

    if sg_idx is not None:
        subgroup_source = "column"
        how = "given" if subgroup_column is not None else "detected"
        notes.append(f"subgroups from column '{header[sg_idx]}' ({how})")
    elif subgroup_size is not None:
        subgroup_source = "size"
        notes.append(f"subgroups of {subgroup_size} consecutive values (given size)")
    else:
        subgroup_source = "none"
        notes.append(
            "no subgroups: values are individuals (no subgroup column found; name one e.g. "
            "'Subgroup' or 'Stichprobe', or give a subgroup size)"
        )
    if t_idx is not None:
        notes.append(f"times from column '{header[t_idx]}'")
    if n_idx is not None:
        notes.append(f"notes from column '{header[n_idx]}'")

    ctx = _Ctx(src, table)
    try:
        if layout == "wide":
            result = _assemble_wide(src, table, ctx, role, sg_idx, t_idx, n_idx, subgroup_size,
                                    notes, warnings_)
        else:
            result = _assemble_long(src, table, ctx, role, char_idx, value_idx, sg_idx, t_idx,
                                    n_idx, subgroup_size, notes, warnings_)
    except DataFileError:
        if src.kind == "xlsx":  # the real cause of an "empty" label or cell, if there is one
            _check_unsaved_formulas(src, table, damage_known=True)
        raise
    characteristics, n_rows = result
    if st_idx is not None:
        characteristics = _attach_streams(src, table, st_idx, characteristics, notes,
                                          given=stream_column is not None)
    _check_summary_rows(src, characteristics, header, sg_idx, t_idx)
    if src.kind == "xlsx" and layout == "wide":
        # the first empty cell of each value column is where an unsaved formula would show
        targets: dict[int, int] = {}
        by_name = {c.name: c for c in characteristics}
        for j, h in enumerate(header):
            if not h or j in role:
                continue
            c = by_name.get(parse_header(h)[0])
            if c is None:  # a skipped (empty) column
                targets[j] = hrow + 1
            elif c.n_missing:
                targets[j] = int(c.rows[int(np.argmax(np.isnan(c.values)))])
        if targets:
            _check_unsaved_formulas(src, table, targets)
    elif src.kind == "xlsx" and any(c.n_missing for c in characteristics):
        _check_unsaved_formulas(src, table)
    for col, k in ctx.text_numbers.items():
        notes.append(
            f"column '{col}': {k} number(s) stored as text in the workbook were read as numbers"
        )
    _subgroup_messages(characteristics, subgroup_source, notes, warnings_)
    return Measurements(
        source=src.name, sha256=src.sha256, layout=layout, subgroup_source=subgroup_source,
        characteristics=tuple(characteristics), warnings=tuple(warnings_), notes=tuple(notes),
        subgroup_column=header[sg_idx] if sg_idx is not None else None,
        subgroup_size=subgroup_size, sheet=table.sheet,
        encoding=src.encoding_label if src.kind == "csv" else None,
        separator=table.separator, decimal=table.decimal if src.kind == "csv" else None,
        n_rows=n_rows,
    )


def _optional_role(header, role, given, names_set, what, find):
    if given is not None:
        j = find(given, f"{what}s", f"{what}_column")
        if j in role:
            raise StudyInputError(
                f"column '{header[j]}' is already used for {role[j]}s; give another column "
                f"as `{what}_column`.", value=given,
            )
    else:
        j = _detect(header, names_set)
        if j is None or j in role:
            return None
    role[j] = what
    return j


def _attach_streams(src, table, j, characteristics, notes, *, given):
    """Give each characteristic the stream label of each of its values (from column ``j``).

    The stream column has its own role, so it is never read as a measurement; its labels are
    read in a second pass and matched to the values by file row. A value without a label is
    refused with its row.
    """
    name = table.header[j]
    rows_acc, lab_acc = _Acc(), _Acc()
    for rows, cols in table.open_chunks():
        rows_acc.add(rows)
        cells = cols[j] if j < len(cols) else np.full(len(rows), "", dtype=object)
        lab_acc.add(_labels(cells, table.text_cells).astype(str))
    all_rows, labels = rows_acc.result(np.int64), lab_acc.result()
    out = []
    for c in characteristics:
        at = np.searchsorted(all_rows, c.rows)
        lab = labels[np.clip(at, 0, max(labels.size - 1, 0))]
        lab = np.char.strip(lab.astype(str))
        bad = np.flatnonzero((lab == "") & ~np.isnan(c.values))
        if bad.size:
            i = int(bad[0])
            raise DataFileError(
                f"this row has a value of '{c.name}' but no stream label in column '{name}' "
                f"(rows without a label: {_fmt_rows(c.rows[bad])}). Fill in the stream of each "
                "row, or rename the column if it does not name streams.",
                file=src.name, row=int(c.rows[i]), column=name, value="",
            )
        out.append(replace(c, streams=lab))
    k = len(dict.fromkeys(labels[labels != ""].tolist()))
    notes.append(f"streams from column '{name}' ({'given' if given else 'detected'}): {k} "
                 "stream(s)")
    return out


def _check_unnamed(src, header, hrow, j, cells, rows, text_cells):
    filled = _filled(cells, text_cells)
    if filled.any():
        i = int(np.flatnonzero(filled)[0])
        letter = _col_letter(j)
        if j >= len(header):
            why = (f"this row has a value ('{_show(cells[i])}') in column {letter}, beyond the "
                   f"{len(header)} named columns. Give the column a name in the header "
                   f"(row {hrow}) or delete the value; check for an extra separator.")
        else:
            why = (f"column {letter} has values (here '{_show(cells[i])}') but no name in the "
                   f"header (row {hrow}). Write a name into the header cell.")
        raise DataFileError(why, file=src.name, row=int(rows[i]), column=letter, value=cells[i])


class _Acc:
    """Lists of chunk arrays, concatenated at the end."""

    def __init__(self):
        self.parts: list[np.ndarray] = []

    def add(self, a):
        self.parts.append(a)

    def result(self, dtype=None):
        if not self.parts:
            return np.empty(0, dtype=dtype or float)
        out = np.concatenate(self.parts) if len(self.parts) > 1 else self.parts[0]
        self.parts = []
        return out


class _LabelAcc:
    """Text labels of many rows kept as integer codes into one list of distinct labels, so a
    label repeated on many rows is stored once."""

    def __init__(self):
        self.index: dict[str, int] = {}
        self.codes = _Acc()

    def add(self, labels: np.ndarray) -> None:
        import pandas as pd

        local, uniq = pd.factorize(labels, sort=False)
        mapping = np.array([self.index.setdefault(u, len(self.index)) for u in uniq],
                           dtype=np.int64)
        self.codes.add(mapping[local].astype(np.int32) if mapping.size else local.astype(np.int32))

    def labels(self) -> np.ndarray:
        labels = np.empty(len(self.index), dtype=object)
        labels[:] = list(self.index)
        return labels

    def result_codes(self) -> np.ndarray:
        return self.codes.result(np.int32)

    def result(self) -> np.ndarray:
        return self.labels()[self.result_codes()]


class _TimeAcc:
    """Time cells, converted chunk by chunk to datetime64 while one format fits."""

    def __init__(self):
        self.parts: list[np.ndarray] = []
        self.fmt: str | None = None
        self.as_text = False

    def add(self, cells: np.ndarray) -> None:
        if not self.as_text:
            parsed, fmt = _times_chunk(cells, self.fmt)
            if parsed is not None:
                self.fmt = fmt or self.fmt
                self.parts.append(parsed)
                return
            self.as_text = True
            self.parts = [_times_text(p) for p in self.parts]
        self.parts.append(_times_text(cells))

    def result(self, notes: list) -> np.ndarray:
        if self.as_text:
            notes.append("times kept as text: not all time cells could be read as one "
                         "date/time format (e.g. 2025-03-01 08:00 or 01.03.2025 08:00)")
            out = np.concatenate(self.parts) if self.parts else np.empty(0, dtype=object)
            return out
        if not self.parts:
            return np.empty(0, dtype="datetime64[ns]")
        return np.concatenate(self.parts)


class _Fallback(Exception):
    """The fast CSV path met something it cannot judge; read again cell by cell."""


def _with_fast_path(table, float_cols, collect):
    if table.fast_chunks is not None and float_cols:
        try:
            return collect(table.fast_chunks(float_cols))
        except (_Fallback, DataFileError):
            pass  # the cell-by-cell reader below finds the cell and says what is wrong
    return collect(table.open_chunks())


def _classify(table, ctx, role, notes) -> dict:
    header = table.header
    gen = table.open_chunks()
    try:
        first = next(gen, None)
    finally:
        gen.close()
    kinds: dict[int, str] = {}
    cols = first[1] if first is not None else []
    for j in range(max(len(cols), len(header))):
        if j >= len(header) or not header[j]:
            kinds[j] = "unnamed"
        elif j in role:
            kinds[j] = role[j]
        elif j >= len(cols):
            kinds[j] = "value"
        else:
            n_filled, n_num = _looks_numeric(ctx, cols[j])
            kinds[j] = "value" if n_num * 2 >= n_filled else "text"
    text_cols = [header[j] for j, k in kinds.items() if k == "text"]
    if text_cols:
        notes.append(
            "columns holding text, not read as measurements: "
            + ", ".join(f"'{h}'" for h in text_cols)
        )
    return kinds


def _assemble_wide(src, table, ctx, role, sg_idx, t_idx, n_idx, subgroup_size, notes, warnings_):
    header = table.header
    kinds = _classify(table, ctx, role, notes)
    float_cols = {j for j, k in kinds.items() if k == "value"}

    def collect(chunks):
        rows_acc = _Acc()
        filled_acc = _Acc()
        value_acc = {j: _Acc() for j in float_cols}
        sg_acc, t_acc, n_acc = _LabelAcc(), _TimeAcc(), _LabelAcc()
        for rows, cols in chunks:
            row_filled = np.zeros(len(rows), dtype=bool)
            for j, cells in enumerate(cols):
                k = kinds.get(j, "unnamed")
                if k == "unnamed":
                    _check_unnamed(src, header, table.header_row, j, cells, rows,
                                   table.text_cells)
                    continue
                if k == "value":
                    vals, empty = _numeric(ctx, cells, rows, header[j])
                    value_acc[j].add(vals)
                    row_filled |= ~empty
                else:
                    row_filled |= _filled(cells, table.text_cells)
                    if k == "text":
                        _check_text_column(src.name, cells, rows, header[j])
                    elif k == "subgroup":
                        sg_acc.add(_labels(cells, table.text_cells))
                    elif k == "time":
                        t_acc.add(cells)
                    elif k == "note":
                        n_acc.add(_labels(cells, table.text_cells))
            rows_acc.add(rows)
            filled_acc.add(row_filled)
        return rows_acc, filled_acc, value_acc, sg_acc, t_acc, n_acc

    rows_acc, filled_acc, value_acc, sg_acc, t_acc, n_acc = _with_fast_path(
        table, float_cols, collect)
    rows = rows_acc.result(np.int64)
    filled = filled_acc.result(bool)
    if not filled.any():
        raise DataFileError(
            "the file has a header but no values below it. Add the measurements, one row per "
            "part, under the column names.",
            file=src.name, row=table.header_row + 1,
        )
    last = int(np.flatnonzero(filled)[-1]) + 1
    keep = np.ones(last, dtype=bool)
    filled = filled[:last]
    rows = rows[:last]
    interior_empty = np.flatnonzero(~filled)
    sg = sg_acc.result_codes()[:last] if sg_idx is not None else None
    empty_code = sg_acc.index.get("", -1)
    if sg is not None:
        sg = _fill_merged(sg, rows, table.merged_fill.get(sg_idx, ()), notes, header[sg_idx],
                          empty_code)
    if interior_empty.size:
        if sg is not None:
            keep[interior_empty] = False
            notes.append(f"empty {_row_word(interior_empty.size)} skipped: "
                         f"{_fmt_rows(rows[interior_empty])}")
        else:
            notes.append(
                "empty rows kept as missing values (they may be parts that were not measured): "
                + _fmt_rows(rows[interior_empty])
            )
    all_kept = bool(keep.all())

    def kept(a):
        return a if all_kept else a[keep]

    rows = kept(rows)
    if sg is not None:
        sg = kept(sg)
        no_label = np.flatnonzero(sg == empty_code)
        if no_label.size:
            i = int(no_label[0])
            raise DataFileError(
                f"this row has values but no subgroup label. Every row needs its subgroup in "
                f"column '{header[sg_idx]}' (rows without a label: {_fmt_rows(rows[no_label])}). "
                "Fill in the labels, or leave out the subgroup column to read individuals.",
                file=src.name, row=int(rows[i]), column=header[sg_idx], value="",
            )
        label_text = sg_acc.labels().astype(str)
        codes = sg

        def labels_of(u):
            return label_text[u]

        subgroups = label_text[codes]
    else:
        codes = np.arange(rows.size) // (subgroup_size or 1)

        def labels_of(u):
            return _position_labels(u)

        subgroups = labels_of(codes)
    times = kept(t_acc.result(notes)[:last]) if t_idx is not None else None
    note_arr = kept(n_acc.result()[:last]) if n_idx is not None else None
    for a in (rows, subgroups, times, note_arr):
        if a is not None:
            a.flags.writeable = False

    if sg is None and subgroup_size is None:
        grouping = (codes, subgroups)  # individuals: one subgroup per row, labels = positions
    else:
        grouping = _grouping(codes, labels_of)
    del codes
    sg_acc.index.clear()
    characteristics = []
    empty_cols = []
    for j, acc in value_acc.items():
        vals = kept(acc.result(float)[:last])
        name, unit = parse_header(header[j])
        if np.isnan(vals).all():
            empty_cols.append(header[j])
            continue
        characteristics.append(_make_char(name, unit, vals, subgroups, grouping, times,
                                          note_arr, rows, warnings_))
    if empty_cols:
        notes.append("empty columns skipped: " + ", ".join(f"'{h}'" for h in empty_cols))
    if not characteristics:
        raise DataFileError(
            "no column holds measurements. Each characteristic needs its own column of numbers "
            "under a header name; the columns found were: "
            + ", ".join(f"'{h}'" for h in header if h) + "."
            + _time_header_hint(header, t_idx, times),
            file=src.name, row=table.header_row,
        )
    if t_idx is not None and _plain_numbers(times):
        warnings_.append(_time_header_hint(header, t_idx, times).strip())
    return characteristics, int(rows.size)


def _plain_numbers(times) -> bool:
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


def _time_header_hint(header, t_idx, times) -> str:
    """Why a column of numbers was not taken as a characteristic: its header reads as a time."""
    if t_idx is None:
        return ""
    name = header[t_idx]
    numbers = " and its cells are plain numbers" if _plain_numbers(times) else ""
    return (f" Column '{name}' was read as time stamps, not as measurements, because its header "
            f"is a time or date name (time, Zeit, date, Datum, timestamp...){numbers}. If it "
            "holds measurements, rename the header, e.g. 'cycle time [s]' or 'elapsed [s]' (a time column is "
            "recognised only by an exact time or date name).")


def _fill_merged(codes, rows, ranges, notes, colname, empty_code):
    """Give rows inside a vertically merged subgroup cell the label of its top cell."""
    if not len(ranges) or empty_code < 0:
        return codes
    codes = codes.copy()
    pos = {int(r): i for i, r in enumerate(rows)} if len(ranges) else {}
    filled_any = False
    for r1, r2 in ranges:
        top = pos.get(r1)
        if top is None or codes[top] == empty_code:
            continue
        for r in range(r1 + 1, r2 + 1):
            i = pos.get(r)
            if i is not None and codes[i] == empty_code:
                codes[i] = codes[top]
                filled_any = True
    if filled_any:
        notes.append(f"merged cells in column '{colname}': each label applied to all its rows")
    return codes


def _position_labels(codes: np.ndarray) -> np.ndarray:
    """``codes + 1`` as the narrowest string array (not the 21 characters of any int64)."""
    codes = np.asarray(codes)
    width = len(str(int(codes.max()) + 1)) if codes.size else 1
    return (codes + 1).astype(f"<U{width}")


def _grouping(codes, labels_of):
    """(codes 0..k-1 in order of first appearance, the k labels as str array)."""
    import pandas as pd

    codes = np.asarray(codes)
    if codes.size:
        # codes that already run 0, 1, 2, ... in order of first appearance need no factorizing
        running_max = np.maximum.accumulate(codes)
        if codes[0] == 0 and np.all(codes[1:] <= running_max[:-1] + 1):
            k = int(running_max[-1]) + 1
            return codes, np.asarray(labels_of(np.arange(k))).astype(str)
    local, uniq = pd.factorize(codes, sort=False)
    return local, np.asarray(labels_of(np.asarray(uniq))).astype(str)


def _make_char(name, unit, vals, subgroups, grouping, times, notes_arr, rows, warnings_):
    """Build one CharacteristicData; `grouping` comes from :func:`_grouping`."""
    local, group_labels = grouping
    missing = np.isnan(vals)
    valid = vals[~missing]
    counts = np.bincount(local, weights=(~missing).astype(float), minlength=len(group_labels))
    n_missing = int(missing.sum())
    if n_missing:
        warnings_.append(
            f"'{name}': {n_missing} empty cell(s) ({_row_word(n_missing)} "
            f"{_fmt_rows(rows[missing])}); the analysis leaves them out"
        )
    if valid.size == 1:
        warnings_.append(
            f"'{name}': only one value ({valid[0]:g}); a study needs many more (common "
            "practice: at least 25 subgroups or 100 individual values)"
        )
    elif valid.size > 1 and valid.max() == valid.min():  # (ptp overflows near 1e308)
        warnings_.append(
            f"'{name}': all {valid.size} values are {valid[0]:g}, so there is no spread and no "
            "capability can be computed. Check that the gauge resolution is fine enough and "
            "that this is the right column."
        )
    return CharacteristicData(
        name=name, unit=unit, values=vals, subgroups=subgroups, times=times, notes=notes_arr,
        rows=rows, n_missing=n_missing,
        is_integer=bool(valid.size and np.all(np.floor(valid) == valid)),
        subgroup_labels=group_labels,
        subgroup_counts=counts.astype(np.int64),
    )


def _subgroup_messages(chars, subgroup_source, notes, warnings_):
    if subgroup_source == "none":
        return
    groups: dict[tuple, list[str]] = {}
    for c in chars:
        sizes = c.subgroup_counts
        filled = sizes[sizes > 0]
        msgs = []
        if filled.size < 2:
            msgs.append((
                "warn",
                f"values in only {filled.size} subgroup(s); a subgrouped analysis needs at "
                "least 2 (common practice: 25 or more)",
            ))
        if filled.size and filled.min() != filled.max():
            vals, cnt = np.unique(filled, return_counts=True)
            dist = ", ".join(f"{k} x size {v}" for v, k in zip(vals.tolist(), cnt.tolist(),
                                                              strict=True))
            msgs.append(("note", f"unequal subgroup sizes: {dist} (allowed; limits vary)"))
            if filled.min() == 1:
                single = c.subgroup_labels[sizes == 1].tolist()
                shown = ", ".join(f"'{x}'" for x in single[:5]) + (
                    f" and {len(single) - 5} more" if len(single) > 5 else "")
                msgs.append((
                    "warn",
                    f"{len(single)} subgroup(s) hold a single value ({shown}) while others hold "
                    f"up to {int(filled.max())}: X-bar charts need at least 2 values in every "
                    "subgroup. Merge or exclude them, or read the values as individuals",
                ))
        if filled.size and filled.max() > LARGE_SUBGROUP:
            msgs.append((
                "warn",
                f"subgroups of up to {int(filled.max())} values (more than {LARGE_SUBGROUP}); "
                "allowed, but an X-bar/S chart suits large subgroups better than X-bar/R",
            ))
        # a label that comes back after other labels
        sg = c.subgroups
        if sg.size > 1:
            changes = int(np.count_nonzero(sg[1:] != sg[:-1])) + 1
            if changes > c.n_subgroups:
                msgs.append((
                    "warn",
                    "some subgroup labels appear in separate blocks of rows; rows of one "
                    "subgroup are expected together, in production order",
                ))
        for kind, text in msgs:
            groups.setdefault((kind, text), []).append(c.name)
    for (kind, text), names in groups.items():
        who = ("all characteristics" if len(names) == len(chars) and len(chars) > 1
               else ", ".join(f"'{n}'" for n in names))
        (warnings_ if kind == "warn" else notes).append(f"{who}: {text}")


_TIME_FORMATS = (
    "%Y-%m-%d %H:%M:%S", "%Y-%m-%dT%H:%M:%S", "%Y-%m-%d %H:%M", "%Y-%m-%dT%H:%M", "%Y-%m-%d",
    "%d.%m.%Y %H:%M:%S", "%d.%m.%Y %H:%M", "%d.%m.%Y", "%d.%m.%y %H:%M", "%d.%m.%y",
    "%Y-%m-%d %H:%M:%S.%f", "%Y-%m-%dT%H:%M:%S.%f",
)


def _times_chunk(cells: np.ndarray, fmt: str | None):
    """(datetime64[ns] array, format) when every filled cell is a date/time, else (None, None)."""
    import pandas as pd

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
    text = pd.Series([v.strip() if isinstance(v, str) else _cell_text(v) for v in cells],
                     dtype=object)
    filled = text != ""
    candidates = [fmt] if fmt else list(_TIME_FORMATS)
    sample = text[filled][:500]
    for f in candidates:
        try:
            pd.to_datetime(sample, format=f)
            parsed = pd.to_datetime(text.where(filled, None), format=f)
        except (ValueError, TypeError):
            continue
        return np.array(parsed, dtype="datetime64[ns]"), f
    return None, None


def _times_text(cells: np.ndarray) -> np.ndarray:
    out = np.empty(len(cells), dtype=object)
    if cells.dtype.kind == "M":
        out[:] = [_time_text(t) or "" for t in cells]
    else:
        out[:] = [v.strip() if isinstance(v, str) else _cell_text(v) for v in cells]
    return out


def _assemble_long(src, table, ctx, role, char_idx, value_idx, sg_idx, t_idx, n_idx,
                   subgroup_size, notes, warnings_):
    header = table.header
    unit_idx = next((j for j, r in role.items() if r == "unit"), None)
    others = [h for j, h in enumerate(header) if h and j not in role]
    if others:
        notes.append("columns not used in the long layout: "
                     + ", ".join(f"'{h}'" for h in others))

    def collect(chunks):
        name_acc, val_acc, rows_acc, filled_acc = _LabelAcc(), _Acc(), _Acc(), _Acc()
        sg_acc, t_acc, n_acc, unit_acc = _LabelAcc(), _TimeAcc(), _LabelAcc(), _LabelAcc()
        for rows, cols in chunks:
            for j in range(len(cols)):
                if j >= len(header) or not header[j]:
                    _check_unnamed(src, header, table.header_row, j, cols[j], rows,
                                   table.text_cells)
            names = _labels(cols[char_idx], table.text_cells)
            vals, empty = _numeric(ctx, cols[value_idx], rows, header[value_idx])
            row_filled = ~empty | (names != "")
            for j in (sg_idx, t_idx, n_idx, unit_idx):
                if j is not None and j < len(cols):
                    row_filled |= _filled(cols[j], table.text_cells)
            bad = row_filled & (names == "")
            if bad.any():
                i = int(np.flatnonzero(bad)[0])
                raise DataFileError(
                    f"this row has no characteristic name in column '{header[char_idx]}'. "
                    "Every row of a long table names the characteristic its value belongs to.",
                    file=src.name, row=int(rows[i]), column=header[char_idx], value="",
                )
            name_acc.add(names)
            val_acc.add(vals)
            rows_acc.add(rows)
            filled_acc.add(row_filled)
            if sg_idx is not None:
                sg_acc.add(_labels(cols[sg_idx], table.text_cells))
            if t_idx is not None:
                t_acc.add(cols[t_idx])
            if n_idx is not None:
                n_acc.add(_labels(cols[n_idx], table.text_cells))
            if unit_idx is not None:
                unit_acc.add(_labels(cols[unit_idx], table.text_cells))
        return name_acc, val_acc, rows_acc, filled_acc, sg_acc, t_acc, n_acc, unit_acc

    name_acc, val_acc, rows_acc, filled_acc, sg_acc, t_acc, n_acc, unit_acc = _with_fast_path(
        table, {value_idx}, collect)
    filled = filled_acc.result(bool)
    if not filled.any():
        raise DataFileError(
            "the file has a header but no values below it. Add the measurements, one row per "
            "value, under the column names.",
            file=src.name, row=table.header_row + 1,
        )
    rows = rows_acc.result(np.int64)
    last = int(np.flatnonzero(filled)[-1]) + 1
    interior = np.flatnonzero(~filled[:last])
    if interior.size:
        notes.append(f"empty rows skipped: {_fmt_rows(rows[interior])}")
    keep = filled.copy()
    rows = rows[keep]
    codes = name_acc.result_codes()[keep]
    name_labels = name_acc.labels()
    # drop the code of the empty name (only on rows that are not kept) and renumber
    present, codes = np.unique(codes, return_inverse=True)
    codes_of = {str(name_labels[c]): k for k, c in enumerate(present)}
    vals = val_acc.result(float)[keep]
    sg = sg_acc.result_codes()[keep] if sg_idx is not None else None
    label_text = sg_acc.labels().astype(str)
    if sg is not None:
        no_label = np.flatnonzero(sg == sg_acc.index.get("", -1))
        if no_label.size:
            i = int(no_label[0])
            raise DataFileError(
                f"this row has no subgroup label in column '{header[sg_idx]}' (rows without a "
                f"label: {_fmt_rows(rows[no_label])}). Fill in the labels, or leave out the "
                "subgroup column to read individuals.",
                file=src.name, row=int(rows[i]), column=header[sg_idx], value="",
            )
    times_all = t_acc.result(notes)[keep] if t_idx is not None else None
    notes_all = n_acc.result()[keep] if n_idx is not None else None
    units_all = unit_acc.result()[keep] if unit_idx is not None else None

    order = np.argsort(codes, kind="stable")
    bounds = np.concatenate([[0], np.cumsum(np.bincount(codes, minlength=len(codes_of)))])
    characteristics = []
    seen_names: dict[str, str] = {}
    for raw_name, k in codes_of.items():
        idx = order[bounds[k] : bounds[k + 1]]
        name, unit = parse_header(raw_name)
        key = name.casefold()
        if key in seen_names:
            raise DataFileError(
                f"'{raw_name}' and '{seen_names[key]}' name the same characteristic with "
                "different units or spelling. Use one name (and one unit) per characteristic.",
                file=src.name, column=header[char_idx], value=raw_name,
            )
        seen_names[key] = raw_name
        if units_all is not None:
            us = [u for u in dict.fromkeys(units_all[idx].tolist()) if u != ""]
            if len(us) > 1:
                first_other = int(idx[np.flatnonzero(units_all[idx] == us[1])[0]])
                raise DataFileError(
                    f"'{name}' is given in more than one unit ({', '.join(us)}). Convert the "
                    "values to one unit.",
                    file=src.name, row=int(rows[first_other]), column=header[unit_idx],
                    value=us[1],
                )
            if us:
                unit = us[0]
        cvals = vals[idx]
        crows = rows[idx]
        if sg is not None:
            ccodes = sg[idx]

            def labels_of(u):
                return label_text[u]
        else:
            ccodes = np.arange(idx.size) // (subgroup_size or 1)

            def labels_of(u):
                return _position_labels(u)

        characteristics.append(_make_char(
            name, unit, cvals, labels_of(ccodes), _grouping(ccodes, labels_of),
            times_all[idx] if times_all is not None else None,
            notes_all[idx] if notes_all is not None else None,
            crows, warnings_,
        ))
    empty = [c.name for c in characteristics if c.n_valid == 0]
    if empty:
        notes.append("characteristics without any value skipped: "
                     + ", ".join(f"'{n}'" for n in empty))
    characteristics = [c for c in characteristics if c.n_valid > 0]
    if not characteristics:
        raise DataFileError(
            f"column '{header[value_idx]}' holds no values. Add the measured values.",
            file=src.name, column=header[value_idx], row=table.header_row + 1,
        )
    return characteristics, int(rows.size)
