"""Forgeries of the evidence report that `verify` must catch, and certificates it must refuse.

Each test is one attack: a signature cut off, a certificate outside its validity, a look-alike
certificate with the genuine signer's name, a page whited out, text or marks added on a page
other than the cover. The expected outcomes follow the exit-code policy in README ("Checking a
report: studykit verify").

Certificate validity (RFC 5280, section 4.1.2.5: a certificate is valid from notBefore to
notAfter inclusive) is the rule applied to the time the signature states it was made.
"""

from __future__ import annotations

import datetime as dt
import io
import logging
import shutil
from pathlib import Path

import pytest
from pypdf import PdfReader, PdfWriter
from pypdf.annotations import FreeText

from studykit.cli import main
from studykit.errors import StudyInputError
from studykit.report.pdf import build_report
from studykit.report.signing import make_demo_certificate, outside_event_loop, sign_report
from studykit.report.verify import verify_report
from studykit.store import StudyFile
from studykit.study import Characteristic

DEMO = Path(__file__).resolve().parents[1] / "demo_data"
PASS = "test-only-passphrase"  # made at test time


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    logging.getLogger("pyhanko").setLevel(logging.CRITICAL)
    tmp = tmp_path_factory.mktemp("forgery")
    data = tmp / "pump_housing_pilot.csv"
    data.write_bytes((DEMO / "pump_housing_pilot.csv").read_bytes())
    study = tmp / "s.study"
    StudyFile.create(
        study,
        data=data.read_bytes(),
        filename=data.name,
        title="Forgery test",
        characteristics=[Characteristic("bore_diameter", unit="mm", lsl=11.97, usl=12.03)],
        who="tester",
    )
    build_report(study, tmp / "r.pdf")
    cert = make_demo_certificate(tmp / "keys", name="Pat Prep", passphrase=PASS)
    sign_report(tmp / "r.pdf", tmp / "s.pdf", cert.p12_path, PASS, role="prepared", name="Pat Prep")
    return tmp, data, study, cert


def _sign_raw(pdf_in: Path, pdf_out: Path, p12: str) -> None:
    """Sign with pyHanko directly, as another tool (or a forger) would: no studykit checks."""
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    from pyhanko.sign import signers

    signer = signers.SimpleSigner.load_pkcs12(p12, passphrase=PASS.encode())
    w = IncrementalPdfFileWriter(io.BytesIO(pdf_in.read_bytes()), strict=False)
    meta = signers.PdfSignatureMetadata(field_name="Signature1", reason="prepared: Pat Prep")
    out = io.BytesIO()
    outside_event_loop(signers.PdfSigner(meta, signer=signer).sign_pdf, w, output=out)
    pdf_out.write_bytes(out.getvalue())


def _colon_hex(hex_lower: str) -> str:
    h = hex_lower.upper()
    return ":".join(h[i : i + 2] for i in range(0, len(h), 2))


# -- signatures ---------------------------------------------------------------------------------


def test_stripped_signature_with_trust_fails(made, tmp_path, capsys):
    tmp, data, _, cert = made
    signed, unsigned = (tmp / "s.pdf").read_bytes(), (tmp / "r.pdf").read_bytes()
    # a PAdES signature is an incremental update: cutting it off gives the unsigned bytes back
    cut = signed[: len(unsigned)]
    assert cut == unsigned
    (tmp_path / "cut.pdf").write_bytes(cut)
    res = verify_report(tmp_path / "cut.pdf", data=data, trust=[cert.cert_path])
    assert res.status == "not_evidence" and res.exit_code == 1
    assert any(c.item == "signatures" and "UNSIGNED, but --trust" in c.detail for c in res.failures)
    # --allow-unsigned does not override --trust: a signature was asked for
    res = verify_report(
        tmp_path / "cut.pdf", data=data, trust=[cert.cert_path], allow_unsigned=True
    )
    assert res.exit_code == 1 and res.status == "not_verified"
    assert (
        main(["verify", str(tmp_path / "cut.pdf"), "--data", str(data), "--trust", cert.cert_path])
        == 1
    )
    assert "NOT EVIDENCE: unsigned" in capsys.readouterr().out


def test_differently_signed_with_trust_fails(made, tmp_path):
    tmp, data, _, cert = made
    other = make_demo_certificate(tmp_path / "k", name="Other Person", passphrase=PASS)
    sign_report(
        tmp / "s.pdf",
        tmp_path / "two.pdf",
        other.p12_path,
        PASS,
        role="reviewed",
        name="Other Person",
    )
    res = verify_report(tmp_path / "two.pdf", data=data, trust=[cert.cert_path])
    assert res.exit_code == 1
    failed = [c for c in res.failures if c.item.startswith("signature Signature2")]
    assert failed and "NOT trusted" in failed[0].detail
    assert _colon_hex(other.fingerprint_sha256) in failed[0].detail


def test_certificate_fingerprint_validity_and_trust_always_printed(made, capsys):
    tmp, data, _, cert = made
    for extra, word in (([], "UNTRUSTED"), (["--trust", cert.cert_path], "TRUSTED")):
        main(["verify", str(tmp / "s.pdf"), "--data", str(data), *extra])
        out = capsys.readouterr().out
        line = next(ln for ln in out.splitlines() if "signature Signature1" in ln)
        assert _colon_hex(cert.fingerprint_sha256) in line
        assert "valid 20" in line and " to 20" in line and word in line


def test_expired_certificate(made, tmp_path, capsys):
    tmp, data, _, _ = made
    now = dt.datetime.now(dt.UTC)
    old = make_demo_certificate(
        tmp_path / "k", name="Pat Prep", passphrase=PASS, days=30, when=now - dt.timedelta(days=400)
    )
    # studykit refuses to sign with it
    with pytest.raises(StudyInputError, match="expired"):
        sign_report(
            tmp / "r.pdf", tmp_path / "x.pdf", old.p12_path, PASS, role="prepared", name="Pat Prep"
        )
    assert not (tmp_path / "x.pdf").exists()
    # a report signed with it by another tool fails verify, trusted root or not
    _sign_raw(tmp / "r.pdf", tmp_path / "old.pdf", old.p12_path)
    for trust in ([old.cert_path], []):
        res = verify_report(tmp_path / "old.pdf", data=data, trust=trust)
        assert res.exit_code == 1, [c.line() for c in res.checks]
        sig = next(c for c in res.checks if c.item.startswith("signature"))
        assert sig.status == "fail" and "expired" in sig.detail
    # and `report --sign` refuses it with one line, exit 2
    shutil.copy(tmp / "s.study", tmp_path / "s.study")
    import os

    os.environ["SK_FORGERY_PW"] = PASS
    try:
        assert (
            main(
                [
                    "report",
                    str(tmp_path / "s.study"),
                    "-o",
                    str(tmp_path / "rep.pdf"),
                    "--sign",
                    old.p12_path,
                    "--passphrase-env",
                    "SK_FORGERY_PW",
                    "--quiet",
                ]
            )
            == 2
        )
    finally:
        del os.environ["SK_FORGERY_PW"]
    err = capsys.readouterr().err
    assert "expired" in err and len(err.strip().splitlines()) == 1


def test_not_yet_valid_certificate(made, tmp_path):
    tmp, data, _, _ = made
    now = dt.datetime.now(dt.UTC)
    future = make_demo_certificate(
        tmp_path / "k", name="Pat Prep", passphrase=PASS, days=365, when=now + dt.timedelta(days=30)
    )
    with pytest.raises(StudyInputError, match="not yet valid"):
        sign_report(
            tmp / "r.pdf",
            tmp_path / "x.pdf",
            future.p12_path,
            PASS,
            role="prepared",
            name="Pat Prep",
        )
    _sign_raw(tmp / "r.pdf", tmp_path / "future.pdf", future.p12_path)
    res = verify_report(tmp_path / "future.pdf", data=data, trust=[future.cert_path])
    assert res.exit_code == 1
    sig = next(c for c in res.checks if c.item.startswith("signature"))
    assert sig.status == "fail" and "not yet valid" in sig.detail


def test_lookalike_certificate_forgery_is_not_verified(made, tmp_path, capsys):
    tmp, data, _, cert = made
    # the forger makes a self-signed certificate with the genuine signer's name and re-signs
    # a report consistent with the data
    fake = make_demo_certificate(tmp_path / "forger", name="Pat Prep", passphrase=PASS)
    assert fake.subject == cert.subject and fake.fingerprint_sha256 != cert.fingerprint_sha256
    sign_report(
        tmp / "r.pdf",
        tmp_path / "forged.pdf",
        fake.p12_path,
        PASS,
        role="prepared",
        name="Pat Prep",
    )
    code = main(["verify", str(tmp_path / "forged.pdf"), "--data", str(data)])
    out = capsys.readouterr().out
    assert code == 3  # consistent, but the signer is not established: never 0
    assert "VERIFIED:" not in out.replace("NOT VERIFIED", "")
    assert "SIGNER UNTRUSTED" in out and _colon_hex(fake.fingerprint_sha256) in out
    # the genuine signer's certificate exposes it
    res = verify_report(tmp_path / "forged.pdf", data=data, trust=[cert.cert_path])
    assert res.exit_code == 1
    assert any("NOT trusted" in c.detail for c in res.failures)


# -- pages --------------------------------------------------------------------------------------


def _overlay(src: Path, dst: Path, page_index: int, draw) -> None:
    """Draw on one page of a PDF (as an editor would) with a reportlab canvas callback."""
    from reportlab.pdfgen import canvas

    reader = PdfReader(src)
    box = reader.pages[page_index].mediabox
    buf = io.BytesIO()
    c = canvas.Canvas(buf, pagesize=(float(box.width), float(box.height)))
    draw(c, float(box.width), float(box.height))
    c.save()
    stamp = PdfReader(io.BytesIO(buf.getvalue())).pages[0]
    writer = PdfWriter(clone_from=reader)
    writer.pages[page_index].merge_page(stamp)
    with open(dst, "wb") as fh:
        writer.write(fh)


def test_page_whited_out(made, tmp_path):
    tmp, data, _, _ = made
    n_pages = len(PdfReader(tmp / "r.pdf").pages)
    assert n_pages >= 3

    def white(c, w, h):
        c.setFillColorRGB(1, 1, 1)
        c.rect(0, 0, w, h, stroke=0, fill=1)

    _overlay(tmp / "r.pdf", tmp_path / "white.pdf", 2, white)
    res = verify_report(tmp_path / "white.pdf", data=data, allow_unsigned=True)
    assert res.exit_code == 1
    page = next(c for c in res.failures if c.item == "every page")
    assert "page 3" in page.detail and "page 1 " not in page.detail
    assert "drawn over" in page.detail


def test_text_added_to_a_page(made, tmp_path):
    tmp, data, _, _ = made

    def text(c, w, h):
        c.setFont("Helvetica", 9)
        c.drawString(60, 60, "Ppk 2.50 - customer waiver granted")

    _overlay(tmp / "r.pdf", tmp_path / "text.pdf", 1, text)
    res = verify_report(tmp_path / "text.pdf", data=data, allow_unsigned=True)
    assert res.exit_code == 1
    page = next(c for c in res.failures if c.item == "every page")
    assert "page 2 shows text studykit did not print" in page.detail
    assert "customer waiver" in page.detail
    # the check of the cover alone (kept) does not see it
    assert next(c for c in res.checks if c.item == "printed numbers").status == "pass"


def test_annotation_added_to_a_page(made, tmp_path):
    tmp, data, _, _ = made
    writer = PdfWriter(clone_from=PdfReader(tmp / "r.pdf"))
    writer.add_annotation(
        page_number=1, annotation=FreeText(text="Meets criteria", rect=(50, 50, 250, 80))
    )
    with open(tmp_path / "annot.pdf", "wb") as fh:
        writer.write(fh)
    res = verify_report(tmp_path / "annot.pdf", data=data, allow_unsigned=True)
    page = next(c for c in res.failures if c.item == "every page")
    assert "page 2 carries added marks" in page.detail and "FreeText" in page.detail


def test_visible_signature_stamp_is_not_a_page_change(made):
    tmp, data, _, cert = made
    res = verify_report(tmp / "s.pdf", data=data, trust=[cert.cert_path])
    assert res.exit_code == 0, [c.line() for c in res.checks]
    assert next(c for c in res.checks if c.item == "every page").status == "pass"
