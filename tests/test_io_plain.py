"""studykit.io.plain: the pandas-free route for small tables gives pandas' own results.

Reference library: pandas (``pandas.factorize``, ``pandas.unique``, ``Series.str.strip``,
``pandas.to_datetime`` with an exact format, ``pandas.read_csv`` with the C engine), called
on the same inputs in the same process. The end-to-end check reads every CSV file of the demo
data once in a process where pandas is never imported and once with pandas loaded (then every
helper hands the work to pandas) and compares what the reader returns.
"""

from __future__ import annotations

import io
import json
import random
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from studykit.io import plain

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize(
    "values",
    [
        np.array(["b", "a", "b", "c", "a"], dtype=object),
        np.array(["10", "9", "10", "1"]),  # fixed-width text
        np.array([5, 3, 5, 0, 3], dtype=np.int64),
        np.array([2, 2, 1], dtype=np.int32),
        np.array([], dtype=object),
    ],
)
def test_factorize_as_pandas(values):
    codes, uniq = plain.plain_factorize(values)
    ref_codes, ref_uniq = pd.factorize(values, sort=False)
    assert codes.tolist() == ref_codes.tolist()
    assert uniq.tolist() == ref_uniq.tolist()
    assert uniq.dtype == np.asarray(ref_uniq).dtype


def test_factorize_leaves_missing_labels_to_pandas():
    # pandas codes None/NaN as -1; the plain route does not read them
    assert plain.plain_factorize(np.array(["a", None], dtype=object)) is None
    assert plain.plain_factorize(np.array([1.0, np.nan])) is None


def test_unique_and_filled_as_pandas(monkeypatch):
    monkeypatch.setattr(plain, "use_pandas", lambda n: False)
    text = np.array([" x", "", "y ", "  ", "x", " x"], dtype=object)
    for cells in (text, text.astype(str)):
        got, ref = plain.unique(cells), pd.unique(cells)
        assert got.tolist() == ref.tolist() and got.dtype == ref.dtype
    assert (
        plain.strip_filled(text).tolist()
        == (pd.Series(text, dtype=object).str.strip() != "").to_numpy(dtype=bool).tolist()
    )
    times = np.array(["2026-03-02 06:00", "NaT", "2026-03-02 06:00", "2026-01-01"], "M8[ns]")
    assert plain.unique(times).tolist() == pd.unique(times).tolist()


_TIME_CELLS = [
    "2026-03-02 06:00:07",
    "2026-03-02T06:00:07",
    "2026-03-02 06:00",
    "2026-03-02T06:00",
    "2026-03-02",
    "2026-02-30 06:00",  # no such day
    "2026-13-02",
    "2026-03-02 24:00",
    "2026-3-2 6:00",  # pandas' own affair
    " 2026-03-02",
    "2024-02-29 23:59:59",
    "",
]


def _pandas_times(cells, fmt):
    try:
        return np.array(pd.to_datetime(cells, format=fmt), dtype="datetime64[ns]").tolist()
    except (ValueError, TypeError):
        return "refused"


@pytest.mark.parametrize("fmt", list(plain._ISO_CELLS))
def test_times_as_pandas(fmt):
    checked = 0
    for cell in _TIME_CELLS:
        for cells in ([cell], [cell, ""], ["2026-03-02 06:00", cell], [None, cell]):
            cells = np.array(cells, dtype=object)
            try:
                got = plain.plain_to_datetime64(cells, fmt)
            except ValueError:
                got = "refused"
            if got is None:
                continue  # left to pandas
            got = got if isinstance(got, str) else got.tolist()
            assert got == _pandas_times(cells, fmt), (fmt, cells)
            checked += 1
    assert checked >= 20


@pytest.mark.parametrize("decimal", [".", ","])
def test_numbers_as_pandas_read_csv(decimal):
    rng = random.Random(7)
    cells = []
    for _ in range(20_000):
        k = rng.randint(1, 15)
        s = "".join(rng.choice("0123456789") for _ in range(k))
        if k > 1 and rng.random() < 0.85:
            i = rng.randint(1, k - 1)
            s = s[:i] + decimal + s[i:]
        cells.append(("-" if rng.random() < 0.3 else "") + s)
    ref = pd.read_csv(
        io.StringIO("v\n" + "\n".join(cells) + "\n"),
        sep=";",
        decimal=decimal,
        dtype={"v": np.float64},
        keep_default_na=False,
        na_values=[""],
        engine="c",
    )["v"].to_numpy()
    got = [plain.plain_float(c, decimal) for c in cells]
    read = np.array([np.nan if g is None else g for g in got])
    kept = ~np.isnan(read)
    assert kept.sum() > 19_000
    assert np.array_equal(read[kept], ref[kept])
    assert np.array_equal(np.signbit(read[kept]), np.signbit(ref[kept]))
    assert plain.plain_float("1e3", ".") is None and plain.plain_float("+1", ".") is None


def test_records_refuse_what_they_do_not_read(monkeypatch):
    monkeypatch.delitem(sys.modules, "pandas")  # as in a process without pandas
    assert plain.plain_records(b"a,b\n1,2\n", "utf-8", ",") == [["a", "b"], ["1", "2"]]
    assert plain.plain_records(b"a,b\r1,2", "utf-8", ",") == [["a", "b"], ["1", "2"]]
    for data in (
        b'a,b\n"1",2\n',  # quotes
        b"a,b\n\n1,2\n",  # an empty line
        b"a,b\n1,2,3\n",  # a ragged row
        b"\xef\xbb\xbfa,b\n1,2\n",  # byte-order mark
        b"a,b\n1\x0b,2\n",  # a line break for str.splitlines only
        b"a,b\n\xff,2\n",  # not UTF-8
    ):
        assert plain.plain_records(data, "utf-8", ",") is None, data


_READ_ALL = """
import glob, json, os, sys
if sys.argv[1] == "pandas":
    import pandas
from studykit.data import read_measurements_bytes
out = {}
for f in sorted(glob.glob("demo_data/*.csv")):
    try:
        m = read_measurements_bytes(open(f, "rb").read(), os.path.basename(f))
        out[f] = repr([(n, sorted((k, repr(v)) for k, v in vars(m.get(n)).items())) for n in m.names])
    except Exception as e:
        out[f] = f"{type(e).__name__}: {e}"
out["pandas imported"] = "pandas" in sys.modules
print(json.dumps(out))
"""


def test_reader_without_pandas_reads_as_with_pandas():
    def run(mode):
        done = subprocess.run(
            [sys.executable, "-c", _READ_ALL, mode],
            cwd=ROOT,
            capture_output=True,
            text=True,
            check=True,
        )
        return json.loads(done.stdout)

    plain_run, pandas_run = run("plain"), run("pandas")
    assert plain_run.pop("pandas imported") is False
    assert pandas_run.pop("pandas imported") is True
    assert len(plain_run) >= 8
    assert plain_run == pandas_run


@pytest.mark.parametrize("fmt", list(plain._ISO_CELLS))
def test_fixed_width_times_as_pandas(fmt):
    """The vectorised check of fixed-width ISO cells: pandas' own values where it reads the
    cells (pandas.to_datetime with the exact format is the reference), None (pandas decides)
    for any cell it does not take, e.g. a day that does not exist, a field out of range, a
    stray blank, a non-ASCII digit or an empty cell."""
    rng = np.random.default_rng(21)
    stamps = np.datetime64("1990-01-01T00:00:00") + rng.integers(0, 60 * 365 * 86400, 30_000)
    text = np.datetime_as_string(stamps.astype("datetime64[s]"), unit="s").astype(object)
    width = plain._ISO_LAYOUT[fmt][0]
    sep = "T" if "T" in fmt else " "
    cells = np.array([t.replace("T", sep)[:width] for t in text], dtype=object)
    got = plain.fixed_iso_datetime64(cells, fmt)
    assert got is not None
    assert got.tolist() == _pandas_times(cells, fmt)
    assert plain.to_datetime64(cells, fmt).tolist() == got.tolist()
    other = "2026-03-02 06:00:07" if sep == "T" else "2026-03-02T06:00:07"  # another form
    for bad in (
        "2026-02-30 06:00:07"[:width],  # no such day
        "2026-13-02 06:00:07"[:width],
        "2026-03-02 24:00:00" if width > 10 else "2026-03-32",
        "2026-03-02 06:60:00" if width > 10 else "2026-00-02",
        "1500-03-02 06:00:00"[:width],  # outside datetime64[ns]: pandas decides
        "2026-03-02 06:0\u0667:00"[:width] if width > 10 else "2026-03-0\u0667",
        " " + cells[7][1:],
        cells[7] + " ",
        "",
        other[:width] if width > 10 else "02.03.2026",
        "2026/03/02 06:00:07"[:width],
    ):
        spoiled = cells.copy()
        spoiled[12_345] = bad
        assert plain.fixed_iso_datetime64(spoiled, fmt) is None, (fmt, bad)
