"""Quality review: odd measurement files a user brings (German Excel exports, totals rows, ...).

Defects found by trying to break `studykit check` are pinned here; files that already read
correctly are kept as regression tests with the values checked cell by cell.
"""

from __future__ import annotations

import numpy as np
import pytest

from studykit.cli import main
from studykit.data import read_measurements
from studykit.errors import DataFileError, StudyInputError


def write(tmp_path, name, text, newline=""):
    path = tmp_path / name
    with open(path, "w", newline=newline, encoding="utf-8") as fh:
        fh.write(text)
    return path


# -- totals / summary rows (defect: they were read as one more subgroup or part) ----------------


def test_totals_row_in_subgroup_column_is_refused(tmp_path):
    # before: 'Total' became a subgroup of one value (4.6) and entered the analysis silently
    path = write(tmp_path, "t.csv", "subgroup,x\n1,1.0\n1,1.2\n2,1.1\n2,1.3\nTotal,4.6\n")
    with pytest.raises(
        DataFileError,
        match=r"file 't.csv', row 6, column 'subgroup': 'Total' "
        r"labels a summary row",
    ):
        read_measurements(path)


def test_mean_row_in_time_column_is_refused(tmp_path):
    # before: the time column fell back to text and the mean (1.1) was read as a fourth part
    path = write(
        tmp_path,
        "t.csv",
        "time,x\n2026-03-02 06:00,1.0\n2026-03-02 06:10,1.2\n2026-03-02 06:20,1.1\nMean,1.1\n",
    )
    with pytest.raises(DataFileError, match=r"row 5, column 'time': 'Mean' labels a summary"):
        read_measurements(path)


def test_total_row_in_text_column_is_refused(tmp_path):
    # before: the part-number column was set aside as text and 3.3 was read as a fourth value
    path = write(tmp_path, "t.csv", "part,x\nP1,1.0\nP2,1.2\nP3,1.1\nTotal:,3.3\n")
    with pytest.raises(DataFileError, match=r"row 5, column 'part': 'Total:' labels a summary"):
        read_measurements(path)


def test_german_summe_row_semicolon_file(tmp_path):
    path = write(
        tmp_path,
        "t.csv",
        "Stichprobe;Durchmesser [mm]\n1;12,003\n1;12,005\n2;11,998\n2;12,001\nSumme;48,007\n",
    )
    with pytest.raises(DataFileError, match=r"row 6, column 'Stichprobe': 'Summe' labels"):
        read_measurements(path)


def test_sum_word_in_value_column_names_the_summary_row(tmp_path):
    path = write(tmp_path, "t.csv", "x,y\n1.0,2\n1.2,3\n1.1,4\nSum,9\n")
    with pytest.raises(DataFileError, match=r"row 5, column 'x': 'Sum' labels a summary row"):
        read_measurements(path)


def test_totals_row_in_workbook(tmp_path):
    import openpyxl  # a declared dev dependency: missing means fail, not skip

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Subgroup", "Bore [mm]"])
    for sg, x in ((1, 12.001), (1, 12.003), (2, 11.999), (2, 12.000)):
        ws.append([sg, x])
    ws.append(["Average", 12.00075])
    path = tmp_path / "t.xlsx"
    wb.save(path)
    with pytest.raises(DataFileError, match=r"row 6, column 'Subgroup': 'Average' labels"):
        read_measurements(path)


def test_operator_named_max_is_not_a_summary_row(tmp_path):
    # 'Max' is a first name; only unmistakable words count in free text columns
    path = write(tmp_path, "t.csv", "operator,x\nMax,1.0\nAnna,1.2\nMax,1.1\n")
    m = read_measurements(path)
    assert m.get("x").values.tolist() == [1.0, 1.2, 1.1]


def test_cli_totals_row_exit_2_one_line(tmp_path, capsys):
    path = write(tmp_path, "t.csv", "subgroup,x\n1,1.0\n1,1.2\n2,1.1\n2,1.3\nTotal,4.6\n")
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "row 6" in err and "Traceback" not in err


# -- 1-value subgroups among larger ones (defect: check said "allowed", analyze then refused) ---


def test_single_value_subgroups_warned_by_check(tmp_path):
    path = write(tmp_path, "t.csv", "subgroup,x\n1,1.0\n2,1.1\n2,1.2\n2,1.3\n2,1.0\n2,1.1\n3,1.2\n")
    m = read_measurements(path)
    assert any(
        "2 subgroup(s) hold a single value ('1', '3') while others hold up to 5" in w
        for w in m.warnings
    )


def test_equal_sizes_no_single_value_warning(tmp_path):
    path = write(tmp_path, "t.csv", "subgroup,x\n1,1.0\n1,1.1\n2,1.2\n2,1.3\n")
    assert not any("single value" in w for w in read_measurements(path).warnings)


# -- files that already read correctly (regression) ---------------------------------------------


def test_german_excel_semicolon_decimal_comma(tmp_path):
    path = write(
        tmp_path,
        "de.csv",
        "Stichprobe;Durchmesser [mm]\r\n1;12,003\r\n1;12,005\r\n2;11,998\r\n2;12,001\r\n",
        newline="",
    )
    m = read_measurements(path)
    c = m.get("Durchmesser")
    assert c.unit == "mm" and m.decimal == "," and m.separator == ";"
    assert c.values.tolist() == [12.003, 12.005, 11.998, 12.001]
    assert c.subgroups.tolist() == ["1", "1", "2", "2"]


def test_trailing_separator_units_in_parentheses_empty_column(tmp_path):
    path = write(
        tmp_path,
        "t.csv",
        "subgroup,width (mm),height (in),blank,\n1,1.0,2,,\n1,1.2,3,,\n2,1.1,4,,\n2,1.3,5,,\n",
    )
    m = read_measurements(path)
    assert m.names == ("width", "height")
    assert m.get("width").unit == "mm" and m.get("height").unit == "in"
    assert m.get("height").values.tolist() == [2.0, 3.0, 4.0, 5.0]
    assert any("empty columns skipped: 'blank'" in n for n in m.notes)


def test_thousands_separator_refused_with_row(tmp_path):
    path = write(tmp_path, "t.csv", 'x\n"1,234.5"\n"1,240.1"\n')
    with pytest.raises(DataFileError, match=r"row 2, column 'x': '1,234.5' uses ','"):
        read_measurements(path)


@pytest.mark.parametrize("scale", [1e-9, 1e9])
def test_tiny_and_huge_magnitudes_exact(tmp_path, scale):
    raw = [1.01, 1.02, 0.99, 1.0, 1.03]
    path = write(tmp_path, "t.csv", "x\n" + "\n".join(repr(v * scale) for v in raw) + "\n")
    got = read_measurements(path).get("x").values
    np.testing.assert_array_equal(got, np.array([v * scale for v in raw]))


def test_nan_text_is_not_a_value(tmp_path):
    path = write(tmp_path, "t.csv", "x\n1\nNaN\n2\n")
    with pytest.raises(DataFileError, match=r"row 3, column 'x': 'NaN' is not a measured value"):
        read_measurements(path)


# -- Python API misuse ----------------------------------------------------------------------------


def test_subgroup_size_true_is_refused(tmp_path):
    # defect: subgroup_size=True was taken as 1
    path = write(tmp_path, "t.csv", "x\n1\n2\n")
    with pytest.raises(
        StudyInputError,
        match=r"`subgroup_size` must be a whole number, not "
        r"'True'",
    ):
        read_measurements(path, subgroup_size=True)


@pytest.mark.parametrize("bad", [None, 5, b"x\n1\n"])
def test_path_of_wrong_type_is_a_clear_error(bad):
    # defect: TypeError from pathlib ("expected str, bytes or os.PathLike object")
    with pytest.raises(StudyInputError, match=r"`path` must be the file's path"):
        read_measurements(bad)


# -- workbooks whose formulas were never calculated ----------------------------------------------


def _formula_workbook(path, *, cached: bool):
    """A workbook with a computed column 'Width [mm]' = 2 x bore; openpyxl stores formulas
    without results, so `cached=True` writes the results into the sheet XML as a spreadsheet
    program would when saving."""
    import zipfile

    import openpyxl  # a declared dev dependency: missing means fail, not skip

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Subgroup", "Bore [mm]", "Width [mm]"])
    bores = [12.001, 12.002, 12.003, 12.004]
    for i, b in enumerate(bores, start=2):
        ws.append([(i // 2), b, f"=B{i}*2"])
    plain = path.with_suffix(".plain.xlsx")
    wb.save(plain)
    with zipfile.ZipFile(plain) as zin, zipfile.ZipFile(path, "w") as zout:
        for item in zin.infolist():
            data = zin.read(item.filename)
            if cached and item.filename == "xl/worksheets/sheet1.xml":
                text = data.decode()
                for i, b in enumerate(bores, start=2):
                    text = text.replace(f"<f>B{i}*2</f><v></v>", f"<f>B{i}*2</f><v>{2 * b!r}</v>")
                data = text.encode()
            zout.writestr(item, data)
    return bores


def test_formulas_without_stored_results_are_refused(tmp_path):
    # defect: the computed column came out empty and was skipped with the note "empty columns
    # skipped", so a characteristic vanished without an error
    path = tmp_path / "calc.xlsx"
    _formula_workbook(path, cached=False)
    with pytest.raises(
        DataFileError,
        match=r"row 2, column 'Width \[mm\]': the cell holds the "
        r"formula '=B2\*2' but no stored result",
    ):
        read_measurements(path)


def test_formulas_with_stored_results_are_read(tmp_path):
    path = tmp_path / "calc.xlsx"
    bores = _formula_workbook(path, cached=True)
    m = read_measurements(path)
    assert m.get("Width").values.tolist() == [2 * b for b in bores]


def test_workbook_with_truly_empty_cells_still_reads(tmp_path):
    import openpyxl  # a declared dev dependency: missing means fail, not skip

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Subgroup", "Bore [mm]", "Spare"])
    ws.append([1, 12.0, None])
    ws.append([1, None, None])
    ws.append([2, 12.2, None])
    path = tmp_path / "gaps.xlsx"
    wb.save(path)
    m = read_measurements(path)
    assert m.get("Bore").n_missing == 1 and m.names == ("Bore",)


def test_subgroup_formulas_without_results_name_the_formula(tmp_path):
    # before: "this row has values but no subgroup label", although the label is a formula
    import openpyxl  # a declared dev dependency: missing means fail, not skip

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Subgroup", "Bore [mm]"])
    for b in (12.001, 12.002, 12.003, 12.004):
        ws.append(["=ROUNDUP((ROW()-1)/2,0)", b])
    path = tmp_path / "labels.xlsx"
    wb.save(path)
    with pytest.raises(
        DataFileError,
        match=r"row 2, column 'Subgroup': the cell holds the "
        r"formula '=ROUNDUP",
    ):
        read_measurements(path)


def test_some_formula_cells_without_results_are_refused(tmp_path):
    import openpyxl  # a declared dev dependency: missing means fail, not skip

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Subgroup", "Bore [mm]", "Width [mm]"])
    ws.append([1, 12.001, 24.0])
    ws.append([1, 12.002, 24.1])
    ws.append([2, 12.003, "=B4*2"])
    ws.append([2, 12.004, 24.2])
    path = tmp_path / "part.xlsx"
    wb.save(path)
    with pytest.raises(
        DataFileError,
        match=r"row 4, column 'Width \[mm\]': the cell holds the "
        r"formula '=B4\*2'",
    ):
        read_measurements(path)
