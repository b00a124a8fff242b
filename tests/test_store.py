"""The study file: round trip, append-only log, crash safety, concurrency, schema versions, lock."""

from __future__ import annotations

import hashlib
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time

import pytest

from studykit.errors import StudyFileError, StudyInputError
from studykit.store import APPLICATION_ID, MIGRATIONS, SCHEMA_VERSION, StudyFile, _apply_migrations
from studykit.study import Characteristic, Criteria, Decision

DATA = b"subgroup,bore [mm],runout [mm]\n1,12.001,0.010\n2,11.999,0.012\n3,12.002,0.009\n"
CHARS = [
    Characteristic("bore", unit="mm", lsl=11.97, usl=12.03, target=12.0, safety_critical=True),
    Characteristic("runout", unit="mm", usl=0.05),
]


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    StudyFile.create(
        path,
        data=DATA,
        filename="pilot.csv",
        title="Pilot lot",
        part="BW-2207",
        supplier="Example supplier",
        characteristics=CHARS,
        criteria={"bore": Criteria(index="cpk", threshold=1.33)},
        who="A. Ruiz",
    )
    return path


def test_round_trip(study_path):
    sf = StudyFile(study_path)
    assert sf.schema_version == SCHEMA_VERSION == len(MIGRATIONS)
    sf.exclude("bore", 2, reason="setup part", who="A. Ruiz")
    sf.append_decision(
        Decision(
            "runout",
            "set_model",
            reason="bounded at zero, skewed",
            who="A. Ruiz",
            payload={"model": "lognormal"},
        )
    )
    sf.update_spec("runout", usl=0.06, who="B. Chen", reason="drawing rev C")
    sf.update_criteria(
        "runout",
        Criteria(index="ppk", threshold=1.33),
        who="B. Chen",
        reason="customer requirement",
    )
    sf.add_comment("Gauge study done on 3 March.", who="B. Chen", characteristic="bore")
    study = StudyFile(study_path).load()
    assert study.title == "Pilot lot" and study.part == "BW-2207"
    assert study.data == DATA and study.data_sha256 == hashlib.sha256(DATA).hexdigest()
    assert study.characteristics["bore"] == CHARS[0]
    assert study.characteristics["runout"].usl == 0.06
    assert study.criteria_for("bore") == Criteria(index="cpk", threshold=1.33)
    assert study.criteria_for("runout").threshold == 1.33
    assert list(study.excluded_subgroups("bore")) == ["2"]
    assert study.model_for("runout") == "lognormal"
    assert [c.text for c in study.comments] == ["Gauge study done on 3 March."]
    # the file's state equals the same changes made in memory
    assert study.content_digest() == study.content_digest()
    whats = [e.what for e in sf.audit_log()]
    assert whats[0] == "create study 'Pilot lot' from 'pilot.csv'"
    assert whats[1] == "remove subgroup 2 of 'bore'"
    assert "change specification of 'runout': usl 0.05 -> 0.06" in whats
    assert sf.audit_log()[1].why == "setup part"


def test_create_refuses_existing_file_and_bad_specs(study_path, tmp_path):
    with pytest.raises(StudyFileError, match="already exists"):
        StudyFile.create(study_path, data=DATA, filename="x.csv", title="t", characteristics=CHARS)
    with pytest.raises(StudyInputError, match=r"`usl` \(1\) must be greater than `lsl` \(2\)"):
        StudyFile.create(
            tmp_path / "new.study",
            data=DATA,
            filename="x.csv",
            title="t",
            characteristics=[Characteristic("x", lsl=2, usl=1)],
        )
    assert not (tmp_path / "new.study").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["pilot.study"]  # no leftovers


def test_missing_and_foreign_files(tmp_path):
    with pytest.raises(StudyFileError, match="does not exist"):
        StudyFile(tmp_path / "nope.study")
    csv = tmp_path / "data.csv"
    csv.write_bytes(DATA)
    with pytest.raises(StudyFileError, match="not a studykit study file .*not an SQLite database"):
        StudyFile(csv)
    other = tmp_path / "other.db"
    conn = sqlite3.connect(other)
    conn.execute("CREATE TABLE t (x)")
    conn.commit()
    conn.close()
    with pytest.raises(StudyFileError, match="SQLite database but not a studykit study file"):
        StudyFile(other)


def test_newer_schema_refused(study_path):
    conn = sqlite3.connect(study_path)
    conn.execute("PRAGMA user_version = 9")
    conn.commit()
    conn.close()
    expected = (
        rf"made by a newer studykit \(schema 9, this one reads up to {SCHEMA_VERSION}\): "
        "update studykit"
    )
    with pytest.raises(StudyFileError, match=expected):
        StudyFile(study_path)


def test_tampered_data_copy_detected(study_path):
    conn = sqlite3.connect(study_path)
    # the triggers refuse the edit ...
    with pytest.raises(sqlite3.IntegrityError, match="data_files is append-only"):
        conn.execute("UPDATE data_files SET content = ?", (DATA.replace(b"12.001", b"12.000"),))
    # ... so a tamperer has to drop them first; the SHA-256 check still catches it
    conn.execute("DROP TRIGGER data_files_no_update")
    conn.execute("UPDATE data_files SET content = ?", (DATA.replace(b"12.001", b"12.000"),))
    conn.commit()
    conn.close()
    with pytest.raises(StudyFileError, match="does not match its recorded SHA-256"):
        StudyFile(study_path).load()


@pytest.mark.parametrize("table", ["audit_log", "decisions", "signoffs", "comments", "results"])
def test_log_tables_cannot_be_updated_or_deleted(study_path, table):
    sf = StudyFile(study_path)
    sf.exclude("bore", 1, reason="setup", who="A")
    sf.add_signoff("P. Novak", role="reviewed", decision="approve")
    sf.add_comment("c", who="A")
    sf.attach_result("gauge_rr", "bore", {"ndc": 7}, who="A")
    conn = sqlite3.connect(study_path)
    with pytest.raises(
        sqlite3.IntegrityError, match=f"{table} is append-only: entries cannot be changed"
    ):
        conn.execute(f"UPDATE {table} SET id = id + 100")
    with pytest.raises(
        sqlite3.IntegrityError, match=f"{table} is append-only: entries cannot be deleted"
    ):
        conn.execute(f"DELETE FROM {table}")
    conn.close()
    assert len(sf.audit_log()) == 5


def test_signoff_voided_after_later_change(study_path):
    sf = StudyFile(study_path)
    s = sf.add_signoff("P. Novak", role="reviewed", decision="approve", comment="checked")
    assert s.digest == sf.load().content_digest()
    assert [st.state for st in sf.load().signoff_state()] == ["valid"]
    sf.exclude("bore", 3, reason="probe not zeroed", who="A. Ruiz")
    (state,) = sf.load().signoff_state()
    assert state.state == "voided" and "changed after signing" in state.why


def test_approved_study_is_locked_until_override(study_path):
    sf = StudyFile(study_path)
    sf.add_signoff("P. Novak", role="reviewed", decision="approve")
    sf.add_signoff("M. Brandt", role="approved", decision="approve")
    assert sf.load().is_locked
    with pytest.raises(StudyFileError, match="approved .*locked"):
        sf.exclude("bore", 1, reason="setup", who="A")
    with pytest.raises(StudyFileError, match="approved .*locked"):
        sf.update_spec("bore", usl=12.05, who="A", reason="rev C")
    with pytest.raises(StudyFileError, match="needs a non-empty reason"):
        sf.exclude("bore", 1, reason="setup", who="A", override_lock=True)
    n_before = len(sf.load().decisions)
    # a comment or a note is still welcome
    sf.add_comment("Released to production.", who="M. Brandt")
    sf.append_decision(Decision(None, "note", who="M. Brandt", reason="PPAP submitted"))
    assert sf.load().is_locked and len(sf.load().decisions) == n_before + 1
    sf.update_spec(
        "bore",
        usl=12.05,
        who="A. Ruiz",
        reason="drawing rev C",
        override_lock=True,
        override_reason="customer released drawing rev C",
    )
    study = sf.load()
    assert not study.is_locked and study.characteristics["bore"].usl == 12.05
    assert len(study.signoffs) == 2  # both sign-offs stay on file ...
    states = study.signoff_state()
    assert [st.state for st in states] == ["voided", "voided"]  # ... marked voided
    assert all("customer released drawing rev C" in st.why for st in states)
    voids = [e for e in sf.audit_log() if e.what.startswith("void sign-off")]
    assert len(voids) == 2 and "approved by M. Brandt" in voids[1].what


def test_results_beside_characteristic(study_path):
    sf = StudyFile(study_path)
    sf.attach_result("gauge_rr", "bore", {"percent_grr": 8.2, "ndc": 12}, who="L. Okafor")
    sf.attach_result("gauge_rr", "bore", {"percent_grr": 7.9, "ndc": 13}, who="L. Okafor")
    sf.attach_result("gauge_rr", None, {"note": "study-wide"}, who="L. Okafor")
    got = sf.results("gauge_rr", "bore")
    assert [r.payload["ndc"] for r in got] == [12, 13]
    assert len(sf.results("gauge_rr")) == 3 and sf.results("other") == []
    with pytest.raises(StudyInputError, match="no characteristic 'flatness'"):
        sf.attach_result("gauge_rr", "flatness", {}, who="A")
    with pytest.raises(StudyInputError, match="`payload` must hold only JSON values"):
        sf.attach_result("gauge_rr", "bore", {"x": float("nan")}, who="A")


def _make_v1_file(path):
    """A file as schema 1 made it (before attached results existed)."""
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA journal_mode = WAL")
    conn.execute("BEGIN")
    _apply_migrations(conn, 0, 1)
    conn.executemany(
        "INSERT INTO meta VALUES (?, ?)",
        [("title", "Old study"), ("part", "P1"), ("supplier", "S")],
    )
    conn.execute(
        "INSERT INTO data_files (filename, sha256, size, content, added_at, added_by) "
        "VALUES (?, ?, ?, ?, ?, ?)",
        ("old.csv", hashlib.sha256(DATA).hexdigest(), len(DATA), DATA, "2025-01-01T00:00:00Z", "A"),
    )
    conn.execute(
        "INSERT INTO characteristics VALUES (0, 'bore', ?, NULL)", (json.dumps(CHARS[0].to_dict()),)
    )
    conn.execute(
        "INSERT INTO decisions (characteristic, action, subgroup, reason, who, at, "
        "automatic, payload_json, recorded_at) VALUES ('bore', 'exclude', '2', "
        "'setup', 'A', '2025-01-01T00:00:00Z', 0, '{}', '2025-01-01T00:00:00Z')"
    )
    conn.execute("COMMIT")
    conn.close()


def test_migrates_a_schema_1_file_forward(tmp_path):
    path = tmp_path / "old.study"
    _make_v1_file(path)
    conn = sqlite3.connect(path)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == 1
    assert conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    conn.close()
    sf = StudyFile(path)
    assert sf.schema_version == SCHEMA_VERSION
    study = sf.load()
    assert study.title == "Old study" and list(study.excluded_subgroups("bore")) == ["2"]
    sf.attach_result("gauge_rr", "bore", {"ndc": 9}, who="A")  # table added by schema 2
    assert sf.results("gauge_rr")[0].payload == {"ndc": 9}
    assert sf.audit_log()[-2].what == f"migrate file from schema 1 to {SCHEMA_VERSION}"
    StudyFile(path)  # opening again does not migrate twice
    assert sum("migrate" in e.what for e in sf.audit_log()) == 1


_WRITER = r"""
import sys
from studykit.store import StudyFile
from studykit.study import Decision
path, tag, count = sys.argv[1], sys.argv[2], int(sys.argv[3])
sf = StudyFile(path)
k = 0
while count < 0 or k < count:
    sf.append_decision(Decision("bore", "note", who=tag, payload={"tag": tag, "seq": k}))
    print(k, flush=True)   # reported only after the commit returned
    k += 1
"""


def _writer(path, tag, count, repo_root):
    return subprocess.Popen(
        [sys.executable, "-c", _WRITER, str(path), tag, str(count)],
        cwd=repo_root,
        stdout=subprocess.PIPE,
        text=True,
    )


def test_two_processes_appending_at_once_lose_nothing(study_path, repo_root):
    procs = [_writer(study_path, tag, 40, repo_root) for tag in ("left", "right")]
    outs = [p.communicate(timeout=60)[0] for p in procs]
    assert [p.returncode for p in procs] == [0, 0]
    assert all(len(o.split()) == 40 for o in outs)
    study = StudyFile(study_path).load()
    seen = {(d.payload["tag"], d.payload["seq"]) for d in study.decisions}
    assert seen == {(t, k) for t in ("left", "right") for k in range(40)}
    assert len(study.decisions) == 80
    assert len(StudyFile(study_path).audit_log()) == 81


def test_writer_killed_mid_loop_loses_no_committed_entry(study_path, repo_root):
    proc = _writer(study_path, "victim", -1, repo_root)
    reported = []
    deadline = time.monotonic() + 30
    while len(reported) < 25 and time.monotonic() < deadline:
        line = proc.stdout.readline()
        if not line:
            break
        reported.append(int(line))
    os.kill(proc.pid, signal.SIGKILL)
    rest = proc.stdout.read()  # anything printed before the kill was committed too
    proc.wait(timeout=10)
    reported += [int(x) for x in rest.split()]
    assert proc.returncode == -signal.SIGKILL
    assert len(reported) >= 25
    sf = StudyFile(study_path)
    assert sf.integrity_check() == "ok"
    seqs = [d.payload["seq"] for d in sf.load().decisions]
    assert set(reported) <= set(seqs)
    assert seqs == list(range(len(seqs)))  # in order, no gaps, nothing half-written
    sf.exclude("bore", 1, reason="file still writable after the crash", who="A")
    assert "1" in sf.load().excluded_subgroups("bore")


def test_file_and_memory_agree(study_path):
    """The same changes made in memory and through the file give the same study and digest."""
    sf = StudyFile(study_path)
    memory = sf.load()
    steps = [
        ("exclude", ("bore", 1), dict(reason="setup", who="A", when="2026-03-03T09:00:00Z")),
        ("exclude", ("runout", 3), dict(reason="probe", who="A", when="2026-03-03T09:01:00Z")),
        ("restore", ("bore", 1), dict(reason="fine", who="B", when="2026-03-03T09:02:00Z")),
    ]
    for method, args, kw in steps:
        memory = getattr(memory, method)(*args, **kw)
        getattr(sf, method)(*args, **kw)
    memory = memory.with_spec(
        "runout", usl=0.045, who="B", reason="rev C", when="2026-03-03T09:03:00Z"
    )
    sf.update_spec("runout", usl=0.045, who="B", reason="rev C")
    on_file = sf.load()
    assert on_file.content_digest() == memory.content_digest()
    assert on_file.characteristics == memory.characteristics
    assert [d.to_dict() | {"when": ""} for d in on_file.decisions] == [
        d.to_dict() | {"when": ""} for d in memory.decisions
    ]


_EXCLUDER = r"""
import sys
from studykit.errors import StudyFileError
from studykit.store import StudyFile
sf = StudyFile(sys.argv[1])
for k in range(1, 5000):
    try:
        sf.exclude("bore", k, reason="race test", who="excluder")
    except StudyFileError as exc:
        print("refused", "locked" in str(exc), flush=True)
        break
    print(k, flush=True)
"""


def test_approval_racing_a_writer_covers_exactly_what_was_saved(study_path, repo_root):
    writer = subprocess.Popen(
        [sys.executable, "-c", _EXCLUDER, str(study_path)],
        cwd=repo_root,
        stdout=subprocess.PIPE,
        text=True,
    )
    first = writer.stdout.readline()  # the writer is under way
    assert first.strip() == "1"
    signed = StudyFile(study_path).add_signoff("M. Brandt", role="approved", decision="approve")
    out = first + writer.communicate(timeout=60)[0]
    lines = out.split("\n")
    committed = [int(x) for x in lines if x.strip().isdigit()]
    assert "refused True" in lines  # the writer hit the lock ...
    study = StudyFile(study_path).load()
    assert study.is_locked  # ... and the approval still holds,
    assert len(study.decisions) == len(committed)  # covering every saved exclusion
    assert signed.digest == study.content_digest()


def test_load_study_shorthand(study_path):
    from studykit.store import load_study

    assert load_study(study_path) == StudyFile(study_path).load()


def test_apply_saves_several_changes_atomically(study_path):
    sf = StudyFile(study_path)
    saved = sf.apply(
        lambda s: (
            s.exclude("bore", 1, reason="setup", who="A")
            .with_spec("runout", usl=0.04, who="A", reason="rev C")
            .with_comment("both done", who="A")
            .sign("P. Novak", role="reviewed", decision="approve")
        )
    )
    assert saved == sf.load()
    assert list(saved.excluded_subgroups("bore")) == ["1"]
    assert saved.characteristics["runout"].usl == 0.04
    assert [st.state for st in saved.signoff_state()] == ["valid"]
    n_log = len(sf.audit_log())

    def half_bad(s):
        s = s.exclude("bore", 2, reason="fine", who="A")
        return s.exclude("flatness", 1, reason="no such characteristic", who="A")

    with pytest.raises(StudyInputError, match="no characteristic 'flatness'"):
        sf.apply(half_bad)
    assert sf.load() == saved and len(sf.audit_log()) == n_log  # all or nothing


def test_apply_refuses_rewriting_history_and_hidden_spec_changes(study_path):
    import dataclasses

    from studykit.study import Characteristic

    sf = StudyFile(study_path)
    sf.exclude("bore", 1, reason="setup", who="A")
    with pytest.raises(StudyFileError, match="rewrote saved decisions"):
        sf.apply(lambda s: dataclasses.replace(s, decisions=()))
    with pytest.raises(StudyFileError, match="without a set_spec/set_criteria decision"):
        sf.apply(
            lambda s: dataclasses.replace(
                s, characteristics=[s.characteristics["bore"], Characteristic("runout", usl=1.0)]
            )
        )
    sf.add_signoff("M. Brandt", role="approved", decision="approve")
    with pytest.raises(StudyFileError, match="locked"):
        sf.apply(lambda s: s.exclude("bore", 2, reason="r", who="A"))
    with pytest.raises(StudyFileError, match="locked"):  # a bypass of the lock check is caught too
        sf.apply(lambda s: s._apply(Decision("bore", "exclude", subgroup=2, reason="r", who="A")))
    assert sf.load().is_locked and len(sf.load().decisions) == 1


def test_attach_result_reason_reaches_the_audit_log(tmp_path):
    sf = StudyFile.create(
        tmp_path / "r.study",
        data=b"subgroup,x\n1,1.0\n2,1.2\n",
        filename="x.csv",
        title="r",
        characteristics=[Characteristic("x", lsl=0, usl=2)],
        who="T. Test",
    )
    sf.attach_result("gauge_rr", "x", {"ok": True}, who="T. Test", reason="gauge GR-07")
    entry = sf.audit_log()[-1]
    assert entry.what.startswith("attach gauge R&R study") and entry.why == "gauge GR-07"
