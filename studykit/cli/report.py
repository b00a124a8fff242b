"""``studykit report``: the evidence PDF of a study, optionally signed, optionally a hand-off zip."""

from __future__ import annotations

import sys
from pathlib import Path

from studykit import names
from studykit.cli.args import jobs_count, p12_passphrase
from studykit.errors import StudyInputError
from studykit.runtime import available_cores


def register(sub) -> None:
    p = sub.add_parser(
        "report",
        help="write the evidence PDF of a study (sign it, make the hand-off pack)",
        description="Analyse every characteristic of STUDYFILE and write the evidence PDF. "
        "With --sign, add a PAdES signature from a PKCS#12 file (run again with the next "
        "signer's file and role to add further signatures; a certificate outside its validity is "
        "refused). With --handoff, also write the hand-off zip (PDF, study, every data file, "
        "frozen limits, chart forms): only when every characteristic has a verdict that meets "
        "its criterion and no open signal, else refused (or, with --handoff-draft, made with "
        "every file stamped DRAFT and the reason). A study file altered outside studykit (its "
        "audit chain broken) is refused.",
    )
    p.add_argument("study", metavar="STUDYFILE", help="the study file")
    p.add_argument(
        "-o",
        "--output",
        metavar="PDF",
        help="the PDF to write (default: "
        "STUDYFILE with .pdf); with --sign and an existing PDF, that PDF is signed",
    )
    p.add_argument("--sign", metavar="P12", help="sign with this PKCS#12 file")
    p.add_argument(
        "--role",
        default="prepared",
        type=names.role_id,
        help="role of the signer: Author, Reviewer or Approver (default Author)",
    )
    p.add_argument(
        "--name",
        help="signer's name as written in the signature (default: the certificate's common name)",
    )
    p.add_argument(
        "--passphrase-env",
        metavar="VAR",
        default="STUDYKIT_P12_PASSPHRASE",
        help="environment variable holding the .p12 passphrase (default STUDYKIT_P12_PASSPHRASE)",
    )
    p.add_argument(
        "--sign-existing",
        action="store_true",
        help="sign the PDF given by -o as "
        "it is (a PDF already signed for the current study state is always signed "
        "as it is, so earlier signatures stay)",
    )
    p.add_argument("--handoff", metavar="ZIP", help="also write the hand-off zip")
    p.add_argument(
        "--handoff-draft",
        action="store_true",
        help="make the hand-off zip even when not every characteristic is ready, "
        "with every file stamped DRAFT and the reason",
    )
    p.add_argument(
        "--notebook",
        metavar="IPYNB",
        help="also write the reproducible analysis notebook: it opens the study "
        "file, recomputes every number of the report step by step with the studykit "
        "library and compares them with the PDF",
    )
    p.add_argument(
        "--jobs",
        type=jobs_count,
        default=None,
        metavar="N",
        help="processes that analyse the characteristics and draw the figures (default: the "
        "cores this process may use; 1: everything in this process). The PDF is the same for "
        "any number",
    )
    p.add_argument("--quiet", action="store_true", help="no progress lines")
    p.set_defaults(func=run)


def _progress(quiet: bool):
    if quiet:
        return None

    def show(done, total, what):
        print(f"[{done}/{total}] {what}", file=sys.stderr, flush=True)

    return show


def _common_name(p12: str, passphrase: str) -> str:
    from cryptography.hazmat.primitives.serialization import pkcs12
    from cryptography.x509.oid import NameOID

    try:
        _, cert, _ = pkcs12.load_key_and_certificates(
            Path(p12).read_bytes(), passphrase.encode("utf-8")
        )
        return cert.subject.get_attributes_for_oid(NameOID.COMMON_NAME)[0].value
    except (ValueError, IndexError, AttributeError):
        return ""


def _signed_same_study(pdf: Path, study_path) -> bool:
    """True when ``pdf`` is a signed report of the study as it stands (so signing adds to it;
    rebuilding would drop the earlier signatures). A signed report of another state is an
    error: it is never overwritten silently."""
    if not pdf.exists():
        return False
    from studykit.report.pdf import read_evidence
    from studykit.report.signing import signature_count
    from studykit.store import StudyFile

    n = signature_count(pdf.read_bytes())
    if n == 0:
        return False
    try:
        evidence = read_evidence(pdf)
        same = evidence["study"]["content_digest"] == StudyFile(study_path).load().content_digest()
    except (StudyInputError, KeyError):
        same = False
    if not same:
        raise StudyInputError(
            f"'{pdf}' already carries {n} signature(s) for another state of the study: "
            "write the new report to another file with -o (signed evidence is never "
            "overwritten)"
        )
    return True


def run(args) -> int:
    from studykit.report.pdf import build_report

    out = Path(args.output) if args.output else Path(args.study).with_suffix(".pdf")
    progress = _progress(args.quiet)
    if args.notebook and Path(args.notebook).suffix.lower() != ".ipynb":
        raise StudyInputError(f"--notebook '{args.notebook}': the file name must end in .ipynb")
    passphrase = p12_passphrase(args.sign, args.passphrase_env) if args.sign else None
    sign_existing = bool(args.sign and (args.sign_existing or _signed_same_study(out, args.study)))
    if args.sign and sign_existing and not args.sign_existing:
        print(f"{out} is already signed for this study state: adding a further signature.")
    if not sign_existing and out.exists():
        from studykit.report.signing import signature_count

        n = signature_count(out.read_bytes())
        if n:
            raise StudyInputError(
                f"'{out}' carries {n} signature(s): write the new report to another file with "
                "-o (signed evidence is never overwritten)"
            )
    if not sign_existing:
        jobs = available_cores() if args.jobs is None else args.jobs
        info = build_report(args.study, out, progress=progress, workers=jobs)
        print(
            f"Wrote {out} ({info.pages} pages, {len(info.characteristics)} characteristic(s), "
            f"{info.seconds:.1f} s)."
        )
        for name, msg in info.errors.items():
            print(f"  not analysed: {name}: {msg}")
    elif not out.exists():
        raise StudyInputError(f"--sign-existing: '{out}' does not exist; build it first")
    if args.sign:
        from studykit.report.signing import sign_report

        name = args.name or _common_name(args.sign, passphrase) or "unnamed signer"
        sig = sign_report(out, out, args.sign, passphrase, role=args.role, name=name)
        print(
            f"Signed {out} as {sig.field_name} ({sig.reason}; certificate {sig.subject})"
            + ("" if sig.visible else "; no box for this role, signature is invisible")
        )
    if args.notebook:
        from studykit.report.notebook import write_notebook

        nb = write_notebook(args.study, args.notebook, pdf_path=out)
        print(f"Wrote {nb} (run it to recompute the report's numbers from {args.study}).")
    if args.handoff:
        from studykit.report.handoff import build_handoff

        h = build_handoff(
            args.study,
            args.handoff,
            report_pdf=out,
            when_not_ready="draft" if args.handoff_draft else "refuse",
        )
        print(
            f"Wrote {args.handoff} ({len(h.entries)} files; limits frozen for "
            f"{len(h.plans)} characteristic(s))"
            + (": DRAFT, not for production, every file stamped." if h.is_draft else ".")
        )
        for name, why in h.draft.items():
            print(f"  DRAFT because {name}: {why}")
        for name, why in h.skipped.items():
            print(f"  no limits for {name}: {why}")
    return 0
