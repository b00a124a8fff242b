"""``studykit interval FILE``: statistical tolerance interval (ISO 16269-6) of one characteristic.

Reads the measurement file like ``studykit analyze`` (CSV/XLSX through :mod:`studykit.data`),
computes the (P, C) tolerance interval and, with limits, the decision "at least P % of parts
within specification with C % confidence" and the parts that criterion needs. Prints a table, or
one JSON object with ``--json``.
"""

from __future__ import annotations

import sys
from pathlib import Path

from studykit.cli._output import closing_lines, write_json
from studykit.cli.args import add_reading_options, add_safety_critical, read_file_measurements
from studykit.errors import DataFileError, StudyInputError

_MODELS = {
    "normal": "normal",
    "lognormal": "lognormal",
    "boxcox": "boxcox",
    "box-cox": "boxcox",
    "distribution-free": "distribution_free",
    "distribution_free": "distribution_free",
}
_METHODS = {
    "exact": "exact",
    "howe": "howe",
    "wald-wolfowitz": "wald_wolfowitz",
    "wald_wolfowitz": "wald_wolfowitz",
    "natrella": "natrella",
}


def register(sub) -> None:
    p = sub.add_parser(
        "interval",
        help="statistical tolerance interval (ISO 16269-6) and the P %% within spec criterion",
        description="Compute the interval that holds at least P of the population with "
        "confidence C (normal with exact factors, on the log or Box-Cox scale, or "
        "distribution-free from the extreme values) and, with --lsl/--usl, whether at least "
        "P of parts are within specification with confidence C, and how many parts that "
        "criterion needs. Exit status 0 when the interval was computed (whatever the "
        "decision), 2 on bad input.",
    )
    p.add_argument("file", metavar="FILE", nargs="?", help="measurement file (CSV or XLSX)")
    p.add_argument(
        "--study",
        metavar="STUDYFILE",
        help="a saved study instead of FILE: its data copy without the recorded "
        "removals, its limits, its safety-critical mark and its lognormal/Box-Cox "
        "model choice apply (options given here override them)",
    )
    p.add_argument(
        "--characteristic",
        "-c",
        metavar="NAME",
        help="characteristic (column) to use; may be left out when the file has one",
    )
    p.add_argument(
        "--coverage",
        type=float,
        default=0.95,
        metavar="P",
        help="proportion of the population inside, 0..1 (default 0.95)",
    )
    p.add_argument(
        "--confidence",
        type=float,
        default=0.95,
        metavar="C",
        help="confidence level, 0..1 (default 0.95)",
    )
    p.add_argument(
        "--sides",
        type=int,
        choices=[1, 2],
        default=None,
        help="2: two-sided interval; 1: one-sided limit (default: 2, or 1 when only "
        "one specification limit is given)",
    )
    p.add_argument(
        "--bound",
        choices=["upper", "lower"],
        help="which one-sided limit (implies --sides 1; default: from the one specification limit)",
    )
    p.add_argument(
        "--model",
        default=None,
        choices=["normal", "lognormal", "boxcox", "distribution-free"],
        help="normal (default; with --study the study's lognormal or Box-Cox "
        "choice), lognormal, boxcox or distribution-free",
    )
    p.add_argument(
        "--method",
        default="exact",
        choices=["exact", "howe", "wald-wolfowitz", "natrella"],
        help="factor: exact (default); two-sided approximations howe, "
        "wald-wolfowitz; one-sided approximation natrella",
    )
    p.add_argument("--lsl", type=float, help="lower specification limit")
    p.add_argument("--usl", type=float, help="upper specification limit")
    p.add_argument(
        "--power",
        type=float,
        default=0.9,
        metavar="Q",
        help="probability of passing used for the normal sample size (default 0.9)",
    )
    add_reading_options(p, long_table=True)
    add_safety_critical(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=run)


def read_values(args, names: list[str | None]):
    """Read the file like ``analyze`` and return (measurements, [CharacteristicData, ...])."""
    m = read_file_measurements(args)
    out = []
    for name in names:
        if name is None:
            if len(m.characteristics) != 1:
                raise StudyInputError(
                    "the file has several characteristics ("
                    + ", ".join(f"'{n}'" for n in m.names)
                    + "); name one with --characteristic NAME",
                    file=m.source,
                )
            out.append(m.characteristics[0])
        else:
            out.append(m.get(name))
    return m, out


def _finite(data, source):
    """The non-missing values of a characteristic, and a note on the missing ones."""
    import numpy as np

    vals = np.asarray(data.values, dtype=float)
    keep = ~np.isnan(vals)
    if not keep.any():
        raise DataFileError("the column has no values", file=source, column=data.label)
    note = None
    if not keep.all():
        rows = [int(r) for r in np.asarray(data.rows)[~keep][:5]]
        note = (
            f"{int((~keep).sum())} empty cell(s) left out (rows "
            + ", ".join(map(str, rows))
            + ("..." if (~keep).sum() > 5 else "")
            + ")"
        )
    return vals[keep], note


def _from_study(args):
    """(source name, data, values, notes, lsl, usl, safety_critical, model) from --study."""
    import numpy as np

    from studykit.analysis import read_study_measurements
    from studykit.store import StudyFile

    if args.file:
        raise StudyInputError("give either a measurement FILE or --study STUDYFILE, not both")
    if not args.characteristic:
        raise StudyInputError("with --study, name the characteristic with --characteristic NAME")
    study = StudyFile(args.study).load()
    spec = study.characteristic(args.characteristic)
    name = spec.name
    data = read_study_measurements(study).get(name)
    source = study.source_of(name)
    values = np.asarray(data.values, dtype=float)
    excluded = study.excluded_subgroups(name)
    notes = []
    if excluded:
        drop = np.isin(np.asarray(data.subgroups).astype(str), list(excluded))
        values = np.where(drop, np.nan, values)
        notes.append("subgroups removed in the study left out: " + ", ".join(excluded))
    keep = ~np.isnan(values)
    if not keep.any():
        raise DataFileError(
            "no values left after the recorded removals", file=source, column=data.label
        )
    n_empty = int(np.isnan(np.asarray(data.values, dtype=float)).sum())
    if n_empty:
        notes.append(f"{n_empty} empty cell(s) left out")
    chosen = study.model_for(name)
    model = chosen if chosen in ("lognormal", "boxcox") else "normal"
    if chosen not in ("auto", "normal", "lognormal", "boxcox"):
        notes.append(
            f"the study's model '{chosen}' has no tolerance interval here; the normal "
            "interval is shown (try --model distribution-free)"
        )
    lsl = args.lsl if args.lsl is not None else spec.lsl
    usl = args.usl if args.usl is not None else spec.usl
    if args.lsl is None and args.usl is None and (spec.lsl is not None or spec.usl is not None):
        notes.append("specification limits taken from the study")
    return (
        Path(args.study).name + f" ({source})",
        data,
        values[keep],
        notes,
        lsl,
        usl,
        bool(spec.safety_critical),
        model,
    )


def run(args) -> int:
    from studykit.stats.tolerance import tolerance_interval

    if args.study:
        (source, data, values, pre_notes, lsl, usl, critical, study_model) = _from_study(args)
    else:
        if not args.file:
            raise StudyInputError("give a measurement FILE or --study STUDYFILE")
        m, (data,) = read_values(args, [args.characteristic])
        values, missing_note = _finite(data, m.source)
        source = m.source
        pre_notes = [missing_note] if missing_note else []
        lsl, usl, critical, study_model = args.lsl, args.usl, False, "normal"
    critical = critical or args.safety_critical
    model = _MODELS[args.model] if args.model else study_model
    sides = args.sides
    if sides is None:
        sides = 1 if args.bound or (lsl is None) != (usl is None) else 2
    try:
        res = tolerance_interval(
            values,
            coverage=args.coverage,
            confidence=args.confidence,
            sides=sides,
            bound=args.bound,
            model=model,
            method=_METHODS[args.method],
            lsl=lsl,
            usl=usl,
            power=args.power,
        )
    except StudyInputError as exc:
        if exc.file is not None or exc.column is not None:
            raise
        raise type(exc)(exc.detail, file=source, column=data.label) from None
    caution = None
    if critical:
        from studykit.analysis import SAFETY_CAUTION

        caution = SAFETY_CAUTION
    if args.json:
        out = {"source": source, "characteristic": data.name, "unit": data.unit, **res.to_dict()}
        out["notes"] = [*pre_notes, *out["notes"]]
        out["safety_critical"] = bool(critical)
        out["caution"] = caution
        write_json(out, allow_nan=False)
    else:
        sys.stdout.write(
            format_interval(res, source=source, name=data.label, notes=pre_notes, caution=caution)
        )
    return 0


def _num(v, fmt=".6g"):
    return "-" if v is None else format(v, fmt)


_MODEL_WORDS = {
    "normal": "normal",
    "lognormal": "lognormal (log scale, back-transformed)",
    "boxcox": "Box-Cox scale, back-transformed",
    "distribution_free": "distribution-free (order statistics)",
}
_METHOD_WORDS = {
    "exact": "exact",
    "howe": "Howe approximation",
    "wald_wolfowitz": "Wald-Wolfowitz approximation",
    "natrella": "Natrella approximation",
}


def format_interval(res, *, source: str = "", name: str = "", notes=(), caution=None) -> str:
    """Plain-text report of a tolerance interval (used by ``studykit interval``).

    Examples
    --------
    >>> import numpy as np
    >>> from studykit.stats.tolerance import tolerance_interval
    >>> res = tolerance_interval(np.linspace(9.8, 10.2, 30), lsl=9.0, usl=11.0)
    >>> print(format_interval(res).splitlines()[0])
    Interval:      normal, two-sided, 95 % coverage, 95 % confidence, n = 30
    """
    lines = []
    if source:
        lines.append(f"File:          {source}" + (f"  ({name})" if name else ""))
    side = "two-sided" if res.sides == 2 else f"one-sided ({res.bound} limit)"
    lines.append(
        f"Interval:      {res.model.replace('_', '-')}, {side}, "
        f"{100 * res.coverage:g} % coverage, {100 * res.confidence:g} % confidence, "
        f"n = {res.n}"
    )
    lines.append(f"Model:         {_MODEL_WORDS[res.model]}")
    if res.factor is not None:
        lines.append(
            f"Factor k:      {res.factor:.4f} ({_METHOD_WORDS[res.factor_method]}); "
            f"mean {res.mean:.6g}, s {res.sd:.6g} on the {res.scale} scale"
        )
    if res.order_statistics is not None:
        lo, hi = res.order_statistics
        ranks = ", ".join(
            f"{w} x_({v})" for w, v in (("lower", lo), ("upper", hi)) if v is not None
        )
        lines.append(
            f"Order stats:   {ranks}; achieved confidence {100 * res.achieved_confidence:.2f} %"
        )
    lines.append(f"Limits:        lower {_num(res.lower)}   upper {_num(res.upper)}")
    lines.append(f"Statement:     {res.statement}")
    if res.lsl is not None or res.usl is not None:
        lines.append(f"Specification: LSL {_num(res.lsl)}   USL {_num(res.usl)}")
        p, c = f"{100 * res.coverage:g} %", f"{100 * res.confidence:g} %"
        if res.meets is None:
            verdict = "NOT JUDGED (no interval on the side the specification needs)"
        elif res.meets:
            verdict = f"MEETS: at least {p} of parts within specification with {c} confidence"
        else:
            verdict = (
                f"DOES NOT MEET: the interval reaches beyond the specification; "
                f"at least {p} within specification is not shown with {c} confidence"
            )
        lines.append(f"Decision:      {verdict}")
        if res.plan is not None:
            normal = (
                "not reachable for a process like this sample"
                if res.plan.normal is None
                else f"{res.plan.normal} (a process like this sample, on the "
                f"{'data' if res.model == 'distribution_free' else res.scale} scale, "
                f"passes with probability {100 * res.plan.power:g} %)"
            )
            free = (
                "more than 100000"
                if res.plan.distribution_free is None
                else res.plan.distribution_free
            )
            lines.append(
                f"Parts needed:  distribution-free {free} "
                "(all inside the specification); normal-theory " + normal
            )
    lines += closing_lines([*notes, *res.notes], caution)
    return "\n".join(lines) + "\n"
