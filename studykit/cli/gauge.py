"""``studykit gauge FILE``: crossed gauge R&R from a long table.

The file has one row per measurement with a part column, an appraiser column, a value column and
optionally a trial column. The result is printed as a table (or one JSON object with ``--json``)
and, with ``--study``, kept in the study file beside the characteristic it qualifies.
"""

from __future__ import annotations

import getpass
import json
import math
import sys
from pathlib import Path

from studykit.errors import DataFileError, StudyInputError
from studykit.stats.gauge import COMPONENT_LABELS, INTERACTION, GaugeResult, gauge_rr

RESULT_KIND = "gauge_rr"


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "gauge",
        help="gauge check: crossed gauge R&R (parts x appraisers x trials) by ANOVA",
        description="Read a long table (one row per measurement) and judge the measurement "
        "system: ANOVA table, variance components, %study variation, %tolerance, ndc and a "
        "verdict. Exit status 0 when the analysis ran (whatever the verdict), 2 on bad input.",
    )
    p.add_argument("file", metavar="FILE", help="CSV or XLSX file, one row per measurement")
    p.add_argument("--part", required=True, metavar="COL", help="column with the part labels")
    p.add_argument("--appraiser", required=True, metavar="COL",
                   help="column with the appraiser (operator) labels")
    p.add_argument("--value", required=True, metavar="COL", help="column with the measurements")
    p.add_argument("--trial", metavar="COL", help="column with the trial number (optional)")
    p.add_argument("--lsl", type=float, metavar="X",
                   help="lower specification limit (default with --study: the characteristic's)")
    p.add_argument("--usl", type=float, metavar="X",
                   help="upper specification limit (default with --study: the characteristic's)")
    p.add_argument("--study-variation", type=float, default=6.0, metavar="K",
                   help="sigmas in the study variation (default 6; 5.15 in older practice)")
    p.add_argument("--alpha-interaction", type=float, default=0.25, metavar="A",
                   help="keep the appraiser-by-part interaction when its p-value is below A "
                   "(default 0.25)")
    p.add_argument("--confidence", type=float, default=0.95, metavar="C",
                   help="confidence level of the intervals (default 0.95)")
    p.add_argument("--sheet", metavar="S", help="worksheet name (XLSX; default: the first)")
    p.add_argument("--json", action="store_true", help="print the result as one JSON object")
    p.add_argument("--study", metavar="STUDYFILE",
                   help="keep the result in this study file (needs --characteristic)")
    p.add_argument("--characteristic", metavar="NAME",
                   help="the characteristic the gauge measures (with --study)")
    p.add_argument("--who", metavar="NAME",
                   help="name recorded with the stored result (default: the login name)")
    p.add_argument("--override-lock", metavar="REASON",
                   help="store the result in an approved study anyway; voids the approval")
    p.set_defaults(func=run)


def read_gauge_table(path, *, part: str, appraiser: str, value: str, trial: str | None = None,
                     sheet: str | None = None) -> dict:
    """Read the long gauge table; returns ``{"values", "parts", "appraisers", "trials"}``.

    Raises DataFileError naming the file, column and spreadsheet row of each problem.
    """
    import pandas as pd

    path = Path(path)
    if not path.exists():
        raise DataFileError(f"file '{path}' does not exist; check the path")
    try:
        if path.suffix.lower() in (".xlsx", ".xlsm"):
            frame = pd.read_excel(path, sheet_name=sheet or 0, dtype=object)
        else:
            # blank lines are kept (and dropped below) so that row numbers match the file
            frame = pd.read_csv(path, sep=None, engine="python", dtype=str,
                                skipinitialspace=True, encoding="utf-8-sig",
                                skip_blank_lines=False)
    except (ValueError, OSError, UnicodeDecodeError) as exc:
        raise DataFileError(f"cannot read the table: {exc}", file=path) from None
    frame.columns = [str(c).strip() for c in frame.columns]
    wanted = {"--part": part, "--appraiser": appraiser, "--value": value}
    if trial:
        wanted["--trial"] = trial
    for option, col in wanted.items():
        if col not in frame.columns:
            raise DataFileError(
                f"no column named '{col}' (given with {option}); the columns are: "
                + ", ".join(f"'{c}'" for c in frame.columns),
                file=path,
            )
    given = list(wanted.items())
    for k, (option, col) in enumerate(given):
        for other, col2 in given[k + 1:]:
            if col == col2:
                raise DataFileError(
                    f"{option} and {other} both name column '{col}'; each role needs its own "
                    "column (parts, appraisers, trials and values)", file=path, column=col,
                )
    # spreadsheet row of each table row (header = row 1); wholly empty rows are left out
    file_rows = [int(i) + 2 for i in range(len(frame))]
    blank = frame.isna().all(axis=1).to_numpy()
    if blank.any():
        frame = frame[~blank]
        file_rows = [r for r, b in zip(file_rows, blank.tolist(), strict=True) if not b]
    values = []
    first_sign: dict[str, int] = {}
    for i, raw in enumerate(frame[value].tolist()):
        text = "" if raw is None or (isinstance(raw, float) and math.isnan(raw)) else str(raw)
        text = text.strip()
        if isinstance(raw, str):
            for sign in (".", ","):
                if sign in text:
                    first_sign.setdefault(sign, file_rows[i])
            if len(first_sign) == 2:
                raise DataFileError(
                    f"'{text}' mixes the decimal signs '.' and ',' with the rest of the column "
                    f"(first '.' in row {first_sign['.']}, first ',' in row {first_sign[',']}); "
                    "use one decimal sign throughout and no thousands separators",
                    file=path, row=file_rows[i], column=value,
                )
        try:
            x = float(text.replace(",", ".")) if "," in text and "." not in text else float(text)
        except ValueError:
            x = math.nan
        if not math.isfinite(x):
            shown = f"'{text}'" if text else "an empty cell"
            raise DataFileError(
                f"{shown} is not a number; every row needs a measured value (delete the row of "
                "a missing measurement from every appraiser's cell, or re-measure)",
                file=path, row=file_rows[i], column=value,
            )
        values.append(x)
    labels = {}
    for key, col in (("parts", part), ("appraisers", appraiser), ("trials", trial)):
        if col is None:
            labels[key] = None
            continue
        out = []
        for i, raw in enumerate(frame[col].tolist()):
            text = "" if raw is None or (isinstance(raw, float) and math.isnan(raw)) else str(raw)
            text = text.strip()
            if not text:
                raise DataFileError("empty label; every row needs one", file=path,
                                    row=file_rows[i], column=col)
            out.append(_natural(text))
        labels[key] = out
    return {"values": values, **labels}


def _natural(text: str):
    """Whole-number labels sort as numbers (part 10 after part 9); others stay text."""
    try:
        return int(text)
    except ValueError:
        return text


def run(args) -> int:
    if (args.study is None) != (args.characteristic is None):
        raise StudyInputError(
            "`--study` and `--characteristic` go together: name the study file and the "
            "characteristic the gauge measures"
        )
    lsl, usl, limits_from = args.lsl, args.usl, None
    if args.study:
        from studykit.store import StudyFile

        spec = StudyFile(args.study).load().characteristic(args.characteristic)
        if lsl is None and usl is None and spec.lsl is not None and spec.usl is not None:
            lsl, usl, limits_from = spec.lsl, spec.usl, args.characteristic
    table = read_gauge_table(args.file, part=args.part, appraiser=args.appraiser,
                             value=args.value, trial=args.trial, sheet=args.sheet)
    try:
        result = gauge_rr(
            table["values"], table["parts"], table["appraisers"], trials=table["trials"],
            alpha_interaction=args.alpha_interaction, study_variation=args.study_variation,
            lsl=lsl, usl=usl, confidence=args.confidence,
        )
    except StudyInputError as exc:
        if exc.file is not None:
            raise
        # a design problem (unbalanced, too few parts...) belongs to the file: say which
        raise type(exc)(exc.detail, file=Path(args.file).name, row=exc.row, column=exc.column,
                        value=exc.value) from None
    stored_id = None
    if args.study:
        who = args.who or _login_name()
        payload = result.to_dict()
        payload["source_file"] = Path(args.file).name
        payload["limits_from"] = "study" if limits_from else "command line"
        payload["columns"] = {"part": args.part, "appraiser": args.appraiser,
                              "value": args.value, "trial": args.trial}
        lock = ({"override_lock": True, "override_reason": args.override_lock}
                if args.override_lock else {})
        stored_id = StudyFile(args.study).attach_result(RESULT_KIND, args.characteristic,
                                                        payload, who=who, **lock)
    if args.json:
        out = result.to_dict()
        if stored_id is not None:
            out["stored"] = {"study": Path(args.study).name, "characteristic": args.characteristic,
                             "result_id": stored_id,
                             "limits_from": "study" if limits_from else "command line"}
        json.dump(out, sys.stdout, indent=2, ensure_ascii=False, allow_nan=False)
        sys.stdout.write("\n")
    else:
        sys.stdout.write(format_gauge(result, source=Path(args.file).name))
        if limits_from:
            sys.stdout.write(f"Tolerance taken from the specification of '{limits_from}' in the "
                             "study file.\n")
        if stored_id is not None:
            sys.stdout.write(f"Stored as result {stored_id} of '{args.characteristic}' in "
                             f"{Path(args.study).name}.\n")
    return 0


def _login_name() -> str:
    try:
        return getpass.getuser()
    except (OSError, KeyError):
        return ""


def _num(x, fmt: str = ".4g") -> str:
    return "-" if x is None else format(x, fmt)


def _table(head, rows, right_from=1) -> list[str]:
    rows = [tuple(head)] + [tuple(r) for r in rows]
    widths = [max(len(r[i]) for r in rows) for i in range(len(head))]
    lines = []
    for k, r in enumerate(rows):
        cells = [r[i].ljust(widths[i]) if i < right_from else r[i].rjust(widths[i])
                 for i in range(len(head))]
        lines.append("  ".join(cells).rstrip())
        if k == 0:
            lines.append("  ".join("-" * w for w in widths))
    return lines


_SOURCE_NAMES = {"part_to_part": "Part", "appraiser": "Appraiser",
                 INTERACTION: "Appraiser x part", "repeatability": "Repeatability",
                 "total": "Total"}


def _anova_lines(rows) -> list[str]:
    return _table(
        ("Source", "df", "SS", "MS", "F", "p"),
        [(_SOURCE_NAMES.get(r.source, r.source), str(r.df), _num(r.ss, ".6g"),
          _num(r.ms, ".6g"), _num(r.f, ".4g"), _num(r.p, ".4g")) for r in rows],
    )


def format_gauge(res: GaugeResult, *, source: str = "") -> str:
    """Plain-text report of a gauge study (used by ``studykit gauge``).

    Examples
    --------
    >>> from studykit.stats.gauge import gauge_rr
    >>> res = gauge_rr([1.0, 1.1, 1.2, 1.1, 2.0, 2.2, 2.1, 2.1], [1, 1, 1, 1, 2, 2, 2, 2],
    ...                ["A", "A", "B", "B"] * 2)
    >>> print(format_gauge(res).splitlines()[0])
    Design:      2 parts x 2 appraisers x 2 trials = 8 values (crossed, balanced)
    """
    k = res.study_variation
    lines = []
    if source:
        lines.append(f"File:        {source}")
    lines.append(f"Design:      {res.n_parts} parts x {res.n_appraisers} appraisers x "
                 f"{res.n_trials} trials = {res.n_values} values (crossed, balanced)")
    if res.tolerance is not None:
        lines.append(f"Tolerance:   {res.lsl:g} .. {res.usl:g} (width {res.tolerance:g})")
    lines.append("")
    lines.append("ANOVA with the appraiser-by-part interaction")
    lines += _anova_lines(res.anova_full)
    if res.interaction_pooled:
        lines.append("")
        lines.append(f"ANOVA used (interaction pooled: p >= {res.alpha_interaction:g})")
        lines += _anova_lines(res.anova_used)
    lines.append("")
    conf = f"{100 * res.confidence:g}%"
    lines.append(f"Variance components (study variation = {k:g} sigma; {conf} interval on sigma)")
    rows = []
    for c in res.components:
        ci = "-" if c.lower is None else f"{c.lower:.4g} .. {c.upper:.4g}"
        tag = (" (set to 0)" if c.set_to_zero else
               " (pooled)" if c.interval_method == "pooled into repeatability" else "")
        rows.append((COMPONENT_LABELS[c.name] + tag,
                     _num(c.variance, ".5g"), _num(c.pct_contribution, ".2f"),
                     _num(c.sigma, ".5g"), _num(c.study_variation, ".5g"),
                     _num(c.pct_study_variation, ".2f"), _num(c.pct_tolerance, ".2f"), ci))
    lines += _table(("Source", "Variance", "%Contrib", "Sigma", f"{k:g}*Sigma", "%StudyVar",
                     "%Tol", "Sigma interval"), rows)
    lines.append("")
    lines.append(f"Distinct categories (ndc): {'-' if res.ndc is None else res.ndc}")
    rm = res.range_method
    lines.append(
        f"Average-and-range check: GRR sigma {rm.gauge_rr:.4g} (EV {rm.repeatability:.4g}, "
        f"AV {rm.reproducibility:.4g}), part sigma {rm.part:.4g}, "
        f"%StudyVar {_num(rm.pct_study_variation, '.2f')}"
    )
    lines.append("")
    v = res.verdict
    lines.append(f"Verdict: {v.status.upper()}")
    lines.append(f"  {v.message}")
    if v.advice:
        lines.append(f"  What to do: {v.advice}")
    if res.notes:
        lines.append("Notes:")
        lines += [f"  - {n}" for n in res.notes]
    return "\n".join(lines) + "\n"
