"""Check an evidence report: its signatures, its digests and every number it reports.

:func:`verify_report` reads the PDF's digital signatures (pyHanko), the embedded evidence JSON
(:data:`studykit.report.pdf.EVIDENCE_FILENAME`), and, given the raw data or the study file,
recomputes every characteristic and compares each reported number with a relative tolerance of
:data:`~studykit.report.pdf.RELATIVE_TOLERANCE` (absolute 1e-12 near zero), to allow for float
printing. Each check is a :class:`Check` with a pass/fail/info/skip status and a sentence that
names what differs.
"""

from __future__ import annotations

import hashlib
import io
import logging
import math
from dataclasses import dataclass
from pathlib import Path

from studykit.errors import StudyFileError, StudyInputError
from studykit.report.pdf import RELATIVE_TOLERANCE, analyze_for_report, read_evidence

__all__ = ["Check", "VerifyResult", "verify_report", "compare_numbers", "study_from_evidence"]

ABSOLUTE_TOLERANCE = 1e-12


@dataclass(frozen=True)
class Check:
    """One verification item.

    Attributes
    ----------
    item : str
        What was checked (``signature Signature1``, ``data digest``, ``numbers of bore``...).
    status : {"pass", "fail", "info", "skip"}
        ``info`` never fails the report (e.g. "unsigned"); ``skip`` means not checked.
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
    ok : bool
        No check failed and none was skipped (exit status 0 of ``studykit verify``).
    """

    path: str
    checks: tuple
    signed: bool
    numbers_checked: int

    @property
    def ok(self) -> bool:
        return all(c.status in ("pass", "info") for c in self.checks)

    @property
    def failures(self) -> tuple:
        return tuple(c for c in self.checks if c.status == "fail")

    def to_dict(self) -> dict:
        return {"path": self.path, "ok": self.ok, "signed": self.signed,
                "numbers_checked": self.numbers_checked,
                "tolerance": {"relative": RELATIVE_TOLERANCE, "absolute": ABSOLUTE_TOLERANCE},
                "checks": [c.to_dict() for c in self.checks]}

    def summary(self) -> str:
        fails = len(self.failures)
        skips = sum(1 for c in self.checks if c.status == "skip")
        if self.ok:
            return ("VERIFIED: " + ("signed, " if self.signed else "unsigned, ")
                    + f"{self.numbers_checked} numbers agree with the recomputed study")
        parts = []
        if fails:
            parts.append(f"{fails} check(s) failed")
        if skips:
            parts.append(f"{skips} check(s) not made")
        return "NOT VERIFIED: " + ", ".join(parts)


# ---------------------------------------------------------------------------------------------
# numbers


def _is_number(v) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool)


def compare_numbers(reported, recomputed, *, path: str = "", rtol: float = RELATIVE_TOLERANCE,
                    atol: float = ABSOLUTE_TOLERANCE) -> tuple[int, list[str]]:
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


def study_from_evidence(evidence: dict, data: bytes):
    """Rebuild the study from the report's embedded content and the raw data bytes."""
    from studykit.study import Characteristic, Criteria, Decision, Study

    s = evidence["study"]
    try:
        return Study(
            title=s["title"], part=s.get("part", ""), supplier=s.get("supplier", ""),
            data=data, data_filename=s["data_filename"],
            characteristics=[Characteristic.from_dict(c) for c in s["characteristics"].values()],
            criteria={n: Criteria.from_dict(c) for n, c in s["criteria"].items()},
            decisions=[Decision.from_dict(d) for d in s["decisions"]],
        )
    except (KeyError, TypeError) as exc:
        raise StudyFileError(f"the embedded study content is incomplete ({exc})") from None


# ---------------------------------------------------------------------------------------------
# signatures


def _signature_checks(pdf_bytes: bytes, trust) -> tuple[list[Check], bool]:
    from pyhanko.pdf_utils.reader import PdfFileReader
    from pyhanko.sign.validation import validate_pdf_signature
    from pyhanko_certvalidator import ValidationContext

    from studykit.report.signing import outside_event_loop

    checks: list[Check] = []
    try:
        reader = PdfFileReader(io.BytesIO(pdf_bytes), strict=False)
        sigs = reader.embedded_signatures
    except Exception as exc:  # noqa: BLE001 - any parse failure is a failed check
        return [Check("PDF structure", "fail", f"the PDF cannot be parsed ({exc}); it was "
                      "altered or is not a PDF")], False
    if not sigs:
        return [Check("signatures", "info", "unsigned: the report carries no digital "
                      "signature (its numbers are still checked)")], False
    roots = []
    for t in trust or ():
        from pyhanko.keys import load_cert_from_pemder

        try:
            roots.append(load_cert_from_pemder(str(t)))
        except Exception as exc:  # noqa: BLE001
            raise StudyInputError(f"`--trust` '{t}' is not a PEM/DER certificate ({exc})") \
                from None
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
                subject = sig.signer_cert.subject.human_friendly
            except Exception:  # noqa: BLE001
                reason, subject = "", "unknown certificate"
            if reason:
                label += f" ({reason})"
            try:
                st = outside_event_loop(validate_pdf_signature, sig, vc)
            except Exception as exc:  # noqa: BLE001 - a broken signature is a failed check
                checks.append(Check(label, "fail", f"cannot be validated: {exc}"))
                continue
            last = i == len(sigs) - 1
            if not (st.intact and st.valid):
                checks.append(Check(label, "fail", "NOT INTACT: the signed bytes were changed "
                                    f"after signing (certificate {subject})"))
                continue
            mod = getattr(st, "modification_level", None)
            mod_name = getattr(mod, "name", str(mod))
            if mod_name not in ("NONE", "LTA_UPDATES", "FORM_FILLING"):
                checks.append(Check(label, "fail", "intact, but the file was changed after this "
                                    f"signature in a way signing does not explain ({mod_name})"))
                continue
            cov = getattr(getattr(st, "coverage", None), "name", "")
            if last and cov != "ENTIRE_FILE":
                checks.append(Check(label, "fail", "intact, but bytes were appended after the "
                                    "last signature"))
                continue
            when = getattr(st, "signer_reported_dt", None)
            when_s = f", signed {when.isoformat(timespec='seconds')}" if when else ""
            if roots:
                if st.trusted:
                    checks.append(Check(label, "pass", f"intact, certificate {subject} is "
                                        f"trusted{when_s}"))
                else:
                    checks.append(Check(label, "fail", f"intact, but certificate {subject} is "
                                        "NOT trusted by the given --trust certificate(s)"))
            else:
                checks.append(Check(label, "pass", f"intact, certificate {subject}{when_s}; "
                                    "trust not checked (give --trust CERT.pem)"))
    finally:
        logger.setLevel(level)
    return checks, True


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
        return Check("printed numbers", "fail", "the cover does not show the embedded "
                     "values: " + "; ".join(missing[:5]))
    return Check("printed numbers", "pass", f"the cover shows the {n} embedded verdict "
                 "numbers")


def verify_report(pdf_path, *, data=None, study=None, trust=()) -> VerifyResult:
    """Verify a studykit evidence report.

    Parameters
    ----------
    pdf_path : str or PathLike
        The (signed or unsigned) report.
    data : str or PathLike, optional
        The raw measurement file: its SHA-256 is compared with the report's, and the study is
        rebuilt from it and the report's embedded specifications and decisions.
    study : str or PathLike, optional
        The study file instead: data digest and content digest are compared, and its data and
        decisions are recomputed.
    trust : iterable of paths
        PEM/DER certificates trusted as roots for the signatures.

    Returns
    -------
    VerifyResult
        ``ok`` is True only when no check fails and the numbers were checked.

    Notes
    -----
    Numbers agree when ``|a - b| <= max(1e-9 * max(|a|, |b|), 1e-12)`` (float printing); the
    analysis is deterministic (its bootstrap has a fixed seed), so a real change in the data or a
    decision moves numbers far beyond this.
    """
    path = Path(pdf_path)
    if not path.exists():
        raise StudyFileError(f"report '{path}' does not exist: check the path")
    if data is not None and study is not None:
        raise StudyInputError("give `--data` or `--study`, not both")
    pdf_bytes = path.read_bytes()
    checks, signed = _signature_checks(pdf_bytes, trust)
    numbers = 0
    try:
        evidence = read_evidence(pdf_bytes)
    except StudyFileError as exc:
        checks.append(Check("embedded evidence", "fail", str(exc)))
        return VerifyResult(str(path), tuple(checks), signed, 0)
    s = evidence["study"]
    checks.append(Check("embedded evidence", "pass",
                        f"{len(evidence.get('results', {}))} characteristic(s), data "
                        f"{s['data_sha256'][:12]}..., content {s['content_digest'][:12]}..."))
    checks.append(_printed_numbers(pdf_bytes, evidence))
    rebuilt = None
    if data is not None:
        dpath = Path(data)
        if not dpath.exists():
            raise StudyInputError(f"`--data` '{dpath}' does not exist: check the path")
        raw = dpath.read_bytes()
        digest = hashlib.sha256(raw).hexdigest()
        if digest == s["data_sha256"]:
            checks.append(Check("data digest", "pass", f"{dpath.name} has the SHA-256 the "
                                "report records"))
        else:
            checks.append(Check("data digest", "fail", f"{dpath.name} differs from the data "
                                f"the report was made from (report {s['data_sha256'][:12]}..., "
                                f"file {digest[:12]}...)"))
        try:
            rebuilt = study_from_evidence(evidence, raw)
        except StudyInputError as exc:
            checks.append(Check("study rebuilt", "fail", str(exc)))
    elif study is not None:
        from studykit.store import StudyFile

        spath = Path(study)
        if not spath.exists():
            raise StudyInputError(f"`--study` '{spath}' does not exist: check the path")
        rebuilt = StudyFile(spath).load()
        if rebuilt.data_sha256 == s["data_sha256"]:
            checks.append(Check("data digest", "pass", "the study's data copy has the SHA-256 "
                                "the report records"))
        else:
            checks.append(Check("data digest", "fail", "the study's data copy differs from the "
                                f"report's (report {s['data_sha256'][:12]}..., study "
                                f"{rebuilt.data_sha256[:12]}...)"))
    else:
        checks.append(Check("numbers", "skip", "not recomputed: give --data FILE or --study "
                            "FILE"))
    if rebuilt is not None:
        cd = rebuilt.content_digest()
        if cd == s["content_digest"]:
            checks.append(Check("content digest", "pass", "data, specifications and decisions "
                                "are those the report records"))
        else:
            checks.append(Check("content digest", "fail", "data, specifications or decisions "
                                f"differ from the report's (report {s['content_digest'][:12]}..., "
                                f"now {cd[:12]}...)"))
        try:
            results, errors, _ = analyze_for_report(rebuilt, evidence.get("gauges"))
        except StudyInputError as exc:
            checks.append(Check("recomputation", "fail", f"the study cannot be analysed: {exc}"))
            results, errors = {}, {}
        reported = evidence.get("results", {})
        for name in sorted(set(reported) | set(results)):
            if name not in results:
                checks.append(Check(f"numbers of {name}", "fail", "reported, but the recomputed "
                                    "study cannot analyse it: " + str(errors.get(name, ""))))
                continue
            if name not in reported:
                checks.append(Check(f"numbers of {name}", "fail", "not in the report"))
                continue
            n, diffs = compare_numbers(reported[name], results[name].to_dict())
            numbers += n
            if diffs:
                more = f" (and {len(diffs) - 4} more)" if len(diffs) > 4 else ""
                checks.append(Check(f"numbers of {name}", "fail",
                                    f"{len(diffs)} difference(s) among {n} numbers compared: "
                                    + "; ".join(diffs[:4])
                                    + more))
            else:
                checks.append(Check(f"numbers of {name}", "pass",
                                    f"all {n} numbers agree (relative tolerance "
                                    f"{RELATIVE_TOLERANCE:g})"))
        numbers += _short_gauge_checks(evidence, checks)
    return VerifyResult(str(path), tuple(checks), signed, numbers)


def _short_gauge_checks(evidence: dict, checks: list) -> int:
    """Recompute each embedded short gauge study from its readings; returns numbers compared."""
    from studykit.report.gauge_error import recheck_short_study

    total = 0
    for name, payload in sorted((evidence.get("short_gauges") or {}).items()):
        label = f"short gauge study of {name}"
        try:
            fresh = recheck_short_study(payload)
        except (StudyInputError, KeyError, TypeError) as exc:
            checks.append(Check(label, "fail", f"cannot be recomputed from its readings: {exc}"))
            continue
        reported = {k: v for k, v in payload.items() if k in fresh}
        n, diffs = compare_numbers(reported, fresh)
        total += n
        if diffs:
            checks.append(Check(label, "fail", f"{len(diffs)} difference(s) among {n} numbers: "
                                + "; ".join(diffs[:4])))
        else:
            checks.append(Check(label, "pass", f"all {n} numbers agree with the readings"))
    return total
