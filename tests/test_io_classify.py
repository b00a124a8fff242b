"""The reader's column classification (measurement or text column): the one-match route for
columns of plain numbers gives the counts of the cell-by-cell route.

Reference: the cell-by-cell route (``count_cells``, as it stood before the one-match route;
:func:`studykit.io.cells.text_number` decides what is a number), on random columns
built from plain numbers and from cells that are not plain numbers (decimal comma, text,
empty cells, an overflowing exponent, digits other than 0-9, a line break inside a cell).
"""

from __future__ import annotations

import random

import numpy as np

from studykit.io import cells as c

PLAIN = ["1", "1.5", " 2 ", "\t3\t", "-.5", "+4e3", "1.", "+0", "1e-5 ", "1" * 301]
OTHER = ["1e999", "9" * 400, "1,5", "", "abc", "1.2.3", "nan", "\u0661", "1\n2", "1 000"]
OTHER += ["1_0", "\xa02", "#N/A", "\r1", 2.5, True, 3]


def test_same_counts_as_cell_by_cell():
    rnd = random.Random(14)
    for _ in range(5000):
        pool = PLAIN if rnd.random() < 0.5 else PLAIN + OTHER
        cells = np.array([rnd.choice(pool) for _ in range(rnd.randint(1, 8))], dtype=object)
        assert c.looks_numeric(None, cells) == c.count_cells(cells), list(cells)


def test_plain_column_counted_whole():
    cells = np.array([f"{x:.6g}" for x in np.linspace(-3, 3, 2500)], dtype=object)
    assert c.looks_numeric(None, cells) == (2000, 2000)
    cells[1999] = "x"
    assert c.looks_numeric(None, cells) == (2000, 1999)


def test_long_column_that_fails_late():
    # the pattern is atomic per line: a failing last line does not backtrack into the others
    # (with an ambiguous pattern this column took minutes)
    cells = np.array(["1" * 50] * 1999 + ["1" * 50 + "x"], dtype=object)
    assert c.looks_numeric(None, cells) == (2000, 1999)
