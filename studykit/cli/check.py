"""``studykit check FILE``: show what studykit reads from a measurement file.

Prints the detected layout, each characteristic with unit, count, missing values and
subgroups, and every warning. A file that cannot be read ends with one line on stderr naming
the file, row and column, and exit status 2 (the dispatcher prints it).
"""

from __future__ import annotations

import sys

from studykit.cli._output import write_json
from studykit.cli.args import add_reading_options, read_file_measurements
from studykit.data import Measurements
from studykit.errors import printable


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "check",
        help="read a measurement file and show what was found",
        description="Read a CSV or XLSX measurement file and show the layout, characteristics, "
        "missing values, subgroups and warnings. Exit status 0 when the file can be read, "
        "2 when it cannot.",
    )
    p.add_argument("file", metavar="FILE", help="CSV or XLSX file with measurements")
    add_reading_options(p, subgroups=True, long_table=True, table_shape=True)
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    m = read_file_measurements(args)
    if args.json:
        write_json(m.summary())
    else:
        sys.stdout.write(format_check(m))
    return 0


def _sizes_text(c) -> str:
    sizes = [v for v in c.subgroup_sizes.values()]
    if not sizes:
        return "-"
    lo, hi = min(sizes), max(sizes)
    return str(lo) if lo == hi else f"{lo}..{hi}"


def format_check(m: Measurements) -> str:
    """Plain-text report of what was read (used by ``studykit check``).

    Text from the file (names, units, labels in notes and warnings) is shown with its control
    characters escaped (:func:`studykit.errors.printable`): one table row per line, and no
    terminal escape sequence from a cell reaches the terminal.
    """
    lines = [f"File:       {printable(m.source)}", f"SHA-256:    {m.sha256}"]
    how = {"wide": "wide (one column per characteristic)", "long": "long (one row per value)"}[
        m.layout
    ]
    lines.append(f"Layout:     {how}")
    if m.sheet:
        lines.append(f"Sheet:      {printable(m.sheet)}")
    if m.separator is not None:
        sep = {",": "comma", ";": "semicolon", "\t": "tab"}.get(m.separator, repr(m.separator))
        lines.append(f"Text:       {sep}-separated, decimal sign '{m.decimal}', {m.encoding}")
    if m.subgroup_source == "column":
        sg = f"from column '{printable(m.subgroup_column)}'"
    elif m.subgroup_source == "size":
        sg = f"{m.subgroup_size} consecutive values each"
    else:
        sg = "none (individual values)"
    lines.append(f"Subgroups:  {sg}")
    lines.append(f"Data rows:  {m.n_rows}")
    lines.append("")
    head = ("Characteristic", "Unit", "Values", "Missing", "Subgroups", "Size", "Min", "Max")
    table = [head]
    for c in m.characteristics:
        s = c.summary()
        table.append(
            (
                printable(c.name),
                printable(c.unit or "-"),
                str(c.n_valid),
                str(c.n_missing),
                str(c.n_subgroups) if m.subgroup_source != "none" else "-",
                _sizes_text(c) if m.subgroup_source != "none" else "-",
                "-" if s["min"] is None else f"{s['min']:g}",
                "-" if s["max"] is None else f"{s['max']:g}",
            )
        )
    widths = [max(len(r[i]) for r in table) for i in range(len(head))]
    for k, r in enumerate(table):
        cells = [r[0].ljust(widths[0]), r[1].ljust(widths[1])]
        cells += [r[i].rjust(widths[i]) for i in range(2, len(head))]
        lines.append("  ".join(cells).rstrip())
        if k == 0:
            lines.append("  ".join("-" * w for w in widths))
    lines.append("")
    lines.append("Detected:")
    lines += [f"  - {printable(n)}" for n in m.notes]
    if m.warnings:
        lines.append("Warnings:")
        lines += [f"  ! {printable(w)}" for w in m.warnings]
    else:
        lines.append("Warnings:   none")
    return "\n".join(lines) + "\n"
