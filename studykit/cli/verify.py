"""``studykit verify``: check a report's signatures, digests, every reported number and page.

Exit status: 0 verified (signed by a certificate trusted with --trust; or unsigned and
consistent with --allow-unsigned), 1 not verified or not evidence, 2 bad input, 3 consistent
but the signer is not established (no --trust; the certificate's fingerprint is printed).
"""

from __future__ import annotations

from studykit.cli._output import write_json


def register(sub) -> None:
    p = sub.add_parser(
        "verify",
        help="check a report's signatures, its digests, every number and every page",
        description="Check each digital signature of REPORT (intact, certificate valid when it "
        "signed, trusted by --trust; the certificate's SHA-256 fingerprint and validity are "
        "always printed), compare the embedded digests with the data or study file (and the "
        "study file's audit chain), recompute the study, compare every reported number "
        "(relative tolerance 1e-9) and redraw every page to compare it with the report's. "
        "Exit status: 0 verified; 3 consistent but the signer is not established (no --trust); "
        "1 not verified, or unsigned without --allow-unsigned; 2 bad input.",
    )
    p.add_argument("report", metavar="REPORT.pdf")
    src = p.add_mutually_exclusive_group()
    src.add_argument(
        "--data",
        metavar="FILE",
        nargs="+",
        action="extend",
        help="the raw measurement file(s): every data file of the study "
        "(e.g. data/* from the hand-off zip)",
    )
    src.add_argument("--study", metavar="FILE", help="the study file")
    p.add_argument(
        "--trust",
        metavar="CERT.pem",
        action="append",
        default=[],
        help="trust this certificate as a root (repeatable); with it, every "
        "signature must be trusted and an unsigned report fails",
    )
    p.add_argument(
        "--allow-unsigned",
        action="store_true",
        help="check the content of an unsigned report (exit 0 when it is "
        "consistent) instead of stopping at NOT EVIDENCE",
    )
    p.add_argument("--json", action="store_true", help="print the checks as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    from studykit.report.verify import verify_report

    res = verify_report(
        args.report,
        data=args.data,
        study=args.study,
        trust=args.trust,
        allow_unsigned=args.allow_unsigned,
    )
    if args.json:
        write_json(res.to_dict())
    else:
        for c in res.checks:
            print(c.line())
        print(res.summary())
    return res.exit_code
