"""The public readers: a path or uploaded bytes in, :class:`~studykit.io.values.Measurements` out.

Part of :mod:`studykit.io` (moved unchanged from ``studykit/data.py``).
"""

from __future__ import annotations

import os
import stat
from dataclasses import replace
from pathlib import Path

import numpy as np

from studykit.errors import DataFileError, StudyInputError
from studykit.io import plain
from studykit.io.assemble import Acc, assemble_long, assemble_wide, subgroup_messages
from studykit.io.cells import (
    CHARACTERISTIC_NAMES,
    NOTE_NAMES,
    STREAM_NAMES,
    SUBGROUP_NAMES,
    TIME_NAMES,
    UNIT_NAMES,
    VALUE_NAMES,
    Ctx,
    check_summary_rows,
    col_letter,
    fmt_rows,
    label_array,
    norm_header,
    parse_header,
    show,
    text_number,
)
from studykit.io.csv_reader import open_csv
from studykit.io.source import Source, Table, check_size, inspect
from studykit.io.values import Measurements
from studykit.io.xlsx_reader import check_unsaved_formulas, open_xlsx


def _regular_file(path) -> tuple[Path, int]:
    """(path, size) of an existing regular file; anything else is refused before reading."""
    if not isinstance(path, str | os.PathLike):
        raise StudyInputError(
            f"`path` must be the file's path (text or Path), not {type(path).__name__}; for "
            "file content in memory use read_measurements_bytes(data, filename)",
            value=path,
        )
    p = Path(path)
    if not p.exists():
        raise DataFileError(
            "the file does not exist. Check the path and the file name.", file=str(path)
        )
    if p.is_dir():
        raise DataFileError(
            "this is a folder, not a file. Give the path of a CSV or XLSX file.", file=str(path)
        )
    st = p.stat()  # stat does not open the file: a pipe or device is refused before reading
    if not stat.S_ISREG(st.st_mode):
        kind = (
            "a named pipe (FIFO)"
            if stat.S_ISFIFO(st.st_mode)
            else "a device"
            if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode)
            else "a socket"
            if stat.S_ISSOCK(st.st_mode)
            else "not a regular file"
        )
        raise DataFileError(
            f"this is {kind}, not a measurement file; studykit reads only regular files (a "
            "pipe or device could block or never end). Save the measurements to a CSV or XLSX "
            "file and give its path.",
            file=str(path),
        )
    return p, st.st_size


# long: the numpydoc of the public reader (about 60 lines); the body is about 20
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
    p, size = _regular_file(path)
    check_size(size, max_bytes, p.name)
    # a small file is read into memory: a plain table is then split without pandas
    # (studykit.io.plain.PLAIN_MAX_BYTES), which costs less than importing it
    data = p.read_bytes() if size <= plain.PLAIN_MAX_BYTES else None
    src = Source(name=p.name, path=p, data=data, size=size if data is None else len(data))
    return _read(
        src,
        sheet=sheet,
        layout=layout,
        subgroup_column=subgroup_column,
        subgroup_size=subgroup_size,
        characteristic_column=characteristic_column,
        value_column=value_column,
        time_column=time_column,
        note_column=note_column,
        encoding=encoding,
        stream_column=stream_column,
    )


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
    check_size(len(data), max_bytes, name)
    src = Source(name=name, path=None, data=data, size=len(data))
    return _read(src, **options)


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
        file=src_name,
        value=wanted,
    )


def _detect(header, names_set) -> int | None:
    for i, h in enumerate(header):
        if h and norm_header(h) in names_set:
            return i
    return None


def _read(src: Source, *, sheet=None, encoding=None, **options) -> Measurements:
    options = _checked_options(**options)
    notes: list[str] = []
    warnings_: list[str] = []
    table = _open_table(src, sheet, encoding, notes)
    try:
        return _read_table(src, table, notes, warnings_, **options)
    finally:
        table.close()


def _checked_options(
    *,
    layout="auto",
    subgroup_column=None,
    subgroup_size=None,
    characteristic_column=None,
    value_column=None,
    time_column=None,
    note_column=None,
    stream_column=None,
) -> dict:
    """The table options of :func:`read_measurements` (all but ``sheet`` and ``encoding``),
    checked before the file is read, with ``subgroup_size`` as an int; an unknown name fails
    here as it would in any call."""
    if layout not in ("auto", "wide", "long"):
        raise StudyInputError(
            f"`layout` must be 'auto', 'wide' or 'long', not '{layout}'.", value=layout
        )
    if subgroup_size is not None:
        subgroup_size = _checked_subgroup_size(subgroup_size, subgroup_column)
    return dict(locals())


def _checked_subgroup_size(subgroup_size, subgroup_column) -> int:
    if isinstance(subgroup_size, bool) or not isinstance(subgroup_size, int | np.integer):
        try:
            ok = not isinstance(subgroup_size, bool) and float(subgroup_size).is_integer()
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
    return subgroup_size


def _open_table(src: Source, sheet, encoding, notes) -> Table:
    """Detect the file's kind and encoding and open its table (notes on what was found)."""
    inspect(src, encoding)
    if src.kind == "xlsx":
        table = open_xlsx(src, sheet, notes)
    else:
        if sheet is not None:
            notes.append(
                f"`sheet` ('{sheet}') was ignored: the file is a text table, not a workbook"
            )
        table = open_csv(src)
        sep_name = {",": "comma", ";": "semicolon", "\t": "tab"}[table.separator]
        notes.append(
            f"text table: {sep_name}-separated, decimal sign '{table.decimal}', "
            f"encoding {src.encoding_label}"
        )
    if table.title_rows:
        a, b = table.title_rows
        span = f"row {a}" if a == b else f"rows {a} to {b}"
        notes.append(
            f"{span} above the header look like a title and were skipped; the header "
            f"is row {table.header_row}"
        )
    return table


def _read_table(
    src,
    table,
    notes,
    warnings_,
    *,
    layout,
    subgroup_column,
    subgroup_size,
    characteristic_column,
    value_column,
    time_column,
    note_column,
    stream_column=None,
):
    header = table.header
    _check_header(src, header, table.header_row)

    def find(wanted, what, option):
        return _find_column(header, wanted, what=what, option=option, src_name=src.name)

    role: dict[int, str] = {}
    layout = _layout(src, table, role, notes, find, layout, characteristic_column, value_column)
    sg_idx = _subgroup_role(header, role, notes, find, subgroup_column, subgroup_size)
    t_idx = _optional_role(header, role, time_column, TIME_NAMES, "time", find)
    n_idx = _optional_role(header, role, note_column, NOTE_NAMES, "note", find)
    st_idx = _optional_role(header, role, stream_column, STREAM_NAMES, "stream", find)
    subgroup_source = _subgroup_source(header, sg_idx, subgroup_column, subgroup_size, notes)
    if t_idx is not None:
        notes.append(f"times from column '{header[t_idx]}'")
    if n_idx is not None:
        notes.append(f"notes from column '{header[n_idx]}'")

    ctx = Ctx(src, table)
    assemble = assemble_wide if layout == "wide" else assemble_long
    try:
        result = assemble(src, table, ctx, role, subgroup_size, notes, warnings_)
    except DataFileError:
        if src.kind == "xlsx":  # the real cause of an "empty" label or cell, if there is one
            check_unsaved_formulas(src, table, damage_known=True)
        raise
    characteristics, n_rows = result
    if st_idx is not None:
        characteristics = _attach_streams(
            src, table, st_idx, characteristics, notes, given=stream_column is not None
        )
    check_summary_rows(src, characteristics, header, sg_idx, t_idx)
    if src.kind == "xlsx":
        _check_formulas(src, table, role, layout, characteristics)
    for col, k in ctx.text_numbers.items():
        notes.append(
            f"column '{col}': {k} number(s) stored as text in the workbook were read as numbers"
        )
    subgroup_messages(characteristics, subgroup_source, notes, warnings_)
    return Measurements(
        source=src.name,
        sha256=src.sha256,
        layout=layout,
        subgroup_source=subgroup_source,
        characteristics=tuple(characteristics),
        warnings=tuple(warnings_),
        notes=tuple(notes),
        subgroup_column=header[sg_idx] if sg_idx is not None else None,
        subgroup_size=subgroup_size,
        sheet=table.sheet,
        encoding=src.encoding_label if src.kind == "csv" else None,
        separator=table.separator,
        decimal=table.decimal if src.kind == "csv" else None,
        n_rows=n_rows,
    )


def _check_header(src, header, hrow) -> None:
    """Refuse a header of numbers only (no header row) and two columns of one name."""
    named = [h for h in header if h]
    if named and all(text_number(h) is not None for h in named):
        raise DataFileError(
            f"the first row holds numbers ('{show(named[0])}'), not column names. Add a header "
            "row that names each column (e.g. 'Diameter [mm]', 'Subgroup') above the values.",
            file=src.name,
            row=hrow,
            value=named[0],
        )
    seen: dict[str, int] = {}
    for j, h in enumerate(header):
        if not h:
            continue
        key = parse_header(h)[0].casefold()
        if key in seen:
            i = seen[key]
            raise DataFileError(
                f"columns {col_letter(i)} ('{header[i]}') and {col_letter(j)} ('{h}') have the "
                "same name. Every column needs its own name: rename one of them (for example "
                f"'{parse_header(h)[0]} 2').",
                file=src.name,
                row=hrow,
                column=h,
                value=h,
            )
        seen[key] = j


def _layout(src, table, role, notes, find, layout, characteristic_column, value_column):
    """``"long"`` when a characteristic and a value column are given or found by name, else
    ``"wide"``; the long table's columns (and a unit column) go into ``role``."""
    header = table.header
    if characteristic_column is not None or value_column is not None:
        if layout == "wide":
            raise StudyInputError(
                "`characteristic_column`/`value_column` describe a long table, but "
                "`layout='wide'` was given. Leave `layout` at 'auto' or set it to 'long'."
            )
        layout = "long"
    if layout not in ("auto", "long"):
        notes.append("wide layout (given): one column per characteristic, one row per part")
        return layout
    char_idx = (
        find(characteristic_column, "characteristic names", "characteristic_column")
        if characteristic_column is not None
        else _detect(header, CHARACTERISTIC_NAMES)
    )
    value_idx = (
        find(value_column, "values", "value_column")
        if value_column is not None
        else _detect(header, VALUE_NAMES)
    )
    if layout == "long" and (char_idx is None or value_idx is None):
        missing = "a characteristic column" if char_idx is None else "a value column"
        raise DataFileError(
            f"a long table needs {missing}, and none was found. Name the columns e.g. "
            "'Characteristic'/'Merkmal' and 'Value'/'Messwert', or give them with "
            "`characteristic_column` and `value_column`. The header has: "
            + ", ".join(f"'{h}'" for h in header if h)
            + ".",
            file=src.name,
            row=table.header_row,
        )
    if char_idx is None or value_idx is None:
        notes.append(
            "wide layout (detected): one column per characteristic, one row per part, "
            "rows in production order"
        )
        return "wide"
    why = "given" if characteristic_column or value_column else "detected"
    notes.append(
        f"long layout ({why}): characteristic names in '{header[char_idx]}', values in "
        f"'{header[value_idx]}'"
    )
    role[char_idx] = "characteristic"
    role[value_idx] = "value"
    unit_idx = _detect(header, UNIT_NAMES)
    if unit_idx is not None and unit_idx not in role:
        role[unit_idx] = "unit"
    return "long"


def _subgroup_role(header, role, notes, find, subgroup_column, subgroup_size):
    """The subgroup column (given, or detected unless a subgroup size is given), or None."""
    sg_idx = None
    if subgroup_column is not None:
        sg_idx = find(subgroup_column, "subgroup labels", "subgroup_column")
    else:
        cand = _detect(header, SUBGROUP_NAMES)
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
    return sg_idx


def _subgroup_source(header, sg_idx, subgroup_column, subgroup_size, notes) -> str:
    """``"column"``, ``"size"`` or ``"none"``, with the note that says so."""
    if sg_idx is not None:
        how = "given" if subgroup_column is not None else "detected"
        notes.append(f"subgroups from column '{header[sg_idx]}' ({how})")
        return "column"
    if subgroup_size is not None:
        notes.append(f"subgroups of {subgroup_size} consecutive values (given size)")
        return "size"
    notes.append(
        "no subgroups: values are individuals (no subgroup column found; name one e.g. "
        "'Subgroup' or 'Stichprobe', or give a subgroup size)"
    )
    return "none"


def _check_formulas(src, table, role, layout, characteristics) -> None:
    """Look for unsaved formulas where a workbook's cells or columns came out empty."""
    header = table.header
    if layout == "wide":
        # the first empty cell of each value column is where an unsaved formula would show
        targets: dict[int, int] = {}
        by_name = {c.name: c for c in characteristics}
        for j, h in enumerate(header):
            if not h or j in role:
                continue
            c = by_name.get(parse_header(h)[0])
            if c is None:  # a skipped (empty) column
                targets[j] = table.header_row + 1
            elif c.n_missing:
                targets[j] = int(c.rows[int(np.argmax(np.isnan(c.values)))])
        if targets:
            check_unsaved_formulas(src, table, targets)
    elif any(c.n_missing for c in characteristics):
        check_unsaved_formulas(src, table)


def _attach_streams(src, table, j, characteristics, notes, *, given):
    """Give each characteristic the stream label of each of its values (from column ``j``).

    The stream column has its own role, so it is never read as a measurement; its labels are
    read in a second pass and matched to the values by file row. A value without a label is
    refused with its row.
    """
    name = table.header[j]
    rows_acc, lab_acc = Acc(), Acc()
    for rows, cols in table.open_chunks():
        rows_acc.add(rows)
        cells = cols[j] if j < len(cols) else np.full(len(rows), "", dtype=object)
        lab_acc.add(label_array(cells, table.text_cells).astype(str))
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
                f"(rows without a label: {fmt_rows(c.rows[bad])}). Fill in the stream of each "
                "row, or rename the column if it does not name streams.",
                file=src.name,
                row=int(c.rows[i]),
                column=name,
                value="",
            )
        out.append(replace(c, streams=lab))
    k = len(dict.fromkeys(labels[labels != ""].tolist()))
    notes.append(
        f"streams from column '{name}' ({'given' if given else 'detected'}): {k} stream(s)"
    )
    return out


def _optional_role(header, role, given, names_set, what, find):
    if given is not None:
        j = find(given, f"{what}s", f"{what}_column")
        if j in role:
            raise StudyInputError(
                f"column '{header[j]}' is already used for {role[j]}s; give another column "
                f"as `{what}_column`.",
                value=given,
            )
    else:
        j = _detect(header, names_set)
        if j is None or j in role:
            return None
    role[j] = what
    return j
