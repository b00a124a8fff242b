"""The one-step parse of CSV time columns reads every file as the cell-by-cell route does.

Reference: the cell-by-cell route itself (``studykit.io.cells.times_chunk``, which parses each
stripped cell with pandas.to_datetime and an exact format); the fast route
(``studykit.io.assemble._text_times``) is switched off by monkeypatching and both readings are
compared value by value (times, values, rows, notes, warnings). Invented data.
"""

from __future__ import annotations

import numpy as np
import pytest

from studykit.data import read_measurements
from studykit.io import assemble, csv_reader

ROWS = [
    "2026-03-02 06:00,12.001",
    "2026-03-02 06:05,12.004",
    ",12.002",  # no time
    "2026-03-02 06:15,",  # time without a value
    "2026-03-02 06:20,12.000",
    "2026-03-02 06:25,12.003",
    "2026-03-02 06:30,12.006",
]

CASES = {
    "clean": ROWS,
    "padded cell": [*ROWS[:4], " 2026-03-02 06:20 ,12.000", *ROWS[5:]],
    "blank cell": [*ROWS[:2], "   ,12.002", *ROWS[3:]],
    "nan text": [*ROWS[:2], "nan,12.002", *ROWS[3:]],
    "day first": [
        "02.03.2026 06:00,1.5",
        "02.03.2026 06:05,1.7",
        "02.03.2026 06:10,1.6",
        "02.03.2026 06:15,1.4",
        "02.03.2026 06:20,1.6",
    ],
    "mixed formats": [*ROWS[:4], "02.03.2026 06:20,12.000", *ROWS[5:]],
    "format changes in a later chunk": [
        "2026-03-02 06:00,1.5",
        "2026-03-02 06:05,1.7",
        "2026-03-02 06:10,1.6",
        "2026-03-02 06:15:30,1.4",
        "2026-03-02 06:20:00,1.6",
        "2026-03-02 06:25:00,1.6",
    ],
}


def _read(path):
    m = read_measurements(path)
    c = m.get("bore")
    return c, list(m.notes), list(m.warnings)


@pytest.mark.parametrize("chunk_rows", [50_000, 2])
@pytest.mark.parametrize("case", list(CASES))
def test_fast_time_parse_matches_cell_by_cell(tmp_path, monkeypatch, case, chunk_rows):
    path = tmp_path / "times.csv"
    path.write_text("timestamp,bore [mm]\n" + "\n".join(CASES[case]) + "\n", encoding="utf-8")
    monkeypatch.setattr(csv_reader, "_CHUNK_ROWS", chunk_rows)
    fast, fast_notes, fast_warn = _read(path)
    monkeypatch.setattr(assemble, "_text_times", lambda cells, fmt: None)
    slow, slow_notes, slow_warn = _read(path)
    assert fast.times.dtype == slow.times.dtype
    if fast.times.dtype.kind == "M":
        np.testing.assert_array_equal(np.isnat(fast.times), np.isnat(slow.times))
        np.testing.assert_array_equal(fast.times, slow.times)
    else:
        assert fast.times.tolist() == slow.times.tolist()
    np.testing.assert_array_equal(fast.values, slow.values)
    np.testing.assert_array_equal(fast.rows, slow.rows)
    assert fast_notes == slow_notes
    assert fast_warn == slow_warn


def test_fast_time_parse_reads_the_clean_file(tmp_path):
    """The clean case read by the fast route gives the written times (no fallback hides it)."""
    path = tmp_path / "times.csv"
    path.write_text("timestamp,bore [mm]\n" + "\n".join(ROWS) + "\n", encoding="utf-8")
    c, _notes, _warn = _read(path)
    expected = [r.split(",")[0] or "NaT" for r in ROWS]
    np.testing.assert_array_equal(c.times, np.array(expected, dtype="datetime64[ns]"))
    cells = np.array([r.split(",")[0] for r in ROWS], dtype=object)
    got = assemble._text_times(cells, None)
    assert got is not None
    assert got[1] == "%Y-%m-%d %H:%M"
    np.testing.assert_array_equal(got[2], [bool(r.split(",")[0]) for r in ROWS])
