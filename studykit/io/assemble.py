"""Assembly: wide or long tables turned into one :class:`~studykit.io.values.CharacteristicData`
per characteristic (subgroups, times, notes, row numbers).

Part of :mod:`studykit.io` (moved unchanged from ``studykit/data.py``).
"""

from __future__ import annotations

import functools

import numpy as np

from studykit.errors import DataFileError
from studykit.io import plain
from studykit.io.cells import (
    check_text_column,
    col_letter,
    filled_mask,
    fmt_rows,
    label_array,
    looks_numeric,
    numeric,
    parse_header,
    plain_numbers,
    row_word,
    show,
    time_header_hint,
    times_chunk,
    times_text,
)
from studykit.io.source import Fallback
from studykit.io.values import LARGE_SUBGROUP, CharacteristicData


def _check_unnamed(src, header, hrow, j, cells, rows, text_cells):
    filled = filled_mask(cells, text_cells)
    if filled.any():
        i = int(np.flatnonzero(filled)[0])
        letter = col_letter(j)
        if j >= len(header):
            why = (
                f"this row has a value ('{show(cells[i])}') in column {letter}, beyond the "
                f"{len(header)} named columns. Give the column a name in the header "
                f"(row {hrow}) or delete the value; check for an extra separator."
            )
        else:
            why = (
                f"column {letter} has values (here '{show(cells[i])}') but no name in the "
                f"header (row {hrow}). Write a name into the header cell."
            )
        raise DataFileError(why, file=src.name, row=int(rows[i]), column=letter, value=cells[i])


class Acc:
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
        self.codes = Acc()

    def add(self, labels: np.ndarray) -> None:
        local, uniq = plain.factorize(labels)
        mapping = np.array(
            [self.index.setdefault(u, len(self.index)) for u in uniq], dtype=np.int64
        )
        self.codes.add(mapping[local].astype(np.int32) if mapping.size else local.astype(np.int32))

    def labels(self) -> np.ndarray:
        labels = np.empty(len(self.index), dtype=object)
        labels[:] = list(self.index)
        return labels

    def result_codes(self) -> np.ndarray:
        return self.codes.result(np.int32)

    def result(self) -> np.ndarray:
        return self.labels()[self.result_codes()]


def _text_times(cells: np.ndarray, fmt: str | None):
    """``times_chunk`` of a chunk of text cells (CSV) in one parse, or None.

    The format is found as :func:`times_chunk` finds it (on the first 500 filled cells, or the
    format of the chunks before); then the raw cells are parsed with it at once, without stripping each cell in Python. The exact
    format rejects a cell with blanks around it (or of blanks only), so a successful parse
    reads every cell as the stripped one would be read. Returns ``(times, format, filled)``
    (``filled``: the cell is not empty), or None when anything needs the cell-by-cell route.
    """
    if fmt is not None:  # the format of the chunks before: times_chunk would try it alone
        try:
            out = plain.to_datetime64(cells, fmt)
        except (ValueError, TypeError):
            return None
        return out, fmt, np.asarray(cells != "", dtype=bool)
    sample = []
    for v in cells:
        t = v.strip() if isinstance(v, str) else None
        if t is None:
            return None
        if t:
            sample.append(t)
            if len(sample) == 500:
                break
    if not sample:
        return None
    head = np.empty(len(sample), dtype=object)
    head[:] = sample
    parsed, f = times_chunk(head, fmt)
    if parsed is None or f is None:
        return None
    try:
        out = plain.to_datetime64(cells, f)
    except (ValueError, TypeError):
        return None
    return out, f, np.asarray(cells != "", dtype=bool)


class _TimeAcc:
    """Time cells, converted chunk by chunk to datetime64 while one format fits."""

    def __init__(self, text_cells: bool = False):
        self.parts: list[np.ndarray] = []
        self.fmt: str | None = None
        self.as_text = False
        self.text_cells = text_cells

    def add(self, cells: np.ndarray) -> np.ndarray | None:
        """Add a chunk; returns its filled mask when the fast route of text cells knew it."""
        if not self.as_text:
            if self.text_cells:
                fast = _text_times(cells, self.fmt)
                if fast is not None:
                    parsed, self.fmt, filled = fast
                    self.parts.append(parsed)
                    return filled
            parsed, fmt = times_chunk(cells, self.fmt)
            if parsed is not None:
                self.fmt = fmt or self.fmt
                self.parts.append(parsed)
                return None
            self.as_text = True
            self.parts = [times_text(p) for p in self.parts]
        self.parts.append(times_text(cells))
        return None

    def result(self, notes: list) -> np.ndarray:
        if self.as_text:
            notes.append(
                "times kept as text: not all time cells could be read as one "
                "date/time format (e.g. 2025-03-01 08:00 or 01.03.2025 08:00)"
            )
            out = np.concatenate(self.parts) if self.parts else np.empty(0, dtype=object)
            return out
        if not self.parts:
            return np.empty(0, dtype="datetime64[ns]")
        return np.concatenate(self.parts)


def _with_fast_path(table, float_cols, collect):
    if table.fast_chunks is not None and float_cols:
        try:
            return collect(table.fast_chunks(float_cols))
        except (Fallback, DataFileError):
            pass  # the cell-by-cell reader below finds the cell and says what is wrong
    return collect(table.open_chunks())


def _named_kinds(table, role) -> dict:
    """The kinds the header alone gives (``unnamed``, a role) and ``value`` for every other
    column: the classification of a table whose named columns all hold numbers."""
    header = table.header
    return {j: "unnamed" if not header[j] else role.get(j, "value") for j in range(len(header))}


def _collect_all_numeric(table, role, collect):
    """The collected chunks (:func:`_collect_wide`) when the fast number reader reads every
    named column that has no role as numbers, else None.

    Such a table is classified as it would be cell by cell (:func:`_classify`): a cell the
    fast reader turns into a finite number is one :func:`looks_numeric` counts (an infinite
    one makes it give up), so every such column is a ``value`` column. The text reading of the
    first chunk that classification needs (a second pass over the file) is then skipped."""
    if table.fast_chunks is None:
        return None
    kinds = _named_kinds(table, role)
    float_cols = {j for j, k in kinds.items() if k == "value"}
    if not float_cols:
        return None
    try:
        return collect(kinds, float_cols, table.fast_chunks(float_cols, guess=True))
    except (Fallback, DataFileError):
        return None  # a text cell, an odd form: classified and read as before


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
            n_filled, n_num = looks_numeric(ctx, cols[j])
            kinds[j] = "value" if n_num * 2 >= n_filled else "text"
    text_cols = [header[j] for j, k in kinds.items() if k == "text"]
    if text_cols:
        notes.append(
            "columns holding text, not read as measurements: "
            + ", ".join(f"'{h}'" for h in text_cols)
        )
    return kinds


def role_index(role: dict, what: str) -> int | None:
    """The column index holding role ``what`` (``"subgroup"``, ``"time"``, ...), or None."""
    return next((j for j, r in role.items() if r == what), None)


def _read_wide(src, table, ctx, role, notes):
    """The collected chunks of a wide table (:func:`_collect_wide`): by the all-numbers guess
    when it holds, else classified first."""
    collect = functools.partial(_collect_wide, src, table, ctx)
    collected = _collect_all_numeric(table, role, collect)
    if collected is not None:
        return collected
    kinds = _classify(table, ctx, role, notes)
    float_cols = {j for j, k in kinds.items() if k == "value"}
    return _with_fast_path(table, float_cols, functools.partial(collect, kinds, float_cols))


def assemble_wide(src, table, ctx, role, subgroup_size, notes, warnings_):
    """One characteristic per value column; the columns' roles (subgroup, time, note) in
    ``role``. Returns (characteristics, number of rows read)."""
    header = table.header
    sg_idx, t_idx, n_idx = (role_index(role, r) for r in ("subgroup", "time", "note"))
    rows_acc, filled_acc, value_acc, sg_acc, t_acc, n_acc = _read_wide(src, table, ctx, role, notes)
    rows = rows_acc.result(np.int64)
    filled = filled_acc.result(bool)
    _refuse_no_values(src, table, filled, "part")
    last = int(np.flatnonzero(filled)[-1]) + 1
    filled = filled[:last]
    rows = rows[:last]
    sg = sg_acc.result_codes()[:last] if sg_idx is not None else None
    empty_code = sg_acc.index.get("", -1)
    if sg is not None:
        sg = _fill_merged(
            sg, rows, table.merged_fill.get(sg_idx, ()), notes, header[sg_idx], empty_code
        )
    keep = _empty_rows(rows, filled, sg is not None, notes)
    all_kept = bool(keep.all())

    def kept(a):
        return a if all_kept else a[keep]

    rows = kept(rows)
    if sg is not None:
        codes = kept(sg)
        _refuse_unlabelled(src, header[sg_idx], rows, codes, empty_code, lead=_NO_LABEL_WIDE)
        labels_of = sg_acc.labels().astype(str).__getitem__
    else:
        codes = np.arange(rows.size) // (subgroup_size or 1)
        labels_of = _position_labels
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
        characteristics.append(
            _make_char(name, unit, vals, subgroups, grouping, times, note_arr, rows, warnings_)
        )
    if empty_cols:
        notes.append("empty columns skipped: " + ", ".join(f"'{h}'" for h in empty_cols))
    if not characteristics:
        raise DataFileError(
            "no column holds measurements. Each characteristic needs its own column of numbers "
            "under a header name; the columns found were: "
            + ", ".join(f"'{h}'" for h in header if h)
            + "."
            + time_header_hint(header, t_idx, times),
            file=src.name,
            row=table.header_row,
        )
    if t_idx is not None and plain_numbers(times):
        warnings_.append(time_header_hint(header, t_idx, times).strip())
    return characteristics, int(rows.size)


def _collect_wide(src, table, ctx, kinds, float_cols, chunks):
    """Read the chunks of a wide table: rows, filled-row masks, values, subgroups, times, notes."""
    header = table.header
    rows_acc = Acc()
    filled_acc = Acc()
    value_acc = {j: Acc() for j in float_cols}
    sg_acc, t_acc, n_acc = _LabelAcc(), _TimeAcc(table.text_cells), _LabelAcc()
    for rows, cols in chunks:
        row_filled = np.zeros(len(rows), dtype=bool)
        for j, cells in enumerate(cols):
            k = kinds.get(j, "unnamed")
            if k == "unnamed":
                _check_unnamed(src, header, table.header_row, j, cells, rows, table.text_cells)
                continue
            if k == "value":
                vals, empty = numeric(ctx, cells, rows, header[j])
                value_acc[j].add(vals)
                row_filled |= ~empty
            elif k == "time":
                filled = t_acc.add(cells)
                row_filled |= filled if filled is not None else filled_mask(cells, table.text_cells)
            else:
                row_filled |= filled_mask(cells, table.text_cells)
                if k == "text":
                    check_text_column(src.name, cells, rows, header[j])
                elif k == "subgroup":
                    sg_acc.add(label_array(cells, table.text_cells))
                elif k == "note":
                    n_acc.add(label_array(cells, table.text_cells))
        rows_acc.add(rows)
        filled_acc.add(row_filled)
    return rows_acc, filled_acc, value_acc, sg_acc, t_acc, n_acc


def _refuse_no_values(src, table, filled, per: str) -> None:
    """Refuse a table with a header and nothing below it (``per``: one row per part or value)."""
    if not filled.any():
        raise DataFileError(
            "the file has a header but no values below it. Add the measurements, one row per "
            f"{per}, under the column names.",
            file=src.name,
            row=table.header_row + 1,
        )


def _empty_rows(rows, filled, skip: bool, notes) -> np.ndarray:
    """The rows to keep: empty rows inside a wide table are skipped when subgroups come from
    a column (``skip``), else kept as missing values; a note says which."""
    keep = np.ones(rows.size, dtype=bool)
    interior_empty = np.flatnonzero(~filled)
    if interior_empty.size:
        if skip:
            keep[interior_empty] = False
            notes.append(
                f"empty {row_word(interior_empty.size)} skipped: {fmt_rows(rows[interior_empty])}"
            )
        else:
            notes.append(
                "empty rows kept as missing values (they may be parts that were not measured): "
                + fmt_rows(rows[interior_empty])
            )
    return keep


#: the start of the message for a row without a subgroup label (wide, long table)
_NO_LABEL_WIDE = "this row has values but no subgroup label. Every row needs its subgroup in"
_NO_LABEL = "this row has no subgroup label in"


def _refuse_unlabelled(src, column, rows, codes, empty_code, *, lead: str) -> None:
    """Refuse rows without a subgroup label (``codes == empty_code``) at the first one."""
    no_label = np.flatnonzero(codes == empty_code)
    if no_label.size:
        raise DataFileError(
            f"{lead} column '{column}' (rows without a label: {fmt_rows(rows[no_label])}). "
            "Fill in the labels, or leave out the subgroup column to read individuals.",
            file=src.name,
            row=int(rows[int(no_label[0])]),
            column=column,
            value="",
        )


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
    if codes.size > 1000 and codes[0] == 0 and np.array_equal(codes, np.arange(codes.size)):
        return _counting_labels(codes.size)  # individuals: '1'..'n', 4x faster than astype
    return (codes + 1).astype(f"<U{width}")


def _counting_labels(n: int) -> np.ndarray:
    """``'1', '2', ..., str(n)`` as a ``<U{digits of n}`` array, written digit by digit: the
    numbers of each length are one block of rows, each digit one column of code points. The
    last three digits repeat every 1000 numbers and the digits before them change once every
    1000 numbers, so each block is written from a table of 000-999 and the few distinct
    leading parts (contiguous copies instead of one division per digit and row)."""
    width = len(str(n))
    chars = np.zeros((n, width), dtype="<u4")  # little-endian code points, as "<U"
    three = np.arange(1000)
    table = np.stack([three // 100, three // 10 % 10, three % 10], axis=1).astype("<u4") + 48
    lo = 1
    for length in range(1, width + 1):
        hi = min(n, 10**length - 1)  # the numbers lo..hi have `length` digits
        block = chars[lo - 1 : hi]
        tail = min(length, 3)
        # the last `tail` digits: the table's rows lo % 1000 ... hi % 1000, repeating
        reps = np.resize(table[:, 3 - tail :], (lo % 1000 + hi - lo + 1, tail))
        block[:, length - tail : length] = reps[lo % 1000 :]
        if length > 3:
            heads = np.arange(lo // 1000, hi // 1000 + 1, dtype=np.int64)  # the leading parts
            digits = np.empty((heads.size, length - 3), dtype="<u4")
            for j in range(length - 3):
                digits[:, j] = heads // 10 ** (length - 4 - j) % 10 + 48
            # each leading part stands on the rows of its 1000 numbers within lo..hi
            starts = np.maximum(heads * 1000, lo) - lo
            ends = np.minimum(heads * 1000 + 999, hi) - lo + 1
            block[:, : length - 3] = np.repeat(digits, ends - starts, axis=0)
        lo = hi + 1
    return chars.view(f"<U{width}").reshape(n)


def _grouping(codes, labels_of):
    """(codes 0..k-1 in order of first appearance, the k labels as str array)."""
    codes = np.asarray(codes)
    if codes.size:
        # codes that already run 0, 1, 2, ... in order of first appearance need no factorizing
        running_max = np.maximum.accumulate(codes)
        if codes[0] == 0 and np.all(codes[1:] <= running_max[:-1] + 1):
            k = int(running_max[-1]) + 1
            return codes, np.asarray(labels_of(np.arange(k))).astype(str)
    local, uniq = plain.factorize(codes)
    return local, np.asarray(labels_of(np.asarray(uniq))).astype(str)


def _make_char(name, unit, vals, subgroups, grouping, times, notes_arr, rows, warnings_):
    """Build one CharacteristicData; `grouping` comes from :func:`_grouping`."""
    local, group_labels = grouping
    missing = np.isnan(vals)
    n_missing = int(missing.sum())
    valid = vals[~missing] if n_missing else vals
    if len(group_labels) == local.size:  # every row its own subgroup: local is 0, 1, 2, ...
        counts = (~missing).astype(np.int64)
    else:
        counts = np.bincount(local, weights=(~missing).astype(float), minlength=len(group_labels))
    if n_missing:
        warnings_.append(
            f"'{name}': {n_missing} empty cell(s) ({row_word(n_missing)} "
            f"{fmt_rows(rows[missing])}); the analysis leaves them out"
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
        name=name,
        unit=unit,
        values=vals,
        subgroups=subgroups,
        times=times,
        notes=notes_arr,
        rows=rows,
        n_missing=n_missing,
        is_integer=_all_whole(valid),
        subgroup_labels=group_labels,
        subgroup_counts=counts.astype(np.int64),
    )


def _all_whole(valid: np.ndarray) -> bool:
    """Every value is a whole number (and there is one): the first 1,000 decide most files."""
    if not valid.size:
        return False
    head = valid[:1000]
    if not np.all(np.floor(head) == head):
        return False
    return bool(np.all(np.floor(valid) == valid))


def subgroup_messages(chars, subgroup_source, notes, warnings_):
    if subgroup_source == "none":
        return
    groups: dict[tuple, list[str]] = {}
    for c in chars:
        sizes = c.subgroup_counts
        filled = sizes[sizes > 0]
        msgs = []
        if filled.size < 2:
            msgs.append(
                (
                    "warn",
                    f"values in only {filled.size} subgroup(s); a subgrouped analysis needs at "
                    "least 2 (common practice: 25 or more)",
                )
            )
        if filled.size and filled.min() != filled.max():
            vals, cnt = np.unique(filled, return_counts=True)
            dist = ", ".join(
                f"{k} x size {v}" for v, k in zip(vals.tolist(), cnt.tolist(), strict=True)
            )
            msgs.append(("note", f"unequal subgroup sizes: {dist} (allowed; limits vary)"))
            if filled.min() == 1:
                single = c.subgroup_labels[sizes == 1].tolist()
                shown = ", ".join(f"'{x}'" for x in single[:5]) + (
                    f" and {len(single) - 5} more" if len(single) > 5 else ""
                )
                msgs.append(
                    (
                        "warn",
                        f"{len(single)} subgroup(s) hold a single value ({shown}) while others hold "
                        f"up to {int(filled.max())}: X-bar charts need at least 2 values in every "
                        "subgroup. Merge or exclude them, or read the values as individuals",
                    )
                )
        if filled.size and filled.max() > LARGE_SUBGROUP:
            msgs.append(
                (
                    "warn",
                    f"subgroups of up to {int(filled.max())} values (more than {LARGE_SUBGROUP}); "
                    "allowed, but an X-bar/S chart suits large subgroups better than X-bar/R",
                )
            )
        # a label that comes back after other labels
        sg = c.subgroups
        if sg.size > 1:
            changes = int(np.count_nonzero(sg[1:] != sg[:-1])) + 1
            if changes > c.n_subgroups:
                msgs.append(
                    (
                        "warn",
                        "some subgroup labels appear in separate blocks of rows; rows of one "
                        "subgroup are expected together, in production order",
                    )
                )
        for kind, text in msgs:
            groups.setdefault((kind, text), []).append(c.name)
    for (kind, text), names in groups.items():
        who = (
            "all characteristics"
            if len(names) == len(chars) and len(chars) > 1
            else ", ".join(f"'{n}'" for n in names)
        )
        (warnings_ if kind == "warn" else notes).append(f"{who}: {text}")


def assemble_long(src, table, ctx, role, subgroup_size, notes, warnings_):
    """One characteristic per name in the characteristic column of a long table; the columns'
    roles (characteristic, value, subgroup, time, note, unit) in ``role``. Returns
    (characteristics, number of rows read)."""
    header = table.header
    char_idx, value_idx, sg_idx, t_idx, n_idx, unit_idx = (
        role_index(role, r) for r in ("characteristic", "value", "subgroup", "time", "note", "unit")
    )
    others = [h for j, h in enumerate(header) if h and j not in role]
    if others:
        notes.append("columns not used in the long layout: " + ", ".join(f"'{h}'" for h in others))
    collect = functools.partial(
        _collect_long, src, table, ctx, (char_idx, value_idx, sg_idx, t_idx, n_idx, unit_idx)
    )
    name_acc, val_acc, rows_acc, filled_acc, sg_acc, t_acc, n_acc, unit_acc = _with_fast_path(
        table, {value_idx}, collect
    )
    filled = filled_acc.result(bool)
    _refuse_no_values(src, table, filled, "value")
    rows = rows_acc.result(np.int64)
    last = int(np.flatnonzero(filled)[-1]) + 1
    interior = np.flatnonzero(~filled[:last])
    if interior.size:
        notes.append(f"empty rows skipped: {fmt_rows(rows[interior])}")
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
        _refuse_unlabelled(src, header[sg_idx], rows, sg, sg_acc.index.get("", -1), lead=_NO_LABEL)
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
        _refuse_second_spelling(src, header[char_idx], seen_names, raw_name, name)
        if units_all is not None:
            unit = _long_unit(src, header[unit_idx], name, units_all[idx], rows[idx]) or unit
        if sg is not None:
            ccodes = sg[idx]
            labels_of = label_text.__getitem__
        else:
            ccodes = np.arange(idx.size) // (subgroup_size or 1)
            labels_of = _position_labels
        characteristics.append(
            _make_char(
                name,
                unit,
                vals[idx],
                labels_of(ccodes),
                _grouping(ccodes, labels_of),
                times_all[idx] if times_all is not None else None,
                notes_all[idx] if notes_all is not None else None,
                rows[idx],
                warnings_,
            )
        )
    return _with_values(src, table, characteristics, header[value_idx], notes), int(rows.size)


def _with_values(src, table, characteristics, value_column, notes):
    """The characteristics of a long table that have a value (a note names the others); none
    at all is refused."""
    empty = [c.name for c in characteristics if c.n_valid == 0]
    if empty:
        notes.append(
            "characteristics without any value skipped: " + ", ".join(f"'{n}'" for n in empty)
        )
    characteristics = [c for c in characteristics if c.n_valid > 0]
    if not characteristics:
        raise DataFileError(
            f"column '{value_column}' holds no values. Add the measured values.",
            file=src.name,
            column=value_column,
            row=table.header_row + 1,
        )
    return characteristics


def _collect_long(src, table, ctx, columns, chunks):
    """Read the chunks of a long table: names, values, rows, filled-row masks, subgroups,
    times, notes and units (``columns``: their indices, None for a column not there)."""
    char_idx, value_idx, sg_idx, t_idx, n_idx, unit_idx = columns
    header = table.header
    name_acc, val_acc, rows_acc, filled_acc = _LabelAcc(), Acc(), Acc(), Acc()
    sg_acc, t_acc, n_acc, unit_acc = (
        _LabelAcc(),
        _TimeAcc(table.text_cells),
        _LabelAcc(),
        _LabelAcc(),
    )
    for rows, cols in chunks:
        for j in range(len(cols)):
            if j >= len(header) or not header[j]:
                _check_unnamed(src, header, table.header_row, j, cols[j], rows, table.text_cells)
        names = label_array(cols[char_idx], table.text_cells)
        vals, empty = numeric(ctx, cols[value_idx], rows, header[value_idx])
        row_filled = ~empty | (names != "")
        for j in (sg_idx, t_idx, n_idx, unit_idx):
            if j is not None and j < len(cols):
                row_filled |= filled_mask(cols[j], table.text_cells)
        bad = row_filled & (names == "")
        if bad.any():
            raise DataFileError(
                f"this row has no characteristic name in column '{header[char_idx]}'. "
                "Every row of a long table names the characteristic its value belongs to.",
                file=src.name,
                row=int(rows[int(np.flatnonzero(bad)[0])]),
                column=header[char_idx],
                value="",
            )
        name_acc.add(names)
        val_acc.add(vals)
        rows_acc.add(rows)
        filled_acc.add(row_filled)
        for j, acc in ((sg_idx, sg_acc), (n_idx, n_acc), (unit_idx, unit_acc)):
            if j is not None:
                acc.add(label_array(cols[j], table.text_cells))
        if t_idx is not None:
            t_acc.add(cols[t_idx])
    return name_acc, val_acc, rows_acc, filled_acc, sg_acc, t_acc, n_acc, unit_acc


def _refuse_second_spelling(src, column, seen_names, raw_name, name) -> None:
    """Refuse two names of a long table that differ only in case or unit; records ``name``."""
    key = name.casefold()
    if key in seen_names:
        raise DataFileError(
            f"'{raw_name}' and '{seen_names[key]}' name the same characteristic with "
            "different units or spelling. Use one name (and one unit) per characteristic.",
            file=src.name,
            column=column,
            value=raw_name,
        )
    seen_names[key] = raw_name


def _long_unit(src, column, name, units, rows) -> str | None:
    """The one unit given in the unit column for a characteristic (None when none is given);
    more than one is refused at the first row of the second."""
    us = [u for u in dict.fromkeys(units.tolist()) if u != ""]
    if len(us) > 1:
        first_other = int(np.flatnonzero(units == us[1])[0])
        raise DataFileError(
            f"'{name}' is given in more than one unit ({', '.join(us)}). Convert the "
            "values to one unit.",
            file=src.name,
            row=int(rows[first_other]),
            column=column,
            value=us[1],
        )
    return us[0] if us else None
