"""The study file: one SQLite database per study, append-only, safe against crashes.

A study file holds a copy of the raw measurement file with its SHA-256 (checked on every load),
the first specification and criterion of each characteristic, and then only appends: decisions
(exclusions, spec and criteria changes, chosen models, notes), comments, sign-offs, attached
results (e.g. a gauge R&R beside the characteristic it qualifies) and an audit log of who did
what, when and why. SQLite triggers refuse any UPDATE or DELETE on these tables, so nothing saved
is ever rewritten; the current state is the first state with every decision replayed in order
(:meth:`studykit.study.Study.replay`).

Every write is one transaction (``BEGIN IMMEDIATE`` in WAL mode with ``synchronous=FULL`` and a
busy timeout): a process killed mid-write leaves the file as of its last commit, and two
processes writing at once wait for each other instead of losing entries. The lock check of an
approved study happens inside the same transaction as the write.

The audit log is a hash chain (schema 3): each entry stores the hash of the entry before it,
the hashes of the rows it wrote (canonical JSON of the whole row, in any table), and the hash of
its own canonical content. :meth:`StudyFile.check_chain` recomputes it and names the entry or row
that breaks it, so rows inserted, deleted or edited behind studykit's back (even with the
triggers dropped) are found. See :func:`check_chain`.

The schema carries a version (``PRAGMA user_version``) and an application id; :data:`MIGRATIONS`
lists the functions that bring a file from each version to the next. A file from a newer
studykit is refused with a clear message instead of being misread.
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
from collections.abc import Callable, Iterable, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from studykit import __version__, names
from studykit.errors import StudyFileError, StudyInputError
from studykit.study import (
    Characteristic,
    Comment,
    Criteria,
    DataFile,
    Decision,
    SignOff,
    Study,
    now_utc,
)

__all__ = [
    "APPLICATION_ID",
    "CHAIN_GENESIS",
    "ChainCheck",
    "SignoffSignature",
    "ChangeWatch",
    "StaleView",
    "MIGRATIONS",
    "SCHEMA_VERSION",
    "AuditEntry",
    "StoredResult",
    "StudyFile",
    "load_study",
]

#: PRAGMA application_id of a study file ("SKST" in ASCII)
APPLICATION_ID = 0x534B5354
_SQLITE_MAGIC = b"SQLite format 3\x00"
_BUSY_TIMEOUT_S = 30.0


# ---------------------------------------------------------------------------------------------
# schema and migrations


def _append_only(conn: sqlite3.Connection, table: str) -> None:
    for op, verb in (("UPDATE", "changed"), ("DELETE", "deleted")):
        conn.execute(
            f"CREATE TRIGGER {table}_no_{op.lower()} BEFORE {op} ON {table} "
            f"BEGIN SELECT RAISE(ABORT, '{table} is append-only: entries cannot be {verb}'); END"
        )


def _migrate_0_to_1(conn: sqlite3.Connection) -> None:
    """Schema 1: meta, data copy, specifications, decisions, comments, sign-offs, audit log."""
    conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    conn.execute("CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)")
    conn.execute(
        "CREATE TABLE data_files (id INTEGER PRIMARY KEY AUTOINCREMENT, filename TEXT NOT NULL, "
        "sha256 TEXT NOT NULL, size INTEGER NOT NULL, content BLOB NOT NULL, "
        "added_at TEXT NOT NULL, added_by TEXT NOT NULL)"
    )
    conn.execute(
        "CREATE TABLE characteristics (position INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE, "
        "spec_json TEXT NOT NULL, criteria_json TEXT)"
    )
    conn.execute(
        "CREATE TABLE decisions (id INTEGER PRIMARY KEY AUTOINCREMENT, characteristic TEXT, "
        "action TEXT NOT NULL, subgroup TEXT, reason TEXT NOT NULL, who TEXT NOT NULL, "
        "at TEXT NOT NULL, automatic INTEGER NOT NULL, payload_json TEXT NOT NULL, "
        "recorded_at TEXT NOT NULL)"
    )
    conn.execute(
        "CREATE TABLE comments (id INTEGER PRIMARY KEY AUTOINCREMENT, characteristic TEXT, "
        "text TEXT NOT NULL, who TEXT NOT NULL, at TEXT NOT NULL)"
    )
    conn.execute(
        "CREATE TABLE signoffs (id INTEGER PRIMARY KEY AUTOINCREMENT, name TEXT NOT NULL, "
        "role TEXT NOT NULL, decision TEXT NOT NULL, comment TEXT NOT NULL, at TEXT NOT NULL, "
        "digest TEXT NOT NULL)"
    )
    conn.execute(
        "CREATE TABLE audit_log (id INTEGER PRIMARY KEY AUTOINCREMENT, at TEXT NOT NULL, "
        "who TEXT NOT NULL, what TEXT NOT NULL, why TEXT NOT NULL, detail_json TEXT NOT NULL)"
    )
    for table in _SCHEMA1_TABLES:
        _append_only(conn, table)


def _migrate_1_to_2(conn: sqlite3.Connection) -> None:
    """Schema 2: attached results (e.g. a gauge R&R beside the characteristic it qualifies)."""
    conn.execute(
        "CREATE TABLE results (id INTEGER PRIMARY KEY AUTOINCREMENT, kind TEXT NOT NULL, "
        "characteristic TEXT, payload_json TEXT NOT NULL, who TEXT NOT NULL, at TEXT NOT NULL)"
    )
    conn.execute("CREATE INDEX results_kind ON results (kind, characteristic)")
    _append_only(conn, "results")


def _migrate_2_to_3(conn: sqlite3.Connection) -> None:
    """Schema 3: the audit log becomes a hash chain; sign-offs carry the chain head they signed.

    Entries already in the file are sealed as found (each gets the previous entry's hash and its
    own); every row already in the file is then claimed by the next audit entry (the migration
    entry written by :class:`StudyFile`), so from here on every row is under the chain.
    """
    conn.execute("ALTER TABLE audit_log ADD COLUMN prev_hash TEXT")
    conn.execute("ALTER TABLE audit_log ADD COLUMN rows_json TEXT")
    conn.execute("ALTER TABLE audit_log ADD COLUMN entry_hash TEXT")
    conn.execute("ALTER TABLE signoffs ADD COLUMN chain_head TEXT")
    rows = _table_rows(conn, "audit_log", order="id")
    if rows:
        conn.execute("DROP TRIGGER IF EXISTS audit_log_no_update")
        prev = CHAIN_GENESIS
        for row in rows:
            row = dict(row, prev_hash=prev, rows_json="[]")
            row.pop("entry_hash", None)
            h = _entry_hash(row)
            conn.execute(
                "UPDATE audit_log SET prev_hash = ?, rows_json = ?, entry_hash = ? WHERE id = ?",
                (prev, "[]", h, row["id"]),
            )
            prev = h
        conn.execute(
            "CREATE TRIGGER audit_log_no_update BEFORE UPDATE ON audit_log BEGIN SELECT "
            "RAISE(ABORT, 'audit_log is append-only: entries cannot be changed'); END"
        )
    _chain_begin(conn, claim_existing=True)


#: MIGRATIONS[v] brings a file from schema v to v + 1; the last one reached is SCHEMA_VERSION
MIGRATIONS: list[Callable[[sqlite3.Connection], None]] = [
    _migrate_0_to_1,
    _migrate_1_to_2,
    _migrate_2_to_3,
]
SCHEMA_VERSION = len(MIGRATIONS)


def _apply_migrations(conn: sqlite3.Connection, start: int, stop: int = SCHEMA_VERSION) -> None:
    """Run migrations start..stop-1 inside the caller's transaction, bumping user_version."""
    for version in range(start, stop):
        MIGRATIONS[version](conn)
        conn.execute(f"PRAGMA user_version = {version + 1}")


# ---------------------------------------------------------------------------------------------
# the hash chain over the audit log

#: ``prev_hash`` of the first audit entry
CHAIN_GENESIS = "0" * 64
_CHAIN_FORMAT = "studykit-chain-1"
#: the tables of the first schema, append-only from the start
_SCHEMA1_TABLES = (
    "meta",
    "data_files",
    "characteristics",
    "decisions",
    "comments",
    "signoffs",
    "audit_log",
)
#: tables made append-only by the migrations (their guards are checked by check_chain)
_GUARDED = (*_SCHEMA1_TABLES, "results")


class _ChainConnection(sqlite3.Connection):
    """A connection that remembers, per table, the last row already claimed by an audit entry
    in the running transaction (``chain_marks``; None outside a write)."""

    chain_marks: dict | None = None


def _canonical_json(obj) -> str:
    return json.dumps(
        obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False
    )


def _encode_value(v):
    if isinstance(v, _KnownBlob):
        return {"blob_sha256": v.sha256, "bytes": v.length}
    if isinstance(v, bytes | bytearray | memoryview):
        b = bytes(v)
        return {"blob_sha256": hashlib.sha256(b).hexdigest(), "bytes": len(b)}
    return v


def _canonical_row(row: Mapping) -> dict:
    """A row as JSON: NULL columns left out (so a column added later as NULL changes no hash),
    BLOBs as their SHA-256 and length."""
    return {k: _encode_value(v) for k, v in row.items() if v is not None}


def _row_hash(table: str, row: Mapping) -> str:
    """SHA-256 of the canonical JSON of a whole row of ``table`` (every column)."""
    text = _canonical_json({"format": _CHAIN_FORMAT, "table": table, "row": _canonical_row(row)})
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def _entry_hash(entry: Mapping) -> str:
    """SHA-256 of the canonical JSON of an audit entry: every column but ``entry_hash``."""
    body = _canonical_row({k: v for k, v in entry.items() if k != "entry_hash"})
    text = _canonical_json({"format": _CHAIN_FORMAT, "entry": body})
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def _chained_tables(conn) -> list[str]:
    """Every table whose rows the chain covers: all but the audit log and SQLite's own."""
    return [
        r[0]
        for r in conn.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%' "
            "AND name != 'audit_log' ORDER BY name"
        )
    ]


def _key_columns(conn, table: str) -> list[str]:
    cols = sorted((r[5], r[1]) for r in conn.execute(f'PRAGMA table_info("{table}")') if r[5])
    return [c for _, c in cols]


def _table_rows(conn, table: str, *, order: str = "_rowid_", after: int | None = None):
    """Rows of ``table`` as dicts with every column (plus ``_rowid_`` under ``"_sk_rowid_"``
    when ``after`` is given)."""
    where = "" if after is None else " WHERE _rowid_ > ?"
    cur = conn.execute(
        f'SELECT _rowid_ AS "_sk_rowid_", * FROM "{table}"{where} ORDER BY {order}',
        () if after is None else (after,),
    )
    names = [d[0] for d in cur.description]
    out = []
    for values in cur:
        row = dict(zip(names, values, strict=True))
        rowid = row.pop("_sk_rowid_")
        if after is not None:
            row["_sk_rowid_"] = rowid
        out.append(row)
    return out


def _row_key(keys: list[str], row: Mapping, rowid=None):
    if not keys:
        return rowid
    return row[keys[0]] if len(keys) == 1 else [row[k] for k in keys]


def _chain_begin(conn, *, claim_existing: bool = False) -> None:
    """Start claiming rows for the chain in this write: rows present now are already claimed
    (or, with ``claim_existing``, none is: the next audit entry claims them all)."""
    marks = {}
    for t in _chained_tables(conn):
        marks[t] = (
            0
            if claim_existing
            else conn.execute(f'SELECT coalesce(max(_rowid_), 0) FROM "{t}"').fetchone()[0]
        )
    try:
        conn.chain_marks = marks
    except AttributeError:  # a plain sqlite3 connection (should not happen): no claiming
        pass


def _claim_new_rows(conn) -> list[dict]:
    """References (table, key, sha256) of the rows written since the last claim."""
    marks = getattr(conn, "chain_marks", None)
    if marks is None:
        return []
    refs = []
    for t in _chained_tables(conn):
        keys = _key_columns(conn, t)
        for row in _table_rows(conn, t, after=marks.get(t, 0)):
            rowid = row.pop("_sk_rowid_")
            marks[t] = max(marks.get(t, 0), rowid)
            refs.append(
                {"table": t, "key": _row_key(keys, row, rowid), "sha256": _row_hash(t, row)}
            )
    return refs


def _chain_tail(conn) -> tuple[int, str]:
    row = conn.execute("SELECT id, entry_hash FROM audit_log ORDER BY id DESC LIMIT 1").fetchone()
    if row is None:
        return 0, CHAIN_GENESIS
    return int(row[0]), row[1] or ""


def _chain_finish(conn) -> None:
    """Before a commit: rows written after the last audit entry get an entry of their own, so
    no row ever escapes the chain."""
    if getattr(conn, "chain_marks", None) is None:
        return
    refs = _claim_new_rows(conn)
    if refs:
        tables = sorted({r["table"] for r in refs})
        _append_entry(
            conn,
            who="studykit",
            what=f"store {len(refs)} row(s) in " + ", ".join(tables),
            why="",
            detail={},
            refs=refs,
        )
    conn.chain_marks = None


def _append_entry(
    conn,
    *,
    who: str,
    what: str,
    why: str,
    detail: Mapping,
    when: str | None = None,
    refs: list | None = None,
) -> int:
    if refs is None:
        refs = _claim_new_rows(conn)
    last_id, prev = _chain_tail(conn)
    entry = {
        "id": last_id + 1,
        "at": when or now_utc(),
        "who": who or "unknown",
        "what": what,
        "why": why or "",
        "detail_json": _dumps(dict(detail or {})),
        "prev_hash": prev,
        "rows_json": _canonical_json(refs),
    }
    entry["entry_hash"] = _entry_hash(entry)
    cols = list(entry)
    conn.execute(
        f"INSERT INTO audit_log ({', '.join(cols)}) VALUES ({', '.join('?' for _ in cols)})",
        [entry[c] for c in cols],
    )
    return entry["id"]


@dataclass(frozen=True)
class ChainCheck:
    """The result of checking a study file's audit chain (:meth:`StudyFile.check_chain`).

    Fields: ``entries`` (how many audit entries), ``head`` (``"<id>:<sha256>"`` of the last
    entry, the chain head), ``rows`` (rows covered), ``problems`` (tuple of (entry id or None,
    sentence), in file order). ``ok`` when there is no problem.
    """

    entries: int
    head: str
    rows: int
    problems: tuple

    @property
    def ok(self) -> bool:
        return not self.problems

    def summary(self) -> str:
        """One line: the chain holds, or the first break (and how many more)."""
        if self.ok:
            return (
                f"audit chain intact: {self.entries} entries over {self.rows} rows, head "
                f"{self.head[:20]}..."
            )
        more = f" (and {len(self.problems) - 1} more problem(s))" if len(self.problems) > 1 else ""
        return f"audit chain BROKEN: {self.problems[0][1]}{more}"

    def to_dict(self) -> dict:
        return {
            "ok": self.ok,
            "entries": self.entries,
            "head": self.head,
            "rows": self.rows,
            "problems": [{"entry": e, "problem": p} for e, p in self.problems],
        }


def _describe_row(table: str, row: Mapping) -> str:
    bits = []
    for k in (
        "name",
        "role",
        "decision",
        "action",
        "characteristic",
        "subgroup",
        "kind",
        "filename",
        "key",
        "who",
    ):
        v = row.get(k)
        if v not in (None, ""):
            bits.append(f"{k} {str(v)[:40]!r}")
    return ", ".join(bits[:4])


def _rows_with_known_blobs(conn, table: str, known: Mapping):
    """Rows of ``table`` like ``_table_rows(after=0)``, but BLOB columns whose hash is already
    known (``known[key][column] = (sha256, length)``, checked against the bytes in the same
    read) are not read again."""
    info = list(conn.execute(f'PRAGMA table_info("{table}")'))
    blobs = [r[1] for r in info if str(r[2]).upper() == "BLOB"]
    keys = _key_columns(conn, table)
    if not blobs or len(keys) != 1:
        yield from _table_rows(conn, table, after=0)
        return
    plain = [r[1] for r in info if r[1] not in blobs]
    cols = ", ".join(f'"{c}"' for c in plain)
    for values in conn.execute(f'SELECT _rowid_, {cols} FROM "{table}" ORDER BY _rowid_'):
        row = dict(zip(plain, values[1:], strict=True))
        row["_sk_rowid_"] = values[0]
        have = known.get(row[keys[0]])
        if have is None or any(b not in have for b in blobs):
            full = conn.execute(
                f"SELECT {', '.join(chr(34) + b + chr(34) for b in blobs)} "
                f'FROM "{table}" WHERE _rowid_ = ?',
                (values[0],),
            ).fetchone()
            row.update(zip(blobs, full, strict=True))
        else:
            for b in blobs:
                row[b] = _KnownBlob(*have[b])
        yield row


class _KnownBlob:
    """A BLOB whose SHA-256 and length were computed from its bytes in the same read."""

    __slots__ = ("sha256", "length")

    def __init__(self, sha256: str, length: int):
        self.sha256, self.length = sha256, int(length)


_SIGNOFF_SIGNATURE_FORMAT = "studykit-signoff-signature-1"


def _signoff_payload(row: Mapping) -> bytes:
    """What a sign-off's certificate signature covers: the sign-off as written (who, role,
    decision, comment, time, content digest) and the chain head it signed."""
    body = {
        k: row.get(k) for k in ("name", "role", "decision", "comment", "at", "digest", "chain_head")
    }
    return _canonical_json({"format": _SIGNOFF_SIGNATURE_FORMAT, "signoff": body}).encode()


def sign_signoff_payload(payload: bytes, p12_path, passphrase) -> dict:
    """Sign ``payload`` with the key of a PKCS#12 file; returns the JSON-safe signature record
    (certificate PEM, its SHA-256 fingerprint, algorithm, value in base64). A certificate not
    valid now is refused."""
    import base64
    import datetime as dt

    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec, padding, rsa
    from cryptography.hazmat.primitives.serialization import pkcs12

    p12 = Path(p12_path)
    if not p12.is_file():
        raise StudyInputError(f"`--p12` '{p12}' does not exist: give the signer's .p12 file")
    pw = passphrase.encode("utf-8") if isinstance(passphrase, str) else passphrase
    try:
        key, cert, _ = pkcs12.load_key_and_certificates(p12.read_bytes(), pw)
    except (ValueError, TypeError) as exc:
        raise StudyInputError(f"cannot open '{p12.name}': {exc} (wrong passphrase?)") from None
    if key is None or cert is None:
        raise StudyInputError(f"'{p12.name}' holds no key and certificate")
    now = dt.datetime.now(dt.UTC)
    if not cert.not_valid_before_utc <= now <= cert.not_valid_after_utc:
        raise StudyInputError(
            f"the certificate in '{p12.name}' is not valid now (valid "
            f"{cert.not_valid_before_utc:%Y-%m-%dT%H:%M:%SZ} to "
            f"{cert.not_valid_after_utc:%Y-%m-%dT%H:%M:%SZ}): a sign-off signed with it would "
            "not be evidence"
        )
    if isinstance(key, rsa.RSAPrivateKey):
        value, alg = key.sign(payload, padding.PKCS1v15(), hashes.SHA256()), "rsa-pkcs1v15-sha256"
    elif isinstance(key, ec.EllipticCurvePrivateKey):
        value, alg = key.sign(payload, ec.ECDSA(hashes.SHA256())), "ecdsa-sha256"
    else:
        raise StudyInputError(
            f"'{p12.name}' holds a {type(key).__name__}: studykit signs "
            "sign-offs with RSA or EC keys"
        )
    return {
        "format": _SIGNOFF_SIGNATURE_FORMAT,
        "algorithm": alg,
        "certificate_pem": cert.public_bytes(serialization.Encoding.PEM).decode("ascii"),
        "fingerprint_sha256": cert.fingerprint(hashes.SHA256()).hex(),
        "value": base64.b64encode(value).decode("ascii"),
    }


@dataclass(frozen=True)
class SignoffSignature:
    """The certificate signature of one sign-off (:meth:`StudyFile.signoff_signatures`).

    Fields: ``index`` (of the sign-off), ``status`` (``valid``, ``INVALID`` or ``none``),
    ``subject``, ``fingerprint_sha256`` (colon-separated hex), ``not_before``, ``not_after``,
    ``why`` (what is wrong when INVALID). A valid signature says the holder of that
    certificate's key signed exactly this sign-off and chain head; whether the certificate is
    the person's is for the reader to check (compare the fingerprint).
    """

    index: int
    status: str
    subject: str = ""
    fingerprint_sha256: str = ""
    not_before: str = ""
    not_after: str = ""
    why: str = ""

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def _check_signoff_signature(index: int, row: Mapping, record) -> SignoffSignature:
    import base64

    from cryptography import x509
    from cryptography.exceptions import InvalidSignature
    from cryptography.hazmat.primitives import hashes
    from cryptography.hazmat.primitives.asymmetric import ec, padding, rsa

    if not record:
        return SignoffSignature(index, "none")
    try:
        cert = x509.load_pem_x509_certificate(str(record["certificate_pem"]).encode("ascii"))
        fp = cert.fingerprint(hashes.SHA256()).hex().upper()
        info = dict(
            subject=cert.subject.rfc4514_string(),
            fingerprint_sha256=":".join(fp[i : i + 2] for i in range(0, len(fp), 2)),
            not_before=f"{cert.not_valid_before_utc:%Y-%m-%dT%H:%M:%SZ}",
            not_after=f"{cert.not_valid_after_utc:%Y-%m-%dT%H:%M:%SZ}",
        )
        value = base64.b64decode(str(record["value"]), validate=True)
        pub = cert.public_key()
        payload = _signoff_payload(row)
        if isinstance(pub, rsa.RSAPublicKey):
            pub.verify(value, payload, padding.PKCS1v15(), hashes.SHA256())
        elif isinstance(pub, ec.EllipticCurvePublicKey):
            pub.verify(value, payload, ec.ECDSA(hashes.SHA256()))
        else:
            return SignoffSignature(index, "INVALID", **info, why="unsupported key type")
    except InvalidSignature:
        return SignoffSignature(
            index,
            "INVALID",
            **info,
            why="the sign-off or its chain head differs from what the certificate's key signed",
        )
    except (KeyError, TypeError, ValueError) as exc:
        return SignoffSignature(index, "INVALID", why=f"unreadable signature ({exc})")
    when = str(row.get("at") or "")
    if when and not info["not_before"] <= when <= info["not_after"]:
        return SignoffSignature(
            index,
            "INVALID",
            **info,
            why=f"the certificate was not valid at the sign-off's time {when}",
        )
    return SignoffSignature(index, "valid", **info)


def signoff_signatures(conn) -> list[SignoffSignature]:
    """Check the certificate signature (if any) of every sign-off, in order."""
    records = {}
    for (detail,) in conn.execute("SELECT detail_json FROM audit_log ORDER BY id"):
        try:
            d = json.loads(detail or "{}")
        except ValueError:
            continue
        if isinstance(d, dict) and d.get("signoff_id") is not None and d.get("signature"):
            records[d["signoff_id"]] = d["signature"]
    out = []
    for i, row in enumerate(_table_rows(conn, "signoffs", order="id")):
        out.append(_check_signoff_signature(i, row, records.get(row.get("id"))))
    return out


def check_chain(conn, *, known_blobs: Mapping | None = None) -> ChainCheck:
    """Recompute the audit chain of an open study file connection; see :class:`ChainCheck`.

    Checks, in order: every entry's ``prev_hash`` is the hash of the entry before it (the first
    one's is :data:`CHAIN_GENESIS`); every entry's ``entry_hash`` is the hash of its content;
    every row of every other table is claimed by exactly one entry with the hash it has now (a
    row no entry claims was inserted behind studykit; a claimed row that is gone was deleted;
    one whose hash differs was edited); every sign-off's ``chain_head`` names an entry of the
    chain with that hash; the append-only guards (triggers) are all in place.
    """
    problems: list[tuple] = []
    cols = {r[1] for r in conn.execute("PRAGMA table_info(audit_log)")}
    if not {"prev_hash", "rows_json", "entry_hash"} <= cols:
        return ChainCheck(
            0,
            "",
            0,
            ((None, "the audit log has no hash chain (the file was not brought to schema 3)"),),
        )
    entries = _table_rows(conn, "audit_log", order="id")
    claimed: dict = {}
    hashes = _check_entries(entries, claimed, problems)
    n_rows, signoffs = _check_rows(conn, known_blobs, claimed, problems)
    for (t, key), (_, eid) in claimed.items():
        problems.append(
            (
                eid,
                f"{t} row {json.loads(key)}, written with audit entry {eid}, is "
                "missing: it was deleted outside studykit",
            )
        )
    _check_signoff_heads(signoffs, hashes, problems)
    if any('"signature"' in str(e.get("detail_json") or "") for e in entries):
        for sig in signoff_signatures(conn):
            if sig.status == "INVALID":
                problems.append(
                    (
                        None,
                        f"the certificate signature of sign-off #{sig.index + 1} "
                        f"({sig.subject or 'unknown certificate'}) does not hold: "
                        f"{sig.why}",
                    )
                )
    _check_guards(conn, problems)
    last_id, last = (
        (entries[-1]["id"], entries[-1].get("entry_hash") or "") if entries else (0, CHAIN_GENESIS)
    )
    return ChainCheck(len(entries), f"{last_id}:{last}", n_rows, tuple(problems))


def _check_entries(entries, claimed: dict, problems: list) -> dict[int, str]:
    """Each audit entry follows the one before it and still matches its hash; the rows it
    claims go into ``claimed`` (a row claimed twice is a problem). Returns entry id -> hash."""
    hashes: dict[int, str] = {}
    prev, prev_id = CHAIN_GENESIS, None
    for e in entries:
        eid = e.get("id")
        stored = e.get("entry_hash")
        where = f"audit entry {eid} ({str(e.get('what'))[:60]!r} by {e.get('who')})"
        if not stored:
            problems.append((eid, f"{where} carries no chain hash: it was added outside studykit"))
        else:
            if e.get("prev_hash") != prev:
                after = "the start of the log" if prev_id is None else f"entry {prev_id}"
                problems.append(
                    (
                        eid,
                        f"{where} does not follow {after}: an entry between them "
                        "was deleted or inserted outside studykit",
                    )
                )
            if _entry_hash(e) != stored:
                problems.append(
                    (
                        eid,
                        f"{where} was changed after it was written (its content "
                        "no longer matches its hash)",
                    )
                )
        hashes[eid] = stored or ""
        prev, prev_id = stored or _entry_hash(e), eid
        try:
            refs = json.loads(e.get("rows_json") or "[]")
            for r in refs:
                k = (r["table"], _canonical_json(r["key"]))
                if k in claimed:
                    problems.append(
                        (
                            eid,
                            f"{where} claims {r['table']} row {r['key']} already "
                            f"claimed by entry {claimed[k][1]}",
                        )
                    )
                claimed[k] = (r["sha256"], eid)
        except (ValueError, TypeError, KeyError):
            problems.append((eid, f"{where} has an unreadable list of rows"))
    return hashes


def _check_rows(conn, known_blobs, claimed: dict, problems: list) -> tuple[int, list]:
    """Every row of the chained tables is claimed by an entry with the hash it has now (claims
    met are taken out of ``claimed``). Returns the number of rows and the sign-off rows."""
    n_rows = 0
    signoffs = []
    for t in _chained_tables(conn):
        keys = _key_columns(conn, t)
        known = (known_blobs or {}).get(t)
        rows = _rows_with_known_blobs(conn, t, known) if known else _table_rows(conn, t, after=0)
        for row in rows:
            rowid = row.pop("_sk_rowid_")
            n_rows += 1
            key = _row_key(keys, row, rowid)
            k = (t, _canonical_json(key))
            h = _row_hash(t, row)
            if t == "signoffs":
                signoffs.append(row)
            if k not in claimed:
                problems.append(
                    (
                        None,
                        f"{t} row {key} ({_describe_row(t, row)}) is in no audit "
                        "entry: it was inserted outside studykit",
                    )
                )
                continue
            want, eid = claimed.pop(k)
            if want != h:
                problems.append(
                    (
                        eid,
                        f"{t} row {key} ({_describe_row(t, row)}), written with "
                        f"audit entry {eid}, was changed outside studykit",
                    )
                )
    return n_rows, signoffs


def _check_signoff_heads(signoffs, hashes: dict, problems: list) -> None:
    """Every sign-off's ``chain_head`` names an entry of the chain with that hash."""
    for row in signoffs:
        head = row.get("chain_head")
        if not head:
            continue
        sid, _, h = str(head).partition(":")
        if not sid.isdigit() or hashes.get(int(sid)) != h:
            problems.append(
                (
                    None,
                    f"sign-off row {row.get('id')} by {row.get('name')} signed "
                    f"chain head {str(head)[:24]}..., which is not an entry of this "
                    "chain: the history before it was rewritten",
                )
            )


def _check_guards(conn, problems: list) -> None:
    """The append-only guards (triggers) of the guarded tables are all in place."""
    triggers = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'")}
    tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    for t in _GUARDED:
        if t not in tables:
            continue
        for op in ("update", "delete"):
            if f"{t}_no_{op}" not in triggers:
                problems.append(
                    (
                        None,
                        f"the guard against {op}s of {t} "
                        f"({t}_no_{op}) was removed outside studykit",
                    )
                )


# ---------------------------------------------------------------------------------------------
# a view older than the file (live workbook pages, `study sign --saw`)


class StaleView(StudyFileError):
    """A change was made on a view of the study that is older than the study file.

    Attributes
    ----------
    newer : list of AuditEntry
        What was written to the file since the view was drawn (oldest first).
    """

    def __init__(self, message: str, newer=()):
        super().__init__(message)
        self.newer = list(newer)


def describe_entries(entries, *, limit: int = 3) -> str:
    """``"who: what; who: what"`` of the newest audit entries (for a stale-view message)."""
    shown = list(entries)[-limit:]
    text = "; ".join(f"{e.who}: {e.what}" for e in shown)
    more = len(list(entries)) - len(shown)
    return text + (f" (and {more} earlier)" if more > 0 else "")


# ---------------------------------------------------------------------------------------------
# records


@dataclass(frozen=True)
class AuditEntry:
    """One line of the audit log: who did what, when and why.

    Fields: ``id`` (increasing), ``when`` (ISO 8601 UTC, the time of the write), ``who``,
    ``what`` (a sentence), ``why`` (the reason given, may be empty), ``detail`` (JSON dict).
    """

    id: int
    when: str
    who: str
    what: str
    why: str
    detail: dict

    def to_dict(self) -> dict:
        return dict(self.__dict__)  # the fields, in their order


@dataclass(frozen=True)
class StoredResult:
    """A result attached to the study, e.g. a gauge R&R (``kind="gauge_rr"``).

    Fields: ``id``, ``kind``, ``characteristic`` (None for study-wide), ``payload`` (JSON dict),
    ``who``, ``when``.
    """

    id: int
    kind: str
    characteristic: str | None
    payload: dict
    who: str
    when: str

    def to_dict(self) -> dict:
        return dict(self.__dict__)  # the fields, in their order


def _dumps(obj) -> str:
    return json.dumps(obj, sort_keys=True, ensure_ascii=False, allow_nan=False)


def _decision_what(d: Decision) -> str:
    on = f" of '{d.characteristic}'" if d.characteristic else ""
    if d.action in ("exclude", "restore"):
        return f"{names.action_label(d.action)} subgroup {d.subgroup}{on}" + (
            " (automatic)" if d.automatic else ""
        )
    if d.action == "keep_signal":
        by = " (rejected proposal)" if d.payload.get("origin") == "rejected_proposal" else ""
        return (
            f"keep signal ({names.rule_label(d.payload.get('rule'))}) at subgroup "
            f"{d.subgroup}{on}{by}"
        )
    if d.action == "reopen_signal":
        return (
            f"reopen signal ({names.rule_label(d.payload.get('rule'))}) at subgroup "
            f"{d.subgroup}{on}"
        )
    if d.action == "set_spec":
        changes = ", ".join(
            f"{k} {d.payload.get('old', {}).get(k)!r} -> {v!r}"
            for k, v in d.payload.get("changes", {}).items()
        )
        return f"change specification{on}: {changes}"
    if d.action == "set_criteria":
        return f"set criterion{on}: {_dumps(d.payload.get('criteria'))}"
    if d.action == "void_signoff":
        return (
            f"void sign-off #{d.payload.get('signoff')} ({d.payload.get('role')} by "
            f"{d.payload.get('signer')}) to allow: {d.payload.get('change')}"
        )
    if d.action == "note":
        return f"note{on}"
    return f"{names.action_label(d.action)}{on}: {_dumps(dict(d.payload))}"


# ---------------------------------------------------------------------------------------------
# the file


class StudyFile:
    """A study file on disk.

    Parameters
    ----------
    path : str or Path
        An existing study file (use :meth:`create` for a new one). Opening checks that it is a
        study file and that this studykit can read its schema; an older schema is migrated
        forward in one transaction.

    Raises
    ------
    StudyFileError
        Missing file, not an SQLite database, not a study file, or a newer schema.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from studykit.study import Characteristic
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "demo.study"
    >>> sf = StudyFile.create(path, data=b"subgroup,x\\n1,1.0\\n", filename="x.csv", title="demo",
    ...                       characteristics=[Characteristic("x", lsl=0, usl=2)], who="A. Ruiz")
    >>> _ = sf.append_decision(Decision("x", "exclude", subgroup=1, reason="setup part",
    ...                                 who="A. Ruiz"))
    >>> list(StudyFile(path).load().excluded_subgroups("x"))
    ['1']
    >>> [e.what for e in sf.audit_log()]
    ["create study 'demo' from 'x.csv'", "remove subgroup 1 of 'x'"]
    """

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        self._check_header()
        conn = self._connect()
        try:
            version = self._check_version(conn)
            if version < SCHEMA_VERSION:
                why = self._not_writable()
                if why is not None:
                    raise StudyFileError(
                        f"study file '{self.path}' is from an older studykit (schema {version}) "
                        f"and must be brought up to date, but {why}. Copy it to a folder where "
                        "you may write and open the copy"
                    )
                conn.execute("BEGIN IMMEDIATE")
                try:
                    version = self._check_version(conn)  # another process may have migrated
                    _chain_begin(conn)
                    _apply_migrations(conn, version)
                    self._audit(
                        conn,
                        who="studykit",
                        what=f"migrate file from schema {version} to {SCHEMA_VERSION}",
                        why="opened by a newer studykit",
                        detail={"studykit": __version__},
                    )
                    _chain_finish(conn)
                    conn.execute("COMMIT")
                except StudyInputError:
                    _rollback(conn)
                    raise
                except _DAMAGE as exc:
                    _rollback(conn)
                    raise StudyFileError(
                        _damaged(self.path, exc) + "; it was not migrated"
                    ) from None
                except BaseException:
                    _rollback(conn)
                    raise
        finally:
            conn.close()

    def __repr__(self) -> str:
        return f"StudyFile({str(self.path)!r})"

    # -- opening -------------------------------------------------------------------------------
    def _check_header(self) -> None:
        if not self.path.exists():
            raise StudyFileError(
                f"study file '{self.path}' does not exist: check the path, or "
                "create it with `studykit study new`"
            )
        if self.path.is_dir():
            raise StudyFileError(f"'{self.path}' is a folder, not a study file")
        with open(self.path, "rb") as fh:
            head = fh.read(len(_SQLITE_MAGIC))
        if head != _SQLITE_MAGIC:
            raise StudyFileError(
                f"'{self.path}' is not a studykit study file (it is not an SQLite database): "
                "pass the .study file made by `studykit study new`, not a data file"
            )

    def _not_writable(self) -> str | None:
        """Why this study file cannot be written to (read-only file or folder), else None."""
        if not os.access(self.path.parent, os.W_OK):
            return (
                f"the folder '{self.path.parent}' is read-only, and a study file needs its "
                "folder writable for its journal"
            )
        if not os.access(self.path, os.W_OK):
            return f"the study file '{self.path}' is read-only"
        return None

    def _connect(self, *, write: bool = False) -> sqlite3.Connection:
        try:
            conn = sqlite3.connect(
                self.path, timeout=_BUSY_TIMEOUT_S, isolation_level=None, factory=_ChainConnection
            )
            conn.execute(f"PRAGMA busy_timeout = {int(_BUSY_TIMEOUT_S * 1000)}")
            conn.execute("PRAGMA synchronous = FULL")
            conn.execute("PRAGMA foreign_keys = ON")
            if not write:
                conn.execute("SELECT count(*) FROM sqlite_master").fetchone()  # opens the WAL
        except (sqlite3.DatabaseError, UnicodeDecodeError) as exc:
            why = self._not_writable()
            if why is not None and not write:
                return self._connect_read_only(why, exc)
            if why is not None:
                raise StudyFileError(
                    f"cannot save to study file '{self.path}': {why}. Copy the study file to a "
                    "folder where you may write, or ask for write permission"
                ) from None
            raise StudyFileError(f"cannot open study file '{self.path}': {exc}") from None
        return conn

    def _connect_read_only(self, why: str, exc: Exception) -> sqlite3.Connection:
        """Read a study file in a read-only place (an archive share, a CD): open it as
        immutable. Refused when a journal with unsaved changes lies beside it, since reading
        without the journal would show an older state."""
        wal = Path(f"{self.path}-wal")
        if wal.exists() and wal.stat().st_size > 0:
            raise StudyFileError(
                f"cannot read study file '{self.path}' ({exc}): {why}, and its journal "
                f"'{wal.name}' holds changes not yet merged. Copy both files to a folder where "
                "you may write and open the copy"
            ) from None
        uri = self.path.resolve().as_uri() + "?immutable=1"
        try:
            conn = sqlite3.connect(uri, uri=True, isolation_level=None, factory=_ChainConnection)
            conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        except (sqlite3.DatabaseError, UnicodeDecodeError) as exc2:
            raise StudyFileError(f"cannot open study file '{self.path}': {exc2}") from None
        return conn

    def _check_version(self, conn: sqlite3.Connection) -> int:
        try:
            app_id = conn.execute("PRAGMA application_id").fetchone()[0]
            version = conn.execute("PRAGMA user_version").fetchone()[0]
        except (sqlite3.DatabaseError, UnicodeDecodeError) as exc:
            raise StudyFileError(
                f"'{self.path}' is damaged or not a study file ({exc}): restore it from a backup"
            ) from None
        if app_id != APPLICATION_ID:
            raise StudyFileError(
                f"'{self.path}' is an SQLite database but not a studykit study file "
                f"(application id {app_id:#x}, expected {APPLICATION_ID:#x})"
            )
        if version > SCHEMA_VERSION:
            raise StudyFileError(
                f"'{self.path}' was made by a newer studykit (schema {version}, this one reads up "
                f"to {SCHEMA_VERSION}): update studykit"
            )
        return version

    @property
    def schema_version(self) -> int:
        """The file's schema version (PRAGMA user_version)."""
        conn = self._connect()
        try:
            return conn.execute("PRAGMA user_version").fetchone()[0]
        finally:
            conn.close()

    # -- transactions --------------------------------------------------------------------------
    @contextmanager
    def _read(self):
        conn = self._connect()
        try:
            conn.execute("BEGIN")
            yield conn
            conn.execute("COMMIT")
        except sqlite3.DatabaseError as exc:
            raise StudyFileError(f"cannot read study file '{self.path}': {exc}") from None
        except StudyInputError:
            raise
        except _DAMAGE as exc:
            raise StudyFileError(_damaged(self.path, exc)) from None
        finally:
            conn.close()

    def _refuse_if_not_writable(self) -> None:
        """A clear error when the file or its folder may not be written (nothing was changed)."""
        why = self._not_writable()
        if why is not None:
            raise StudyFileError(
                f"cannot save to study file '{self.path}': {why}; nothing was changed. "
                "Copy the study file to a folder where you may write, or ask for write "
                "permission"
            ) from None

    @contextmanager
    def _write(self):
        conn = self._connect(write=True)
        try:
            try:
                conn.execute("BEGIN IMMEDIATE")
            except sqlite3.OperationalError as exc:
                self._refuse_if_not_writable()
                raise StudyFileError(
                    f"study file '{self.path}' is busy or read-only ({exc}): try again, or check "
                    "that you may write to it"
                ) from None
            try:
                before = self._check_expected(conn)
                _chain_begin(conn)
                yield conn
                _chain_finish(conn)
                self.last_write = (before, self._version(conn))
                conn.execute("COMMIT")
            except sqlite3.DatabaseError as exc:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                if any(w in str(exc) for w in ("malformed", "not a database", "corrupt")):
                    raise StudyFileError(
                        _damaged(self.path, exc) + "; nothing was changed"
                    ) from None
                self._refuse_if_not_writable()
                raise StudyFileError(
                    f"could not save to study file '{self.path}' ({exc}); nothing was changed: "
                    "check free disk space and write permission, then try again"
                ) from None
            except StudyInputError:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                raise
            except _DAMAGE as exc:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                raise StudyFileError(_damaged(self.path, exc) + "; nothing was changed") from None
            except BaseException:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                raise
        finally:
            conn.close()

    # -- versions: what a view of the study was drawn from ------------------------------------
    @staticmethod
    def _version(conn) -> int:
        return int(conn.execute("SELECT coalesce(max(id), 0) FROM audit_log").fetchone()[0])

    def version(self) -> int:
        """The study file's version: the id of its newest audit entry (every write adds one)."""
        with self._read() as conn:
            return self._version(conn)

    def entries_since(self, version: int) -> list[AuditEntry]:
        """Audit entries written after ``version`` (see :meth:`version`), oldest first."""
        with self._read() as conn:
            rows = conn.execute(
                "SELECT id, at, who, what, why, detail_json FROM audit_log WHERE id > ? "
                "ORDER BY id",
                (int(version),),
            ).fetchall()
        return [
            AuditEntry(i, at, who, what, why, json.loads(d)) for i, at, who, what, why, d in rows
        ]

    @contextmanager
    def expecting(self, version: int | None):
        """Writes inside this block are refused (:class:`StaleView`) when the file changed
        after ``version``: the person acted on an older view. None: no check.

        The check runs inside each write's transaction, so nothing can slip in between.
        """
        previous = getattr(self, "_expected", None)
        self._expected = version
        try:
            yield self
        finally:
            self._expected = previous

    def _check_expected(self, conn) -> int:
        """Inside a write transaction: the current version, or StaleView if it moved on."""
        current = self._version(conn)
        expected = getattr(self, "_expected", None)
        if expected is not None and current != int(expected):
            rows = conn.execute(
                "SELECT id, at, who, what, why, detail_json FROM audit_log WHERE id > ? "
                "ORDER BY id",
                (int(expected),),
            ).fetchall()
            newer = [
                AuditEntry(i, at, who, what, why, json.loads(d))
                for i, at, who, what, why, d in rows
            ]
            raise StaleView(
                "the study changed after this view of it was drawn ("
                + (describe_entries(newer) or "a newer entry")
                + "); nothing was saved. Look "
                "at the study as it is now and do it again if it still applies",
                newer,
            )
        return current

    @staticmethod
    def _audit(
        conn,
        *,
        who: str,
        what: str,
        why: str = "",
        detail: Mapping | None = None,
        when: str | None = None,
    ) -> int:
        """Append one audit entry to the chain; it claims every row written since the last
        entry of this transaction (see :func:`check_chain`)."""
        return _append_entry(
            conn, who=who, what=what, why=why, detail=dict(detail or {}), when=when
        )

    # -- create --------------------------------------------------------------------------------
    @classmethod
    def create(
        cls,
        path: str | os.PathLike,
        *,
        data: bytes,
        filename: str,
        title: str,
        part: str = "",
        supplier: str = "",
        characteristics: Iterable[Characteristic] | Mapping[str, Characteristic] = (),
        criteria: Mapping[str, Criteria] | None = None,
        who: str = "",
        overwrite: bool = False,
        extra_files: Iterable[tuple[str, bytes]] = (),
        when: str | None = None,
    ) -> StudyFile:
        """Create a new study file holding ``data`` and the first specifications.

        ``when`` (ISO 8601 UTC, default now) is the time of the creation entry.

        The file is built under a temporary name beside ``path`` and moved into place only when
        complete, so a crash never leaves a half-made study file. An existing file is refused
        unless ``overwrite=True``. ``extra_files`` are further measurement files,
        ``(filename, bytes)``; a characteristic names its file with ``Characteristic.source``.

        Returns
        -------
        StudyFile
        """
        path = Path(path)
        study = Study(
            title=title,
            part=part,
            supplier=supplier,
            data=data,
            data_filename=Path(str(filename)).name,
            characteristics=characteristics,
            criteria=criteria or {},
            extra_files=tuple(DataFile(Path(str(n)).name, b) for n, b in extra_files),
        )
        if path.exists() and not overwrite:
            raise StudyFileError(
                f"'{path}' already exists: choose another name or pass overwrite=True "
                "(`--force` on the command line)"
            )
        if not path.parent.exists():
            raise StudyFileError(f"folder '{path.parent}' does not exist: create it first")
        tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
        for leftover in (tmp, Path(f"{tmp}-wal"), Path(f"{tmp}-shm"), Path(f"{tmp}-journal")):
            leftover.unlink(missing_ok=True)
        conn = sqlite3.connect(tmp, isolation_level=None, factory=_ChainConnection)
        try:
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = FULL")
            conn.execute("BEGIN IMMEDIATE")
            _apply_migrations(conn, 0)
            _chain_begin(conn, claim_existing=True)
            at = when or now_utc()
            who = (who or "").strip() or "unknown"
            meta = {
                "title": study.title,
                "part": study.part,
                "supplier": study.supplier,
                "created_at": at,
                "created_by": who,
                "created_with": f"studykit {__version__}",
            }
            conn.executemany("INSERT INTO meta (key, value) VALUES (?, ?)", meta.items())
            conn.execute(
                "INSERT INTO data_files (filename, sha256, size, content, added_at, added_by) "
                "VALUES (?, ?, ?, ?, ?, ?)",
                (study.data_filename, study.data_sha256, len(study.data), study.data, at, who),
            )
            for f in study.extra_files:
                conn.execute(
                    "INSERT INTO data_files (filename, sha256, size, content, added_at, added_by) "
                    "VALUES (?, ?, ?, ?, ?, ?)",
                    (f.filename, f.sha256, len(f.data), f.data, at, who),
                )
            for pos, (name, c) in enumerate(study.characteristics.items()):
                crit = study.criteria.get(name)
                conn.execute(
                    "INSERT INTO characteristics (position, name, spec_json, criteria_json) "
                    "VALUES (?, ?, ?, ?)",
                    (
                        pos,
                        name,
                        _dumps(c.to_dict()),
                        None if crit is None else _dumps(crit.to_dict()),
                    ),
                )
            cls._audit(
                conn,
                who=who,
                when=at,
                what=f"create study '{study.title}' from '{study.data_filename}'",
                detail={
                    "data_sha256": study.data_sha256,
                    "characteristics": list(study.characteristics),
                },
            )
            _chain_finish(conn)
            conn.execute("COMMIT")
            conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        except BaseException:
            conn.close()
            tmp.unlink(missing_ok=True)
            raise
        conn.close()
        if overwrite:
            os.replace(tmp, path)
        else:
            try:
                os.link(tmp, path)
            except FileExistsError:
                tmp.unlink(missing_ok=True)
                raise StudyFileError(f"'{path}' already exists: choose another name") from None
            except OSError:
                os.replace(tmp, path)
            tmp.unlink(missing_ok=True)
        return cls(path)

    # -- load ----------------------------------------------------------------------------------
    def load(self) -> Study:
        """The study as it stands: first specifications with every decision replayed.

        Raises :class:`StudyFileError` when the stored data copy does not match its SHA-256,
        or when the audit chain is broken (the file was altered outside studykit; the message
        names the first break, :meth:`check_chain` lists them all).
        """
        with self._read() as conn:
            study = self._load(conn)
            # the data copies were just hashed and matched their sha256 column: the chain
            # check uses those hashes instead of reading the copies again
            known = {
                i: {"content": (sha, n)}
                for i, sha, n in conn.execute("SELECT id, sha256, length(content) FROM data_files")
            }
            chain = check_chain(conn, known_blobs={"data_files": known})
        if not chain.ok:
            raise StudyFileError(
                f"study file '{self.path}' was altered outside studykit: "
                f"{chain.summary()}; `studykit study log` lists every break. "
                "Restore the study file from a backup"
            )
        return study

    def _load(self, conn) -> Study:
        meta = dict(conn.execute("SELECT key, value FROM meta"))
        rows = conn.execute(
            "SELECT filename, sha256, content FROM data_files ORDER BY id"
        ).fetchall()
        if not rows:
            raise StudyFileError(f"study file '{self.path}' holds no data copy: it is damaged")
        for filename, sha, content in rows:
            actual = hashlib.sha256(content).hexdigest()
            if actual != sha:
                raise StudyFileError(
                    f"study file '{self.path}': the stored copy of '{filename}' does not match "
                    f"its recorded SHA-256 (recorded {sha[:12]}..., now {actual[:12]}...): the "
                    "data were altered outside studykit; restore the study file from a backup"
                )
        filename, sha, content = rows[0]
        extra = tuple(DataFile(f, c, sha256=h) for f, h, c in rows[1:])
        chars, crit = [], {}
        for name, spec_json, crit_json in conn.execute(
            "SELECT name, spec_json, criteria_json FROM characteristics ORDER BY position"
        ):
            chars.append(Characteristic.from_dict(json.loads(spec_json)))
            if crit_json is not None:
                crit[name] = Criteria.from_dict(json.loads(crit_json))
        decisions = [
            Decision(
                ch,
                action,
                subgroup=sub,
                reason=reason,
                who=who,
                when=at,
                automatic=bool(auto),
                payload=json.loads(payload),
            )
            for ch, action, sub, reason, who, at, auto, payload in conn.execute(
                "SELECT characteristic, action, subgroup, reason, who, at, automatic, "
                "payload_json FROM decisions ORDER BY id"
            )
        ]
        comments = [
            Comment(text, who=who, when=at, characteristic=ch)
            for ch, text, who, at in conn.execute(
                "SELECT characteristic, text, who, at FROM comments ORDER BY id"
            )
        ]
        signoffs = [
            SignOff(
                name, role, decision, comment=comment, when=at, digest=digest, chain_head=head or ""
            )
            for name, role, decision, comment, at, digest, head in conn.execute(
                "SELECT name, role, decision, comment, at, digest, chain_head FROM signoffs "
                "ORDER BY id"
            )
        ]
        try:
            return Study.replay(
                title=meta.get("title", ""),
                part=meta.get("part", ""),
                supplier=meta.get("supplier", ""),
                data=content,
                data_filename=filename,
                data_sha256=sha,
                characteristics=chars,
                criteria=crit,
                decisions=decisions,
                comments=comments,
                signoffs=signoffs,
                extra_files=extra,
            )
        except StudyFileError:
            raise
        except StudyInputError as exc:
            raise StudyFileError(f"study file '{self.path}' cannot be replayed: {exc}") from None

    # -- appending -----------------------------------------------------------------------------
    def _insert_decisions(self, conn, decisions: Iterable[Decision]) -> list[int]:
        ids = []
        recorded = now_utc()
        for d in decisions:
            cur = conn.execute(
                "INSERT INTO decisions (characteristic, action, subgroup, reason, who, at, "
                "automatic, payload_json, recorded_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    d.characteristic,
                    d.action,
                    d.subgroup,
                    d.reason,
                    d.who,
                    d.when,
                    int(d.automatic),
                    _dumps(dict(d.payload)),
                    recorded,
                ),
            )
            ids.append(cur.lastrowid)
            # one clock per event: the audit entry carries the decision's own time (the removal
            # log and the audit log show the same time); when it was written is kept too
            self._audit(
                conn,
                who=d.who,
                what=_decision_what(d),
                why=d.reason,
                when=d.when,
                detail={
                    "decision_id": cur.lastrowid,
                    "action": d.action,
                    "characteristic": d.characteristic,
                    "subgroup": d.subgroup,
                    "automatic": d.automatic,
                    "decided_at": d.when,
                    "recorded_at": recorded,
                },
            )
        return ids

    def _insert_comment(self, conn, c: Comment) -> int:
        cur = conn.execute(
            "INSERT INTO comments (characteristic, text, who, at) VALUES (?, ?, ?, ?)",
            (c.characteristic, c.text, c.who, c.when),
        )
        on = f" on '{c.characteristic}'" if c.characteristic else ""
        self._audit(
            conn,
            who=c.who,
            what=f"comment{on}",
            when=c.when,
            detail={"comment_id": cur.lastrowid, "text": c.text, "recorded_at": now_utc()},
        )
        return cur.lastrowid

    def _insert_signoff(self, conn, s: SignOff, index: int, signer=None) -> int:
        """Insert a sign-off carrying the chain head it signs; refused on a broken chain (a
        signature on a file altered behind studykit would vouch for the alteration)."""
        chain = check_chain(conn)
        if not chain.ok:
            raise StudyFileError(f"study file '{self.path}' cannot be signed: {chain.summary()}")
        cur = conn.execute(
            "INSERT INTO signoffs (name, role, decision, comment, at, digest, chain_head) "
            "VALUES (?, ?, ?, ?, ?, ?, ?)",
            (s.name, s.role, s.decision, s.comment, s.when, s.digest, chain.head),
        )
        detail = {
            "signoff_index": index,
            "signoff_id": cur.lastrowid,
            "digest": s.digest,
            "chain_head": chain.head,
        }
        if signer is not None:
            row = {
                "name": s.name,
                "role": s.role,
                "decision": s.decision,
                "comment": s.comment,
                "at": s.when,
                "digest": s.digest,
                "chain_head": chain.head,
            }
            detail["signature"] = sign_signoff_payload(_signoff_payload(row), *signer)
        self._audit(
            conn,
            who=s.name,
            what=f"sign-off: {names.decision_label(s.decision)} as "
            f"{names.role_label(s.role)}"
            + (" (certificate signature)" if signer is not None else ""),
            why=s.comment,
            when=s.when,
            detail=detail,
        )
        return cur.lastrowid

    def _change(self, make: Callable[[Study], Study]) -> list[int]:
        """Load, derive the new study, append the new decisions; all in one transaction."""
        with self._write() as conn:
            study = self._load(conn)
            new = make(study)
            added = new.decisions[len(study.decisions) :]
            return self._insert_decisions(conn, added)

    def apply(self, change: Callable[[Study], Study]) -> Study:
        """Make several changes at once: ``change(study) -> new study``, saved atomically.

        ``change`` receives the study as it is on file (inside the write transaction, so no
        other writer can slip in between) and returns a study derived from it with the pure
        methods of :class:`~studykit.study.Study` (``exclude``, ``with_spec``, ``with_comment``,
        ``sign`` ...). The new decisions, comments and sign-offs are appended in one
        transaction: all or nothing. Returns the study as saved.

        Examples
        --------
        >>> import tempfile, pathlib
        >>> from studykit.study import Characteristic
        >>> path = pathlib.Path(tempfile.mkdtemp()) / "demo.study"
        >>> sf = StudyFile.create(path, data=b"subgroup,x\\n1,1\\n2,1.2\\n", filename="x.csv",
        ...                       title="demo", characteristics=[Characteristic("x", usl=2)])
        >>> study = sf.apply(lambda s: s.exclude("x", 1, reason="setup", who="A")
        ...                              .exclude("x", 2, reason="setup", who="A"))
        >>> sorted(sf.load().excluded_subgroups("x"))
        ['1', '2']
        """
        with self._write() as conn:
            study = self._load(conn)
            new = change(study)
            if not isinstance(new, Study):
                raise StudyInputError(f"the change must return a Study, got {type(new).__name__}")
            for kind in ("decisions", "comments", "signoffs"):
                old_items, new_items = getattr(study, kind), getattr(new, kind)
                if new_items[: len(old_items)] != old_items:
                    raise StudyFileError(
                        f"the change rewrote saved {kind}: a study file only grows; derive the "
                        "new study from the one passed in"
                    )
            for attr in ("title", "part", "supplier", "data_sha256"):
                if getattr(new, attr) != getattr(study, attr):
                    raise StudyFileError(
                        f"the change altered the study's {attr}, which is "
                        "fixed when the file is created"
                    )
            self._insert_decisions(conn, new.decisions[len(study.decisions) :])
            for c in new.comments[len(study.comments) :]:
                self._insert_comment(conn, c)
            for i, s in enumerate(new.signoffs[len(study.signoffs) :], start=len(study.signoffs)):
                self._insert_signoff(conn, s, i)
            saved = self._load(conn)
            added = new.decisions[len(study.decisions) :]
            if (
                study.is_locked
                and saved.content_digest() != study.content_digest()
                and not any(d.action == "void_signoff" for d in added)
            ):
                raise StudyFileError(
                    "the study is approved and therefore locked: pass override_lock=True with a "
                    "reason to the change that needs it"
                )
            if saved.content_digest() != new.content_digest():
                raise StudyFileError(
                    "the change cannot be saved as decisions (specifications or criteria changed "
                    "without a set_spec/set_criteria decision): use with_spec/with_criteria"
                )
            return saved

    def _record(self, change: Callable[[Study], Study]) -> int:
        """Save one change made by a pure method of :class:`~studykit.study.Study`; returns the
        id of the last decision it appended (after any ``void_signoff`` an override adds)."""
        return self._change(change)[-1]

    def append_decision(
        self, decision: Decision, *, override_lock: bool = False, override_reason: str | None = None
    ) -> int:
        """Append one decision; returns its id.

        A decision that changes the analysis (anything but a note) is refused while the study is
        approved, unless ``override_lock=True`` with ``override_reason``: then the approval and
        every other sign-off still valid are voided by ``void_signoff`` entries written first.
        """
        return self._record(
            lambda s: s.with_decision(
                decision, override_lock=override_lock, override_reason=override_reason
            )
        )

    def exclude(self, characteristic: str, subgroup, *, reason: str, **options) -> int:
        """Record the exclusion of one subgroup; returns the decision id. The options (``who``,
        ``automatic``, ``payload``, ``when``, ``override_lock``, ``override_reason``) are those
        of :meth:`Study.exclude <studykit.study.Study.exclude>`."""
        return self._record(lambda s: s.exclude(characteristic, subgroup, reason=reason, **options))

    def restore(self, characteristic: str, subgroup, *, reason: str, **options) -> int:
        """Record that an excluded subgroup comes back; returns the decision id. The options
        are those of :meth:`Study.restore <studykit.study.Study.restore>`."""
        return self._record(lambda s: s.restore(characteristic, subgroup, reason=reason, **options))

    def update_spec(self, characteristic: str, *, who: str, reason: str, **changes) -> int:
        """Change specification fields (``lsl=``, ``usl=``, ``target=`` ...), recorded as a
        ``set_spec`` decision with old and new values; returns its id. ``when``,
        ``override_lock`` and ``override_reason`` are those of
        :meth:`Study.with_spec <studykit.study.Study.with_spec>`."""
        return self._record(
            lambda s: s.with_spec(characteristic, who=who, reason=reason, **changes)
        )

    def update_criteria(
        self, characteristic: str, criteria: Criteria, *, who: str, reason: str, **options
    ) -> int:
        """Change the acceptance criterion, recorded as a ``set_criteria`` decision; returns its
        id. The options (``when``, ``override_lock``, ``override_reason``) are those of
        :meth:`Study.with_criteria <studykit.study.Study.with_criteria>`."""
        return self._record(
            lambda s: s.with_criteria(characteristic, criteria, who=who, reason=reason, **options)
        )

    def add_comment(
        self, text: str, *, who: str, characteristic: str | None = None, when: str = ""
    ) -> int:
        """Add a comment (allowed on an approved study; it changes no result)."""
        with self._write() as conn:
            study = self._load(conn)
            c = study.with_comment(
                text, who=who, characteristic=characteristic, when=when
            ).comments[-1]
            return self._insert_comment(conn, c)

    def add_signoff(
        self,
        name: str,
        *,
        role: str,
        decision: str,
        comment: str = "",
        when: str = "",
        certificate: tuple | None = None,
        expected_digest: str | None = None,
        check: Callable[[Study, SignOff], None] | None = None,
    ) -> SignOff:
        """Sign the study as it stands now; returns the SignOff with the content digest and the
        chain head it signed.

        ``certificate=(p12_path, passphrase)`` adds a signature with that certificate's key
        over the sign-off and its chain head (kept in its audit entry; the passphrase is never
        stored); :meth:`signoff_signatures` checks it, and the chain check reports one that no
        longer holds.

        ``expected_digest`` is the content digest the signer saw (the page, or ``study show``):
        when the study's content differs from it, nothing is saved and :class:`StaleView` says
        what changed. ``check(study, signoff)`` (e.g. the sign-off rules of
        :mod:`studykit.signoff_rules`) runs inside the same transaction and may refuse by
        raising.
        """
        with self._write() as conn:
            study = self._load(conn)
            s = study.sign(name, role=role, decision=decision, comment=comment, when=when).signoffs[
                -1
            ]
            if expected_digest is not None:
                seen = str(expected_digest).strip().lower()
                if len(seen) < 12 or not s.digest.startswith(seen):
                    raise StaleView(
                        f"the study's content is now {s.digest[:12]}..., not the "
                        f"{seen[:12] or '(empty)'}... that was looked at: data or decisions "
                        "changed after that view was drawn, so the sign-off would cover content "
                        "its signer did not see; nothing was saved. Look at the study as it is "
                        "now and sign again"
                    )
            if check is not None:
                check(study, s)
            self._insert_signoff(conn, s, len(study.signoffs), signer=certificate)
            return self._load(conn).signoffs[-1]

    def attach_result(
        self,
        kind: str,
        characteristic: str | None,
        payload: Mapping[str, Any],
        *,
        who: str,
        override_lock: bool = False,
        override_reason: str | None = None,
        reason: str = "",
        when: str | None = None,
    ) -> int:
        """Keep a result beside the study (e.g. ``kind="gauge_rr"``); returns its id.

        ``when`` (ISO 8601 UTC, default now) is the time it was attached.

        ``reason`` (why it is attached) goes into the audit log's "why".

        Results are evidence, not decisions: they do not enter the content digest. Because a
        result changes what the study reports (a gauge R&R feeds the findings), it is refused
        while the study is approved, unless ``override_lock=True`` with ``override_reason``:
        then every sign-off still valid is voided first, as for any other change.
        """
        kind = (kind or "").strip()
        if not kind:
            raise StudyInputError("`kind` must name the result, e.g. 'gauge_rr'")
        try:
            text = _dumps(dict(payload))
        except (TypeError, ValueError) as exc:
            raise StudyInputError(f"`payload` must hold only JSON values: {exc}") from None
        with self._write() as conn:
            study = self._load(conn)
            if characteristic is not None:
                study.characteristic(characteristic)
            on = f" to '{characteristic}'" if characteristic else ""
            if study.is_locked:
                voids = study._check_lock(
                    f"attaching a {names.result_kind_label(kind)}{on}",
                    override_lock,
                    override_reason,
                    who,
                )
                self._insert_decisions(conn, voids)
            at = when or now_utc()
            cur = conn.execute(
                "INSERT INTO results (kind, characteristic, payload_json, who, at) "
                "VALUES (?, ?, ?, ?, ?)",
                (kind, characteristic, text, who or "unknown", at),
            )
            self._audit(
                conn,
                who=who,
                what=f"attach {names.result_kind_label(kind)}{on}",
                why=reason or "",
                when=at,
                detail={"result_id": cur.lastrowid},
            )
            return cur.lastrowid

    # -- reading records -----------------------------------------------------------------------
    def results(self, kind: str, characteristic: str | None = None) -> list[StoredResult]:
        """Attached results of ``kind`` (of one characteristic when given), oldest first."""
        sql = "SELECT id, kind, characteristic, payload_json, who, at FROM results WHERE kind = ?"
        args: list = [kind]
        if characteristic is not None:
            sql += " AND characteristic = ?"
            args.append(characteristic)
        with self._read() as conn:
            rows = conn.execute(sql + " ORDER BY id", args).fetchall()
            return [StoredResult(i, k, c, json.loads(p), w, a) for i, k, c, p, w, a in rows]

    def audit_log(self) -> list[AuditEntry]:
        """Every audit entry, oldest first."""
        with self._read() as conn:
            rows = conn.execute(
                "SELECT id, at, who, what, why, detail_json FROM audit_log ORDER BY id"
            ).fetchall()
            return [
                AuditEntry(i, at, who, what, why, json.loads(d))
                for i, at, who, what, why, d in rows
            ]

    def check_chain(self) -> ChainCheck:
        """Recompute the audit chain (see :func:`check_chain`); never raises on a break, the
        problems are in the result."""
        with self._read() as conn:
            return check_chain(conn)

    def signoff_signatures(self) -> list[SignoffSignature]:
        """The certificate signature of each sign-off: valid, INVALID (and why) or none."""
        with self._read() as conn:
            return signoff_signatures(conn)

    def chain_entry_hash(self, entry_id: int) -> str | None:
        """The stored ``entry_hash`` of audit entry ``entry_id`` (None when there is none)."""
        with self._read() as conn:
            row = conn.execute(
                "SELECT entry_hash FROM audit_log WHERE id = ?", (int(entry_id),)
            ).fetchone()
        return None if row is None else row[0]

    def require_intact(self) -> ChainCheck:
        """:meth:`check_chain`, raising :class:`StudyFileError` (one line naming the first
        break) when the chain is broken."""
        chain = self.check_chain()
        if not chain.ok:
            raise StudyFileError(
                f"study file '{self.path}' was altered outside studykit: "
                f"{chain.summary()}; `studykit study log` lists every break. "
                "Restore the study file from a backup"
            )
        return chain

    def integrity_check(self) -> str:
        """SQLite's own consistency check of the file: ``"ok"`` when sound."""
        with self._read() as conn:
            return "; ".join(r[0] for r in conn.execute("PRAGMA integrity_check"))


#: errors a damaged study file can raise while it is read (turned into StudyFileError)
_DAMAGE = (
    sqlite3.DatabaseError,
    UnicodeDecodeError,
    ValueError,
    TypeError,
    KeyError,
    IndexError,
    OverflowError,
    AttributeError,
)


def _rollback(conn) -> None:
    try:
        if conn.in_transaction:
            conn.execute("ROLLBACK")
    except sqlite3.DatabaseError:  # a damaged file may refuse even that; nothing was committed
        pass


def _damaged(path, exc) -> str:
    what = type(exc).__name__ if not str(exc) else str(exc).splitlines()[0][:160]
    return f"study file '{path}' is damaged and cannot be read ({what}): restore it from a backup"


class ChangeWatch:
    """Tells cheaply whether anyone wrote to a study file since the last look.

    Keeps one read connection open and asks SQLite's ``PRAGMA data_version``, which changes
    when another connection commits; only then is the file's version (newest audit id) read.
    For the live workbook, which asks a few times a second.
    """

    def __init__(self, study_file: StudyFile):
        self.file = study_file
        self._conn = None
        self._data_version = None

    def version(self) -> int:
        """The file's current version (see :meth:`StudyFile.version`)."""
        try:
            return self._look()
        except sqlite3.DatabaseError:
            # the long-held connection can go bad (the file was replaced, a transient I/O
            # error): look once more on a fresh connection before saying the watch failed
            self.close()
            self._last = None
            return self._look()

    def _look(self) -> int:
        ident = _file_identity(self.file.path)
        if self._conn is not None and ident != self._ident:
            # the file was replaced (a study created again over it, a restored backup): the
            # held connection still reads the old one, so read the new file afresh
            self.close()
            self._last = None
        if self._conn is None:
            self._conn = self.file._connect()
            self._ident = ident
        dv = self._conn.execute("PRAGMA data_version").fetchone()[0]
        if dv != self._data_version or self._last is None:
            self._data_version = dv
            self._last = StudyFile._version(self._conn)
        return self._last

    _last: int | None = None
    _ident: tuple[int, int] | None = None

    def close(self) -> None:
        if self._conn is not None:
            self._conn.close()
            self._conn = None


def _file_identity(path) -> tuple[int, int] | None:
    """(device, inode) of the file at ``path``, or None when it cannot be read."""
    try:
        st = os.stat(path)
    except OSError:
        return None
    return st.st_dev, st.st_ino


def load_study(path: str | os.PathLike) -> Study:
    """Open a study file and return its current :class:`~studykit.study.Study`.

    Shorthand for ``StudyFile(path).load()``; raises :class:`StudyFileError` like it.
    """
    return StudyFile(path).load()
