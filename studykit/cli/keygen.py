"""``studykit keygen --demo``: a self-signed DEMO certificate for trying out signatures."""

from __future__ import annotations

import os

from studykit.errors import StudyInputError


def register(sub) -> None:
    p = sub.add_parser(
        "keygen",
        help="make a self-signed DEMO signing certificate (.p12 + .crt.pem)",
        description="Write NAME.p12 (key + certificate) and NAME.crt.pem into DIR. The "
        "certificate's subject says it is a studykit demo certificate, not for production; "
        "real evidence needs a certificate from your organisation.",
    )
    p.add_argument(
        "--demo",
        action="store_true",
        required=True,
        help="required: acknowledges that the certificate is for demonstration only",
    )
    p.add_argument("-o", "--output", metavar="DIR", required=True, help="folder to write into")
    p.add_argument("--name", default="Demo Signer", help="the signer's name (certificate CN)")
    p.add_argument(
        "--passphrase-env",
        metavar="VAR",
        default="STUDYKIT_P12_PASSPHRASE",
        help="environment variable holding the passphrase for the .p12 "
        "(default STUDYKIT_P12_PASSPHRASE)",
    )
    p.add_argument("--days", type=int, default=365, help="validity in days (default 365)")
    p.set_defaults(func=run)


def run(args) -> int:
    from studykit.report.signing import make_demo_certificate

    passphrase = os.environ.get(args.passphrase_env)
    if not passphrase:
        raise StudyInputError(
            f"set the passphrase for the new .p12 in the environment variable "
            f"{args.passphrase_env} (or name another with --passphrase-env)"
        )
    cert = make_demo_certificate(args.output, name=args.name, passphrase=passphrase, days=args.days)
    print(f"Wrote {cert.p12_path} and {cert.cert_path}")
    print(f"Subject: {cert.subject}")
    print(f"SHA-256 fingerprint: {cert.fingerprint_sha256}")
    print("DEMO certificate: not for production evidence.")
    return 0
