"""PAdES signatures on the evidence report, and DEMO certificates for trying it out.

:func:`sign_report` adds one PDF signature (pyHanko, incremental update) from a PKCS#12 file the
user supplies; several signers (prepared, reviewed, approved) sign in turn, each update keeping
the earlier signatures intact. The role and the signer's name go into the signature's reason; a
signer whose role has a reserved box on the sign-off page gets a visible stamp there.

:func:`make_demo_certificate` writes a self-signed certificate whose subject says, in its
organisation field, that it is a studykit DEMO certificate not for production, plus its PKCS#12
bundle. Real evidence needs a certificate from the organisation's own authority.

References
----------
ETSI EN 319 142-1 (PAdES baseline signatures); ISO 32000-1:2008, section 12.8 (digital
signatures in PDF); pyHanko documentation, "Signing functionality".
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import re
from dataclasses import dataclass
from pathlib import Path

from studykit.errors import StudyFileError, StudyInputError

__all__ = [
    "DEMO_ORGANISATION",
    "CertificateInfo",
    "certificate_info",
    "DemoCertificate",
    "SignatureInfo",
    "make_demo_certificate",
    "sign_report",
    "next_field_name",
    "signature_count",
]

#: Organisation written into every demo certificate's subject.
DEMO_ORGANISATION = "studykit demo certificate - not for production"


@dataclass(frozen=True)
class DemoCertificate:
    """Files written by :func:`make_demo_certificate`.

    Attributes
    ----------
    p12_path, cert_path : str
        The PKCS#12 bundle (key + certificate) and the certificate alone (PEM), to give to
        ``verify --trust``.
    subject : str
        The certificate subject (RFC 4514 string).
    fingerprint_sha256 : str
        SHA-256 fingerprint of the certificate (hex).
    """

    p12_path: str
    cert_path: str
    subject: str
    fingerprint_sha256: str

    def to_dict(self) -> dict:
        return {
            "p12_path": self.p12_path,
            "cert_path": self.cert_path,
            "subject": self.subject,
            "fingerprint_sha256": self.fingerprint_sha256,
        }


@dataclass(frozen=True)
class SignatureInfo:
    """One signature added by :func:`sign_report`.

    Attributes
    ----------
    path : str
        The signed PDF.
    field_name : str
        The signature field (``Signature1``, ``Signature2``...).
    role, name : str
        What and who, as written into the reason.
    reason : str
        The signature's reason text.
    subject : str
        Subject of the signing certificate.
    visible : bool
        Whether the stamp was placed in the role's box on the sign-off page.
    """

    path: str
    field_name: str
    role: str
    name: str
    reason: str
    subject: str
    visible: bool

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class CertificateInfo:
    """What a verifier needs to know about a signing certificate.

    Attributes
    ----------
    subject, issuer : str
        Human-readable names.
    fingerprint_sha256 : str
        SHA-256 over the certificate's DER bytes, as colon-separated hex pairs (the form
        certificate viewers show), so a signer can read theirs out over the phone.
    not_before, not_after : datetime
        The validity period (UTC).
    self_signed : bool
    """

    subject: str
    issuer: str
    fingerprint_sha256: str
    not_before: _dt.datetime
    not_after: _dt.datetime
    self_signed: bool

    def valid_at(self, when: _dt.datetime) -> bool:
        return self.not_before <= when <= self.not_after

    def validity_problem(self, when: _dt.datetime) -> str:
        """``"expired on ..."`` / ``"not valid before ..."`` at ``when`` (empty when valid)."""
        if when < self.not_before:
            return f"not yet valid at {_iso(when)} (valid from {_iso(self.not_before)})"
        if when > self.not_after:
            return f"expired at {_iso(when)} (valid until {_iso(self.not_after)})"
        return ""

    def period(self) -> str:
        return f"valid {_iso(self.not_before)} to {_iso(self.not_after)}"

    def to_dict(self) -> dict:
        return {
            "subject": self.subject,
            "issuer": self.issuer,
            "fingerprint_sha256": self.fingerprint_sha256,
            "not_before": _iso(self.not_before),
            "not_after": _iso(self.not_after),
            "self_signed": self.self_signed,
        }


def _iso(when: _dt.datetime) -> str:
    return when.astimezone(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def certificate_info(cert) -> CertificateInfo:
    """:class:`CertificateInfo` of an ``asn1crypto`` certificate (as pyHanko gives it)."""
    import hashlib

    der = cert.dump()
    fp = hashlib.sha256(der).hexdigest().upper()
    validity = cert["tbs_certificate"]["validity"]
    nb = validity["not_before"].native
    na = validity["not_after"].native
    return CertificateInfo(
        subject=cert.subject.human_friendly,
        issuer=cert.issuer.human_friendly,
        fingerprint_sha256=":".join(fp[i : i + 2] for i in range(0, len(fp), 2)),
        not_before=nb.astimezone(_dt.UTC),
        not_after=na.astimezone(_dt.UTC),
        self_signed=cert.subject == cert.issuer,
    )


def outside_event_loop(fn, /, *args, **kwargs):
    """Call ``fn`` where no asyncio event loop runs in the calling thread.

    pyHanko's synchronous API (``PdfSigner.sign_pdf``, ``validate_pdf_signature``) starts its own
    event loop with ``asyncio.run``, which fails inside a Jupyter kernel (the workbook) or any
    other running loop. There the call goes to a short-lived worker thread.
    """
    import asyncio

    try:
        asyncio.get_running_loop()
    except RuntimeError:
        return fn(*args, **kwargs)
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="studykit-pdf") as pool:
        return pool.submit(fn, *args, **kwargs).result()


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", text).strip("_") or "signer"


def make_demo_certificate(
    out_dir,
    *,
    name: str = "Demo Signer",
    passphrase: str,
    days: int = 365,
    when: _dt.datetime | None = None,
) -> DemoCertificate:
    """Write a self-signed DEMO signing certificate and its PKCS#12 bundle.

    Parameters
    ----------
    out_dir : str or PathLike
        Folder for ``<name>.p12`` and ``<name>.crt.pem`` (created if missing).
    name : str
        Common name of the signer.
    passphrase : str
        Protects the .p12 file; must not be empty.
    days : int
        Validity.
    when : datetime, optional
        Start of validity (default: now, UTC).

    Returns
    -------
    DemoCertificate

    Notes
    -----
    RSA 2048 key; subject ``CN=<name>, O=studykit demo certificate - not for production``;
    BasicConstraints CA (so the certificate can be its own trust root for ``verify --trust``);
    KeyUsage digitalSignature + contentCommitment (non-repudiation), as PDF signing expects.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     cert = make_demo_certificate(d, name="Pat Example", passphrase="example only")
    >>> "not for production" in cert.subject, cert.p12_path.endswith("Pat_Example.p12")
    (True, True)
    """
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import rsa
    from cryptography.hazmat.primitives.serialization import pkcs12
    from cryptography.x509.oid import NameOID

    if not isinstance(passphrase, str) or not passphrase:
        raise StudyInputError("`passphrase` must not be empty: the .p12 file holds a private key")
    if not isinstance(name, str) or not name.strip():
        raise StudyInputError("`name` must not be empty: it becomes the certificate's CN")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    key = rsa.generate_private_key(public_exponent=65537, key_size=2048)
    subject = x509.Name(
        [
            x509.NameAttribute(NameOID.COMMON_NAME, name.strip()),
            x509.NameAttribute(NameOID.ORGANIZATION_NAME, DEMO_ORGANISATION),
            x509.NameAttribute(NameOID.ORGANIZATIONAL_UNIT_NAME, "DEMO ONLY"),
        ]
    )
    start = when or _dt.datetime.now(_dt.UTC)
    cert = (
        x509.CertificateBuilder()
        .subject_name(subject)
        .issuer_name(subject)
        .public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(start - _dt.timedelta(minutes=5))
        .not_valid_after(start + _dt.timedelta(days=int(days)))
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .add_extension(
            x509.KeyUsage(
                digital_signature=True,
                content_commitment=True,
                key_encipherment=False,
                data_encipherment=False,
                key_agreement=False,
                key_cert_sign=True,
                crl_sign=False,
                encipher_only=False,
                decipher_only=False,
            ),
            critical=True,
        )
        .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()), critical=False)
        .sign(key, hashes.SHA256())
    )
    stem = _slug(name)
    p12 = out / f"{stem}.p12"
    crt = out / f"{stem}.crt.pem"
    p12.write_bytes(
        pkcs12.serialize_key_and_certificates(
            name.encode("utf-8"),
            key,
            cert,
            None,
            serialization.BestAvailableEncryption(passphrase.encode("utf-8")),
        )
    )
    try:
        os.chmod(p12, 0o600)
    except OSError:  # pragma: no cover - e.g. some network file systems
        pass
    crt.write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    return DemoCertificate(
        str(p12), str(crt), subject.rfc4514_string(), cert.fingerprint(hashes.SHA256()).hex()
    )


def signature_count(pdf_bytes: bytes) -> int:
    """How many signatures the PDF carries (0 when it cannot be parsed).

    A file with no ``/ByteRange`` (every signature dictionary has one) and no object stream
    (where one could be hidden compressed) carries none: answered without loading pyHanko
    (about a second) or parsing the whole file, as when an unsigned report is made again.

    >>> signature_count(b"%PDF-1.4 1 0 obj << /Type /Catalog >> endobj %%EOF")
    0
    """
    import io

    if b"/ByteRange" not in pdf_bytes and b"/ObjStm" not in pdf_bytes:
        return 0
    from pyhanko.pdf_utils.reader import PdfFileReader

    try:
        return len(PdfFileReader(io.BytesIO(pdf_bytes), strict=False).embedded_signatures)
    except Exception:  # noqa: BLE001 - not a readable PDF: nothing signed in it
        return 0


def next_field_name(pdf_bytes: bytes) -> str:
    """``SignatureN`` with N one more than the signatures already in the PDF."""
    return f"Signature{signature_count(pdf_bytes) + 1}"


def _boxes(pdf_bytes: bytes) -> dict:
    import io

    from pypdf import PdfReader

    from studykit.report.pdf import BOXES_KEY

    try:
        meta = PdfReader(io.BytesIO(pdf_bytes)).metadata or {}
        return json.loads(str(meta.get(BOXES_KEY, "{}")))
    except Exception:  # noqa: BLE001 - no boxes means an invisible signature
        return {}


def sign_report(
    pdf_in,
    pdf_out,
    p12_path,
    passphrase,
    *,
    role: str,
    name: str,
    visible: bool = True,
    p12_data: bytes | None = None,
) -> SignatureInfo:
    """Add one PAdES signature to a report (incremental update; earlier ones stay intact).

    Parameters
    ----------
    pdf_in, pdf_out : str or PathLike
        The report and where to write the signed copy (may be the same path).
    p12_path : str or PathLike
        PKCS#12 file with the signer's key and certificate (its name only, for messages,
        when ``p12_data`` is given).
    passphrase : str or bytes
        Passphrase of the .p12 (never stored).
    role : str
        ``prepared``, ``reviewed``, ``approved`` or another role; written into the reason.
    name : str
        The signer's name as it should read in the reason.
    visible : bool
        Place a stamp in the role's box on the sign-off page when there is one.
    p12_data : bytes, optional
        The PKCS#12 bundle itself (e.g. uploaded in the workbook); then nothing is read from
        ``p12_path`` and the key never touches the disk.

    Returns
    -------
    SignatureInfo

    Raises
    ------
    StudyInputError
        Missing files, a wrong passphrase, an empty role or name.
    """
    import io

    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    from pyhanko.sign import fields, signers
    from pyhanko.stamp import TextStampStyle

    role = (role or "").strip()
    name = (name or "").strip()
    if not role:
        raise StudyInputError(
            "`role` must not be empty: say what the signature means, e.g. "
            "Author, Reviewer or Approver"
        )
    if not name:
        raise StudyInputError("`name` must not be empty: give the signer's name")
    src = Path(pdf_in)
    if not src.exists():
        raise StudyFileError(f"report '{src}' does not exist: check the path")
    p12 = Path(p12_path)
    if p12_data is None and not p12.exists():
        raise StudyInputError(
            f"`p12_path` '{p12}' does not exist: give the signer's .p12 file "
            "(studykit keygen --demo makes one for trying it out)"
        )
    pw = passphrase.encode("utf-8") if isinstance(passphrase, str) else passphrase
    try:
        if p12_data is not None:
            signer = signers.SimpleSigner.load_pkcs12_data(
                bytes(p12_data), other_certs=(), passphrase=pw
            )
        else:
            signer = signers.SimpleSigner.load_pkcs12(str(p12), passphrase=pw)
    except (ValueError, TypeError) as exc:
        raise StudyInputError(f"cannot open '{p12.name}': {exc} (wrong passphrase?)") from None
    if signer is None:
        raise StudyInputError(
            f"cannot open '{p12.name}': wrong passphrase or not a PKCS#12 "
            "file with a key and a certificate"
        )
    info = certificate_info(signer.signing_cert)
    now = _dt.datetime.now(_dt.UTC)
    if not info.valid_at(now):
        raise StudyInputError(
            f"the certificate in '{p12.name}' ({info.subject}) is "
            f"{info.validity_problem(now)}: a signature made with it would not be evidence. "
            "Use a certificate valid now"
        )
    data = src.read_bytes()
    field_name = next_field_name(data)
    reason = f"{role}: {name}"
    box = _boxes(data).get(role.lower()) if visible else None
    w = IncrementalPdfFileWriter(io.BytesIO(data), strict=False)
    new_field = None
    stamp = None
    if box:
        page, x1, y1, x2, y2 = box
        new_field = fields.SigFieldSpec(
            sig_field_name=field_name, on_page=int(page), box=(x1, y1, x2, y2)
        )
        stamp = TextStampStyle(
            stamp_text=f"Signed ({role}) by %(signer)s\nReason: {reason}\nTime: %(ts)s",
            border_width=0,
        )
    meta = signers.PdfSignatureMetadata(
        field_name=field_name, reason=reason, name=name, location=None
    )
    pdf_signer = signers.PdfSigner(meta, signer=signer, stamp_style=stamp, new_field_spec=new_field)
    out_buf = io.BytesIO()
    outside_event_loop(pdf_signer.sign_pdf, w, output=out_buf)
    dst = Path(pdf_out)
    tmp = dst.with_name(dst.name + ".part")
    tmp.write_bytes(out_buf.getvalue())
    os.replace(tmp, dst)
    subject = signer.signing_cert.subject.human_friendly
    return SignatureInfo(str(dst), field_name, role, name, reason, subject, bool(box))
