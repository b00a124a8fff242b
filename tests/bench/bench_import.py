"""Benchmark for studykit.data: read time and peak memory of large measurement files.

Run: ``.venv/bin/python tests/bench/bench_import.py [--xlsx-rows N]``

Prints, for each generated file, its size, the rows read, the read time, the peak rise in
resident memory of a fresh interpreter (ru_maxrss) and the ratios memory/file size and
seconds per million rows. Nothing here is a pass/fail test; the bounded-memory check lives in
tests/test_data.py::test_50mb_file_in_bounded_memory.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

import numpy as np

MB = 1024 * 1024


def make_wide_50mb(path: Path, *, seed: int = 1) -> int:
    """Semicolon CSV, decimal comma, subgroup column + three characteristics, ~50 MB."""
    rng = np.random.default_rng(seed)
    rows = 0
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("Stichprobe;Bohrung [mm];Länge [mm];Breite [mm]\n")
        while fh.tell() < 50 * MB:
            block = rng.normal(10.0, 0.01, size=(20000, 3))
            fh.write(
                "".join(
                    f"{(rows + i) // 5 + 1};{a:.5f};{b:.5f};{c:.5f}\n".replace(".", ",")
                    for i, (a, b, c) in enumerate(block)
                )
            )
            rows += len(block)
    return rows


def make_long_1m(path: Path, *, seed: int = 2) -> int:
    """Comma CSV in long layout: 1,000,000 rows, two characteristics, subgroups of 5."""
    rng = np.random.default_rng(seed)
    n = 1_000_000
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("characteristic,subgroup,value\n")
        for start in range(0, n, 50000):
            vals = rng.normal(25.0, 0.2, size=50000)
            fh.write(
                "".join(
                    f"{'Torque' if (start + i) % 2 else 'Angle'},{(start + i) // 10 + 1},{v:.4f}\n"
                    for i, v in enumerate(vals)
                )
            )
    return n


def make_individuals_1m(path: Path, *, seed: int = 3) -> int:
    """One column, 1,000,000 individual values (the label array is the largest here)."""
    rng = np.random.default_rng(seed)
    n = 1_000_000
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("Flatness [um]\n")
        for _ in range(0, n, 100000):
            fh.write("".join(f"{v:.3f}\n" for v in rng.gamma(2.0, 3.0, size=100000)))
    return n


def make_xlsx(path: Path, rows: int, *, seed: int = 4) -> int:
    import openpyxl

    rng = np.random.default_rng(seed)
    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet("Data")
    ws.append(["Subgroup", "Diameter [mm]", "Height [mm]"])
    for i, (a, b) in enumerate(rng.normal(5.0, 0.01, size=(rows, 2))):
        ws.append([i // 5 + 1, float(a), float(b)])
    wb.save(path)
    return rows


def measure(path: Path) -> dict:
    """Read `path` in a fresh interpreter; return seconds, memory rise and counts."""
    script = textwrap.dedent(
        f"""
        import json, resource, time
        import numpy, pandas, openpyxl
        from studykit.data import read_measurements
        before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
        t = time.perf_counter()
        m = read_measurements({str(path)!r})
        seconds = time.perf_counter() - t
        after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
        print(json.dumps({{"seconds": seconds, "rise": after - before, "rows": m.n_rows,
                          "characteristics": len(m), "layout": m.layout}}))
        """
    )
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True)
    return json.loads(out.stdout)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--xlsx-rows", type=int, default=50_000, help="rows of the XLSX case (0 to skip)"
    )
    args = parser.parse_args(argv)
    cases = [
        ("wide CSV, ~50 MB, decimal comma", "wide50.csv", make_wide_50mb),
        ("long CSV, 1,000,000 rows", "long1m.csv", make_long_1m),
        ("individuals CSV, 1,000,000 rows", "ind1m.csv", make_individuals_1m),
    ]
    if args.xlsx_rows:
        cases.append(
            (f"XLSX, {args.xlsx_rows:,} rows", "sheet.xlsx", lambda p: make_xlsx(p, args.xlsx_rows))
        )
    print(
        f"{'case':36} {'size MB':>8} {'rows':>10} {'read s':>7} {'peak rise MB':>13} "
        f"{'rise/size':>9} {'s per 1M rows':>13}"
    )
    with tempfile.TemporaryDirectory() as tmp:
        for title, name, make in cases:
            path = Path(tmp) / name
            make(path)
            size = path.stat().st_size
            r = measure(path)
            print(
                f"{title:36} {size / MB:8.1f} {r['rows']:10,d} {r['seconds']:7.2f} "
                f"{r['rise'] / MB:13.1f} {r['rise'] / size:9.2f} "
                f"{r['seconds'] / r['rows'] * 1e6:13.2f}",
                flush=True,
            )
            path.unlink()
    return 0


if __name__ == "__main__":
    sys.exit(main())
