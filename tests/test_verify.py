"""studykit verify: signatures, digests and every number; tampering is named."""

from __future__ import annotations

import json
import logging
from pathlib import Path

import pytest

from studykit.cli import main
from studykit.errors import StudyInputError
from studykit.report.pdf import build_report
from studykit.report.signing import make_demo_certificate, sign_report
from studykit.report.verify import compare_numbers, verify_report
from studykit.store import StudyFile
from studykit.study import Characteristic

DEMO = Path(__file__).resolve().parents[1] / "demo_data"
PASS = "test-only-passphrase"  # made at test time


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    logging.getLogger("pyhanko").setLevel(logging.CRITICAL)
    tmp = tmp_path_factory.mktemp("verify")
    data = tmp / "pump_housing_pilot.csv"
    data.write_bytes((DEMO / "pump_housing_pilot.csv").read_bytes())
    study = tmp / "s.study"
    StudyFile.create(
        study,
        data=data.read_bytes(),
        filename=data.name,
        title="Verify test",
        characteristics=[
            Characteristic("bore_diameter", unit="mm", lsl=11.97, usl=12.03),
            Characteristic("flange_thickness", unit="mm", lsl=7.9, usl=8.1),
        ],
        who="tester",
    )
    StudyFile(study).exclude("flange_thickness", "17", reason="chipped insert", who="tester")
    build_report(study, tmp / "r.pdf")
    cert = make_demo_certificate(tmp / "keys", name="Pat Prep", passphrase=PASS)
    sign_report(tmp / "r.pdf", tmp / "s.pdf", cert.p12_path, PASS, role="prepared", name="Pat Prep")
    return tmp, data, study, cert


def test_signed_report_verifies_against_study_and_data(made):
    tmp, data, study, cert = made
    for kw in ({"study": study}, {"data": data}):
        res = verify_report(tmp / "s.pdf", trust=[cert.cert_path], **kw)
        assert res.ok, [c.line() for c in res.checks]
        assert res.signed and res.numbers_checked > 100
        assert "VERIFIED: signed" in res.summary()
        items = {c.item.split(" (")[0] for c in res.checks}
        assert {
            "signature Signature1",
            "data digest",
            "content digest",
            "numbers of bore_diameter",
            "numbers of flange_thickness",
        } <= items


def test_unsigned_report_is_not_evidence_unless_allowed(made):
    tmp, data, _, _ = made
    res = verify_report(tmp / "r.pdf", data=data)
    assert not res.ok and not res.signed and res.status == "not_evidence"
    assert res.exit_code == 1 and [c.item for c in res.failures] == ["signatures"]
    assert res.summary().startswith("NOT EVIDENCE: unsigned")
    res = verify_report(tmp / "r.pdf", data=data, allow_unsigned=True)
    assert res.ok and res.status == "consistent_unsigned" and res.exit_code == 0
    assert any(c.status == "info" and "unsigned" in c.detail for c in res.checks)
    assert res.summary().startswith("CONSISTENT BUT UNSIGNED")
    assert next(c for c in res.checks if c.item == "every page").status == "pass"


def test_one_changed_byte_of_the_pdf_is_named(made, tmp_path):
    tmp, data, _, cert = made
    blob = bytearray((tmp / "s.pdf").read_bytes())
    blob[len(blob) // 2] ^= 0x01
    (tmp_path / "bad.pdf").write_bytes(bytes(blob))
    res = verify_report(tmp_path / "bad.pdf", data=data, trust=[cert.cert_path])
    assert not res.ok
    fails = [c for c in res.failures if c.item.startswith("signature Signature1")]
    assert fails and "NOT INTACT" in fails[0].detail


def test_one_changed_value_of_the_data_is_named(made, tmp_path):
    tmp, data, _, _ = made
    text = data.read_text()
    lines = text.splitlines()
    # row 2 (first data row): change the bore diameter 12.002 -> 12.012
    assert lines[1].split(",")[3] == "12.002"
    cells = lines[1].split(",")
    cells[3] = "12.012"
    lines[1] = ",".join(cells)
    bad = tmp_path / data.name
    bad.write_text("\n".join(lines) + "\n")
    res = verify_report(tmp / "s.pdf", data=bad)
    assert not res.ok
    failed = {c.item for c in res.failures}
    assert {"data digest", "content digest", "numbers of bore_diameter"} <= failed
    assert "numbers of flange_thickness" not in failed
    detail = next(c.detail for c in res.failures if c.item == "numbers of bore_diameter")
    assert "mean: report" in detail or "capability" in detail


def test_changed_decision_is_named(made, tmp_path):
    tmp, _, study, _ = made
    other = tmp_path / "s.study"
    other.write_bytes(study.read_bytes())
    StudyFile(other).exclude("bore_diameter", "2", reason="late change", who="tester")
    res = verify_report(tmp / "s.pdf", study=other)
    failed = {c.item for c in res.failures}
    assert "content digest" in failed and "numbers of bore_diameter" in failed
    assert "data digest" not in failed


def test_without_data_numbers_are_not_checked(made):
    tmp, _, _, _ = made
    res = verify_report(tmp / "s.pdf")
    assert not res.ok and not res.failures
    assert any(c.status == "skip" for c in res.checks)


def test_compare_numbers_tolerance():
    # relative tolerance 1e-9: a printing-level difference passes, a real one is named
    n, diffs = compare_numbers({"x": [1.0, None, "a"]}, {"x": [1.0 + 1e-10, None, "a"]})
    assert (n, diffs) == (1, [])
    n, diffs = compare_numbers({"x": 1.0}, {"x": 1.00001})
    assert n == 1 and diffs == ["x: report 1, recomputed 1.00001"]
    _, diffs = compare_numbers({"a": 1}, {"b": 1})
    assert diffs == ["a: not recomputed", "b: not in the report"]


def test_cli_verify_exit_status(made, capsys, tmp_path):
    tmp, data, _, cert = made
    assert main(["verify", str(tmp / "s.pdf"), "--data", str(data), "--trust", cert.cert_path]) == 0
    out = capsys.readouterr().out
    assert "PASS  signature Signature1" in out and "VERIFIED" in out
    # without --trust the signer is not established: exit 3, never "verified"
    assert main(["verify", str(tmp / "s.pdf"), "--data", str(data), "--json"]) == 3
    out = json.loads(capsys.readouterr().out)
    assert out["ok"] is False and out["consistent"] is True
    assert out["status"] == "signer_not_established" and out["exit_code"] == 3
    other = make_demo_certificate(tmp_path, name="Someone Else", passphrase=PASS)
    assert (
        main(["verify", str(tmp / "s.pdf"), "--data", str(data), "--trust", other.cert_path]) == 1
    )
    assert "NOT trusted" in capsys.readouterr().out
    assert main(["verify", str(tmp_path / "none.pdf")]) == 2
    with pytest.raises(StudyInputError, match="not both"):
        verify_report(tmp / "s.pdf", data=data, study=tmp / "s.study")
