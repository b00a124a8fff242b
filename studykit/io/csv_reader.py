"""CSV tables: separator sniffing and chunked reading (with a pandas fast path).

Part of :mod:`studykit.io` (moved unchanged from ``studykit/data.py``).
"""

from __future__ import annotations

import csv
import functools
import io
import re
import sys

import numpy as np

from studykit.errors import DataFileError
from studykit.io.cells import COMMA_DECIMAL_RE, POINT_DECIMAL_RE, text_number
from studykit.io.plain import plain_fast_columns, plain_records
from studykit.io.source import HEADER_MAX_BYTES, Fallback, Source, Table, human_size

_CHUNK_ROWS = 50_000


def _sample_lines(src: Source) -> list[str]:
    lines = src.sample.splitlines()
    if src.sample_truncated and lines:
        lines = lines[:-1]
    return lines


def _csv_rows(lines: list[str], delimiter: str, file=None) -> list[list[str]]:
    """The cells of sample lines; a field may be as long as the sample (a wide header is one
    field for a separator that does not split it), beyond the csv module's 128 KiB default."""
    old = csv.field_size_limit()
    csv.field_size_limit(max(old, HEADER_MAX_BYTES + 1))
    try:
        return list(csv.reader(lines, delimiter=delimiter))
    except csv.Error as exc:
        raise DataFileError(
            f'the first lines cannot be split into cells ({exc}). Check quotes (") and '
            "separators, or save the file again from the spreadsheet as CSV.",
            file=file,
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
        if k > 0 and all(text_number(c) is not None for c in r[k] if c.strip()):
            continue  # numbers, not a header below a title
        if all(len(x) == len(r[k]) for x in r[k:]):
            return d, idx[k]
    # one column of numbers with decimal commas: nothing to split
    semi = recs[";"]
    if (
        len(recs[","][0]) == 1
        and all(len(x) == 1 for x in semi)
        and any(COMMA_DECIMAL_RE.match(x[0].strip()) for x in semi[1:])
    ):
        return ";", idx[0]
    best, best_cols = ",", 1
    for d in delims:
        if len(recs[d][0]) > best_cols:
            best, best_cols = d, len(recs[d][0])
    return best, idx[0]


def open_csv(src: Source) -> Table:
    lines = _sample_lines(src)
    first_line = _first_filled_line(src, lines)
    sep, header_index = _sniff(lines, first_line, src.name)
    header = [h.strip() for h in _csv_rows([lines[header_index]], delimiter=sep, file=src.name)[0]]
    decimal = _decimal_sign(lines[header_index + 1 : header_index + 200], sep, src.name)
    plain = _PlainSplit(src, sep)
    return Table(
        header=header,
        header_row=header_index + 1,
        open_chunks=functools.partial(_text_chunks, src, header, sep, header_index, plain),
        fast_chunks=functools.partial(
            _float_chunks, src, len(header), sep, header_index, decimal, plain
        ),
        separator=sep,
        decimal=decimal,
        text_cells=True,
        title_rows=(first_line + 1, header_index) if header_index > first_line else None,
    )


def _first_filled_line(src: Source, lines: list[str]) -> int:
    """Index of the first sample line holding more than separators (a title or the header)."""
    if not lines and src.sample_truncated:
        raise DataFileError(
            f"the first line is longer than {human_size(HEADER_MAX_BYTES)} without a line "
            "break, so no header row can be found. Check that the file is a table with one "
            "row per line (a file with only carriage returns or no line breaks at all is not), "
            "or save it again from the spreadsheet as CSV.",
            file=src.name,
            row=1,
        )
    first = next((i for i, ln in enumerate(lines) if ln.strip(" \t,;")), None)
    if first is None:
        raise DataFileError(
            "the file holds no header and no values (only empty lines or separators). Export "
            "the measurements again with the column names in the first row.",
            file=src.name,
        )
    return first


def _decimal_sign(lines: list[str], sep: str, file) -> str:
    """``","`` when more sample cells hold a decimal comma than a decimal point, else ``"."``."""
    n_comma = n_point = 0
    for rec in _csv_rows(lines, delimiter=sep, file=file):
        for cell in rec:
            cell = cell.strip()
            if COMMA_DECIMAL_RE.match(cell):
                n_comma += 1
            elif POINT_DECIMAL_RE.match(cell):
                n_point += 1
    return "," if n_comma > n_point else "."


def _pandas_reader(handle, src: Source, sep: str, skiprows: int, **options):
    """pandas' C reader in chunks over the file below ``skiprows`` lines, every cell kept."""
    import pandas as pd

    return pd.read_csv(
        handle,
        sep=sep,
        header=None,
        skiprows=skiprows,
        keep_default_na=False,
        skip_blank_lines=False,
        chunksize=_CHUNK_ROWS,
        encoding=src.encoding,
        quotechar='"',
        engine="c",
        encoding_errors="strict",
        **options,
    )


class _PlainSplit:
    """The plain split of a small table (:func:`studykit.io.plain.plain_records`), made once
    and shared by the text and the number route; None when the table needs pandas or pandas
    is already loaded (then it costs nothing more and its result is the reference)."""

    def __init__(self, src: Source, sep: str):
        self.src, self.sep = src, sep
        self._records: list | None = None
        self._done = False

    def __call__(self):
        if not self._done:
            self._records = (
                None
                if "pandas" in sys.modules
                else plain_records(self.src.data, self.src.encoding, self.sep)
            )
            self._done = True
        return self._records


def _text_chunks(src: Source, header: list, sep: str, header_index: int, plain: _PlainSplit):
    """(spreadsheet rows, text columns) chunks of the rows below the header."""
    records = plain()
    if records is not None:  # what pandas' reader yields below, without pandas
        cols = [np.array(col, dtype=object) for col in zip(*records[header_index:], strict=True)]
        rows = np.arange(header_index + 2, len(records) + 1, dtype=np.int64)
        yield rows, [c[1:] for c in cols]
        return
    import pandas as pd

    handle = src.binary()
    try:
        reader = _pandas_reader(handle, src, sep, header_index, dtype=object, na_filter=False)
        start = header_index + 1  # spreadsheet row of the reader's first line (the header)
        first = True
        for frame in reader:
            # the columns as rows of one array (the cells of frame[c], without a Series each)
            cols = list(frame.to_numpy(dtype=object).T)
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
            + (
                "Leave the encoding out to have it detected, or give the one the file was "
                "saved with (e.g. 'cp1252' or 'utf-16')."
                if src.encoding_given
                else "Save the file as UTF-8 CSV, or give its encoding explicitly."
            ),
            file=src.name,
        ) from None
    finally:
        handle.close()


def _float_chunks(
    src: Source,
    width: int,
    sep: str,
    header_index: int,
    decimal: str,
    plain,
    float_cols,
    *,
    guess: bool = False,
):
    """Numbers parsed by pandas' C reader (or the plain route of a small table); any doubt
    raises Fallback. ``guess``: ``float_cols`` is a guess (every named column), so a small
    table the plain route splits but cannot read as those numbers raises Fallback at once
    rather than going to pandas (the classified reading then needs no pandas either)."""
    records = plain()
    plain_cols = plain_fast_columns(records, header_index, width, float_cols, decimal)
    if plain_cols is not None:
        yield np.arange(header_index + 2, len(records) + 1, dtype=np.int64), plain_cols
        return
    if guess and (records is not None or not _header_decodes(src, header_index)):
        raise Fallback
    import pandas as pd

    handle = src.binary()
    try:
        reader = _pandas_reader(
            handle,
            src,
            sep,
            header_index + 1,
            names=list(range(width)),
            dtype={j: (np.float64 if j in float_cols else object) for j in range(width)},
            decimal=decimal,
            # an empty cell is NaN in a number column only: the text columns keep their cells
            # as they are ("" stays "", no fillna over 10^6 cells)
            na_values={j: [""] for j in float_cols},
            na_filter=True,
        )
        start = header_index + 2
        for frame in reader:
            if frame.shape[1] != width or not frame.index.equals(
                pd.RangeIndex(start - header_index - 2, start - header_index - 2 + len(frame))
            ):
                raise Fallback
            if all(j in float_cols for j in range(width)):
                # every column a number: the rows of one C-ordered copy (the values of
                # np.array(frame[j]), contiguous as they were, without a Series each)
                yield (
                    np.arange(start, start + len(frame), dtype=np.int64),
                    list(np.ascontiguousarray(frame.to_numpy(dtype=np.float64).T)),
                )
                start += len(frame)
                continue
            cols = []
            for j in range(width):
                if j in float_cols:
                    cols.append(np.array(frame[j], dtype=np.float64))
                else:
                    cols.append(frame[j].to_numpy(dtype=object))
            rows = np.arange(start, start + len(frame), dtype=np.int64)
            start += len(frame)
            yield rows, cols
    except (ValueError, TypeError, OverflowError, pd.errors.ParserError, UnicodeDecodeError):
        raise Fallback from None
    finally:
        handle.close()


def _header_decodes(src: Source, header_index: int) -> bool:
    """Whether the lines down to the one below the header decode in the file's encoding
    (strictly). The number reader skips the header; the text reader, which a guess stands in
    for, reads it and names a header the encoding cannot read."""
    handle = src.binary()
    try:
        text = io.TextIOWrapper(handle, encoding=src.encoding or "utf-8", newline="")
        for _ in range(header_index + 2):
            if not text.readline():
                break
        return True
    except (UnicodeDecodeError, LookupError):
        return False
    finally:
        handle.close()


def _translate_parser_error(exc, src: Source, header: list, sep: str) -> DataFileError:
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
            file=src.name,
            row=row,
            value=saw,
        )
    return DataFileError(
        f'the table cannot be split into cells ({msg.strip()}). Check quotes (") and '
        f"separators ({sep_name}) in the file, or save it again from the spreadsheet as CSV.",
        file=src.name,
    )
