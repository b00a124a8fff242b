"""``studykit position FILE``: positional tolerance from X and Y deviations.

Reads two columns of deviations from nominal (CSV/XLSX through :mod:`studykit.data`), fits the
bivariate normal and reports the expected PPM outside the true-position zone of diameter T, the
equivalent index, the one-dimensional shortcut beside it, and optionally writes the scatter plot
with the zone and the fitted ellipse.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from studykit.cli._output import closing_lines, write_json
from studykit.cli.args import (
    add_override_lock,
    add_reading_options,
    add_safety_critical,
    add_who,
    lock_options,
    login_name,
)
from studykit.errors import DataFileError, StudyInputError

FIGURE_SUFFIXES = (".png", ".pdf", ".svg")


def register(sub) -> None:
    p = sub.add_parser(
        "position",
        help="positional tolerance: X/Y deviations against a true-position zone",
        description="Fit a bivariate normal (offset, unequal spreads, correlation) to the X "
        "and Y deviations from nominal and report the expected PPM outside the circular zone "
        "of diameter T, its equivalent index and, beside it, the one-dimensional shortcut "
        "(2 sqrt(dx^2 + dy^2) against T as a one-sided limit). Exit status 0 when computed, "
        "2 on bad input.",
    )
    p.add_argument("file", metavar="FILE", help="measurement file (CSV or XLSX)")
    p.add_argument("--x", required=True, metavar="COL", help="column of X deviations")
    p.add_argument("--y", required=True, metavar="COL", help="column of Y deviations")
    p.add_argument(
        "--tolerance",
        required=True,
        type=float,
        metavar="T",
        help="diameter of the position zone (same unit as the deviations)",
    )
    p.add_argument(
        "--figure",
        metavar="PATH",
        help="write the scatter plot with the zone and fitted ellipse (.png, .pdf or .svg)",
    )
    add_reading_options(p)
    add_safety_critical(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument(
        "--study",
        metavar="STUDYFILE",
        help="keep the position study in this study file (needs --name); the "
        "workbook, the PDF and verify then show and check it",
    )
    p.add_argument("--name", metavar="NAME", help="name of the position study (with --study)")
    add_who(p, "name recorded with the stored study (default: the login name)")
    add_override_lock(p, "store it in an approved study anyway; voids the approval")
    p.set_defaults(func=run)


def _paired(m, xd, yd):
    """Paired finite (dx, dy); a row with one value but not the other is an error."""
    xv, yv = np.asarray(xd.values, dtype=float), np.asarray(yd.values, dtype=float)
    xr, yr = np.asarray(xd.rows), np.asarray(yd.rows)
    if xv.size != yv.size or not np.array_equal(xr, yr):
        raise DataFileError(
            f"columns '{xd.label}' and '{yd.label}' are not read row by row "
            "(a long table?); put X and Y side by side, one part per row",
            file=m.source,
        )
    one = np.isnan(xv) != np.isnan(yv)
    if one.any():
        i = int(np.flatnonzero(one)[0])
        col = xd.label if np.isnan(xv[i]) else yd.label
        raise DataFileError(
            "this cell is empty but the other deviation of the part is "
            "given; every part needs both X and Y (or neither)",
            file=m.source,
            row=int(xr[i]),
            column=col,
        )
    keep = ~np.isnan(xv)
    return xv[keep], yv[keep], int((~keep).sum())


def run(args) -> int:
    from studykit.cli.interval import read_values
    from studykit.stats.position import position_study

    if args.figure and Path(args.figure).suffix.lower() not in FIGURE_SUFFIXES:
        raise StudyInputError(
            f"--figure '{args.figure}': the file name must end in " + ", ".join(FIGURE_SUFFIXES)
        )
    if bool(args.study) != bool(args.name):
        raise StudyInputError(
            "--study and --name go together: name the position study kept "
            "in the study file, e.g. --study pilot.study --name hole_position"
        )
    if args.x == args.y:
        raise StudyInputError(
            f"--x and --y both name column '{args.x}'; give the X and the Y deviation columns"
        )
    m, (xd, yd) = read_values(args, [args.x, args.y])
    dx, dy, n_empty = _paired(m, xd, yd)
    try:
        res = position_study(dx, dy, tolerance=args.tolerance)
    except StudyInputError as exc:
        if exc.file is not None:
            raise
        raise type(exc)(exc.detail, file=m.source) from None
    notes = [f"{n_empty} row(s) without deviations left out"] if n_empty else []
    stored_id = None
    if args.study:
        from studykit.positions import POSITION_KIND, position_payload
        from studykit.store import StudyFile

        payload = position_payload(
            args.name,
            dx,
            dy,
            tolerance=args.tolerance,
            unit=xd.unit,
            source_file=Path(args.file).name,
            columns={"x": xd.name, "y": yd.name},
            safety_critical=bool(args.safety_critical),
        )
        stored_id = StudyFile(args.study).attach_result(
            POSITION_KIND,
            None,
            payload,
            who=args.who or login_name(),
            reason=f"position study {args.name} from {Path(args.file).name}",
            **lock_options(args),
        )
    if args.figure:
        from studykit.report.position_figures import position_figure

        fig = position_figure(res, unit=xd.unit)
        try:
            fig.savefig(args.figure, dpi=150)
        except OSError as exc:
            raise StudyInputError(
                f"cannot write the figure '{args.figure}': {exc.strerror or exc}"
            ) from None
    caution = None
    if args.safety_critical:
        from studykit.analysis import SAFETY_CAUTION

        caution = SAFETY_CAUTION
    if args.json:
        out = {"source": m.source, "x": xd.name, "y": yd.name, "unit": xd.unit, **res.to_dict()}
        out["notes"] = [*notes, *out["notes"]]
        out["figure"] = args.figure
        out["safety_critical"] = bool(args.safety_critical)
        out["caution"] = caution
        if stored_id is not None:
            out["stored"] = {
                "study": Path(args.study).name,
                "name": args.name,
                "result_id": stored_id,
            }
        write_json(out, allow_nan=False)
    else:
        sys.stdout.write(
            format_position(
                res, source=m.source, x=xd.label, y=yd.label, notes=notes, caution=caution
            )
        )
        if args.figure:
            sys.stdout.write(f"Figure written to {args.figure}\n")
        if stored_id is not None:
            sys.stdout.write(f"Kept in {args.study} as position study '{args.name}'.\n")
    return 0


def _g(v, fmt=".4g"):
    return "-" if v is None else format(v, fmt)


def format_position(res, *, source="", x="dx", y="dy", notes=(), caution=None) -> str:
    """Plain-text report of a position study (used by ``studykit position``).

    Examples
    --------
    >>> import numpy as np
    >>> from studykit.stats.position import position_study
    >>> turn = np.arange(40.0)  # deviations on an ellipse around nominal, one part per step
    >>> res = position_study(0.02 * np.sin(turn), 0.03 * np.cos(turn), tolerance=0.2)
    >>> print(format_position(res).splitlines()[0])
    Zone:        diameter 0.2 around nominal; 40 parts
    """
    lines = []
    if source:
        lines.append(f"File:        {source}  (X: {x}, Y: {y})")
    lines.append(f"Zone:        diameter {res.tolerance:g} around nominal; {res.n} parts")
    lines.append(
        f"Model:       bivariate normal: mean ({res.mean_x:.4g}, {res.mean_y:.4g}), "
        f"offset {res.offset:.4g}; sd X {res.sd_x:.4g}, sd Y {res.sd_y:.4g}, "
        f"correlation {res.correlation:.3f}"
    )
    rows = [
        (
            "Two-dimensional model (bivariate normal)",
            _g(res.ppm_expected, ".4g"),
            _g(res.index, ".3f"),
        ),
        (
            "Shortcut: 2*sqrt(dx^2+dy^2) vs T, normal",
            _g(res.shortcut_ppm, ".4g"),
            _g(res.shortcut_index, ".3f"),
        ),
        ("Observed", f"{res.ppm_observed:.4g} ({res.observed_outside} of {res.n})", "-"),
    ]
    w0 = max(len(r[0]) for r in rows)
    w1 = max(len(r[1]) for r in rows + [("", "PPM outside", "")])
    lines.append("")
    lines.append(f"{'':{w0}}  {'PPM outside':>{w1}}  index")
    lines.append(f"{'-' * w0}  {'-' * w1}  -----")
    lines += [f"{a:{w0}}  {b:>{w1}}  {c}" for a, b, c in rows]
    lines.append("")
    lines.append(
        "Index: Phi^-1(1 - PPM/1e6) / 3, the one-sided Ppk with the same fraction "
        "outside (common practice, no source). The shortcut ignores that the "
        "position value is never negative and skewed; read the two-dimensional row."
    )
    if res.outside:
        lines.append(
            "Parts outside the zone (order in the file): "
            + ", ".join(str(i + 1) for i in res.outside[:20])
            + (" ..." if len(res.outside) > 20 else "")
        )
    lines += closing_lines([*notes, *res.notes], caution)
    return "\n".join(lines) + "\n"
