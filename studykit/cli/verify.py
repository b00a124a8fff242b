"""``studykit verify``: check a report's signatures, digests and every reported number."""

from __future__ import annotations

import json
import sys


def register(sub) -> None:
    p = sub.add_parser(
        "verify",
        help="check a report's signatures, its digests and every number it reports",
        description="Check each digital signature of REPORT (intact, which certificate, "
        "trusted by --trust), compare the embedded digests with the data or study file, and "
        "recompute the study and compare every reported number (relative tolerance 1e-9). "
        "Exit status 0 only when every check holds; an unsigned report is said to be unsigned.",
    )
    p.add_argument("report", metavar="REPORT.pdf")
    src = p.add_mutually_exclusive_group()
    src.add_argument("--data", metavar="FILE", help="the raw measurement file")
    src.add_argument("--study", metavar="FILE", help="the study file")
    p.add_argument("--trust", metavar="CERT.pem", action="append", default=[],
                   help="trust this certificate as a root (repeatable)")
    p.add_argument("--json", action="store_true", help="print the checks as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    from studykit.report.verify import verify_report

    res = verify_report(args.report, data=args.data, study=args.study, trust=args.trust)
    if args.json:
        json.dump(res.to_dict(), sys.stdout, indent=2, ensure_ascii=False)
        sys.stdout.write("\n")
    else:
        for c in res.checks:
            print(c.line())
        print(res.summary())
    return 0 if res.ok else 1
