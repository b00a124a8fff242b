"""Tests for studykit.data: reading measurement files and the messages for bad files.

The expected values are the numbers written into each generated file; file digests are checked
against ``hashlib.sha256`` of the same bytes. Nothing statistical is computed here.
"""

from __future__ import annotations

import hashlib
import json
import math
import subprocess
import sys
import textwrap

import numpy as np
import openpyxl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studykit.data import (
    CharacteristicData,
    Measurements,
    parse_header,
    read_measurements,
    read_measurements_bytes,
)
from studykit.errors import DataFileError, StudyInputError


def write(tmp_path, name, text, encoding="utf-8"):
    p = tmp_path / name
    p.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return p


def write_xlsx(tmp_path, name, rows, *, sheet="Data", extra_sheets=(), merge=None):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = sheet
    for r in rows:
        ws.append(list(r))
    for s in extra_sheets:
        wb.create_sheet(s)
    if merge:
        ws.merge_cells(merge)
    p = tmp_path / name
    wb.save(p)
    return p


GERMAN = (
    "Stichprobe;Zeit;Bohrung [mm];Länge (mm);Bemerkung\n"
    "1;01.03.2025 08:00;10,02;50,1;\n"
    "1;01.03.2025 08:00;10,01;50,2;\n"
    "2;01.03.2025 09:00;9,98;;Werkzeugwechsel\n"
    "2;01.03.2025 09:00;10,00;50,0;\n"
)


# ---------------------------------------------------------------------------------------------
# reading what is there


def test_wide_semicolon_decimal_comma_german_headers(tmp_path):
    m = read_measurements(write(tmp_path, "de.csv", GERMAN))
    assert isinstance(m, Measurements)
    assert m.layout == "wide"
    assert m.subgroup_source == "column"
    assert m.subgroup_column == "Stichprobe"
    assert (m.separator, m.decimal) == (";", ",")
    assert m.names == ("Bohrung", "Länge")
    bore = m.get("Bohrung")
    assert bore.unit == "mm"
    np.testing.assert_array_equal(bore.values, [10.02, 10.01, 9.98, 10.00])
    assert bore.subgroups.tolist() == ["1", "1", "2", "2"]
    assert bore.rows.tolist() == [2, 3, 4, 5]
    assert bore.subgroup_sizes == {"1": 2, "2": 2}
    assert bore.notes.tolist() == ["", "", "Werkzeugwechsel", ""]
    assert bore.times.dtype == np.dtype("datetime64[ns]")
    assert str(bore.times[2]).startswith("2025-03-01T09:00")
    length = m.get("Länge [mm]")  # name with unit works too
    assert length.unit == "mm"
    assert length.n_missing == 1
    assert math.isnan(length.values[2])
    assert length.subgroup_sizes == {"1": 2, "2": 1}  # non-missing values per subgroup
    assert any("semicolon" in n and "','" in n for n in m.notes)
    assert any("wide layout (detected)" in n for n in m.notes)
    assert any("'Länge'" in w and "row 4" in w for w in m.warnings)


def test_parse_header_units():
    assert parse_header("Bore diameter [mm]") == ("Bore diameter", "mm")
    assert parse_header("  Torque (N m) ") == ("Torque", "N m")
    assert parse_header("Flatness") == ("Flatness", None)
    assert parse_header("[mm]") == ("[mm]", None)  # nothing but a unit: kept as the name


def test_english_comma_file_with_sample_and_note_columns(tmp_path):
    text = "Sample No.,Timestamp,Width [mm],Comment\n1,2025-03-01 08:00,4.1,\n1,2025-03-01 08:00,4.2,ok\n2,2025-03-01 09:00,4.0,\n"
    m = read_measurements(write(tmp_path, "en.csv", text))
    assert m.subgroup_column == "Sample No."
    w = m.get("Width")
    assert w.values.tolist() == [4.1, 4.2, 4.0]
    assert w.times[0] == np.datetime64("2025-03-01T08:00")
    assert w.notes.tolist() == ["", "ok", ""]


def test_tab_separated(tmp_path):
    m = read_measurements(write(tmp_path, "t.txt", "A\tB\n1.5\t2\n2.5\t3\n"))
    assert m.separator == "\t"
    assert m.get("A").values.tolist() == [1.5, 2.5]
    assert m.get("B").is_integer and not m.get("A").is_integer


def test_long_layout_detected(tmp_path):
    text = (
        "Merkmal;Stichprobe;Messwert;Einheit\n"
        "Bohrung;1;10,01;mm\nLänge;1;50,1;mm\nBohrung;1;10,02;mm\n"
        "Länge;1;50,2;mm\nBohrung;2;;mm\nLänge;2;50,0;mm\n"
    )
    m = read_measurements(write(tmp_path, "long.csv", text))
    assert m.layout == "long"
    assert m.names == ("Bohrung", "Länge")
    b = m.get("Bohrung")
    assert b.unit == "mm"
    assert b.rows.tolist() == [2, 4, 6]
    assert b.subgroups.tolist() == ["1", "1", "2"]
    assert b.n_missing == 1
    assert any("long layout (detected)" in n for n in m.notes)
    frame = m.to_frame()
    assert list(frame.columns) == ["characteristic", "subgroup", "value", "time", "note", "row"]
    assert len(frame) == 6


def test_long_layout_forced_without_columns_says_what_is_needed(tmp_path):
    p = write(tmp_path, "w.csv", "A,B\n1,2\n")
    with pytest.raises(DataFileError, match=r"w\.csv.*long table needs a characteristic column"):
        read_measurements(p, layout="long")


def test_subgroup_size_and_individuals(tmp_path):
    p = write(tmp_path, "x.csv", "X\n1\n2\n3\n4\n5\n6\n7\n")
    m = read_measurements(p, subgroup_size=3)
    x = m.get("X")
    assert m.subgroup_source == "size"
    assert x.subgroups.tolist() == ["1", "1", "1", "2", "2", "2", "3"]
    assert x.subgroup_sizes == {"1": 3, "2": 3, "3": 1}
    assert any("unequal subgroup sizes" in n for n in m.notes)
    ind = read_measurements(p)
    assert ind.subgroup_source == "none"
    assert ind.get("X").subgroups.tolist() == [str(i) for i in range(1, 8)]


def test_subgroup_column_option_and_conflict(tmp_path):
    p = write(tmp_path, "x.csv", "Shift,X\na,1\na,2\nb,3\nb,4\n")
    m = read_measurements(p, subgroup_column="shift")
    assert m.get("X").subgroup_sizes == {"a": 2, "b": 2}
    with pytest.raises(StudyInputError, match="either `subgroup_column`.*or `subgroup_size`"):
        read_measurements(p, subgroup_column="Shift", subgroup_size=2)
    with pytest.raises(DataFileError, match=r"no column named 'Batch'.*'Shift', 'X'"):
        read_measurements(p, subgroup_column="Batch")
    with pytest.raises(StudyInputError, match=r"`subgroup_size` must be 1 or more, not 0"):
        read_measurements(p, subgroup_size=0)


def test_text_column_is_not_a_characteristic(tmp_path):
    p = write(tmp_path, "x.csv", "Operator,X\nAnna,1\nBen,2\n")
    m = read_measurements(p)
    assert m.names == ("X",)
    assert any("'Operator'" in n and "text" in n for n in m.notes)


def test_missing_values_counted_and_kept(tmp_path):
    p = write(tmp_path, "x.csv", "A,B\n1,\n,2\n3,4\n,\n5,6\n\n\n")
    m = read_measurements(p)
    a, b = m.get("A"), m.get("B")
    # row 5 is empty inside the data: kept as a missing part; the trailing empty rows are not data
    assert a.rows.tolist() == [2, 3, 4, 5, 6]
    assert a.n_missing == 2 and b.n_missing == 2
    assert np.isnan(a.values).tolist() == [False, True, False, True, False]
    assert any("empty row" in n and "5" in n for n in m.notes)
    assert any("'A': 2 empty cell(s) (rows 3, 5)" in w for w in m.warnings)


def test_arrays_are_read_only(tmp_path):
    c = read_measurements(write(tmp_path, "x.csv", "A\n1\n2\n")).get("A")
    assert isinstance(c, CharacteristicData)
    with pytest.raises(ValueError):
        c.values[0] = 5.0


def test_summary_and_to_dict_are_json_safe(tmp_path):
    m = read_measurements(write(tmp_path, "de.csv", GERMAN))
    s = json.loads(json.dumps(m.summary()))
    assert s["characteristics"][1]["n_missing"] == 1
    d = json.loads(json.dumps(m.to_dict()))
    assert d["characteristics"][1]["values"][2] is None
    assert d["characteristics"][0]["times"][0].startswith("2025-03-01T08:00")


def test_bytes_api_and_digest(tmp_path):
    raw = GERMAN.encode("utf-8")
    m = read_measurements_bytes(raw, "upload/de.csv")
    assert m.source == "de.csv"
    assert m.sha256 == hashlib.sha256(raw).hexdigest()
    from_path = read_measurements(write(tmp_path, "de.csv", raw))
    assert from_path.sha256 == m.sha256
    np.testing.assert_array_equal(from_path.get("Bohrung").values, m.get("Bohrung").values)


def test_get_unknown_name_lists_names(tmp_path):
    m = read_measurements(write(tmp_path, "x.csv", "A,B\n1,2\n"))
    with pytest.raises(DataFileError, match=r"no characteristic named 'C'.*'A', 'B'"):
        m.get("C")


# ---------------------------------------------------------------------------------------------
# every problem: a named test


def test_empty_file(tmp_path):
    with pytest.raises(
        DataFileError, match=r"file 'e\.csv': the file is empty.*first row must name"
    ):
        read_measurements(write(tmp_path, "e.csv", ""))


def test_file_with_only_blank_lines_is_empty(tmp_path):
    with pytest.raises(DataFileError, match=r"the file is empty"):
        read_measurements(write(tmp_path, "e.csv", "\n\r\n  \n"))


def test_header_only(tmp_path):
    with pytest.raises(
        DataFileError, match=r"file 'h\.csv', row 2: the file has a header but no values"
    ):
        read_measurements(write(tmp_path, "h.csv", "Diameter [mm];Length [mm]\n"))


def test_text_in_value_cell(tmp_path):
    p = write(tmp_path, "t.csv", "Sample,Diameter [mm]\n1,10.1\n1,10.2\n2,10.3 mm\n")
    with pytest.raises(DataFileError) as info:
        read_measurements(p)
    err = info.value
    assert (err.file, err.row, err.column, err.value) == ("t.csv", 4, "Diameter [mm]", "10.3 mm")
    assert str(err).startswith(
        "file 't.csv', row 4, column 'Diameter [mm]': '10.3 mm' is not a number"
    )
    assert "Leave the cell empty for a missing value" in str(err)


@pytest.mark.parametrize("token", ["NaN", "nan", "inf", "-Inf", "Infinity", "N/A"])
def test_nan_inf_text(tmp_path, token):
    p = write(tmp_path, "n.csv", f"X\n1.0\n{token}\n2.0\n")
    with pytest.raises(
        DataFileError,
        match=rf"row 3, column 'X': '{token}' is not a measured value\. Leave the cell empty",
    ):
        read_measurements(p)


def test_mixed_decimal_signs(tmp_path):
    p = write(tmp_path, "d.csv", "X;Y\n1,5;2,5\n1,6;2,6\n1.7;2,7\n")
    with pytest.raises(
        DataFileError, match=r"row 4, column 'X': '1\.7' uses '\.' but this file uses ','"
    ):
        read_measurements(p)


def test_decimal_comma_in_comma_separated_file(tmp_path):
    p = write(tmp_path, "c.csv", "A,B\n1,2\n3,5,4\n")
    with pytest.raises(
        DataFileError,
        match=r"row 3: this row has 3 cells but the header has 2 columns.*decimal comma",
    ):
        read_measurements(p)


def test_value_in_unnamed_column(tmp_path):
    p = write(tmp_path, "u.csv", "A;;B\n1;;2\n3;7;4\n")
    with pytest.raises(
        DataFileError, match=r"row 3, column 'B': column B has values \(here '7'\) but no name"
    ):
        read_measurements(p)


def test_all_values_identical_is_allowed_and_warned(tmp_path):
    m = read_measurements(write(tmp_path, "i.csv", "X\n5\n5\n5\n5\n"))
    assert m.get("X").values.tolist() == [5.0] * 4
    assert any("all 4 values are 5, so there is no spread" in w for w in m.warnings)


def test_single_value(tmp_path):
    m = read_measurements(write(tmp_path, "s.csv", "X [mm]\n7.25\n"))
    assert m.get("X").values.tolist() == [7.25]
    assert any("only one value (7.25)" in w for w in m.warnings)


def test_fewer_than_two_subgroups(tmp_path):
    m = read_measurements(write(tmp_path, "g.csv", "Subgroup,X\n1,5.1\n1,5.2\n1,5.0\n"))
    assert any("values in only 1 subgroup(s)" in w for w in m.warnings)
    with pytest.raises(
        DataFileError, match=r"'X' has values in 1 subgroup\(s\), but at least 2 are needed"
    ):
        m.check_subgroups(min_subgroups=2)
    m.get("X").check_subgroups(min_subgroups=1)  # enough for what is asked: no error


def test_unequal_subgroup_sizes_are_noted(tmp_path):
    text = "Subgroup,X\n" + "".join(
        f"{g},{v}\n" for g, v in [(1, 1), (1, 2), (1, 3), (2, 4), (2, 5), (3, 6), (3, 7), (3, 8)]
    )
    m = read_measurements(write(tmp_path, "u.csv", text))
    assert m.get("X").subgroup_sizes == {"1": 3, "2": 2, "3": 3}
    assert any("unequal subgroup sizes: 1 x size 2, 2 x size 3" in n for n in m.notes)
    assert not any("unequal" in w for w in m.warnings)


def test_large_subgroups_are_warned(tmp_path):
    text = "Lot,X\n" + "".join(f"{1 + i // 30},{i}\n" for i in range(60))
    m = read_measurements(write(tmp_path, "l.csv", text))
    assert m.get("X").subgroup_sizes == {"1": 30, "2": 30}
    assert any("subgroups of up to 30 values (more than 25)" in w for w in m.warnings)


def test_subgroup_label_missing(tmp_path):
    p = write(tmp_path, "m.csv", "Subgroup,X\n1,5\n,6\n2,7\n")
    with pytest.raises(
        DataFileError, match=r"row 3, column 'Subgroup': this row has values but no subgroup label"
    ):
        read_measurements(p)


def test_duplicate_column_names(tmp_path):
    p = write(tmp_path, "d.csv", "Diameter [mm],Length,Diameter [mm]\n1,2,3\n")
    with pytest.raises(
        DataFileError,
        match=r"row 1, column 'Diameter \[mm\]': columns A \('Diameter \[mm\]'\) and C .* same name",
    ):
        read_measurements(p)


def test_utf8_with_bom(tmp_path):
    m = read_measurements(write(tmp_path, "b.csv", "\ufeff" + GERMAN))
    assert m.names == ("Bohrung", "Länge")
    assert m.subgroup_column == "Stichprobe"  # the BOM is not part of the first header name
    assert m.encoding == "UTF-8 with BOM"


def test_latin1(tmp_path):
    m = read_measurements(write(tmp_path, "l.csv", GERMAN, encoding="latin-1"))
    assert m.names == ("Bohrung", "Länge")
    assert "Latin-1" in m.encoding


def test_utf16_with_bom(tmp_path):
    m = read_measurements(write(tmp_path, "w.csv", GERMAN, encoding="utf-16"))
    assert m.names == ("Bohrung", "Länge")
    assert m.encoding == "UTF-16 with BOM"
    assert m.get("Bohrung").values.tolist() == [10.02, 10.01, 9.98, 10.0]


def test_xlsx_reads_sheet_numbers_and_dates(tmp_path):
    import datetime as dt

    p = write_xlsx(
        tmp_path,
        "m.xlsx",
        [
            ("Subgroup", "Time", "Bore [mm]"),
            (1, dt.datetime(2025, 3, 1, 8), 10.01),
            (1, dt.datetime(2025, 3, 1, 8), 10.02),
            (2, dt.datetime(2025, 3, 1, 9), None),
            (2, dt.datetime(2025, 3, 1, 9), 9.99),
        ],
        extra_sheets=("Limits",),
    )
    m = read_measurements(p)
    bore = m.get("Bore")
    assert m.sheet == "Data"
    assert bore.values[[0, 1, 3]].tolist() == [10.01, 10.02, 9.99]
    assert bore.n_missing == 1 and bore.rows.tolist() == [2, 3, 4, 5]
    assert bore.subgroups.tolist() == ["1", "1", "2", "2"]
    assert bore.times[2] == np.datetime64("2025-03-01T09:00")
    assert any("first of 2 sheets" in n for n in m.notes)


def test_xlsx_wrong_sheet_name_lists_sheets(tmp_path):
    p = write_xlsx(tmp_path, "m.xlsx", [("X",), (1,)], extra_sheets=("Limits",))
    with pytest.raises(
        DataFileError, match=r"no sheet named 'Messwerte'\. Its sheets are: 'Data', 'Limits'"
    ):
        read_measurements(p, sheet="Messwerte")
    assert read_measurements(p, sheet="data").sheet == "Data"  # case does not matter


def test_xlsx_merged_header_cells(tmp_path):
    p = write_xlsx(tmp_path, "m.xlsx", [("Diameter", None, "Length"), (1, 2, 3)], merge="A1:B1")
    with pytest.raises(
        DataFileError, match=r"row 1, column 'Diameter': the header cells A1:B1 are merged.*unmerge"
    ):
        read_measurements(p)


def test_xlsx_merged_subgroup_cells_fill_down(tmp_path):
    p = write_xlsx(tmp_path, "m.xlsx", [("Subgroup", "X"), (1, 5), (None, 6), (2, 7), (None, 8)])
    wb = openpyxl.load_workbook(p)
    wb.active.merge_cells("A2:A3")
    wb.active.merge_cells("A4:A5")
    wb.save(p)
    m = read_measurements(p)
    assert m.get("X").subgroups.tolist() == ["1", "1", "2", "2"]
    assert any("merged cells" in n for n in m.notes)


def test_xlsx_numbers_stored_as_text(tmp_path):
    p = write_xlsx(tmp_path, "t.xlsx", [("X",), ("10.5",), ("10,25",), (11,), (" 9.75 ",)])
    m = read_measurements(p)
    assert m.get("X").values.tolist() == [10.5, 10.25, 11.0, 9.75]
    assert any("3 number(s) stored as text" in n for n in m.notes)


def test_xlsx_text_and_error_cells(tmp_path):
    p = write_xlsx(tmp_path, "t.xlsx", [("X",), (1,), (2,), ("n.m.",)])
    with pytest.raises(DataFileError, match=r"row 4, column 'X': 'n\.m\.' is not a number"):
        read_measurements(p)
    p = write_xlsx(tmp_path, "e.xlsx", [("X",), (1,), ("#DIV/0!",)])
    with pytest.raises(
        DataFileError, match=r"row 3, column 'X': the cell shows the spreadsheet error '#DIV/0!'"
    ):
        read_measurements(p)


def test_xlsx_saved_with_csv_name_is_read_as_workbook(tmp_path):
    p = write_xlsx(tmp_path, "m.xlsx", [("X",), (1,), (2,)])
    q = tmp_path / "renamed.csv"
    q.write_bytes(p.read_bytes())
    m = read_measurements(q)
    assert m.get("X").values.tolist() == [1.0, 2.0]
    assert any("Excel file (.xlsx) despite its name" in n for n in m.notes)


def test_damaged_xlsx(tmp_path):
    p = write(tmp_path, "bad.xlsx", b"PK\x03\x04" + b"\x00" * 100)
    with pytest.raises(DataFileError, match=r"file 'bad\.xlsx': the Excel file cannot be opened"):
        read_measurements(p)
    with pytest.raises(DataFileError, match=r"not an Excel file"):
        read_measurements(write(tmp_path, "text.xlsx", "X\n1\n"))


def test_binary_junk_with_csv_name(tmp_path):
    junk = np.random.default_rng(seed=7).integers(0, 256, 4000, dtype=np.uint8).tobytes()
    with pytest.raises(
        DataFileError,
        match=r"file 'junk\.csv': the file does not look like a text table.*save them as \.xlsx",
    ):
        read_measurements(write(tmp_path, "junk.csv", junk))
    png_like = b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 4
    with pytest.raises(DataFileError, match="does not look like a text table"):
        read_measurements_bytes(png_like, "picture.csv")


def test_old_xls_workbook(tmp_path):
    with pytest.raises(DataFileError, match=r"old-style Excel file \(\.xls\)"):
        read_measurements(
            write(tmp_path, "old.xls", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 600)
        )


def test_max_bytes_limit(tmp_path):
    raw = ("X\n" + "1.0\n" * 3000).encode()
    with pytest.raises(
        DataFileError,
        match=r"file 'big\.csv': the file is 11\.7 kB, more than the limit of 10\.0 kB",
    ):
        read_measurements_bytes(raw, "big.csv", max_bytes=10 * 1024)
    with pytest.raises(DataFileError, match="more than the limit"):
        read_measurements(write(tmp_path, "big.csv", raw), max_bytes=10 * 1024)
    assert read_measurements_bytes(raw, "big.csv", max_bytes=len(raw)).get("X").n == 3000


def test_missing_file(tmp_path):
    with pytest.raises(DataFileError, match=r"nope\.csv.*does not exist"):
        read_measurements(tmp_path / "nope.csv")


# ---------------------------------------------------------------------------------------------
# property: what is written is what is read


@settings(max_examples=40, deadline=None)
@given(
    values=st.lists(
        st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False),
        min_size=2,
        max_size=40,
    ),
    german=st.booleans(),
    missing=st.sets(st.integers(min_value=0, max_value=39), max_size=5),
)
def test_roundtrip_values(values, german, missing):
    cells = ["" if i in missing else repr(v) for i, v in enumerate(values)]
    if german:
        cells = [c.replace(".", ",") for c in cells]
    sep = ";" if german else ","
    if all(c == "" for c in cells):
        cells[0] = "1"
        values = [1.0] + values[1:]
    text = f"Sample{sep}Value X\n" + "".join(f"{i // 5 + 1}{sep}{c}\n" for i, c in enumerate(cells))
    m = read_measurements_bytes(text.encode(), "p.csv")
    x = m.get("Value X")
    expected = [math.nan if c == "" else v for c, v in zip(cells, values, strict=True)]
    np.testing.assert_array_equal(x.values, expected)
    assert x.n_missing == sum(c == "" for c in cells)
    assert x.rows.tolist()[: len(cells)] == list(range(2, 2 + x.n))


# ---------------------------------------------------------------------------------------------
# a large file in bounded memory


@pytest.mark.slow
def test_50mb_file_in_bounded_memory(tmp_path):
    """A 50 MB CSV is read with a peak memory rise of at most 6x the file size.

    Measured in a fresh interpreter (ru_maxrss before and after reading), so the C parser's
    buffers count too. What is kept is about 1.8x the file here (three float64 columns, int64
    row numbers and 6-character subgroup labels for 1.6 million rows); the peak adds one chunk
    of text, the table of 328,000 distinct subgroup labels and allocator slack (measured 4.1x
    to 4.6x with tests/bench/bench_import.py). Reading the whole file as text cells would grow
    with the number of cells instead. The factor is our own choice, no source.
    """
    path = tmp_path / "big.csv"
    rng = np.random.default_rng(seed=1)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("Subgroup;Bore [mm];Length [mm];Width [mm]\n")
        row = 0
        while fh.tell() < 50 * 1024 * 1024:
            block = rng.normal(10.0, 0.01, size=(20000, 3))
            lines = [
                f"{(row + i) // 5 + 1};{a:.5f};{b:.5f};{c:.5f}\n".replace(".", ",")
                for i, (a, b, c) in enumerate(block)
            ]
            fh.write("".join(lines))
            row += len(lines)
    size = path.stat().st_size
    script = textwrap.dedent(
        f"""
        import resource, sys
        import numpy, pandas, openpyxl
        from studykit.data import read_measurements
        before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        m = read_measurements({str(path)!r})
        after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        print(before * 1024, after * 1024, m.get("Bore").n, m.get("Width").n_missing)
        """
    )
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True)
    before, after, n, n_missing = (int(x) for x in out.stdout.split())
    assert n == row
    assert n_missing == 0
    assert after - before < 6 * size, (
        f"peak rise {(after - before) / 2**20:.0f} MB for {size / 2**20:.0f} MB"
    )


def test_numbers_in_first_row_mean_no_header(tmp_path):
    with pytest.raises(
        DataFileError, match=r"row 1: the first row holds numbers \('10\.1'\), not column names"
    ):
        read_measurements(write(tmp_path, "n.csv", "10.1\n10.2\n"))


def test_crlf_line_ends_and_quotes(tmp_path):
    text = 'Part,"Diameter, outer [mm]",Note\r\n1,"10,5",\r\n2,"10,7","re-measured, ok"\r\n'
    m = read_measurements(write(tmp_path, "q.csv", text))
    d = m.get("Diameter, outer")
    assert d.unit == "mm"
    assert d.values.tolist() == [10.5, 10.7]  # quoted decimal commas
    assert d.notes.tolist() == ["", "re-measured, ok"]
    assert d.rows.tolist() == [2, 3]


def test_long_layout_with_subgroup_size_from_xlsx(tmp_path):
    rows = [("Characteristic", "Value")] + [("A" if i % 2 else "B", float(i)) for i in range(12)]
    m = read_measurements(write_xlsx(tmp_path, "l.xlsx", rows), subgroup_size=3)
    assert m.layout == "long"
    assert m.names == ("B", "A")
    assert m.get("B").values.tolist() == [0.0, 2.0, 4.0, 6.0, 8.0, 10.0]
    assert m.get("B").subgroups.tolist() == ["1", "1", "1", "2", "2", "2"]
    assert m.get("A").rows.tolist() == [3, 5, 7, 9, 11, 13]


def test_characteristic_data_built_directly():
    c = CharacteristicData("Gap", "mm", [1.0, float("nan"), 3.0], subgroups=["a", "a", "b"])
    assert c.n_missing == 1 and c.n_valid == 2
    assert c.subgroup_sizes == {"a": 1, "b": 1}
    assert c.rows.tolist() == [2, 3, 4]
    with pytest.raises(StudyInputError, match=r"`subgroups` has 2 entries but `values` has 3"):
        CharacteristicData("Gap", "mm", [1.0, 2.0, 3.0], subgroups=["a", "b"])


@settings(max_examples=30, deadline=None)
@given(
    table=st.lists(
        st.tuples(
            st.sampled_from(["", "1", "2", "3"]),
            st.one_of(st.just(""), st.floats(-100, 100, allow_nan=False).map(lambda v: f"{v:.4f}")),
            st.one_of(st.just(""), st.integers(-5, 5).map(str)),
        ),
        min_size=1,
        max_size=30,
    ),
    sep=st.sampled_from([";", "\t", ","]),
    blank_line=st.booleans(),
)
def test_fast_reader_agrees_with_cell_by_cell_reader(table, sep, blank_line):
    """The pandas fast path and the cell-by-cell path give the same result or the same error."""
    import studykit.io.assemble as data  # the fast-path switch lives there

    lines = [f"Subgroup{sep}A [mm]{sep}B"]
    lines += [sep.join(r) for r in table]
    if blank_line:
        lines.insert(2, "")
    raw = ("\n".join(lines) + "\n").encode()

    def read(fast):
        original = data._with_fast_path
        if not fast:
            data._with_fast_path = lambda table, float_cols, collect: collect(table.open_chunks())
        try:
            return read_measurements_bytes(raw, "f.csv")
        except DataFileError as exc:
            return str(exc)
        finally:
            data._with_fast_path = original

    a, b = read(True), read(False)
    if isinstance(a, str) or isinstance(b, str):
        assert a == b
        return
    assert a.names == b.names and a.notes == b.notes and a.warnings == b.warnings
    for x, y in zip(a, b, strict=True):
        np.testing.assert_array_equal(x.values, y.values)
        assert x.rows.tolist() == y.rows.tolist()
        assert x.subgroups.tolist() == y.subgroups.tolist()
        assert x.subgroup_sizes == y.subgroup_sizes


def test_clean_csv_uses_the_fast_reader(monkeypatch):
    import studykit.io.assemble as data

    used = []
    original = data._collect_wide

    def spy(src, table, ctx, kinds, float_cols, chunks):
        used.append(getattr(chunks, "__name__", "?"))
        return original(src, table, ctx, kinds, float_cols, chunks)

    monkeypatch.setattr(data, "_collect_wide", spy)
    read_measurements_bytes(b"Subgroup;A [mm]\n1;1,5\n1;\n2;2,5\n", "x.csv")
    assert used == ["_float_chunks"]
    used.clear()
    with pytest.raises(DataFileError, match="'abc' is not a number"):
        read_measurements_bytes(b"A\n1\nabc\n", "x.csv")
    # the guess that every column holds numbers, the classified columns' numbers, then the
    # cell-by-cell reading that finds the cell
    assert used == ["_float_chunks", "_float_chunks", "_text_chunks"]


def test_title_rows_above_the_header_are_skipped(tmp_path):
    text = "Messprotokoll Welle 4711;;\n\nStichprobe;Durchmesser [mm];Bemerkung\n1;10,1;\n1;10,2;\n"
    m = read_measurements(write(tmp_path, "t.csv", text))
    d = m.get("Durchmesser")
    assert d.rows.tolist() == [4, 5]
    assert any("rows 1 to 2 above the header look like a title" in n for n in m.notes)
    text = "Report shaft 4711\nSubgroup,Diameter [mm]\n1,10.1\n"
    assert read_measurements(write(tmp_path, "u.csv", text)).get("Diameter").rows.tolist() == [3]
    p = write_xlsx(
        tmp_path,
        "t.xlsx",
        [("Report shaft 4711",), (), ("Subgroup", "Diameter [mm]"), (1, 10.1), (1, 10.2)],
        merge="A1:B1",
    )
    m = read_measurements(p)
    assert m.get("Diameter").rows.tolist() == [4, 5]
    assert m.subgroup_column == "Subgroup"


def test_single_column_with_decimal_commas(tmp_path):
    m = read_measurements(write(tmp_path, "s.csv", "Rauheit [um]\n0,81\n0,79\n\n0,85\n"))
    r = m.get("Rauheit")
    assert r.values[[0, 1, 3]].tolist() == [0.81, 0.79, 0.85] and r.n_missing == 1
    assert m.decimal == ","


def test_row_numbers_across_chunks(tmp_path, monkeypatch):
    import studykit.io.csv_reader as data  # the CSV chunk size lives there

    monkeypatch.setattr(data, "_CHUNK_ROWS", 7)
    lines = ["Subgroup;X"] + [f"{i // 5 + 1};{i},5" for i in range(30)]
    lines.insert(12, "")  # an empty row between subgroups (skipped, noted)
    m = read_measurements(write(tmp_path, "c.csv", "\n".join(lines) + "\n"))
    x = m.get("X")
    assert x.n == 30
    assert x.rows.tolist() == list(range(2, 13)) + list(range(14, 33))
    assert x.values[-1] == 29.5
    lines[25] = "5;oops"
    with pytest.raises(DataFileError, match=r"row 26, column 'X': 'oops' is not a number"):
        read_measurements(write(tmp_path, "d.csv", "\n".join(lines) + "\n"))


def test_xlsx_time_of_day_cells_kept_as_text(tmp_path):
    import datetime as dt

    p = write_xlsx(tmp_path, "t.xlsx", [("Time", "X"), (dt.time(8, 0), 1.0), (dt.time(9, 30), 2.0)])
    m = read_measurements(p)
    assert m.get("X").times.tolist() == ["08:00:00", "09:30:00"]
    assert any("times kept as text" in n for n in m.notes)


def test_wrong_encoding_given(tmp_path):
    p = write(tmp_path, "w.csv", "A;Länge\n1;2\n", encoding="latin-1")
    with pytest.raises(DataFileError, match=r"cannot be read as utf-8 .*Leave the encoding out"):
        read_measurements(p, encoding="utf-8")
    assert read_measurements(p, encoding="latin-1").names == ("A", "Länge")


@pytest.mark.parametrize("header", ["time", "time [s]", "Zeit", "date"])
def test_numeric_column_under_a_time_header_says_why_and_how_to_override(tmp_path, header):
    # issue 11: a column of numbers headed like a time stamp is read as times; the error must
    # say so and how to get it read as a measurement (rename the header)
    from studykit.data import read_measurements
    from studykit.errors import StudyInputError

    path = tmp_path / "t.csv"
    path.write_text(f"{header}\n1.5\n2.5\n3.5\n", encoding="utf-8")
    with pytest.raises(StudyInputError) as err:
        read_measurements(path)
    msg = str(err.value)
    assert "no column holds measurements" in msg
    assert f"Column '{header}' was read as time stamps" in msg
    assert "plain numbers" in msg and "rename the header" in msg
    renamed = tmp_path / "r.csv"
    renamed.write_text("cycle time [s]\n1.5\n2.5\n3.5\n", encoding="utf-8")
    assert read_measurements(renamed).names == ("cycle time",)


def _long_csv_with(note: bytes, at: int) -> bytes:
    """A CSV of plain ASCII rows with ``note`` in a note cell whose bytes start at byte ``at``
    (so the encoding check meets it in a later block of the file than the first)."""
    head = b"Part,Length [mm],Note\n"
    row = b"1,10.0,ok\n"
    rows = head + row * ((at - len(head)) // len(row) - 1)
    text = rows + b"2,10.0," + b"x" * (at - len(rows) - 7)
    assert len(text) == at  # (the test's own set-up)
    return text + note + b"\n" + row * 10


@pytest.mark.parametrize("shift", [0, 1])
def test_encoding_seen_after_plain_ascii_blocks(tmp_path, shift):
    # UTF-8 of 'é' (two bytes) placed across the 1 MiB read block boundary (shift 1) or
    # right after it; and the same letter as one cp1252 byte there: UTF-8 must be rejected
    from studykit.io.source import READ_BLOCK

    p = tmp_path / "u.csv"
    p.write_bytes(_long_csv_with("é".encode(), READ_BLOCK - shift))
    m = read_measurements(p)
    assert m.encoding == "UTF-8"
    p = tmp_path / "c.csv"
    p.write_bytes(_long_csv_with("é".encode("cp1252"), READ_BLOCK - shift))
    m = read_measurements(p)
    assert "1252" in m.encoding
