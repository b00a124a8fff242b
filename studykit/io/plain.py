"""pandas' table helpers for small inputs, without importing pandas (same results).

Reading a study's stored files is the only use of pandas on the workbook's landing view, and
importing pandas holds about 28 MB of every workbook kernel (RSS, measured on this project's
machine); a command that reads a small measurement file (a batch of 1,000 characteristics x
125 readings is 1 MB) saves the import, 0.15-0.23 s. The readers call these functions; each
one does the work in numpy or plain Python when the input is small (:data:`PLAIN_MAX_CELLS`,
:data:`PLAIN_MAX_TABLE_CELLS`) and of a form whose result is certain to be pandas' own, and otherwise (a large input, a cell of any doubtful form, pandas already loaded)
calls the pandas function it stands for. So a file reads to the same values either way; large
files keep pandas' speed.

Examples
--------
>>> import numpy as np
>>> codes, uniques = factorize(np.array(["b", "a", "b"], dtype=object))
>>> codes.tolist(), uniques.tolist()
([0, 1, 0], ['b', 'a'])
>>> strip_filled(np.array([" 1", "  ", ""], dtype=object)).tolist()
[True, False, False]
>>> to_datetime64(np.array(["2026-03-02 06:00", ""], dtype=object), "%Y-%m-%d %H:%M")
array(['2026-03-02T06:00:00.000000000',                           'NaT'],
      dtype='datetime64[ns]')
"""

from __future__ import annotations

import re
import sys

import numpy as np

__all__ = [
    "PLAIN_MAX_BYTES",
    "PLAIN_MAX_CELLS",
    "PLAIN_MAX_TABLE_CELLS",
    "factorize",
    "fixed_iso_datetime64",
    "plain_factorize",
    "plain_fast_columns",
    "plain_float",
    "plain_records",
    "plain_to_datetime64",
    "strip_filled",
    "to_datetime64",
    "unique",
    "use_pandas",
]

#: Inputs of more cells than this go to pandas (its C loops win there).
PLAIN_MAX_CELLS = 20_000


def use_pandas(n: int) -> bool:
    """Whether pandas does the work: a large input, or pandas already imported (then it
    costs nothing more and its result is the reference)."""
    return n > PLAIN_MAX_CELLS or "pandas" in sys.modules


def _all_str(values: np.ndarray) -> bool:
    return values.dtype.kind == "U" or (
        values.dtype.kind == "O" and all(type(v) is str for v in values.tolist())
    )


def _like(texts: list[str], values: np.ndarray) -> np.ndarray:
    """``texts`` as pandas returns uniques: fixed-width text as the input's dtype, else object."""
    if values.dtype.kind == "U":
        return np.array(texts, dtype=values.dtype)
    out = np.empty(len(texts), dtype=object)
    out[:] = texts
    return out


def plain_factorize(values) -> tuple[np.ndarray, np.ndarray] | None:
    """``pandas.factorize(values, sort=False)`` for an array of ``str`` (object or fixed width;
    the uniques of the input's dtype, as pandas gives them) or of integers (codes in order of first
    appearance); None for any other input.

    >>> codes, uniq = plain_factorize(np.array([7, 3, 7, 9]))
    >>> codes.tolist(), uniq.tolist(), uniq.dtype == np.array([7]).dtype
    ([0, 1, 0, 2], [7, 3, 9], True)
    """
    values = np.asarray(values)
    if values.ndim != 1:
        return None
    if values.dtype.kind in "iu":
        uniq, first, inverse = np.unique(values, return_index=True, return_inverse=True)
        order = np.argsort(first, kind="stable")
        rank = np.empty(order.size, dtype=np.intp)
        rank[order] = np.arange(order.size)
        return rank[inverse.ravel()], uniq[order]
    if _all_str(values):
        index: dict[str, int] = {}
        codes = np.fromiter(
            (index.setdefault(v, len(index)) for v in values.tolist()), np.intp, values.size
        )
        return codes, _like(list(index), values)
    return None


def factorize(values) -> tuple[np.ndarray, np.ndarray]:
    """``pandas.factorize(values, sort=False)``: codes and uniques (first-appearance order)."""
    values = np.asarray(values)
    if not use_pandas(values.size):
        plain = plain_factorize(values)
        if plain is not None:
            return plain
    import pandas as pd

    return pd.factorize(values, sort=False)


def unique(values) -> np.ndarray:
    """``pandas.unique(values)`` (first-appearance order) of an object array of ``str`` or a
    datetime64 array.

    >>> unique(np.array(["2026-03-02", "NaT", "2026-03-02"], dtype="datetime64[ns]")).tolist()
    [1772409600000000000, None]
    """
    values = np.asarray(values)
    if not use_pandas(values.size) and values.ndim == 1:
        if _all_str(values):
            return _like(list(dict.fromkeys(values.tolist())), values)
        if values.dtype.kind == "M":
            as_int = values.view(np.int64)
            _, first = np.unique(as_int, return_index=True)
            return values[np.sort(first)]
    import pandas as pd

    return pd.unique(values)


def strip_filled(cells: np.ndarray) -> np.ndarray:
    """``pandas.Series(cells, dtype=object).str.strip() != ""`` as a bool array."""
    cells = np.asarray(cells, dtype=object)
    if not use_pandas(cells.size) and _all_str(cells):
        return np.fromiter((v.strip() != "" for v in cells.tolist()), bool, cells.size)
    import pandas as pd

    return (pd.Series(cells, dtype=object).str.strip() != "").to_numpy(dtype=bool)


# The ISO formats the readers try, each as the one cell form read here without pandas: fields of
# exactly their width, hours 00-23, minutes and seconds 00-59 (pandas reads these the same;
# any other cell, e.g. "2026-3-2 6:00", goes to pandas).
_D = r"\d{4}-\d{2}-\d{2}"
_HM = r"(?:[01]\d|2[0-3]):[0-5]\d"
_ISO_CELLS = {
    "%Y-%m-%d %H:%M:%S": re.compile(rf"{_D} {_HM}:[0-5]\d"),
    "%Y-%m-%dT%H:%M:%S": re.compile(rf"{_D}T{_HM}:[0-5]\d"),
    "%Y-%m-%d %H:%M": re.compile(rf"{_D} {_HM}"),
    "%Y-%m-%dT%H:%M": re.compile(rf"{_D}T{_HM}"),
    "%Y-%m-%d": re.compile(_D),
}


def plain_to_datetime64(cells, fmt: str) -> np.ndarray | None:
    """The cells read with ``fmt`` as datetime64[ns] (empty or None: NaT), or None when a
    cell or the format is not one of the plain ISO forms (then pandas decides); ValueError
    when a cell is of another of these forms than ``fmt`` (as pandas' exact format)."""
    pattern = _ISO_CELLS.get(fmt)
    if pattern is None:
        return None
    texts = []
    other = False  # a cell of another of the ISO forms: pandas' exact format refuses it
    for v in np.asarray(cells, dtype=object).tolist():
        if v is None or v == "":
            texts.append("NaT")
        elif type(v) is str and pattern.fullmatch(v):
            texts.append(v)
        elif type(v) is str and any(p.fullmatch(v) for p in _ISO_CELLS.values()):
            other = True
        else:
            return None
    if other:
        raise ValueError(f"a time cell does not match the format {fmt!r}")
    try:
        return np.array(texts, dtype="datetime64[ns]")
    except ValueError:  # e.g. 2026-02-30: pandas raises its own error
        return None


#: Each ISO format of :data:`_ISO_CELLS` as fixed positions: (width, the separator at each
#: position, the positions of the two-digit hour, minute and second fields present).
_ISO_LAYOUT = {
    "%Y-%m-%d %H:%M:%S": (19, {4: "-", 7: "-", 10: " ", 13: ":", 16: ":"}, (11, 14, 17)),
    "%Y-%m-%dT%H:%M:%S": (19, {4: "-", 7: "-", 10: "T", 13: ":", 16: ":"}, (11, 14, 17)),
    "%Y-%m-%d %H:%M": (16, {4: "-", 7: "-", 10: " ", 13: ":"}, (11, 14)),
    "%Y-%m-%dT%H:%M": (16, {4: "-", 7: "-", 10: "T", 13: ":"}, (11, 14)),
    "%Y-%m-%d": (10, {4: "-", 7: "-"}, ()),
}


_YEAR_MIN, _YEAR_MAX = (int.from_bytes(y, "big") for y in (b"1678", b"2261"))


def fixed_iso_datetime64(cells, fmt: str) -> np.ndarray | None:
    """The cells read with ``fmt`` as datetime64[ns] when every cell is of the one form
    :func:`plain_to_datetime64` reads (the pattern of :data:`_ISO_CELLS`, in ASCII digits),
    checked for all cells at once; else None (then the cell-by-cell route or pandas decides).

    The cells are joined by line breaks into one ASCII byte string: when its length is that of
    ``n`` cells of the format's width and every row of the ``n x (width + 1)`` byte matrix holds
    the separators at their places, digits elsewhere, hours 00-23 and minutes and seconds 00-59,
    each cell is exactly of that form; numpy then reads the texts as the plain route does (about
    twice as fast as pandas' format parser on 10^6 cells). A day that does not exist, or a year
    outside 1678-2261 (the range of datetime64[ns]), gives None.

    >>> fixed_iso_datetime64(np.array(["2026-03-02 06:00:07"], dtype=object), "%Y-%m-%d %H:%M:%S")
    array(['2026-03-02T06:00:07.000000000'], dtype='datetime64[ns]')
    >>> fixed_iso_datetime64(np.array(["2026-03-02 24:00"], dtype=object), "%Y-%m-%d %H:%M") is None
    True
    """
    layout = _ISO_LAYOUT.get(fmt)
    texts = np.asarray(cells, dtype=object).tolist()
    if layout is None or not texts:
        return None
    width, separators, fields = layout
    try:
        raw = "\n".join(texts).encode("ascii")
    except (TypeError, UnicodeEncodeError):  # a cell that is not text, or not ASCII
        return None
    n = len(texts)
    if len(raw) != (width + 1) * n - 1:
        return None
    rows = np.frombuffer(raw + b"\n", dtype=np.uint8).reshape(n, width + 1)
    digit = np.ones(width + 1, dtype=bool)
    digit[list(separators) + [width]] = False
    if not (rows[:, width] == 10).all() or not all(
        (rows[:, i] == ord(c)).all() for i, c in separators.items()
    ):
        return None
    if not ((rows[:, digit] - np.uint8(48)) < 10).all():  # (a byte below "0" wraps around)
        return None
    for i, top in zip(fields, (23, 59, 59), strict=False):
        if int((rows[:, i].astype(np.int16) * 10 + rows[:, i + 1]).max()) - 528 > top:
            return None  # 528 = 48 * 10 + 48: the two ASCII digits as a number
    # four ASCII digits read as one big-endian number sort as the years they write
    year = np.ascontiguousarray(rows[:, :4]).view(">u4")
    if year.min() < _YEAR_MIN or year.max() > _YEAR_MAX:  # outside datetime64[ns]: pandas's
        return None
    try:
        return np.array(texts, dtype="datetime64[ns]")
    except ValueError:  # e.g. 2026-02-30: pandas raises its own error
        return None


def to_datetime64(cells, fmt: str) -> np.ndarray:
    """``pandas.to_datetime(cells, format=fmt)`` as a datetime64[ns] array (raises ValueError
    or TypeError as pandas does)."""
    if not use_pandas(len(cells)):
        plain = plain_to_datetime64(cells, fmt)
        if plain is not None:
            return plain
    elif len(cells) > PLAIN_MAX_CELLS:
        fixed = fixed_iso_datetime64(cells, fmt)
        if fixed is not None:
            return fixed
    import pandas as pd

    return np.array(pd.to_datetime(cells, format=fmt), dtype="datetime64[ns]")


# A decimal number of at most 15 digits and no exponent: its nearest double is the same from
# Python's float() and from pandas' C parser (an exact integer mantissa below 2**53 divided
# once by an exact power of ten: one correctly rounded operation).
_PLAIN_NUMBER = {".": re.compile(r"-?\d+(?:\.\d+)?"), ",": re.compile(r"-?\d+(?:,\d+)?")}
_MAX_DIGITS = 15


def plain_float(cell: str, decimal: str) -> float | None:
    """The number in ``cell`` when it is a plain decimal (see above), else None.

    >>> plain_float("12.002", "."), plain_float("8,5", ","), plain_float("1e3", ".")
    (12.002, 8.5, None)
    >>> plain_float("1234567890123456", ".") is None  # 16 digits: left to pandas
    True
    """
    if not _PLAIN_NUMBER[decimal].fullmatch(cell):
        return None
    digits = len(cell) - cell.startswith("-") - (decimal in cell)
    if digits > _MAX_DIGITS:
        return None
    x = float(cell.replace(",", ".") if decimal == "," else cell)
    if x == 0 and cell.startswith("-"):
        return None  # the sign of a negative zero: left to pandas
    return x


#: Text tables of at most this many bytes (in memory: a study's stored file, an upload, a
#: file read by a command) are split without pandas when their form is plain
#: (:func:`plain_records`).
PLAIN_MAX_BYTES = 1 << 20
#: ... and of at most this many cells. Up to this size the plain split and the numbers of
#: :func:`plain_fast_columns` take less time than importing pandas alone (1,000 columns x 125
#: rows, 1 MB: 0.07 s against an import of 0.15-0.23 s and 0.05 s of reading, on this project's
#: machine); a larger table, or any table once pandas is imported, goes to pandas.
PLAIN_MAX_TABLE_CELLS = 250_000
_LINE_BREAK = re.compile(r"\r\n|\r|\n")


def plain_records(data: bytes | None, encoding: str | None, sep: str) -> list[list[str]] | None:
    r"""Every line of a small text table split at ``sep``, as pandas' C reader splits it, or None
    when the table is not of the plain form read here: in memory and small, decoding cleanly,
    no quote character, no byte-order mark or NUL, no empty line, every line with the same
    number of cells, at most :data:`PLAIN_MAX_TABLE_CELLS` cells.

    >>> plain_records(b"a;b\r\n1;2\r\n", "utf-8", ";")
    [['a', 'b'], ['1', '2']]
    >>> plain_records(b'a,b\n"1,5",2\n', "utf-8", ",") is None
    True
    """
    if data is None or len(data) > PLAIN_MAX_BYTES:
        return None
    try:
        text = data.decode(encoding or "utf-8", errors="strict")
    except (UnicodeDecodeError, LookupError):
        return None
    if '"' in text or "\x00" in text or text.startswith("\ufeff"):
        return None
    lines = _LINE_BREAK.split(text)
    if lines and lines[-1] == "":
        lines.pop()  # the break that ends the last line
    if not lines or "" in lines or len(text.splitlines()) != len(lines):
        return None  # (splitlines breaks at more characters: the header's line number)
    records = [line.split(sep) for line in lines]
    width = len(records[0])
    if any(len(r) != width for r in records) or width * len(records) > PLAIN_MAX_TABLE_CELLS:
        return None
    return records


def plain_fast_columns(records, header_index: int, width: int, float_cols, decimal: str):
    """The data columns of :func:`plain_records` (below the header line) as the readers' fast
    route gets them from pandas: float64 for ``float_cols`` (empty cell: NaN), the cells as text
    for the others; None when there are no records, no data rows, another width, or a cell of a
    float column is not a plain decimal (then pandas reads the table)."""
    if records is None or len(records) <= header_index + 1 or len(records[0]) != width:
        return None
    data = records[header_index + 1 :]
    cols = []
    for j, col in enumerate(zip(*data, strict=True)):
        if j in float_cols:
            values = np.empty(len(col))
            for i, cell in enumerate(col):
                x = float("nan") if cell == "" else plain_float(cell, decimal)
                if x is None:
                    return None
                values[i] = x
            cols.append(values)
        else:
            cols.append(np.array(col, dtype=object))
    return cols
