"""Command-line arguments shared by the commands that analyse measurements.

``studykit analyze`` (one characteristic) and ``studykit analyze --all`` (:mod:`studykit.cli.batch`)
read the measurement file, build the specification, the acceptance criterion and the analysis
options from the same arguments here, so the two cannot drift apart.
"""

from __future__ import annotations

import argparse

from studykit.errors import StudyInputError

__all__ = [
    "add_override_lock",
    "add_reading_options",
    "add_safety_critical",
    "add_who",
    "analysis_options",
    "criteria_from_args",
    "jobs_count",
    "lock_options",
    "login_name",
    "p12_passphrase",
    "read_file_measurements",
    "spec_from_args",
]


def add_override_lock(parser, help_text="change an approved study anyway; voids the approval"):
    """The ``--override-lock REASON`` option of every command that changes a study file."""
    parser.add_argument("--override-lock", metavar="REASON", help=help_text)


#: reading options a command may have, passed to ``read_measurements`` only when given
_READ_OPTIONS = (
    "subgroup_column",
    "subgroup_size",
    "sheet",
    "stream_column",
    "characteristic_column",
    "value_column",
    "layout",
    "encoding",
)


def add_reading_options(
    parser, *, subgroups: bool = False, long_table: bool = False, table_shape: bool = False
) -> None:
    """The options that say how to read the data FILE (:func:`read_file_measurements` applies
    them): ``--sheet``; with ``subgroups`` ``--subgroup-size`` or ``--subgroup-column``; with
    ``long_table`` ``--characteristic-column`` and ``--value-column``; with ``table_shape``
    ``--layout`` and ``--encoding``."""
    parser.add_argument("--sheet", metavar="S", help="worksheet name (XLSX; default: the first)")
    if subgroups:
        group = parser.add_mutually_exclusive_group()
        group.add_argument(
            "--subgroup-size", type=int, metavar="N", help="consecutive values form subgroups of N"
        )
        group.add_argument(
            "--subgroup-column", metavar="COL", help="column holding the subgroup labels"
        )
    if long_table:
        parser.add_argument(
            "--characteristic-column",
            metavar="COL",
            help="long table: column naming the characteristic of each row",
        )
        parser.add_argument(
            "--value-column", metavar="COL", help="long table: column with the values"
        )
    if table_shape:
        parser.add_argument(
            "--layout",
            choices=("auto", "wide", "long"),
            default="auto",
            help="table shape (default: detected from the header)",
        )
        parser.add_argument(
            "--encoding", metavar="E", help="text encoding of a CSV (default: detected)"
        )


def read_file_measurements(args):
    """The measurements of the data FILE with the options of :func:`add_reading_options` and
    ``--stream-column`` applied (each only when the command has it and it is given)."""
    from studykit.data import read_measurements

    read_kw = {key: getattr(args, key, None) for key in _READ_OPTIONS}
    return read_measurements(args.file, **{k: v for k, v in read_kw.items() if v is not None})


def analysis_options(args):
    """The :class:`~studykit.analysis.AnalysisOptions` of the command-line options."""
    from studykit.analysis import AnalysisOptions

    return AnalysisOptions(
        chart=args.chart,
        subgroup_size=args.subgroup_size,
        phase1=args.phase1 or ("off" if getattr(args, "study", None) else "auto"),
        rules=args.rules,
        model=args.model,
        confidence=args.confidence,
        **(
            {"max_auto_removed_share": args.max_auto_removal}
            if getattr(args, "max_auto_removal", None) is not None
            else {}
        ),
        **(
            {"min_kept_values": args.min_kept}
            if getattr(args, "min_kept", None) is not None
            else {}
        ),
        sigma_method=getattr(args, "sigma_method", None),
        transform_indices=getattr(args, "transform_indices", None) or "transformed",
        mr_removal=getattr(args, "mr_removal", None) or "later",
        rank_models=getattr(args, "rank_models", None),
    )


def criteria_from_args(args, base=None):
    """``base`` (a :class:`~studykit.study.Criteria` or None) with ``--index/--threshold/--basis``
    (and ``--confidence``) applied; ``base`` itself when none of them is given."""
    from studykit.study import Criteria

    if args.index is None and args.threshold is None and args.basis is None:
        return base
    base = base or Criteria()
    return Criteria(
        index=args.index or base.index,
        threshold=args.threshold if args.threshold is not None else base.threshold,
        basis=args.basis or base.basis,
        confidence=args.confidence if args.confidence is not None else base.confidence,
    )


def spec_from_args(args, name, unit, base=None):
    """The :class:`~studykit.study.Characteristic` of ``name`` from ``--lsl/--usl/--target``
    (and ``--chart``, ``--size-column``) over ``base``; None when there is no specification."""
    from studykit.study import Characteristic

    if args.chart in ("p", "np", "c", "u") and (
        args.lsl is not None or args.usl is not None or args.target is not None
    ):
        raise StudyInputError(
            f"--lsl/--usl/--target do not apply to a {args.chart} chart: counted data are "
            "judged by their defective rate or defects per unit; leave the limits out"
        )

    if base is not None and args.lsl is None and args.usl is None and args.target is None:
        return base
    if args.lsl is None and args.usl is None and args.chart not in ("p", "np", "c", "u"):
        if base is not None:
            return base
        return None
    lsl = args.lsl if args.lsl is not None else (base.lsl if base is not None else None)
    usl = args.usl if args.usl is not None else (base.usl if base is not None else None)
    target = args.target if args.target is not None else (base.target if base else None)
    return Characteristic(
        name,
        unit=unit,
        lsl=lsl,
        usl=usl,
        target=target,
        chart=(args.chart or "auto").replace("-", "_"),
        safety_critical=bool(base.safety_critical) if base is not None else False,
        size_column=args.size_column,
    )


def lock_options(args) -> dict:
    """The ``override_lock``/``override_reason`` keywords of ``--override-lock REASON`` (none
    when the option is not given or the command has none)."""
    reason = getattr(args, "override_lock", None)
    return {"override_lock": True, "override_reason": reason} if reason else {}


def add_safety_critical(parser) -> None:
    """The ``--safety-critical`` flag of a command that takes no study file's mark."""
    parser.add_argument(
        "--safety-critical",
        action="store_true",
        help="mark the characteristic safety-critical (prints the caution)",
    )


def add_who(parser, help_text="your name (default: the login name)") -> None:
    """The ``--who NAME`` option of a command that records who did something."""
    parser.add_argument("--who", metavar="NAME", default=None, help=help_text)


def login_name(fallback: str = "") -> str:
    """The login name of the user running the command (``fallback`` when the system has none)."""
    import getpass

    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no login name on this system
        return fallback


def p12_passphrase(p12: str, env_var: str) -> str:
    """The passphrase of the certificate file ``p12`` from the environment variable
    ``env_var`` (``--passphrase-env``); a clear error when it is not set."""
    import os

    passphrase = os.environ.get(env_var)
    if passphrase is None:
        raise StudyInputError(
            f"the passphrase of '{p12}' is not set: put it into the environment "
            f"variable {env_var} (or name another with --passphrase-env)"
        )
    return passphrase


def jobs_count(text: str) -> int:
    """argparse type of ``--jobs``: a whole number of at least 1."""
    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1:
        raise argparse.ArgumentTypeError(f"--jobs {text!r}: give a whole number of at least 1")
    return n
