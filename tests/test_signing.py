"""PAdES signatures: several signers in turn, each intact; demo certificates say DEMO."""

from __future__ import annotations

import logging
import shutil
from pathlib import Path

import pytest
from pyhanko.keys import load_cert_from_pemder
from pyhanko.pdf_utils.reader import PdfFileReader
from pyhanko.sign.validation import validate_pdf_signature
from pyhanko_certvalidator import ValidationContext

from studykit.cli import main
from studykit.errors import StudyInputError
from studykit.report.pdf import build_report
from studykit.report.signing import (
    DEMO_ORGANISATION,
    make_demo_certificate,
    outside_event_loop,
    sign_report,
)
from studykit.store import StudyFile
from studykit.study import Characteristic

DEMO = Path(__file__).resolve().parents[1] / "demo_data"
PASS = "test-only-passphrase"  # made at test time, never stored in the repo


@pytest.fixture(scope="module")
def signed(tmp_path_factory):
    logging.getLogger("pyhanko").setLevel(logging.CRITICAL)
    tmp = tmp_path_factory.mktemp("sign")
    study = tmp / "s.study"
    StudyFile.create(
        study,
        data=(DEMO / "pump_housing_pilot.csv").read_bytes(),
        filename="pump_housing_pilot.csv",
        title="Signing test",
        characteristics=[Characteristic("bore_diameter", unit="mm", lsl=11.97, usl=12.03)],
        who="tester",
    )
    build_report(study, tmp / "r.pdf")
    prep = make_demo_certificate(tmp / "keys", name="Pat Prep", passphrase=PASS)
    appr = make_demo_certificate(tmp / "keys", name="Avery Approver", passphrase=PASS)
    s1 = sign_report(
        tmp / "r.pdf", tmp / "s1.pdf", prep.p12_path, PASS, role="prepared", name="Pat Prep"
    )
    s2 = sign_report(
        tmp / "s1.pdf", tmp / "s2.pdf", appr.p12_path, PASS, role="approved", name="Avery Approver"
    )
    return tmp, study, prep, appr, s1, s2


def _statuses(pdf: Path, roots):
    vc = ValidationContext(trust_roots=[load_cert_from_pemder(r) for r in roots])
    with open(pdf, "rb") as f:
        # pyHanko runs its own event loop; outside_event_loop keeps that working when a loop
        # already runs in this thread (the browser tests leave one behind)
        return [
            (s.field_name, outside_event_loop(validate_pdf_signature, s, vc))
            for s in PdfFileReader(f).embedded_signatures
        ]


def test_demo_certificate_is_marked_demo(signed):
    _, _, prep, _, _, _ = signed
    assert DEMO_ORGANISATION in prep.subject and "not for production" in prep.subject
    cert = load_cert_from_pemder(prep.cert_path)
    assert "DEMO" in cert.subject.human_friendly
    assert Path(prep.p12_path).stat().st_mode & 0o077 == 0


def test_successive_signatures_all_validate(signed):
    tmp, _, prep, appr, s1, s2 = signed
    assert (s1.field_name, s2.field_name) == ("Signature1", "Signature2")
    assert s1.reason == "prepared: Pat Prep" and s2.reason == "approved: Avery Approver"
    assert s1.visible and s2.visible
    st = _statuses(tmp / "s2.pdf", [prep.cert_path, appr.cert_path])
    assert [n for n, _ in st] == ["Signature1", "Signature2"]
    for _, status in st:
        assert status.intact and status.valid and status.trusted and status.bottom_line
    assert st[1][1].summary() == "INTACT:TRUSTED,UNTOUCHED"


def test_one_flipped_byte_breaks_the_signature(signed, tmp_path):
    tmp, _, prep, appr, _, _ = signed
    data = bytearray((tmp / "s2.pdf").read_bytes())
    data[len(data) // 3] ^= 0x01
    bad = tmp_path / "bad.pdf"
    bad.write_bytes(bytes(data))
    st = _statuses(bad, [prep.cert_path, appr.cert_path])
    assert any(not s.intact or not s.bottom_line for _, s in st)


def test_untrusted_without_root(signed):
    tmp, _, _, _, _, _ = signed
    st = _statuses(tmp / "s2.pdf", [])
    assert all(s.intact and not s.trusted for _, s in st)


def test_signing_errors_are_clear(signed, tmp_path):
    tmp, _, prep, _, _, _ = signed
    with pytest.raises(StudyInputError, match="wrong passphrase"):
        sign_report(
            tmp / "r.pdf", tmp_path / "x.pdf", prep.p12_path, "not-it", role="prepared", name="X"
        )
    with pytest.raises(StudyInputError, match="`role` must not be empty"):
        sign_report(tmp / "r.pdf", tmp_path / "x.pdf", prep.p12_path, PASS, role=" ", name="X")
    with pytest.raises(StudyInputError, match="does not exist"):
        sign_report(
            tmp / "r.pdf",
            tmp_path / "x.pdf",
            tmp_path / "none.p12",
            PASS,
            role="prepared",
            name="X",
        )
    with pytest.raises(StudyInputError, match="`passphrase` must not be empty"):
        make_demo_certificate(tmp_path, passphrase="")


def test_cli_keygen_report_sign(signed, tmp_path, monkeypatch, capsys):
    _, study, _, _, _, _ = signed
    shutil.copy(study, tmp_path / "s.study")
    monkeypatch.setenv("SK_TEST_PW", PASS)
    assert (
        main(
            [
                "keygen",
                "--demo",
                "-o",
                str(tmp_path / "k"),
                "--name",
                "Rita Review",
                "--passphrase-env",
                "SK_TEST_PW",
            ]
        )
        == 0
    )
    assert "DEMO certificate" in capsys.readouterr().out
    p12 = tmp_path / "k" / "Rita_Review.p12"
    assert (
        main(
            [
                "report",
                str(tmp_path / "s.study"),
                "-o",
                str(tmp_path / "r.pdf"),
                "--sign",
                str(p12),
                "--role",
                "reviewed",
                "--passphrase-env",
                "SK_TEST_PW",
                "--quiet",
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    assert "Signature1" in out and "reviewed: Rita Review" in out
    # a second signer on the same study state adds to the signed PDF (never drops the first)
    assert (
        main(
            [
                "report",
                str(tmp_path / "s.study"),
                "-o",
                str(tmp_path / "r.pdf"),
                "--sign",
                str(p12),
                "--role",
                "approved",
                "--name",
                "Rita Review",
                "--passphrase-env",
                "SK_TEST_PW",
                "--quiet",
            ]
        )
        == 0
    )
    assert "Signature2" in capsys.readouterr().out
    with open(tmp_path / "r.pdf", "rb") as f:
        assert len(PdfFileReader(f).embedded_signatures) == 2
    assert (
        main(["report", str(tmp_path / "s.study"), "-o", str(tmp_path / "r.pdf"), "--quiet"]) == 2
    )
    assert "never overwritten" in capsys.readouterr().err
    # after a change to the study, the signed PDF is not overwritten
    StudyFile(tmp_path / "s.study").exclude("bore_diameter", "4", reason="late", who="t")
    assert (
        main(
            [
                "report",
                str(tmp_path / "s.study"),
                "-o",
                str(tmp_path / "r.pdf"),
                "--sign",
                str(p12),
                "--passphrase-env",
                "SK_TEST_PW",
                "--quiet",
            ]
        )
        == 2
    )
    assert "never overwritten" in capsys.readouterr().err
    monkeypatch.delenv("SK_TEST_PW")
    assert (
        main(
            [
                "report",
                str(tmp_path / "s.study"),
                "-o",
                str(tmp_path / "r2.pdf"),
                "--sign",
                str(p12),
                "--passphrase-env",
                "SK_TEST_PW",
                "--quiet",
            ]
        )
        == 2
    )
    assert "SK_TEST_PW" in capsys.readouterr().err
    assert not (tmp_path / "r2.pdf").exists()  # refused before any work


def test_signature_count_with_and_without_signatures(signed):
    # the quick answer for a file without /ByteRange must agree with pyHanko's own count
    # (PdfFileReader.embedded_signatures) on unsigned, once- and twice-signed reports
    from studykit.report.signing import signature_count

    tmp = signed[0]
    for name, expected in (("r.pdf", 0), ("s1.pdf", 1), ("s2.pdf", 2)):
        data = (tmp / name).read_bytes()
        with open(tmp / name, "rb") as f:
            assert len(PdfFileReader(f, strict=False).embedded_signatures) == expected
        assert signature_count(data) == expected
