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

The package is split by job:

=====================  ====================================================================
module                 job
=====================  ====================================================================
``io.readers``         the public readers (path or uploaded bytes in, ``Measurements`` out)
``io.source``          source detection: size limit, hashing, CSV or XLSX, text encoding
``io.csv_reader``      CSV: separator sniffing, chunked reading, the pandas fast path
``io.xlsx_reader``     XLSX: package (zip bomb) checks, header row, merged cells, formulas
``io.cells``           cell parsing: header names and units, numbers, labels, times
``io.assemble``        assembly of wide/long tables into one series per characteristic
``io.values``          the value objects ``CharacteristicData`` and ``Measurements``
=====================  ====================================================================
"""

from __future__ import annotations

from studykit.io.cells import parse_header
from studykit.io.readers import read_measurements, read_measurements_bytes
from studykit.io.source import DEFAULT_MAX_BYTES
from studykit.io.values import LARGE_SUBGROUP, CharacteristicData, Measurements
from studykit.io.xlsx_reader import XLSX_MAX_MEMBERS, XLSX_MAX_RATIO, XLSX_MAX_UNPACKED

__all__ = [
    "CharacteristicData",
    "Measurements",
    "read_measurements",
    "read_measurements_bytes",
    "parse_header",
    "LARGE_SUBGROUP",
    "DEFAULT_MAX_BYTES",
    "XLSX_MAX_UNPACKED",
    "XLSX_MAX_RATIO",
    "XLSX_MAX_MEMBERS",
]
