"""XLSX tables: package checks (zip bombs), the header row, merged cells and chunked rows.

Part of :mod:`studykit.io` (moved unchanged from ``studykit/data.py``).
"""

from __future__ import annotations

import re
import zipfile
import zlib
from pathlib import Path

import numpy as np

from studykit.errors import DataFileError, StudyInputError
from studykit.io.cells import cell_text, col_letter, show
from studykit.io.source import READ_BLOCK, Source, Table, human_size

_XLSX_CHUNK_ROWS = 20_000
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


def _check_xlsx_package(src: Source) -> None:
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
            f"the Excel file holds {len(infos)} parts, more than the {XLSX_MAX_MEMBERS} "
            "a spreadsheet has; it is not read. Export the measurements as CSV, or save them "
            "in a new Excel file.",
            file=src.name,
            value=len(infos),
        )
    for info in infos:
        if info.file_size > _XLSX_RATIO_FROM and info.file_size > XLSX_MAX_RATIO * max(
            info.compress_size, 1
        ):
            ratio = info.file_size / max(info.compress_size, 1)
            raise DataFileError(
                f"part '{show(info.filename)}' of the Excel file unpacks from "
                f"{human_size(info.compress_size)} to {human_size(info.file_size)} "
                f"({ratio:.0f} times; spreadsheet programs pack about 5 to 15 times, the limit "
                f"is {XLSX_MAX_RATIO}). A file packed this tightly is built to exhaust memory "
                "(a 'zip bomb') and is not read. If it is a genuine export, save the "
                "measurements as CSV and load that file.",
                file=src.name,
                value=info.filename,
            )
    total = sum(i.file_size for i in infos)
    if total > XLSX_MAX_UNPACKED:
        raise DataFileError(
            f"the Excel file unpacks to {human_size(total)}, more than the limit of "
            f"{human_size(XLSX_MAX_UNPACKED)}. Save the measurements as CSV (read in pieces, "
            "without this limit), or split the Excel file.",
            file=src.name,
            value=total,
        )


def _xlsx_reason(exc: BaseException) -> str:
    """Plain words for what a damaged workbook's parser ran into."""
    import xml.parsers.expat
    from xml.etree.ElementTree import ParseError

    text = show(exc) if str(exc) else type(exc).__name__
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


def _xlsx_open_failure(src: Source, exc: BaseException) -> DataFileError:
    return DataFileError(
        f"the Excel file cannot be opened ({_xlsx_reason(exc)}). It may be damaged or protected "
        "with a password. Open it in the spreadsheet program and save it again as .xlsx, or "
        "export the measurements as CSV.",
        file=src.name,
    )


def _xlsx_failure(src: Source, exc: BaseException, *, sheet=None, row=None) -> DataFileError:
    """Any failure of the workbook parser as one user message (file, sheet and row if known)."""
    if isinstance(exc, StudyInputError):
        return exc
    where = f" near row {row}" if row is not None else ""
    return DataFileError(
        f"the Excel file is damaged and cannot be read{where}: {_xlsx_reason(exc)}. Open it in "
        "the spreadsheet program and save it again as .xlsx (or export the measurements as "
        "CSV), then load that file.",
        file=src.name,
        sheet=sheet,
    )


def open_xlsx(src: Source, sheet: str | None, notes: list) -> Table:
    _check_xlsx_package(src)
    try:
        return _open_xlsx_inner(src, sheet, notes)
    except StudyInputError:
        raise
    except Exception as exc:  # noqa: BLE001 - a damaged workbook can fail anywhere in the parser
        raise _xlsx_failure(src, exc, sheet=sheet) from None


def _open_xlsx_inner(src: Source, sheet: str | None, notes: list) -> Table:
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
                + ", ".join(f"'{n}'" for n in names)
                + "); choose another with `sheet`."
            )
    else:
        matches = [n for n in names if n == sheet] or [
            n for n in names if n.strip().casefold() == str(sheet).strip().casefold()
        ]
        if not matches:
            wb.close()
            raise DataFileError(
                f"the workbook has no sheet named '{sheet}'. Its sheets are: "
                + ", ".join(f"'{n}'" for n in names)
                + ". Give one of these names.",
                file=src.name,
                value=sheet,
            )
        sheet_name = matches[0]
    ws = wb[sheet_name]
    if hasattr(ws, "reset_dimensions"):
        ws.reset_dimensions()  # some writers store wrong dimensions; read every cell
    if src.path is not None and Path(src.name).suffix.lower() not in (".xlsx", ".xlsm"):
        notes.append("the file is an Excel file (.xlsx) despite its name; read it as .xlsx")

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
            file=src.name,
            value=sheet_name,
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
            header = [("" if v is None else cell_text(v)) for v in values]
            header_row = r
        if n_filled >= 2:
            header = [("" if v is None else cell_text(v)) for v in values]
            header_row = r
            break
        if r - first_row >= 10:
            break
    return header, header_row, first_row


def _xlsx_table(src, wb, ws, sheet_name, merged, header, header_row, first_row) -> Table:
    fill = _merged_fill(src, wb, merged, header, header_row)

    def chunks():
        at = [header_row]  # the last row read, for the message if the next one fails
        try:  # a damaged sheet fails while its rows are read: say where
            yield from _xlsx_rows(src, ws, header_row, len(header), at)
        except StudyInputError:
            raise
        except Exception as exc:  # noqa: BLE001 - any parser failure on a damaged sheet
            raise _xlsx_failure(src, exc, sheet=sheet_name, row=at[0] + 1) from None

    return Table(
        header=header,
        header_row=header_row,
        open_chunks=chunks,
        text_cells=False,
        merged_fill=fill,
        sheet=sheet_name,
        close=wb.close,
        title_rows=(first_row, header_row - 1) if header_row > first_row else None,
    )


def _merged_fill(src, wb, merged, header, header_row) -> dict[int, list]:
    """{column index: [(first row, last row), ...]} of the merged ranges below the header
    (one column each); merged header cells are refused."""
    fill: dict[int, list] = {}
    for r1, c1, r2, c2 in merged:
        if r1 <= header_row <= r2 and (c1 != c2 or r1 != r2):
            span = f"{col_letter(c1 - 1)}{r1}:{col_letter(c2 - 1)}{r2}"
            wb.close()
            raise DataFileError(
                f"the header cells {span} are merged. Every column needs its own name in the "
                "header row: unmerge these cells and write a name into each column (for example "
                "'Diameter 1', 'Diameter 2'), or put the header in a single row.",
                file=src.name,
                row=header_row,
                column=header[c1 - 1] if c1 - 1 < len(header) else None,
                value=span,
            )
        if r1 > header_row and c1 == c2:
            fill.setdefault(c1 - 1, []).append((r1, r2))
    return fill


def _xlsx_rows(src, ws, header_row, width, at):
    """The rows below the header in chunks of (rows, columns); ``at[0]`` is the row being read."""
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
            _refuse_unnamed_values(src, values, width, r)
        if len(rows_buf) >= _XLSX_CHUNK_ROWS:
            yield _xlsx_chunk(rows_buf, cols_buf)
            rows_buf = []
            cols_buf = [[] for _ in range(width)]
    if rows_buf:
        yield _xlsx_chunk(rows_buf, cols_buf)


def _refuse_unnamed_values(src, values, width, r) -> None:
    """Refuse a value to the right of the last named column."""
    for j in range(width, len(values)):
        v = values[j]
        if v is not None and str(v).strip() != "":
            raise DataFileError(
                f"there is a value ('{show(v)}') in column "
                f"{col_letter(j)}, which has no name in the header row. "
                "Give the column a name in the header or delete the value.",
                file=src.name,
                row=r,
                column=col_letter(j),
                value=v,
            )


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
            block = fh.read(READ_BLOCK)
            if not block:
                break
            buf = tail + block
            for m in pattern.finditer(buf):
                c1, r1, c2, r2 = range_boundaries(m.group(1).decode())
                out.append((r1, c1, r2, c2))
            tail = buf[-300:]
    return sorted(set(out))


def check_unsaved_formulas(
    src, table, targets: dict[int, int] | None = None, *, damage_known: bool = False
) -> None:
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
                        raise _unsaved_formula(src, table, r, j, f)
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
        pairs = zip(
            ws.iter_rows(min_row=start, max_col=width, values_only=True),
            ws_values.iter_rows(min_row=start, max_col=width, values_only=True),
            strict=False,
        )
        for r, (formulas, values) in enumerate(pairs, start=start):
            for j, f in enumerate(formulas or ()):
                v = values[j] if values is not None and j < len(values) else None
                if v is None and isinstance(f, str) and f.startswith("="):
                    raise _unsaved_formula(src, table, r, j, f)
    finally:
        wb.close()
        wb_values.close()
        handle.close()
        handle_values.close()


def _unsaved_formula(src, table, r: int, j: int, formula: str) -> DataFileError:
    """The message for a formula cell (row ``r``, column index ``j``) with no stored result."""
    return DataFileError(
        f"the cell holds the formula '{show(formula)}' but no stored result: the "
        "workbook was saved by a program that does not calculate formulas, so "
        "the value is unknown. Open the workbook in a spreadsheet program, let "
        "it calculate, save it, and load it again (or paste the values).",
        file=src.name,
        row=r,
        column=table.header[j] or col_letter(j),
        value=formula,
    )
