"""Check an evidence report: its signatures, its digests and every number it reports.

:func:`verify_report` reads the PDF's digital signatures (pyHanko), the embedded evidence JSON
(:data:`studykit.report.pdf.EVIDENCE_FILENAME`), and, given the raw data or the study file,
recomputes every characteristic and compares each reported number with a relative tolerance of
:data:`~studykit.report.pdf.RELATIVE_TOLERANCE` (absolute 1e-12 near zero), to allow for float
printing. Each check is a :class:`Check` with a pass/fail/info/skip status and a sentence that
names what differs.

What the outcome means (:attr:`VerifyResult.status`, the exit status of ``studykit verify``):

* ``verified`` (exit 0): signed, every signature intact, made while its certificate was valid
  and trusted by a ``--trust`` certificate; digests, numbers and every page agree.
* ``consistent_unsigned`` (exit 0, only with ``allow_unsigned``): no signature, but digests,
  numbers and every page agree. Nothing shows who made the report.
* ``signer_not_established`` (exit 3): signed and consistent, but no ``--trust`` was given, so
  nothing shows whose certificate it is; its SHA-256 fingerprint is printed to compare with
  the signer's. A look-alike certificate (same name, other key) ends here, never at 0.
* ``not_evidence`` (exit 1): unsigned, without ``allow_unsigned``.
* ``not_verified`` (exit 1): a check failed or could not be made.
"""

from __future__ import annotations

import datetime
import hashlib
import io
import json
import logging
import math
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from studykit.errors import StudyFileError, StudyInputError
from studykit.report.pdf import (
    RELATIVE_TOLERANCE,
    analyze_for_report,
    read_evidence_bytes,
)

__all__ = [
    "EXIT_CODES",
    "Check",
    "VerifyResult",
    "verify_report",
    "compare_numbers",
    "study_from_evidence",
]

#: exit status of ``studykit verify`` per :attr:`VerifyResult.status`
EXIT_CODES = {
    "verified": 0,
    "consistent_unsigned": 0,
    "signer_not_established": 3,
    "not_evidence": 1,
    "not_verified": 1,
}

ABSOLUTE_TOLERANCE = 1e-12


@dataclass(frozen=True)
class Check:
    """One verification item.

    Attributes
    ----------
    item : str
        What was checked (``signature Signature1``, ``data digest``, ``numbers of bore``...).
    status : {"pass", "fail", "warn", "info", "skip"}
        ``info`` never fails the report; ``warn`` (a signer not established by ``--trust``)
        keeps the report from being verified without making it inconsistent; ``skip`` means
        not checked.
    detail : str
        One sentence: what holds or what differs.
    """

    item: str
    status: str
    detail: str

    def to_dict(self) -> dict:
        return {"item": self.item, "status": self.status, "detail": self.detail}

    def line(self) -> str:
        return f"{self.status.upper():<5} {self.item}: {self.detail}"


@dataclass(frozen=True)
class VerifyResult:
    """Every check made on one report.

    Attributes
    ----------
    path : str
    checks : tuple of Check
    signed : bool
        At least one digital signature is present.
    numbers_checked : int
        How many reported numbers were recomputed and compared.
    allow_unsigned : bool
        An unsigned report was accepted for checking its content.
    signers : tuple of dict
        Per signature: field, subject, fingerprint, validity, trust.
    consistent : bool
        No check failed and none was skipped (the content agrees; says nothing about who).
    ok : bool
        The exit status is 0 (``verified``, or ``consistent_unsigned`` when allowed).
    """

    path: str
    checks: tuple
    signed: bool
    numbers_checked: int
    allow_unsigned: bool = False
    signers: tuple = ()

    @property
    def consistent(self) -> bool:
        return all(c.status in ("pass", "info", "warn") for c in self.checks)

    @property
    def status(self) -> str:
        """``verified``, ``consistent_unsigned``, ``signer_not_established``,
        ``not_evidence`` or ``not_verified`` (see the module notes)."""
        if not self.signed and not self.allow_unsigned:
            return "not_evidence"
        if not self.consistent:
            return "not_verified"
        if not self.signed:
            return "consistent_unsigned"
        if any(c.status == "warn" for c in self.checks):
            return "signer_not_established"
        return "verified"

    @property
    def exit_code(self) -> int:
        return EXIT_CODES[self.status]

    @property
    def ok(self) -> bool:
        return self.exit_code == 0

    @property
    def failures(self) -> tuple:
        return tuple(c for c in self.checks if c.status == "fail")

    def to_dict(self) -> dict:
        return {
            "path": self.path,
            "ok": self.ok,
            "status": self.status,
            "exit_code": self.exit_code,
            "consistent": self.consistent,
            "signed": self.signed,
            "signers": [dict(x) for x in self.signers],
            "numbers_checked": self.numbers_checked,
            "tolerance": {"relative": RELATIVE_TOLERANCE, "absolute": ABSOLUTE_TOLERANCE},
            "checks": [c.to_dict() for c in self.checks],
        }

    def summary(self) -> str:
        fails = len(self.failures)
        skips = sum(1 for c in self.checks if c.status == "skip")
        status = self.status
        if status == "verified":
            who = "; ".join(
                f"{x['subject']} ({x['fingerprint_sha256'][:23]}...)" for x in self.signers
            )
            return (
                f"VERIFIED: signed by trusted certificate(s) {who}; "
                f"{self.numbers_checked} numbers and every page agree with the recomputed "
                "study"
            )
        if status == "consistent_unsigned":
            return (
                f"CONSISTENT BUT UNSIGNED (accepted by --allow-unsigned): "
                f"{self.numbers_checked} numbers and every page agree, but nothing shows "
                "who made this report"
            )
        if status == "signer_not_established":
            who = "; ".join(
                f"{x['subject']}, SHA-256 fingerprint {x['fingerprint_sha256']}"
                for x in self.signers
                if x.get("trust") != "trusted"
            )
            return (
                f"NOT VERIFIED - SIGNER UNTRUSTED: {self.numbers_checked} numbers agree, "
                f"but nothing establishes the signer ({who}); compare the fingerprint with "
                "the signer's certificate, or give --trust CERT.pem"
            )
        parts = []
        if status == "not_evidence":
            parts.append("unsigned")
            fails = sum(1 for c in self.failures if c.item != "signatures")
        if fails:
            parts.append(f"{fails} check(s) failed")
        if skips:
            parts.append(f"{skips} check(s) not made")
        if status == "not_evidence":
            return (
                "NOT EVIDENCE: " + ", ".join(parts) + " (give --allow-unsigned to check "
                "the content of an unsigned report)"
            )
        return "NOT VERIFIED: " + ", ".join(parts)


# ---------------------------------------------------------------------------------------------
# numbers


def _is_number(v) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool)


def compare_numbers(
    reported,
    recomputed,
    *,
    path: str = "",
    rtol: float = RELATIVE_TOLERANCE,
    atol: float = ABSOLUTE_TOLERANCE,
) -> tuple[int, list[str]]:
    """Compare two JSON trees; returns (numbers compared, differences as sentences).

    Numbers agree when ``|a - b| <= max(rtol * max(|a|, |b|), atol)``; text, booleans and None
    must be equal; lists must have the same length; dicts the same keys.

    Examples
    --------
    >>> compare_numbers({"a": 1.0, "b": [2.0]}, {"a": 1.0 + 1e-12, "b": [2.5]})
    (2, ['b[0]: report 2, recomputed 2.5'])
    """
    diffs: list[str] = []
    count = 0

    def walk(a, b, p):
        nonlocal count
        if _is_number(a) and _is_number(b):
            count += 1
            fa, fb = float(a), float(b)
            if not (math.isclose(fa, fb, rel_tol=rtol, abs_tol=atol)):
                diffs.append(f"{p}: report {fa:.10g}, recomputed {fb:.10g}")
            return
        if isinstance(a, dict) and isinstance(b, dict):
            for k in sorted(set(a) | set(b), key=str):
                q = f"{p}.{k}" if p else str(k)
                if k not in a:
                    diffs.append(f"{q}: not in the report")
                elif k not in b:
                    diffs.append(f"{q}: not recomputed")
                else:
                    walk(a[k], b[k], q)
            return
        if isinstance(a, list) and isinstance(b, list):
            if len(a) != len(b):
                diffs.append(f"{p}: report has {len(a)} entries, recomputed {len(b)}")
            for i, (x, y) in enumerate(zip(a, b, strict=False)):
                walk(x, y, f"{p}[{i}]")
            return
        if a != b:
            diffs.append(f"{p}: report {a!r:.80}, recomputed {b!r:.80}")

    walk(reported, recomputed, path)
    return count, diffs


def evidence_files(evidence: dict) -> list[dict]:
    """The data files a report records: ``[{filename, sha256, bytes?}]``, the first first
    (reports made before every file was recorded list the first file only)."""
    s = evidence["study"]
    files = s.get("data_files")
    if isinstance(files, list) and files:
        return [dict(f) for f in files]
    return [{"filename": s["data_filename"], "sha256": s["data_sha256"]}]


def study_from_evidence(evidence: dict, data):
    """Rebuild the study from the report's embedded content and the raw data.

    ``data`` is the bytes of the first data file, or a mapping filename -> bytes holding every
    data file the report records. Comments and sign-offs come back too (they are printed).
    """
    from studykit.study import Characteristic, Comment, Criteria, DataFile, Decision, SignOff, Study

    s = evidence["study"]
    try:
        files = evidence_files(evidence)
        blobs = dict(data) if isinstance(data, dict) else {files[0]["filename"]: data}
        missing = [f["filename"] for f in files if f["filename"] not in blobs]
        if missing:
            raise StudyInputError(
                "the report was made from "
                + ", ".join(f"'{f['filename']}'" for f in files)
                + "; give every one of them with --data "
                "(missing: " + ", ".join(f"'{m}'" for m in missing) + ")"
            )
        first = files[0]["filename"]
        order = [n for n in s.get("characteristic_order") or () if n in s["characteristics"]]
        order += [n for n in s["characteristics"] if n not in order]
        signoff_fields = ("name", "role", "decision", "comment", "when", "digest", "chain_head")
        return Study(
            title=s["title"],
            part=s.get("part", ""),
            supplier=s.get("supplier", ""),
            data=blobs[first],
            data_filename=first,
            extra_files=tuple(DataFile(f["filename"], blobs[f["filename"]]) for f in files[1:]),
            characteristics=[Characteristic.from_dict(s["characteristics"][n]) for n in order],
            criteria={n: Criteria.from_dict(c) for n, c in s["criteria"].items()},
            decisions=[Decision.from_dict(d) for d in s["decisions"]],
            comments=tuple(Comment(**c) for c in s.get("comments", ())),
            signoffs=tuple(
                SignOff(**{k: v for k, v in so.items() if k in signoff_fields})
                for so in s.get("signoffs", ())
            ),
        )
    except (KeyError, TypeError) as exc:
        raise StudyFileError(f"the embedded study content is incomplete ({exc})") from None


# ---------------------------------------------------------------------------------------------
# signatures


def _trust_roots(trust) -> list:
    """The certificates given with ``--trust`` (a clear error for one that is not a certificate)."""
    roots = []
    for t in trust or ():
        from pyhanko.keys import load_cert_from_pemder

        try:
            roots.append(load_cert_from_pemder(str(t)))
        except Exception as exc:  # noqa: BLE001
            raise StudyInputError(f"`--trust` '{t}' is not a PEM/DER certificate ({exc})") from None
    return roots


def _unsigned_check(trust_given: bool, allow_unsigned: bool) -> Check:
    """The check of a report that carries no signature."""
    if trust_given:
        return Check(
            "signatures",
            "fail",
            "UNSIGNED, but --trust asks for a signature "
            "by a trusted certificate: the report carries none (a signature "
            "cut off leaves exactly this)",
        )
    if allow_unsigned:
        return Check(
            "signatures",
            "info",
            "unsigned: the report carries no digital "
            "signature; its content is checked because --allow-unsigned was "
            "given",
        )
    return Check(
        "signatures",
        "fail",
        "NOT EVIDENCE: unsigned; the report carries no "
        "digital signature, so nothing shows who made it or that it is unchanged "
        "(--allow-unsigned checks its content anyway)",
    )


def _signature_checks(
    pdf_bytes: bytes, trust, allow_unsigned: bool = False
) -> tuple[list[Check], bool, list[dict]]:
    """One check per signature (intact, covers the file, certificate valid when it signed,
    trusted); the certificate's subject, SHA-256 fingerprint, validity and trust are always
    named. Returns (checks, signed, signers)."""
    from pyhanko.pdf_utils.reader import PdfFileReader
    from pyhanko.sign.validation import validate_pdf_signature
    from pyhanko_certvalidator import ValidationContext

    from studykit.report.signing import certificate_info, outside_event_loop

    checks: list[Check] = []
    signers: list[dict] = []
    roots = _trust_roots(trust)
    root_prints = {certificate_info(r).fingerprint_sha256 for r in roots}
    try:
        reader = PdfFileReader(io.BytesIO(pdf_bytes), strict=False)
        sigs = reader.embedded_signatures
    except Exception as exc:  # noqa: BLE001 - any parse failure is a failed check
        return (
            [
                Check(
                    "PDF structure",
                    "fail",
                    f"the PDF cannot be parsed ({exc}); it was altered or is not a PDF",
                )
            ],
            False,
            [],
        )
    if not sigs:
        return [_unsigned_check(bool(roots), allow_unsigned)], False, []
    vc = ValidationContext(trust_roots=roots)
    logger = logging.getLogger("pyhanko")
    level = logger.level
    logger.setLevel(logging.CRITICAL + 1)
    logging.getLogger("pyhanko_certvalidator").setLevel(logging.CRITICAL + 1)
    try:
        for i, sig in enumerate(sigs):
            label = f"signature {sig.field_name}"
            try:
                reason = sig.sig_object.get("/Reason")
                reason = str(reason) if reason is not None else ""
                info = certificate_info(sig.signer_cert)
            except Exception as exc:  # noqa: BLE001
                checks.append(
                    Check(label, "fail", f"the signer's certificate cannot be read ({exc})")
                )
                continue
            if reason:
                label += f" ({reason})"
            cert_text = (
                f"certificate {info.subject} ("
                + ("self-signed" if info.self_signed else f"issued by {info.issuer}")
                + f"), SHA-256 fingerprint {info.fingerprint_sha256}, {info.period()}"
            )
            signer = dict(info.to_dict(), field=sig.field_name, reason=reason, trust="")
            signers.append(signer)
            try:
                st = outside_event_loop(validate_pdf_signature, sig, vc)
            except Exception as exc:  # noqa: BLE001 - a broken signature is a failed check
                checks.append(Check(label, "fail", f"cannot be validated ({exc}); {cert_text}"))
                signer["trust"] = "invalid"
                continue
            problem = _signature_problem(st, last=i == len(sigs) - 1)
            if problem is None:
                when = st.signer_reported_dt
                signer["signed_at"] = when.astimezone(datetime.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
                expired = info.validity_problem(when)
                if expired:
                    problem = (
                        f"intact, but the certificate was {expired} when it signed: not evidence"
                    )
            if problem is not None:
                checks.append(Check(label, "fail", f"{problem}; {cert_text}"))
                signer["trust"] = "invalid"
                continue
            signed_s = f"signed {signer['signed_at']}"
            if roots:
                # trusted by pyHanko's path validation, or the certificate is itself one of the
                # --trust certificates (a self-signed signer given as its own root)
                if st.trusted or info.fingerprint_sha256 in root_prints:
                    signer["trust"] = "trusted"
                    checks.append(
                        Check(
                            label,
                            "pass",
                            f"intact, {signed_s}; {cert_text}; "
                            "TRUSTED by the given --trust certificate(s)",
                        )
                    )
                else:
                    signer["trust"] = "not trusted"
                    checks.append(
                        Check(
                            label,
                            "fail",
                            f"intact, {signed_s}; {cert_text}; NOT "
                            "trusted by the given --trust certificate(s): another "
                            "signer, or a look-alike certificate",
                        )
                    )
            else:
                signer["trust"] = "not established"
                checks.append(
                    Check(
                        label,
                        "warn",
                        f"intact, {signed_s}; {cert_text}; signer "
                        "UNTRUSTED: no --trust given, so anyone could have made "
                        "this certificate; compare its fingerprint with the "
                        "signer's",
                    )
                )
    finally:
        logger.setLevel(level)
    return checks, True, signers


def _signature_problem(st, *, last: bool) -> str | None:
    """Why a validated signature (pyHanko's status ``st``) is not evidence, before its
    certificate's validity is looked at: bytes changed after signing, a change signing does not
    explain, bytes appended after the ``last`` signature, or no signing time; None when none."""
    if not (st.intact and st.valid):
        return "NOT INTACT: the signed bytes were changed after signing"
    mod = getattr(st, "modification_level", None)
    mod_name = getattr(mod, "name", str(mod))
    if mod_name not in ("NONE", "LTA_UPDATES", "FORM_FILLING"):
        return (
            "intact, but the file was changed after this "
            f"signature in a way signing does not explain ({mod_name})"
        )
    cov = getattr(getattr(st, "coverage", None), "name", "")
    if last and cov != "ENTIRE_FILE":
        return "intact, but bytes were appended after the last signature"
    if getattr(st, "signer_reported_dt", None) is None:
        return (
            "intact, but it states no signing time, so the certificate's validity cannot be checked"
        )
    return None


# ---------------------------------------------------------------------------------------------
# pages


def _tree_digest(obj, h, memo: dict, depth: int = 0) -> None:
    """Feed a canonical form of a PDF object (streams decoded, references followed) into the
    hash ``h``; ``/Parent`` links are not followed."""
    from pypdf.generic import ArrayObject, DictionaryObject, IndirectObject, StreamObject

    if depth > 40:
        h.update(b"<deep>")
        return
    if isinstance(obj, IndirectObject):
        key = (obj.idnum, obj.generation)
        if key in memo:
            h.update(memo[key])
            return
        memo[key] = b"<cycle>"
        sub = hashlib.sha256()
        _tree_digest(obj.get_object(), sub, memo, depth + 1)
        memo[key] = sub.digest()
        h.update(memo[key])
        return
    if isinstance(obj, StreamObject):
        try:
            data = obj.get_data()
        except Exception:  # noqa: BLE001 - a filter pypdf cannot decode: the raw bytes
            data = getattr(obj, "_data", b"") or b""
        h.update(b"stream" + hashlib.sha256(data).digest())
    if isinstance(obj, DictionaryObject):
        h.update(b"{")
        for k in sorted(obj.keys()):
            if k in ("/Parent", "/Length", "/Filter", "/DecodeParms", "/P"):
                continue
            h.update(str(k).encode("utf-8", "replace") + b":")
            _tree_digest(obj.raw_get(k), h, memo, depth + 1)
        h.update(b"}")
        return
    if isinstance(obj, ArrayObject):
        h.update(b"[")
        for x in obj:
            _tree_digest(x, h, memo, depth + 1)
        h.update(b"]")
        return
    h.update(repr(obj).encode("utf-8", "replace") + b";")


def _page_prints(pdf_bytes: bytes) -> list[tuple[str, list[str], str]]:
    """Per page: (digest of what is drawn, annotations studykit does not make, text)."""
    from pypdf import PdfReader

    reader = PdfReader(io.BytesIO(pdf_bytes))
    memo: dict = {}
    out = []
    from pypdf.generic import DictionaryObject

    for page in reader.pages:
        h = hashlib.sha256()
        for key in ("/Contents", "/MediaBox", "/CropBox", "/Rotate"):
            h.update(key.encode())
            if key in page:
                _tree_digest(page.raw_get(key), h, memo)
        # resources: only those the page's content names (a shared font dictionary that an
        # edit of another page extended does not make this page differ)
        try:
            contents = page.get_contents()
            used = contents.get_data() if contents is not None else b""
        except Exception:  # noqa: BLE001
            used = b""
        res = page.get("/Resources")
        res = res.get_object() if res is not None else {}
        for cat in sorted(res.keys()):
            entries = res[cat].get_object() if hasattr(res[cat], "get_object") else res[cat]
            h.update(str(cat).encode())
            if isinstance(entries, DictionaryObject):
                for name in sorted(entries.keys()):
                    if str(name).encode("latin-1", "replace") in used:
                        h.update(str(name).encode("utf-8", "replace"))
                        _tree_digest(entries.raw_get(name), h, memo)
            else:
                _tree_digest(res.raw_get(cat), h, memo)
        foreign = []
        for a in page.get("/Annots") or []:
            a = a.get_object()
            sub = str(a.get("/Subtype", ""))
            ft = a.get("/FT") or (
                a.get("/Parent").get_object().get("/FT") if a.get("/Parent") is not None else None
            )
            if sub == "/Widget" and str(ft) == "/Sig":
                continue  # a digital signature's field (its stamp in a role's box)
            foreign.append(sub.lstrip("/") or "unknown")
        try:
            text = page.extract_text() or ""
        except Exception:  # noqa: BLE001
            text = ""
        out.append((h.hexdigest(), foreign, text))
    return out


def _first_difference(a: str, b: str) -> str:
    la = [x.strip() for x in a.splitlines() if x.strip()]
    lb = [x.strip() for x in b.splitlines() if x.strip()]
    if la == lb:
        return (
            "its text is as studykit prints it, but what is drawn differs (something was "
            "drawn over it, whited out or an image replaced)"
        )
    extra = [x for x in la if x not in lb]
    gone = [x for x in lb if x not in la]
    bits = []
    if extra:
        bits.append(
            f"shows text studykit did not print: {extra[0][:80]!r}"
            + (f" (and {len(extra) - 1} more line(s))" if len(extra) > 1 else "")
        )
    if gone:
        bits.append(
            f"lacks text studykit printed: {gone[0][:80]!r}"
            + (f" (and {len(gone) - 1} more line(s))" if len(gone) > 1 else "")
        )
    return "; ".join(bits) or "its text differs in order or spacing"


def _pages_check(pdf_bytes: bytes, redrawn: bytes) -> Check:
    """Every page of the report against the same page redrawn from the evidence."""
    try:
        got = _page_prints(pdf_bytes)
    except Exception as exc:  # noqa: BLE001
        return Check("every page", "fail", f"the pages cannot be read ({exc})")
    want = _page_prints(redrawn)
    problems = []
    if len(got) != len(want):
        problems.append(
            f"the report has {len(got)} pages, studykit draws {len(want)} for this evidence"
        )
    for i, (g, w) in enumerate(zip(got, want, strict=False), start=1):
        if g[1]:
            problems.append(
                f"page {i} carries added marks studykit does not make "
                f"({', '.join(g[1])} annotation)"
            )
        if g[0] != w[0]:
            problems.append(f"page {i} {_first_difference(g[2], w[2])}")
    if problems:
        more = f" (and {len(problems) - 3} more)" if len(problems) > 3 else ""
        return Check("every page", "fail", "; ".join(problems[:3]) + more)
    return Check(
        "every page",
        "pass",
        f"all {len(got)} pages are exactly what studykit draws "
        "from the embedded evidence (text, figures and marks)",
    )


# ---------------------------------------------------------------------------------------------
# entry point


def _printed_numbers(pdf_bytes: bytes, evidence: dict) -> Check:
    """The two-decimal estimates and bounds on the cover appear in the PDF text."""
    from pypdf import PdfReader

    try:
        reader = PdfReader(io.BytesIO(pdf_bytes))
        text = reader.pages[0].extract_text() or ""
    except Exception as exc:  # noqa: BLE001
        return Check("printed numbers", "fail", f"the cover text cannot be read ({exc})")
    missing = []
    n = 0
    for name, res in evidence.get("results", {}).items():
        v = res.get("verdict") or {}
        for key in ("estimate", "lower_bound"):
            x = v.get(key)
            if _is_number(x):
                n += 1
                if f"{x:.2f}" not in text:
                    missing.append(f"{name} {key} {x:.2f}")
    if missing:
        return Check(
            "printed numbers",
            "fail",
            "the cover does not show the embedded values: " + "; ".join(missing[:5]),
        )
    return Check("printed numbers", "pass", f"the cover shows the {n} embedded verdict numbers")


def _read_data_files(data) -> dict:
    """``--data`` paths (one or several) -> {filename: bytes}."""
    paths = [data] if isinstance(data, str | Path) else list(data)
    out: dict = {}
    for d in paths:
        dpath = Path(d)
        if not dpath.is_file():
            raise StudyInputError(
                f"`--data` '{dpath}' does not exist or is not a file: check the path"
            )
        if dpath.name in out:
            raise StudyInputError(f"`--data` names two files called '{dpath.name}'")
        out[dpath.name] = dpath.read_bytes()
    return out


def _data_checks(evidence: dict, given: dict) -> tuple[list[Check], dict]:
    """Match the given files to the report's data files by SHA-256 (or name); a check per
    recorded file. Returns (checks, {recorded filename: bytes})."""
    checks = []
    files = evidence_files(evidence)
    by_sha = {hashlib.sha256(b).hexdigest(): (n, b) for n, b in given.items()}
    matched: dict = {}
    used = set()
    for f in files:
        name, want = f["filename"], f["sha256"]
        if want in by_sha:
            gname, blob = by_sha[want]
            matched[name] = blob
            used.add(gname)
            shown = name if gname == name else f"{gname} (recorded as {name})"
            checks.append(
                Check(f"data digest {name}", "pass", f"{shown} has the SHA-256 the report records")
            )
        elif name in given:
            digest = hashlib.sha256(given[name]).hexdigest()
            matched[name] = given[name]
            used.add(name)
            checks.append(
                Check(
                    f"data digest {name}",
                    "fail",
                    f"{name} differs from the data "
                    f"the report was made from (report {want[:12]}..., file "
                    f"{digest[:12]}...)",
                )
            )
        else:
            checks.append(
                Check(
                    f"data digest {name}",
                    "fail",
                    f"{name} (SHA-256 {want[:12]}...) "
                    "is one of the report's data files but was not given: pass "
                    "every data file with --data",
                )
            )
    for n in given:
        if n not in used:
            checks.append(
                Check(
                    f"data file {n}",
                    "fail",
                    f"{n} is none of the report's data "
                    "files (" + ", ".join(f["filename"] for f in files) + ")",
                )
            )
    if len(files) == 1:  # the name a single-file report has always used
        checks = [
            Check("data digest", c.status, c.detail) if c.item.startswith("data digest") else c
            for c in checks
        ]
    return checks, matched


def _chain_checks(study_path, evidence: dict) -> list[Check]:
    """The study file's audit chain is intact and continues the chain head the report
    records."""
    from studykit.store import StudyFile

    sf = StudyFile(study_path)
    chain = sf.check_chain()
    out = []
    if not chain.ok:
        out.append(Check("study audit chain", "fail", chain.summary()))
        return out
    out.append(Check("study audit chain", "pass", chain.summary()))
    recorded = (evidence["study"].get("chain") or {}).get("head")
    if not recorded:
        out.append(
            Check(
                "report chain head",
                "info",
                "the report records no audit chain head "
                "(made before studykit recorded one, or not from a study file)",
            )
        )
        return out
    eid, _, h = str(recorded).partition(":")
    now = sf.chain_entry_hash(int(eid)) if eid.isdigit() else None
    if now == h:
        later = chain.entries - int(eid)
        out.append(
            Check(
                "report chain head",
                "pass",
                f"the study file's chain holds entry {eid} "
                "with the hash the report records"
                + (f"; {later} entr(ies) were added since" if later else ""),
            )
        )
    else:
        out.append(
            Check(
                "report chain head",
                "fail",
                f"the report records audit entry {eid} "
                f"with hash {h[:12]}..., but the study file's entry {eid} is "
                + (f"{now[:12]}..." if now else "missing")
                + ": this study file is not the one the report was made from, or its "
                "history was rewritten",
            )
        )
    return out


def verify_report(
    pdf_path, *, data=None, study=None, trust=(), allow_unsigned: bool = False
) -> VerifyResult:
    """Verify a studykit evidence report.

    Parameters
    ----------
    pdf_path : str or PathLike
        The (signed or unsigned) report.
    data : path or list of paths, optional
        The raw measurement file(s): every data file the report records (matched by SHA-256,
        so renamed copies work). Their digests are compared and the study is rebuilt from
        them and the report's embedded specifications and decisions.
    study : str or PathLike, optional
        The study file instead: its audit chain is checked (intact, and holding the chain head
        the report records), data and content digests are compared, and its data and decisions
        are recomputed.
    trust : iterable of paths
        PEM/DER certificates trusted as roots. With any, every signature must be by a trusted
        certificate and an unsigned report fails.
    allow_unsigned : bool
        Check the content of an unsigned report instead of stopping at "not evidence".

    Returns
    -------
    VerifyResult
        ``status`` and ``exit_code`` say what was established (see the module notes).

    Notes
    -----
    Numbers agree when ``|a - b| <= max(1e-9 * max(|a|, |b|), 1e-12)`` (float printing); the
    analysis is deterministic (its bootstrap has a fixed seed), so a real change in the data or a
    decision moves numbers far beyond this. With the data, every page is redrawn from the
    embedded evidence and compared with the report's page (what is drawn, its text, and marks
    added on top), so a page whited out or text added anywhere is named.
    """

    path = Path(pdf_path)
    if not path.exists():
        raise StudyFileError(f"report '{path}' does not exist: check the path")
    if data is not None and study is not None:
        raise StudyInputError("give `--data` or `--study`, not both")
    if isinstance(data, list | tuple) and not data:
        data = None
    pdf_bytes = path.read_bytes()
    checks, signed, signers = _signature_checks(pdf_bytes, trust, allow_unsigned)

    def result():
        return VerifyResult(
            str(path), tuple(checks), signed, numbers, allow_unsigned, tuple(signers)
        )

    numbers = 0
    try:
        evidence_bytes = read_evidence_bytes(pdf_bytes)
        evidence = json.loads(evidence_bytes.decode("utf-8"))
        s = evidence["study"]
        files = evidence_files(evidence)
    except (StudyFileError, KeyError, TypeError, ValueError) as exc:
        checks.append(Check("embedded evidence", "fail", str(exc)))
        return result()
    checks.append(
        Check(
            "embedded evidence",
            "pass",
            f"{len(evidence.get('results', {}))} characteristic(s), "
            f"{len(files)} data file(s) ("
            + ", ".join(f"{f['filename']} {f['sha256'][:12]}..." for f in files)
            + f"), content {s['content_digest'][:12]}..."
            + (
                f", audit chain head entry {s['chain']['head'].split(':')[0]}"
                if s.get("chain")
                else ""
            ),
        )
    )
    checks.append(_printed_numbers(pdf_bytes, evidence))
    rebuilt = None
    blobs: dict | None = None
    if data is not None:
        dchecks, blobs = _data_checks(evidence, _read_data_files(data))
        checks.extend(dchecks)
        if len(blobs) == len(files):
            try:
                rebuilt = study_from_evidence(evidence, blobs)
            except StudyInputError as exc:
                checks.append(Check("study rebuilt", "fail", str(exc)))
    elif study is not None:
        from studykit.store import StudyFile

        spath = Path(study)
        if not spath.exists():
            raise StudyInputError(f"`--study` '{spath}' does not exist: check the path")
        chain_checks = _chain_checks(spath, evidence)
        checks.extend(chain_checks)
        if chain_checks[0].status == "fail":
            return result()  # a file altered outside studykit is not read as a study
        rebuilt = StudyFile(spath).load()
        dchecks, blobs = _data_checks(evidence, dict(rebuilt.files))
        checks.extend(
            c
            if c.status == "pass"
            else Check(c.item, c.status, c.detail.replace("with --data", "in the study"))
            for c in dchecks
        )
    else:
        checks.append(
            Check(
                "numbers",
                "skip",
                "not recomputed: give --data FILE (every data file) or --study FILE",
            )
        )
    if rebuilt is not None:
        checks.append(_content_digest_check(rebuilt, s["content_digest"]))
        try:
            results, errors, measurements = analyze_for_report(rebuilt, evidence.get("gauges"))
        except StudyInputError as exc:
            checks.append(Check("recomputation", "fail", f"the study cannot be analysed: {exc}"))
            results, errors, measurements = {}, {}, None
        numbers += _result_checks(evidence.get("results", {}), results, errors, checks)
        numbers += _short_gauge_checks(evidence, checks)
        numbers += _position_checks(evidence, checks)
        page_study = rebuilt if data is not None else None
        pages = _redrawn_pages_check(
            pdf_bytes,
            evidence_bytes,
            evidence,
            blobs if blobs is not None and len(blobs) == len(files) else None,
            page_study,
            (results, errors, measurements),
        )
        if pages is not None:
            checks.append(pages)
    return result()


def _content_digest_check(rebuilt, reported_digest: str) -> Check:
    """The rebuilt study's content digest against the one the report records."""
    cd = rebuilt.content_digest()
    if cd == reported_digest:
        return Check(
            "content digest",
            "pass",
            "data, specifications and decisions are those the report records",
        )
    return Check(
        "content digest",
        "fail",
        "data, specifications or decisions "
        f"differ from the report's (report {reported_digest[:12]}..., "
        f"now {cd[:12]}...)",
    )


def _result_checks(reported: dict, results: dict, errors: dict, checks: list) -> int:
    """One check per characteristic: its reported numbers against the recomputed ones;
    returns the numbers compared."""
    numbers = 0
    for name in sorted(set(reported) | set(results)):
        if name not in results:
            checks.append(
                Check(
                    f"numbers of {name}",
                    "fail",
                    "reported, but the recomputed "
                    "study cannot analyse it: " + str(errors.get(name, "")),
                )
            )
            continue
        if name not in reported:
            checks.append(Check(f"numbers of {name}", "fail", "not in the report"))
            continue
        n, diffs = compare_numbers(reported[name], results[name].to_dict())
        numbers += n
        if diffs:
            more = f" (and {len(diffs) - 4} more)" if len(diffs) > 4 else ""
            checks.append(
                Check(
                    f"numbers of {name}",
                    "fail",
                    f"{len(diffs)} difference(s) among {n} numbers compared: "
                    + "; ".join(diffs[:4])
                    + more,
                )
            )
        else:
            checks.append(
                Check(
                    f"numbers of {name}",
                    "pass",
                    f"all {n} numbers agree (relative tolerance {RELATIVE_TOLERANCE:g})",
                )
            )
    return numbers


def _redrawn_pages_check(
    pdf_bytes: bytes, evidence_bytes: bytes, evidence: dict, blobs, page_study, analysed
) -> Check | None:
    """Every page redrawn from the embedded evidence and the analysis ``analysed`` (results,
    errors, measurements) against the report's pages; ``page_study`` is the study rebuilt from
    the data, or None to rebuild it from the evidence and ``blobs`` (every data file, or None
    when some are missing). None when there is nothing to redraw: no analysis, or not every
    data file; a skip when another studykit version made the report."""
    from studykit import __version__
    from studykit.report.pdf import render_pages

    results, errors, measurements = analysed
    made_by = (evidence.get("software") or {}).get("studykit")
    if measurements is None:
        return None
    if made_by != __version__:
        return Check(
            "every page",
            "skip",
            f"not redrawn: the report was made by "
            f"studykit {made_by}, this is {__version__}; verify with the "
            "version that made it",
        )
    if blobs is None:
        return None
    try:
        if page_study is None:
            page_study = study_from_evidence(evidence, blobs)
        redrawn, _ = render_pages(
            page_study,
            results,
            errors,
            measurements,
            evidence.get("gauges"),
            chain=evidence["study"].get("chain"),
            short_gauges=evidence.get("short_gauges"),
            positions=evidence.get("positions"),
            evidence_sha=hashlib.sha256(evidence_bytes).hexdigest(),
        )
        return _pages_check(pdf_bytes, redrawn)
    except (StudyInputError, KeyError, TypeError, ValueError) as exc:
        return Check(
            "every page",
            "fail",
            f"the pages cannot be redrawn from the embedded evidence ({exc})",
        )


def _short_gauge_checks(evidence: dict, checks: list) -> int:
    """Recompute each embedded short gauge study from its readings; returns numbers compared."""
    from studykit.report.gauge_error import recheck_short_study

    short = _Recheck("short gauge study of", "readings", recheck_short_study, _fresh_keys)
    return short.run(evidence.get("short_gauges"), checks)


def _position_checks(evidence: dict, checks: list) -> int:
    """Recompute each embedded position study from its deviations; returns numbers compared."""
    from studykit.positions import recheck_position

    position = _Recheck("position study", "deviations", recheck_position, _stored_result)
    return position.run(evidence.get("positions"), checks)


def _fresh_keys(payload, fresh) -> dict:
    """The numbers of ``payload`` that the recomputation gives too."""
    return {k: v for k, v in payload.items() if k in fresh}


def _stored_result(payload, fresh) -> dict:
    """The stored result of ``payload``."""
    return payload.get("result") or {}


@dataclass(frozen=True)
class _Recheck:
    """An embedded kind of study that ``verify`` recomputes: ``what`` names it in the check
    lines, ``raw`` its stored values; ``recheck(payload)`` gives the fresh numbers and
    ``reported(payload, fresh)`` the stored ones to compare with them."""

    what: str
    raw: str
    recheck: Callable
    reported: Callable

    def run(self, payloads, checks: list) -> int:
        """One check per embedded study ``{name: payload}`` (a study that cannot be recomputed
        fails); returns the numbers compared."""
        total = 0
        for name, payload in sorted((payloads or {}).items()):
            label = f"{self.what} {name}"
            try:
                fresh = self.recheck(payload)
            except (StudyInputError, KeyError, TypeError, ValueError) as exc:
                checks.append(
                    Check(label, "fail", f"cannot be recomputed from its {self.raw}: {exc}")
                )
                continue
            reported = self.reported(payload, fresh)
            total += _compare_check(label, reported, fresh, f"the {self.raw}", checks)
        return total


def _compare_check(label, reported, fresh, source, checks) -> int:
    """Compare the reported numbers with the recomputed ones; one check line; numbers compared."""
    n, diffs = compare_numbers(reported, fresh)
    if diffs:
        checks.append(
            Check(
                label,
                "fail",
                f"{len(diffs)} difference(s) among {n} numbers: " + "; ".join(diffs[:4]),
            )
        )
    else:
        checks.append(Check(label, "pass", f"all {n} numbers agree with {source}"))
    return n
