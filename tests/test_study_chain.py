"""The study file's hash-chained audit log: forgeries behind studykit's back are named.

Every attack edits the file with raw sqlite3, as anyone with the file could, and (where it
needs to) drops the append-only triggers first. `study show`, `study log`, `report` and
`verify --study` must name the entry or row that breaks the chain and never show the forgery
as valid. The chain's construction (each entry hashes the previous entry's hash and its own
canonical content) is the hash chain of S. Haber and W. S. Stornetta (1991), "How to time-stamp
a digital document", J. Cryptology 3(2); the hash is SHA-256 (FIPS 180-4).
"""

from __future__ import annotations

import hashlib
import json
import shutil
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from studykit.cli import main
from studykit.errors import StudyFileError
from studykit.report.pdf import build_report
from studykit.report.verify import verify_report
from studykit.store import CHAIN_GENESIS, StudyFile
from studykit.study import Characteristic

DEMO = Path(__file__).resolve().parents[1] / "demo_data"


def _study(tmp_path: Path) -> Path:
    path = tmp_path / "s.study"
    sf = StudyFile.create(
        path,
        data=(DEMO / "pump_housing_pilot.csv").read_bytes(),
        filename="pump_housing_pilot.csv",
        title="Chain test",
        characteristics=[Characteristic("bore_diameter", unit="mm", lsl=11.97, usl=12.03)],
        who="A. Ruiz",
    )
    sf.exclude("bore_diameter", "3", reason="setup part", who="A. Ruiz")
    sf.add_comment("looks fine", who="B. Chen")
    sf.add_signoff("B. Chen", role="reviewed", decision="approve")
    return path


def _raw(path: Path, *sql: str, params=()) -> None:
    conn = sqlite3.connect(path)
    for stmt in sql:
        conn.execute(stmt, params if "?" in stmt else ())
    conn.commit()
    conn.close()


def test_intact_chain_and_signoff_carries_head(tmp_path):
    path = _study(tmp_path)
    sf = StudyFile(path)
    chain = sf.check_chain()
    assert chain.ok and chain.entries == 4 and chain.rows > 0
    s = sf.load().signoffs[0]
    # the sign-off signed the head as it was before its own entry (entry 3, the comment)
    assert s.chain_head == f"3:{sf.chain_entry_hash(3)}"
    first = sf.chain_entry_hash(1)
    conn = sqlite3.connect(path)
    assert (
        conn.execute("SELECT prev_hash FROM audit_log WHERE id = 1").fetchone()[0] == CHAIN_GENESIS
    )
    assert conn.execute("SELECT prev_hash FROM audit_log WHERE id = 2").fetchone()[0] == first


def test_forged_signoff_row(tmp_path, capsys):
    path = _study(tmp_path)
    study = StudyFile(path).load()
    _raw(
        path,
        "INSERT INTO signoffs (name, role, decision, comment, at, digest) VALUES "
        "('M. Mallory', 'approved', 'approve', '', '2026-03-05T10:00:00Z', ?)",
        params=(study.content_digest(),),
    )
    # the forged row carries the current digest: replayed alone it would be a valid approval;
    # loading the study (workbook, analyze, report) refuses the file instead
    with pytest.raises(StudyFileError, match="signoffs row 2"):
        StudyFile(path).load()
    chain = StudyFile(path).check_chain()
    assert not chain.ok
    assert "signoffs row 2" in chain.problems[0][1] and "inserted outside" in chain.problems[0][1]
    assert main(["study", "show", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "signoffs row 2" in err[0] and "M. Mallory" in err[0]
    assert main(["study", "log", str(path)]) == 2
    out = capsys.readouterr()
    assert "!! BROKEN: signoffs row 2" in out.out and len(out.err.strip().splitlines()) == 1
    assert main(["report", str(path), "-o", str(tmp_path / "r.pdf"), "--quiet"]) == 2
    assert "altered outside studykit" in capsys.readouterr().err
    assert not (tmp_path / "r.pdf").exists()
    # nobody can sign on top of it either
    with pytest.raises(StudyFileError, match="cannot be signed"):
        StudyFile(path).add_signoff("C. Dore", role="approved", decision="approve")


def test_dropped_trigger_and_deleted_audit_rows(tmp_path, capsys):
    path = _study(tmp_path)
    _raw(path, "DROP TRIGGER audit_log_no_delete", "DELETE FROM audit_log WHERE id = 2")
    problems = [p for _, p in StudyFile(path).check_chain().problems]
    # the next entry no longer follows, the rows entry 2 wrote are orphans, the guard is gone
    assert any("audit entry 3" in p and "does not follow entry 1" in p for p in problems)
    assert any(p.startswith("decisions row 1") and "in no audit entry" in p for p in problems)
    assert any("audit_log_no_delete" in p for p in problems)
    assert main(["study", "show", str(path)]) == 2
    # deleting the last entry and its row (a sign-off) is found too: the row's guard is gone
    path2 = _study(tmp_path / "b" if (tmp_path / "b").mkdir() is None else tmp_path)
    _raw(
        path2,
        "DROP TRIGGER audit_log_no_delete",
        "DROP TRIGGER signoffs_no_delete",
        "DELETE FROM audit_log WHERE id = 4",
    )
    problems = [p for _, p in StudyFile(path2).check_chain().problems]
    assert any(p.startswith("signoffs row 1") for p in problems)
    capsys.readouterr()


def test_edited_row(tmp_path):
    path = _study(tmp_path)
    _raw(
        path,
        "DROP TRIGGER decisions_no_update",
        "UPDATE decisions SET reason = 'gauge recalibrated' WHERE id = 1",
        "CREATE TRIGGER decisions_no_update BEFORE UPDATE ON decisions BEGIN SELECT "
        "RAISE(ABORT, 'x'); END",
    )
    chain = StudyFile(path).check_chain()
    assert len(chain.problems) == 1
    entry, problem = chain.problems[0]
    assert entry == 2 and problem.startswith("decisions row 1")
    assert "written with audit entry 2, was changed outside studykit" in problem
    # an edited audit entry is named by its id
    path2 = tmp_path / "c.study"
    shutil.copy(_study(tmp_path / "x" if (tmp_path / "x").mkdir() is None else tmp_path), path2)
    _raw(
        path2,
        "DROP TRIGGER audit_log_no_update",
        "UPDATE audit_log SET why = 'nothing to see' WHERE id = 2",
    )
    chain = StudyFile(path2).check_chain()
    assert chain.problems[0][0] == 2 and "was changed after it was written" in chain.problems[0][1]


def test_rewritten_chain_is_caught_by_the_report_chain_head(tmp_path):
    """A forger who recomputes every hash makes the file consistent in itself; the chain head
    recorded in the (signed) report then no longer matches."""
    from studykit.store import _entry_hash

    path = _study(tmp_path)
    build_report(path, tmp_path / "r.pdf")
    assert verify_report(tmp_path / "r.pdf", study=path, allow_unsigned=True).exit_code == 0
    conn = sqlite3.connect(path)
    conn.execute("DROP TRIGGER audit_log_no_update")
    conn.execute("UPDATE audit_log SET who = 'Someone Else' WHERE id = 1")
    prev = CHAIN_GENESIS
    cur = conn.execute("SELECT * FROM audit_log ORDER BY id")
    names = [d[0] for d in cur.description]
    for row in [dict(zip(names, r, strict=True)) for r in cur.fetchall()]:
        row["prev_hash"] = prev
        h = _entry_hash(row)
        conn.execute(
            "UPDATE audit_log SET prev_hash = ?, entry_hash = ? WHERE id = ?", (prev, h, row["id"])
        )
        prev = h
    conn.execute(
        "CREATE TRIGGER audit_log_no_update BEFORE UPDATE ON audit_log BEGIN SELECT "
        "RAISE(ABORT, 'x'); END"
    )
    conn.commit()
    conn.close()
    problems = [p for _, p in StudyFile(path).check_chain().problems]
    # the sign-off's own chain head gives it away inside the file ...
    assert len(problems) == 1 and "signed chain head" in problems[0]
    # ... and the report's chain head outside it
    res = verify_report(tmp_path / "r.pdf", study=path, allow_unsigned=True)
    assert res.exit_code == 1
    assert any(c.item in ("study audit chain", "report chain head") for c in res.failures)


def _as_schema_2(path: Path) -> None:
    """Turn a schema-3 file back into the schema-2 layout (no chain columns), as older
    studykit versions wrote it."""
    conn = sqlite3.connect(path)
    conn.execute("DROP TRIGGER audit_log_no_update")
    conn.execute("DROP TRIGGER signoffs_no_update")
    for col in ("prev_hash", "rows_json", "entry_hash"):
        conn.execute(f"ALTER TABLE audit_log DROP COLUMN {col}")
    conn.execute("ALTER TABLE signoffs DROP COLUMN chain_head")
    for t in ("audit_log", "signoffs"):
        conn.execute(
            f"CREATE TRIGGER {t}_no_update BEFORE UPDATE ON {t} BEGIN SELECT "
            f"RAISE(ABORT, '{t} is append-only: entries cannot be changed'); END"
        )
    conn.execute("PRAGMA user_version = 2")
    conn.commit()
    conn.close()


def test_old_file_migrates_to_a_chain(tmp_path):
    path = _study(tmp_path)
    before = StudyFile(path).load().to_dict()
    _as_schema_2(path)
    conn = sqlite3.connect(path)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == 2
    conn.close()
    sf = StudyFile(path)  # migrates
    assert sf.schema_version == 3
    chain = sf.check_chain()
    assert chain.ok and chain.entries == 5
    assert sf.audit_log()[-1].what == "migrate file from schema 2 to 3"
    after = sf.load().to_dict()
    for so in before["signoffs"]:  # an old file's sign-offs carry no chain head
        so["chain_head"] = ""
    assert after == before
    # from now on a forgery in the old part is caught
    _raw(path, "DROP TRIGGER comments_no_update", "UPDATE comments SET text = 'x'")
    assert not StudyFile(path).check_chain().ok


def test_demo_study_has_an_intact_chain():
    chain = StudyFile(DEMO / "pump_housing_pilot.study").check_chain()
    assert chain.ok, chain.problems


# -- corrupted files ---------------------------------------------------------------------------


def _corpus(base: bytes, rng: np.random.Generator, n: int) -> list[tuple[str, bytes]]:
    """Seeded damage to a study file: flipped bytes, zeroed and shuffled pages, truncation."""
    out = []
    page = 4096
    pages = len(base) // page
    for i in range(n):
        blob = bytearray(base)
        kind = i % 5
        if kind == 0:  # a few random bytes flipped (header kept)
            for pos in rng.integers(100, len(blob), size=int(rng.integers(1, 20))):
                blob[pos] ^= int(rng.integers(1, 256))
        elif kind == 1:  # one page zeroed
            p = int(rng.integers(1, pages))
            blob[p * page : (p + 1) * page] = bytes(page)
        elif kind == 2:  # truncated
            blob = blob[: int(rng.integers(200, len(blob)))]
        elif kind == 3:  # one page overwritten with random bytes
            p = int(rng.integers(0, pages))
            blob[p * page + (100 if p == 0 else 0) : (p + 1) * page] = rng.integers(
                0, 256, size=page - (100 if p == 0 else 0), dtype=np.uint8
            ).tobytes()
        else:  # two pages swapped
            a, b = (int(x) for x in rng.choice(np.arange(1, pages), size=2, replace=False))
            pa, pb = bytes(blob[a * page : (a + 1) * page]), bytes(blob[b * page : (b + 1) * page])
            blob[a * page : (a + 1) * page], blob[b * page : (b + 1) * page] = pb, pa
        out.append((f"damaged_{i:03d}_kind{kind}.study", bytes(blob)))
    return out


def test_corrupted_files_give_one_line_and_exit_2(tmp_path, capsys):
    # invalid UTF-8 in a text column: once a traceback (UnicodeDecodeError) while reading
    bad_text = tmp_path / "bad_text.study"
    shutil.copy(_study(tmp_path), bad_text)
    _raw(
        bad_text,
        "DROP TRIGGER meta_no_update",
        "UPDATE meta SET value = CAST(X'FFFE41' AS TEXT) WHERE key = 'title'",
    )
    files = [("bad_text.study", bad_text.read_bytes())]
    # a seeded corpus of damaged copies of the demo study file
    base = (DEMO / "pump_housing_pilot.study").read_bytes()
    files += _corpus(base, np.random.default_rng(20261202), 40)
    # damaged files of the older schema: the migration meets the damage
    old = tmp_path / "old.study"
    shutil.copy(DEMO / "pump_housing_pilot.study", old)
    _as_schema_2(old)
    files += [
        ("old_" + n, b) for n, b in _corpus(old.read_bytes(), np.random.default_rng(20261203), 15)
    ]
    outcomes = {}
    for name, blob in files:
        p = tmp_path / "corpus" / name
        p.parent.mkdir(exist_ok=True)
        p.write_bytes(blob)
        for argv in (
            ["study", "show", str(p)],
            ["study", "log", str(p)],
            ["study", "comment", str(p), "still readable?", "--who", "T"],
        ):
            shutil.copy(p, tmp_path / "work.study")  # each command on a fresh copy
            argv = [a if a != str(p) else str(tmp_path / "work.study") for a in argv]
            code = main(argv)  # an exception here is the failure this test looks for
            out = capsys.readouterr()
            assert code in (0, 2), (name, argv, code, out.err)
            if code == 2:
                lines = out.err.strip().splitlines()
                assert len(lines) == 1 and "Traceback" not in out.err, (name, out.err)
            outcomes[(name, argv[1])] = code
    assert outcomes[("bad_text.study", "show")] == 2
    # most damage is found (the rest hit unused space in the file)
    damaged = [v for (n, cmd), v in outcomes.items() if cmd == "show" and n != "bad_text.study"]
    assert sum(1 for v in damaged if v == 2) >= len(damaged) // 2


def test_chain_hash_is_sha256_of_canonical_row():
    """The row hash is SHA-256 (FIPS 180-4) of canonical JSON; checked against hashlib on a
    row written by hand."""
    from studykit.store import _row_hash

    row = {"id": 1, "name": "A", "blob": b"xyz", "gone": None}
    text = json.dumps(
        {
            "format": "studykit-chain-1",
            "table": "t",
            "row": {
                "blob": {"blob_sha256": hashlib.sha256(b"xyz").hexdigest(), "bytes": 3},
                "id": 1,
                "name": "A",
            },
        },
        sort_keys=True,
        separators=(",", ":"),
    )
    assert _row_hash("t", row) == hashlib.sha256(text.encode()).hexdigest()


# -- certificate signatures on sign-offs --------------------------------------------------------


def _reseal(path: Path) -> None:
    """What a forger with the source code can do: recompute every row hash and the whole chain
    after editing rows."""
    from studykit.store import _entry_hash, _key_columns, _row_hash, _table_rows

    conn = sqlite3.connect(path)
    conn.execute("DROP TRIGGER audit_log_no_update")
    rows = {}
    for (t,) in conn.execute(
        "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT "
        "LIKE 'sqlite_%' AND name != 'audit_log'"
    ).fetchall():
        keys = _key_columns(conn, t)
        for r in _table_rows(conn, t, after=0):
            r.pop("_sk_rowid_")
            rows[(t, json.dumps(r[keys[0]]))] = _row_hash(t, r)
    cur = conn.execute("SELECT * FROM audit_log ORDER BY id")
    names = [d[0] for d in cur.description]
    prev = CHAIN_GENESIS
    for entry in [dict(zip(names, r, strict=True)) for r in cur.fetchall()]:
        refs = json.loads(entry["rows_json"])
        for ref in refs:
            ref["sha256"] = rows[(ref["table"], json.dumps(ref["key"]))]
        entry["rows_json"] = json.dumps(refs, sort_keys=True, separators=(",", ":"))
        entry["prev_hash"] = prev
        h = _entry_hash(entry)
        conn.execute(
            "UPDATE audit_log SET rows_json = ?, prev_hash = ?, entry_hash = ? WHERE id = ?",
            (entry["rows_json"], prev, h, entry["id"]),
        )
        prev = h
    conn.execute(
        "CREATE TRIGGER audit_log_no_update BEFORE UPDATE ON audit_log BEGIN SELECT "
        "RAISE(ABORT, 'x'); END"
    )
    conn.commit()
    conn.close()


def test_signoff_with_a_certificate_signature(tmp_path, capsys, monkeypatch):
    import datetime as dt

    from studykit.report.signing import make_demo_certificate

    pw = "test-only-passphrase"  # made at test time
    path = _study(tmp_path)
    cert = make_demo_certificate(tmp_path / "k", name="Q. Lead", passphrase=pw)
    monkeypatch.setenv("SK_CHAIN_PW", pw)
    assert (
        main(
            [
                "study",
                "sign",
                str(path),
                "--role",
                "approved",
                "--decision",
                "approve",
                "--who",
                "Q. Lead",
                "--p12",
                cert.p12_path,
                "--passphrase-env",
                "SK_CHAIN_PW",
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    fp = cert.fingerprint_sha256.upper()
    colon = ":".join(fp[i : i + 2] for i in range(0, len(fp), 2))
    assert "certificate signature: valid" in out and colon in out
    sigs = StudyFile(path).signoff_signatures()
    assert [s.status for s in sigs] == ["none", "valid"]
    assert main(["study", "show", str(path)]) == 0
    assert f"certificate signature valid: {sigs[1].subject}" in capsys.readouterr().out
    # a forger edits the signed sign-off and recomputes every hash: the chain holds again,
    # but the certificate signature does not
    _raw(
        path,
        "DROP TRIGGER signoffs_no_update",
        "UPDATE signoffs SET comment = 'approved with waiver' WHERE id = 2",
        "CREATE TRIGGER signoffs_no_update BEFORE UPDATE ON signoffs BEGIN SELECT "
        "RAISE(ABORT, 'x'); END",
    )
    _reseal(path)
    problems = [p for _, p in StudyFile(path).check_chain().problems]
    assert len(problems) == 1 and "certificate signature of sign-off #2" in problems[0]
    assert StudyFile(path).signoff_signatures()[1].status == "INVALID"
    assert main(["study", "show", str(path)]) == 2
    capsys.readouterr()
    # an expired certificate is refused, nothing is written
    path2 = _study(tmp_path / "b" if (tmp_path / "b").mkdir() is None else tmp_path)
    old = make_demo_certificate(
        tmp_path / "old",
        name="Q. Lead",
        passphrase=pw,
        days=10,
        when=dt.datetime.now(dt.UTC) - dt.timedelta(days=100),
    )
    n = len(StudyFile(path2).audit_log())
    assert (
        main(
            [
                "study",
                "sign",
                str(path2),
                "--role",
                "approved",
                "--decision",
                "approve",
                "--who",
                "Q. Lead",
                "--p12",
                old.p12_path,
                "--passphrase-env",
                "SK_CHAIN_PW",
            ]
        )
        == 2
    )
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not valid now" in err[0]
    assert len(StudyFile(path2).audit_log()) == n
