"""``studykit gauge FILE``: crossed gauge R&R from a long table, or the short gauge study.

Crossed study: the file has one row per measurement with a part column, an appraiser column, a
value column and optionally a trial column.

Short gauge study (``--reference VALUE``): one reference part measured repeatedly; the file has
one row per reading (the value column only is needed); Cg, Cgk, bias and its t-test.

The result is printed as a table (or one JSON object with ``--json``) and, with ``--study``, kept
in the study file beside the characteristic it qualifies (kinds ``gauge_rr`` and ``gauge_short``).
"""

from __future__ import annotations

import sys
from pathlib import Path

from studykit import names
from studykit.cli._output import closing_lines, write_json
from studykit.cli.args import (
    add_override_lock,
    add_reading_options,
    add_who,
    lock_options,
    login_name,
)
from studykit.errors import StudyInputError
from studykit.io.gauge_table import read_gauge_table, read_reference_readings
from studykit.stats.gauge import COMPONENT_LABELS, INTERACTION, GaugeResult, gauge_rr
from studykit.stats.gauge_type1 import (
    DEFAULT_K_PERCENT,
    DEFAULT_L_SIGMAS,
    DEFAULT_MINIMUM,
    ShortGaugeResult,
    short_gauge_study,
)

RESULT_KIND = names.GAUGE_RR_KIND
#: Kind under which a short gauge study (one reference part) is kept in the study file.
SHORT_KIND = names.GAUGE_SHORT_KIND


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "gauge",
        help="gauge check: crossed gauge R&R by ANOVA, or the short gauge study of one "
        "reference part (--reference)",
        description="Read a long table (one row per measurement) and judge the measurement "
        "system: ANOVA table, variance components, %study variation, %tolerance, ndc and a "
        "verdict. With --reference VALUE: the short gauge study of one reference part measured "
        "repeatedly (Cg, Cgk, bias and its t-test; needs --value and the tolerance). Exit "
        "status 0 when the analysis ran (whatever the verdict), 2 on bad input.",
    )
    p.add_argument("file", metavar="FILE", help="CSV or XLSX file, one row per measurement")
    p.add_argument("--part", metavar="COL", help="column with the part labels (crossed study)")
    p.add_argument(
        "--appraiser",
        metavar="COL",
        help="column with the appraiser (operator) labels (crossed study)",
    )
    p.add_argument("--value", required=True, metavar="COL", help="column with the measurements")
    p.add_argument("--trial", metavar="COL", help="column with the trial number (optional)")
    p.add_argument(
        "--lsl",
        type=float,
        metavar="X",
        help="lower specification limit (default with --study: the characteristic's)",
    )
    p.add_argument(
        "--usl",
        type=float,
        metavar="X",
        help="upper specification limit (default with --study: the characteristic's)",
    )
    p.add_argument(
        "--study-variation",
        type=float,
        default=6.0,
        metavar="K",
        help="sigmas in the study variation (default 6; 5.15 in older practice)",
    )
    p.add_argument(
        "--alpha-interaction",
        type=float,
        default=0.25,
        metavar="A",
        help="keep the appraiser-by-part interaction when its p-value is below A (default 0.25)",
    )
    p.add_argument(
        "--confidence",
        type=float,
        default=0.95,
        metavar="C",
        help="confidence level of the intervals (default 0.95)",
    )
    short = p.add_argument_group("short gauge study (one reference part)")
    short.add_argument(
        "--reference",
        type=float,
        metavar="VALUE",
        help="reference value of the part measured repeatedly; selects the short "
        "gauge study (Cg, Cgk, bias)",
    )
    short.add_argument(
        "--tolerance",
        type=float,
        metavar="T",
        help="tolerance width USL - LSL (instead of --lsl/--usl)",
    )
    short.add_argument(
        "--k-percent",
        type=float,
        default=DEFAULT_K_PERCENT,
        metavar="K",
        help="share of the tolerance granted to the gauge, in percent (default "
        f"{DEFAULT_K_PERCENT:g}; common practice)",
    )
    short.add_argument(
        "--l-sigmas",
        type=float,
        default=DEFAULT_L_SIGMAS,
        metavar="L",
        help=f"sigmas standing for the gauge spread (default {DEFAULT_L_SIGMAS:g}; "
        "4 in some plans)",
    )
    short.add_argument(
        "--alpha",
        type=float,
        default=0.05,
        metavar="A",
        help="significance level of the bias t-test (default 0.05)",
    )
    short.add_argument(
        "--minimum",
        type=float,
        default=DEFAULT_MINIMUM,
        metavar="C",
        help=f"Cg and Cgk needed to call the gauge capable (default "
        f"{DEFAULT_MINIMUM:g}; common practice)",
    )
    add_reading_options(p)
    p.add_argument("--json", action="store_true", help="print the result as one JSON object")
    p.add_argument(
        "--study",
        metavar="STUDYFILE",
        help="keep the result in this study file (needs --characteristic)",
    )
    p.add_argument(
        "--characteristic",
        metavar="NAME",
        help="the characteristic the gauge measures (with --study)",
    )
    add_who(p, "name recorded with the stored result (default: the login name)")
    add_override_lock(p, "store the result in an approved study anyway; voids the approval")
    p.set_defaults(func=run)


def run(args) -> int:
    if (args.study is None) != (args.characteristic is None):
        raise StudyInputError(
            "`--study` and `--characteristic` go together: name the study file and the "
            "characteristic the gauge measures"
        )
    if args.reference is not None:
        return run_short(args)
    if args.tolerance is not None:
        raise StudyInputError(
            "`--tolerance` belongs to the short gauge study (with "
            "--reference); the crossed study takes --lsl and --usl"
        )
    missing = [o for o, v in (("--part", args.part), ("--appraiser", args.appraiser)) if not v]
    if missing:
        raise StudyInputError(
            f"the crossed gauge study needs {' and '.join(missing)} (the columns with the part "
            "and appraiser labels); for one reference part measured repeatedly give "
            "--reference VALUE instead"
        )
    lsl, usl, limits_from = args.lsl, args.usl, None
    if args.study:
        from studykit.store import StudyFile

        spec = StudyFile(args.study).load().characteristic(args.characteristic)
        if lsl is None and usl is None and spec.lsl is not None and spec.usl is not None:
            lsl, usl, limits_from = spec.lsl, spec.usl, args.characteristic
    table = read_gauge_table(
        args.file,
        part=args.part,
        appraiser=args.appraiser,
        value=args.value,
        trial=args.trial,
        sheet=args.sheet,
    )
    try:
        result = gauge_rr(
            **table,  # values, parts, appraisers, trials: gauge_rr's own arguments
            alpha_interaction=args.alpha_interaction,
            study_variation=args.study_variation,
            lsl=lsl,
            usl=usl,
            confidence=args.confidence,
        )
    except StudyInputError as exc:
        if exc.file is not None:
            raise
        # a design problem (unbalanced, too few parts...) belongs to the file: say which
        raise type(exc)(
            exc.detail, file=Path(args.file).name, row=exc.row, column=exc.column, value=exc.value
        ) from None
    columns = {
        "part": args.part,
        "appraiser": args.appraiser,
        "value": args.value,
        "trial": args.trial,
    }
    return _store_and_print(
        args,
        result,
        RESULT_KIND,
        columns,
        limits_from,
        format_gauge(result, source=Path(args.file).name),
    )


def run_short(args) -> int:
    """``studykit gauge FILE --reference VALUE``: the short gauge study of one reference part."""
    if args.part or args.appraiser or args.trial:
        raise StudyInputError(
            "--reference selects the short gauge study of one reference part: leave out "
            "--part, --appraiser and --trial (one reading per row in the --value column)"
        )
    if args.tolerance is not None and (args.lsl is not None or args.usl is not None):
        raise StudyInputError("give either --tolerance or --lsl and --usl, not both")
    lsl, usl, tol, limits_from = args.lsl, args.usl, args.tolerance, None
    if args.study:
        from studykit.store import StudyFile

        spec = StudyFile(args.study).load().characteristic(args.characteristic)
        if (
            tol is None
            and lsl is None
            and usl is None
            and spec.lsl is not None
            and spec.usl is not None
        ):
            lsl, usl, limits_from = spec.lsl, spec.usl, args.characteristic
    if tol is None and (lsl is None or usl is None):
        raise StudyInputError(
            "the short gauge study needs the tolerance: give --tolerance T, or --lsl and --usl"
            + ("" if args.study else ", or --study with a characteristic that has both limits")
        )
    readings = read_reference_readings(args.file, value=args.value, sheet=args.sheet)
    try:
        result = short_gauge_study(
            readings,
            reference=args.reference,
            lsl=None if tol is not None else lsl,
            usl=None if tol is not None else usl,
            tolerance=tol,
            k_percent=args.k_percent,
            l_sigmas=args.l_sigmas,
            alpha=args.alpha,
            minimum=args.minimum,
        )
    except StudyInputError as exc:
        if exc.file is not None:
            raise
        raise type(exc)(
            exc.detail, file=Path(args.file).name, column=exc.column or args.value, value=exc.value
        ) from None
    return _store_and_print(
        args,
        result,
        SHORT_KIND,
        {"value": args.value},
        limits_from,
        format_short(result, source=Path(args.file).name),
    )


def format_short(res: ShortGaugeResult, *, source: str = "") -> str:
    """Plain-text report of a short gauge study (used by ``studykit gauge --reference``).

    Examples
    --------
    >>> from studykit.stats.gauge_type1 import short_gauge_study
    >>> res = short_gauge_study([5.001, 5.003, 5.002, 5.002, 5.004, 5.000, 5.002, 5.001, 5.003,
    ...                          5.002], reference=5.0, tolerance=0.1)
    >>> print(format_short(res).splitlines()[0])
    Design:      10 readings of one reference part (reference 5)
    """
    lines = []
    if source:
        lines.append(f"File:        {source}")
    lines.append(
        f"Design:      {res.n} readings of one reference part (reference {res.reference:g})"
    )
    lines.append(
        f"Tolerance:   {res.lsl:g} .. {res.usl:g} (width {res.tolerance:g}); "
        f"K = {res.k_percent:g} % of it granted to the gauge, L = {res.l_sigmas:g} sigma"
    )
    lines.append("")
    rows = [
        ("Mean of the readings", _num(res.mean, ".6g")),
        ("Standard deviation s", _num(res.sd, ".4g")),
        ("Bias (mean - reference)", _num(res.bias, ".4g")),
        ("Bias, % of tolerance", _num(res.bias_pct_tolerance, ".2f")),
        ("Cg", _num(res.cg, ".3f")),
        ("Cgk", _num(res.cgk, ".3f")),
        ("%Var repeatability (K/Cg)", _num(res.pct_repeatability, ".2f")),
        ("%Var repeatability and bias (K/Cgk)", _num(res.pct_repeatability_bias, ".2f")),
    ]
    lines += _table(("Figure", "Value"), rows)
    lines.append("")
    conf = f"{100 * (1 - res.alpha):g}%"
    lines.append(
        f"Bias t-test (H0: bias = 0, two-sided): t = {_num(res.t_statistic, '.4g')}, "
        f"df = {res.df}, p = {_num(res.p_value, '.4g')}; {conf} interval of the bias "
        f"{_num(res.bias_lower, '.4g')} .. {_num(res.bias_upper, '.4g')}"
    )
    lines.append("")
    lines.append(f"Verdict: {res.status.upper()}")
    lines.append(f"  {res.message}")
    lines += closing_lines(res.notes)
    return "\n".join(lines) + "\n"


def _num(x, fmt: str = ".4g") -> str:
    return "-" if x is None else format(x, fmt)


def _table(head, rows, right_from=1) -> list[str]:
    rows = [tuple(head)] + [tuple(r) for r in rows]
    widths = [max(len(r[i]) for r in rows) for i in range(len(head))]
    lines = []
    for k, r in enumerate(rows):
        cells = [
            r[i].ljust(widths[i]) if i < right_from else r[i].rjust(widths[i])
            for i in range(len(head))
        ]
        lines.append("  ".join(cells).rstrip())
        if k == 0:
            lines.append("  ".join("-" * w for w in widths))
    return lines


_SOURCE_NAMES = {
    "part_to_part": "Part",
    "appraiser": "Appraiser",
    INTERACTION: "Appraiser x part",
    "repeatability": "Repeatability",
    "total": "Total",
}


def _anova_lines(rows) -> list[str]:
    return _table(
        ("Source", "df", "SS", "MS", "F", "p"),
        [
            (
                _SOURCE_NAMES.get(r.source, r.source),
                str(r.df),
                _num(r.ss, ".6g"),
                _num(r.ms, ".6g"),
                _num(r.f, ".4g"),
                _num(r.p, ".4g"),
            )
            for r in rows
        ],
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
    lines.append(
        f"Design:      {res.n_parts} parts x {res.n_appraisers} appraisers x "
        f"{res.n_trials} trials = {res.n_values} values (crossed, balanced)"
    )
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
        tag = (
            " (set to 0)"
            if c.set_to_zero
            else " (pooled)"
            if c.interval_method == "pooled into repeatability"
            else ""
        )
        rows.append(
            (
                COMPONENT_LABELS[c.name] + tag,
                _num(c.variance, ".5g"),
                _num(c.pct_contribution, ".2f"),
                _num(c.sigma, ".5g"),
                _num(c.study_variation, ".5g"),
                _num(c.pct_study_variation, ".2f"),
                _num(c.pct_tolerance, ".2f"),
                ci,
            )
        )
    lines += _table(
        (
            "Source",
            "Variance",
            "%Contrib",
            "Sigma",
            f"{k:g}*Sigma",
            "%StudyVar",
            "%Tol",
            "Sigma interval",
        ),
        rows,
    )
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
    lines += closing_lines(res.notes)
    return "\n".join(lines) + "\n"


def _store_and_print(args, result, kind, columns, limits_from, text) -> int:
    """Attach the gauge result to the study (with ``--study``) and print it as JSON or text."""
    stored_id = None
    from_ = "study" if limits_from else "command line"
    if args.study:
        from studykit.store import StudyFile

        payload = result.to_dict()
        payload["source_file"] = Path(args.file).name
        payload["limits_from"] = from_
        payload["columns"] = columns
        stored_id = StudyFile(args.study).attach_result(
            kind, args.characteristic, payload, who=args.who or login_name(), **lock_options(args)
        )
    if args.json:
        out = result.to_dict()
        if stored_id is not None:
            out["stored"] = {
                "study": Path(args.study).name,
                "characteristic": args.characteristic,
                "result_id": stored_id,
                "limits_from": from_,
            }
        write_json(out, allow_nan=False)
        return 0
    sys.stdout.write(text)
    if limits_from:
        sys.stdout.write(
            f"Tolerance taken from the specification of '{limits_from}' in the study file.\n"
        )
    if stored_id is not None:
        sys.stdout.write(
            f"Stored as result {stored_id} of '{args.characteristic}' in {Path(args.study).name}.\n"
        )
    return 0
