"""Wide tables whose named columns all hold numbers skip the text classification pass.

Reference: the reader as it classified every table before (the first chunk read as text,
each column counted cell by cell by :func:`studykit.io.cells.looks_numeric`, then the numbers
read), reached here by switching the all-numbers route off. On random tables large enough for
pandas' reader (more than ``PLAIN_MAX_CELLS`` cells), built from plain numbers, empty cells
and cells that are not plain numbers (text, an overflowing exponent, ``nan``, a decimal
comma), the two routes give the same measurements, notes and errors; a table of numbers never
reaches the classification pass. A small file on disk is split without pandas, as pandas
reads it (reference: pandas' reader, the route taken once pandas is imported).
"""

from __future__ import annotations

import pickle
import random

import pytest

from studykit.errors import DataFileError
from studykit.io import assemble
from studykit.io.plain import PLAIN_MAX_CELLS
from studykit.io.readers import read_measurements

NUMBERS = ["1.25", "-3", "4e-3", " 2.5 ", "+7", "0.001", "12345.678"]
ODD = ["abc", "1e999", "nan", "", "1,5", "#N/A", "1 000", "x1"]


def _table(rnd: random.Random, width: int, rows: int, odd_share: float) -> str:
    cols = []
    for _ in range(width):
        kind = rnd.random()
        if kind < 0.5:  # plain numbers, some empty cells
            col = [rnd.choice(NUMBERS) if rnd.random() > 0.05 else "" for _ in range(rows)]
        elif kind < 0.5 + odd_share:  # numbers with a few odd cells
            col = [rnd.choice(NUMBERS) for _ in range(rows)]
            for _ in range(rnd.randint(1, 3)):
                col[rnd.randrange(rows)] = rnd.choice(ODD)
        else:
            col = [f"{rnd.gauss(10, 1):.4f}" for _ in range(rows)]
        cols.append(col)
    header = ",".join(f"c{j}" for j in range(width))
    lines = [",".join(col[i] for col in cols) for i in range(rows)]
    return header + "\n" + "\n".join(lines) + "\n"


def _read(path, *, classify_all: bool):
    """(measurements or the error's text) read by the all-numbers route or by the old one."""
    saved = assemble._collect_all_numeric
    if classify_all:
        assemble._collect_all_numeric = lambda *a: None
    try:
        return pickle.dumps(read_measurements(path))
    except DataFileError as exc:
        return str(exc)
    finally:
        assemble._collect_all_numeric = saved


@pytest.mark.parametrize("seed", range(8))
def test_same_as_classified_reading(tmp_path, seed):
    rnd = random.Random(seed)
    width, rows = 30, PLAIN_MAX_CELLS // 30 + 50
    path = tmp_path / "wide.csv"
    path.write_text(_table(rnd, width, rows, odd_share=0.1 if seed % 2 else 0.0))
    assert _read(path, classify_all=False) == _read(path, classify_all=True)


def test_numbers_only_table_is_not_classified(tmp_path, monkeypatch):
    path = tmp_path / "wide.csv"
    path.write_text(_table(random.Random(3), 30, PLAIN_MAX_CELLS // 30 + 50, 0.0))
    calls = []
    real = assemble._classify
    monkeypatch.setattr(assemble, "_classify", lambda *a: calls.append(1) or real(*a))
    m = read_measurements(path)
    assert len(m.characteristics) == 30 and calls == []


def test_text_column_still_classified_and_named(tmp_path, monkeypatch):
    rnd = random.Random(5)
    text = _table(rnd, 30, PLAIN_MAX_CELLS // 30 + 50, 0.0).splitlines()
    # a column that holds words: classified as text, named in a note, not a measurement
    text = [
        line + ("," + ("zz" if i == 0 else rnd.choice(["ok", "re-measured", ""])))
        for i, line in enumerate(text)
    ]
    path = tmp_path / "wide.csv"
    path.write_text("\n".join(text) + "\n")
    calls = []
    real = assemble._classify
    monkeypatch.setattr(assemble, "_classify", lambda *a: calls.append(1) or real(*a))
    m = read_measurements(path)
    assert calls == [1]
    assert [c.name for c in m.characteristics] == [f"c{j}" for j in range(30)]
    assert any("'zz'" in n for n in m.notes)


def _numbers(rows: int, width: int, sep: str = ",", point: str = ".") -> list[str]:
    rnd = random.Random(rows + width)
    return [
        sep.join(f"{rnd.gauss(10, 1):.4f}".replace(".", point) for _ in range(width))
        for _ in range(rows)
    ]


ROWS = PLAIN_MAX_CELLS // 20 + 50


@pytest.mark.parametrize(
    ("case", "lines", "encoding"),
    [
        # a header the given encoding cannot read (the number reader skips the header line)
        ("latin-1 header", ["A,Länge"] + _numbers(ROWS, 2), "latin-1"),
        ("latin-1 data", ["A,B"] + _numbers(ROWS, 2)[:-1] + ["1,Länge"], "latin-1"),
        ("extra cell", ["A,B"] + _numbers(ROWS, 2)[:-1] + ["1,2,3"], "utf-8"),
        ("missing cell", ["A,B"] + _numbers(ROWS, 2)[:-1] + ["1"], "utf-8"),
        ("title rows", ["Report of line 4", "", "A,B"] + _numbers(ROWS, 2), "utf-8"),
        ("decimal comma", ["A;B"] + _numbers(ROWS, 2, ";", ","), "utf-8"),
        (
            "subgroups",
            ["subgroup,A,B"] + [f"{i // 5},{r}" for i, r in enumerate(_numbers(ROWS, 2))],
            "utf-8",
        ),
        ("unnamed column", ["A,,B"] + _numbers(ROWS, 3), "utf-8"),
        (
            "quoted cells",
            ['"A","B"']
            + [f'"{r.replace(",", chr(34) + "," + chr(34))}"' for r in _numbers(ROWS, 2)],
            "utf-8",
        ),
    ],
)
def test_same_as_classified_reading_odd_files(tmp_path, case, lines, encoding):
    path = tmp_path / "odd.csv"
    path.write_bytes(("\n".join(lines) + "\n").encode(encoding))
    assert _read(path, classify_all=False) == _read(path, classify_all=True), case


def test_small_file_on_disk_read_without_pandas_as_with_it(tmp_path):
    """A file of at most 1 MiB and ``PLAIN_MAX_TABLE_CELLS`` cells is split without pandas (in
    a fresh process: pandas not imported); the measurements equal pandas' reading (this
    process has pandas imported, so its reader takes pandas' route)."""
    import subprocess
    import sys

    import pandas  # noqa: F401 - the reference route below

    from studykit.io.plain import PLAIN_MAX_BYTES, PLAIN_MAX_TABLE_CELLS

    path = tmp_path / "wide.csv"
    path.write_text(
        "\n".join(["subgroup,A,B,C"] + [f"{i // 5},{r}" for i, r in enumerate(_numbers(12_000, 3))])
        + "\n"
    )
    assert PLAIN_MAX_CELLS < 4 * 12_001 <= PLAIN_MAX_TABLE_CELLS
    assert path.stat().st_size <= PLAIN_MAX_BYTES
    code = (
        "import pickle, sys\n"
        "from studykit.io.readers import read_measurements\n"
        f"m = read_measurements({str(path)!r})\n"
        "sys.stdout.buffer.write(pickle.dumps(('pandas' in sys.modules, m)))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, check=True)
    imported, plain_read = pickle.loads(done.stdout)
    assert imported is False
    assert pickle.dumps(plain_read) == pickle.dumps(read_measurements(path))
