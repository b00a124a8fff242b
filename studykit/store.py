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

from studykit import __version__
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
    for table in ("meta", "data_files", "characteristics", "decisions", "comments", "signoffs",
                  "audit_log"):
        _append_only(conn, table)


def _migrate_1_to_2(conn: sqlite3.Connection) -> None:
    """Schema 2: attached results (e.g. a gauge R&R beside the characteristic it qualifies)."""
    conn.execute(
        "CREATE TABLE results (id INTEGER PRIMARY KEY AUTOINCREMENT, kind TEXT NOT NULL, "
        "characteristic TEXT, payload_json TEXT NOT NULL, who TEXT NOT NULL, at TEXT NOT NULL)"
    )
    conn.execute("CREATE INDEX results_kind ON results (kind, characteristic)")
    _append_only(conn, "results")


#: MIGRATIONS[v] brings a file from schema v to v + 1; the last one reached is SCHEMA_VERSION
MIGRATIONS: list[Callable[[sqlite3.Connection], None]] = [_migrate_0_to_1, _migrate_1_to_2]
SCHEMA_VERSION = len(MIGRATIONS)


def _apply_migrations(conn: sqlite3.Connection, start: int, stop: int = SCHEMA_VERSION) -> None:
    """Run migrations start..stop-1 inside the caller's transaction, bumping user_version."""
    for version in range(start, stop):
        MIGRATIONS[version](conn)
        conn.execute(f"PRAGMA user_version = {version + 1}")


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
        return {"id": self.id, "when": self.when, "who": self.who, "what": self.what,
                "why": self.why, "detail": self.detail}


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
        return {"id": self.id, "kind": self.kind, "characteristic": self.characteristic,
                "payload": self.payload, "who": self.who, "when": self.when}


def _dumps(obj) -> str:
    return json.dumps(obj, sort_keys=True, ensure_ascii=False, allow_nan=False)


def _decision_what(d: Decision) -> str:
    on = f" of '{d.characteristic}'" if d.characteristic else ""
    if d.action in ("exclude", "restore"):
        return f"{d.action} subgroup {d.subgroup}{on}" + (" (automatic)" if d.automatic else "")
    if d.action == "keep_signal":
        by = " (rejected proposal)" if d.payload.get("origin") == "rejected_proposal" else ""
        return f"keep signal {d.payload.get('rule')} at subgroup {d.subgroup}{on}{by}"
    if d.action == "reopen_signal":
        return f"reopen signal {d.payload.get('rule')} at subgroup {d.subgroup}{on}"
    if d.action == "set_spec":
        changes = ", ".join(f"{k} {d.payload.get('old', {}).get(k)!r} -> {v!r}"
                            for k, v in d.payload.get("changes", {}).items())
        return f"change specification{on}: {changes}"
    if d.action == "set_criteria":
        return f"set criteria{on}: {_dumps(d.payload.get('criteria'))}"
    if d.action == "void_signoff":
        return (f"void sign-off #{d.payload.get('signoff')} ({d.payload.get('role')} by "
                f"{d.payload.get('signer')}) to allow: {d.payload.get('change')}")
    if d.action == "note":
        return f"note{on}"
    return f"{d.action}{on}: {_dumps(dict(d.payload))}"


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
    ["create study 'demo' from 'x.csv'", "exclude subgroup 1 of 'x'"]
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
                    _apply_migrations(conn, version)
                    self._audit(conn, who="studykit",
                                what=f"migrate file from schema {version} to {SCHEMA_VERSION}",
                                why="opened by a newer studykit",
                                detail={"studykit": __version__})
                    conn.execute("COMMIT")
                except BaseException:
                    conn.execute("ROLLBACK")
                    raise
        finally:
            conn.close()

    def __repr__(self) -> str:
        return f"StudyFile({str(self.path)!r})"

    # -- opening -------------------------------------------------------------------------------
    def _check_header(self) -> None:
        if not self.path.exists():
            raise StudyFileError(f"study file '{self.path}' does not exist: check the path, or "
                                 "create it with `studykit study new`")
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
            return (f"the folder '{self.path.parent}' is read-only, and a study file needs its "
                    "folder writable for its journal")
        if not os.access(self.path, os.W_OK):
            return f"the study file '{self.path}' is read-only"
        return None

    def _connect(self, *, write: bool = False) -> sqlite3.Connection:
        try:
            conn = sqlite3.connect(self.path, timeout=_BUSY_TIMEOUT_S, isolation_level=None)
            conn.execute(f"PRAGMA busy_timeout = {int(_BUSY_TIMEOUT_S * 1000)}")
            conn.execute("PRAGMA synchronous = FULL")
            conn.execute("PRAGMA foreign_keys = ON")
            if not write:
                conn.execute("SELECT count(*) FROM sqlite_master").fetchone()  # opens the WAL
        except sqlite3.DatabaseError as exc:
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
            conn = sqlite3.connect(uri, uri=True, isolation_level=None)
            conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        except sqlite3.DatabaseError as exc2:
            raise StudyFileError(f"cannot open study file '{self.path}': {exc2}") from None
        return conn

    def _check_version(self, conn: sqlite3.Connection) -> int:
        try:
            app_id = conn.execute("PRAGMA application_id").fetchone()[0]
            version = conn.execute("PRAGMA user_version").fetchone()[0]
        except sqlite3.DatabaseError as exc:
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
        finally:
            conn.close()

    @contextmanager
    def _write(self):
        conn = self._connect(write=True)
        try:
            try:
                conn.execute("BEGIN IMMEDIATE")
            except sqlite3.OperationalError as exc:
                why = self._not_writable()
                if why is not None:
                    raise StudyFileError(
                        f"cannot save to study file '{self.path}': {why}; nothing was changed. "
                        "Copy the study file to a folder where you may write, or ask for write "
                        "permission"
                    ) from None
                raise StudyFileError(
                    f"study file '{self.path}' is busy or read-only ({exc}): try again, or check "
                    "that you may write to it"
                ) from None
            try:
                yield conn
                conn.execute("COMMIT")
            except sqlite3.DatabaseError as exc:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                why = self._not_writable()
                if why is not None:
                    raise StudyFileError(
                        f"cannot save to study file '{self.path}': {why}; nothing was changed. "
                        "Copy the study file to a folder where you may write, or ask for write "
                        "permission"
                    ) from None
                raise StudyFileError(
                    f"could not save to study file '{self.path}' ({exc}); nothing was changed: "
                    "check free disk space and write permission, then try again"
                ) from None
            except BaseException:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                raise
        finally:
            conn.close()

    @staticmethod
    def _audit(conn, *, who: str, what: str, why: str = "", detail: Mapping | None = None,
               when: str | None = None) -> int:
        cur = conn.execute(
            "INSERT INTO audit_log (at, who, what, why, detail_json) VALUES (?, ?, ?, ?, ?)",
            (when or now_utc(), who or "unknown", what, why or "", _dumps(dict(detail or {}))),
        )
        return cur.lastrowid

    # -- create --------------------------------------------------------------------------------
    @classmethod
    def create(cls, path: str | os.PathLike, *, data: bytes, filename: str, title: str,
               part: str = "", supplier: str = "",
               characteristics: Iterable[Characteristic] | Mapping[str, Characteristic] = (),
               criteria: Mapping[str, Criteria] | None = None, who: str = "",
               overwrite: bool = False,
               extra_files: Iterable[tuple[str, bytes]] = ()) -> StudyFile:
        """Create a new study file holding ``data`` and the first specifications.

        The file is built under a temporary name beside ``path`` and moved into place only when
        complete, so a crash never leaves a half-made study file. An existing file is refused
        unless ``overwrite=True``. ``extra_files`` are further measurement files,
        ``(filename, bytes)``; a characteristic names its file with ``Characteristic.source``.

        Returns
        -------
        StudyFile
        """
        path = Path(path)
        study = Study(title=title, part=part, supplier=supplier, data=data,
                      data_filename=Path(str(filename)).name, characteristics=characteristics,
                      criteria=criteria or {},
                      extra_files=tuple(DataFile(Path(str(n)).name, b) for n, b in extra_files))
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
        conn = sqlite3.connect(tmp, isolation_level=None)
        try:
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = FULL")
            conn.execute("BEGIN IMMEDIATE")
            _apply_migrations(conn, 0)
            at = now_utc()
            who = (who or "").strip() or "unknown"
            meta = {"title": study.title, "part": study.part, "supplier": study.supplier,
                    "created_at": at, "created_by": who, "created_with": f"studykit {__version__}"}
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
                    (pos, name, _dumps(c.to_dict()), None if crit is None else _dumps(crit.to_dict())),
                )
            cls._audit(conn, who=who, when=at,
                       what=f"create study '{study.title}' from '{study.data_filename}'",
                       detail={"data_sha256": study.data_sha256,
                               "characteristics": list(study.characteristics)})
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

        Raises :class:`StudyFileError` when the stored data copy does not match its SHA-256.
        """
        with self._read() as conn:
            return self._load(conn)

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
            Decision(ch, action, subgroup=sub, reason=reason, who=who, when=at,
                     automatic=bool(auto), payload=json.loads(payload))
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
            SignOff(name, role, decision, comment=comment, when=at, digest=digest)
            for name, role, decision, comment, at, digest in conn.execute(
                "SELECT name, role, decision, comment, at, digest FROM signoffs ORDER BY id"
            )
        ]
        try:
            return Study.replay(
                title=meta.get("title", ""), part=meta.get("part", ""),
                supplier=meta.get("supplier", ""), data=content, data_filename=filename,
                data_sha256=sha, characteristics=chars, criteria=crit, decisions=decisions,
                comments=comments, signoffs=signoffs, extra_files=extra,
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
                (d.characteristic, d.action, d.subgroup, d.reason, d.who, d.when,
                 int(d.automatic), _dumps(dict(d.payload)), recorded),
            )
            ids.append(cur.lastrowid)
            self._audit(conn, who=d.who, what=_decision_what(d), why=d.reason,
                        detail={"decision_id": cur.lastrowid, "action": d.action,
                                "characteristic": d.characteristic, "subgroup": d.subgroup,
                                "automatic": d.automatic, "decided_at": d.when})
        return ids

    def _insert_comment(self, conn, c: Comment) -> int:
        cur = conn.execute(
            "INSERT INTO comments (characteristic, text, who, at) VALUES (?, ?, ?, ?)",
            (c.characteristic, c.text, c.who, c.when),
        )
        on = f" on '{c.characteristic}'" if c.characteristic else ""
        self._audit(conn, who=c.who, what=f"comment{on}",
                    detail={"comment_id": cur.lastrowid, "text": c.text})
        return cur.lastrowid

    def _insert_signoff(self, conn, s: SignOff, index: int) -> int:
        cur = conn.execute(
            "INSERT INTO signoffs (name, role, decision, comment, at, digest) "
            "VALUES (?, ?, ?, ?, ?, ?)",
            (s.name, s.role, s.decision, s.comment, s.when, s.digest),
        )
        self._audit(conn, who=s.name, what=f"sign-off: {s.decision} as {s.role}", why=s.comment,
                    detail={"signoff_index": index, "signoff_id": cur.lastrowid,
                            "digest": s.digest})
        return cur.lastrowid

    def _change(self, make: Callable[[Study], Study]) -> list[int]:
        """Load, derive the new study, append the new decisions; all in one transaction."""
        with self._write() as conn:
            study = self._load(conn)
            new = make(study)
            added = new.decisions[len(study.decisions):]
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
                if new_items[:len(old_items)] != old_items:
                    raise StudyFileError(
                        f"the change rewrote saved {kind}: a study file only grows; derive the "
                        "new study from the one passed in"
                    )
            for attr in ("title", "part", "supplier", "data_sha256"):
                if getattr(new, attr) != getattr(study, attr):
                    raise StudyFileError(f"the change altered the study's {attr}, which is "
                                         "fixed when the file is created")
            self._insert_decisions(conn, new.decisions[len(study.decisions):])
            for c in new.comments[len(study.comments):]:
                self._insert_comment(conn, c)
            for i, s in enumerate(new.signoffs[len(study.signoffs):], start=len(study.signoffs)):
                self._insert_signoff(conn, s, i)
            saved = self._load(conn)
            added = new.decisions[len(study.decisions):]
            if (study.is_locked and saved.content_digest() != study.content_digest()
                    and not any(d.action == "void_signoff" for d in added)):
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

    def append_decision(self, decision: Decision, *, override_lock: bool = False,
                        override_reason: str | None = None) -> int:
        """Append one decision; returns its id.

        A decision that changes the analysis (anything but a note) is refused while the study is
        approved, unless ``override_lock=True`` with ``override_reason``: then the approval and
        every other sign-off still valid are voided by ``void_signoff`` entries written first.
        """
        ids = self._change(lambda s: s.with_decision(
            decision, override_lock=override_lock, override_reason=override_reason))
        return ids[-1]

    def exclude(self, characteristic: str, subgroup, *, reason: str, who: str = "",
                automatic: bool = False, payload: Mapping | None = None, when: str = "",
                **lock) -> int:
        """Record the exclusion of one subgroup; returns the decision id."""
        return self.append_decision(
            Decision(characteristic, "exclude", subgroup=subgroup, reason=reason, who=who,
                     automatic=automatic, payload=payload or {}, when=when), **lock)

    def restore(self, characteristic: str, subgroup, *, reason: str, who: str = "",
                automatic: bool = False, when: str = "", **lock) -> int:
        """Record that an excluded subgroup comes back; returns the decision id."""
        return self.append_decision(
            Decision(characteristic, "restore", subgroup=subgroup, reason=reason, who=who,
                     automatic=automatic, when=when), **lock)

    def update_spec(self, characteristic: str, *, who: str, reason: str, when: str = "",
                    override_lock: bool = False, override_reason: str | None = None,
                    **changes) -> int:
        """Change specification fields (``lsl=``, ``usl=``, ``target=`` ...), recorded as a
        ``set_spec`` decision with old and new values; returns its id."""
        ids = self._change(lambda s: s.with_spec(
            characteristic, who=who, reason=reason, when=when, override_lock=override_lock,
            override_reason=override_reason, **changes))
        return ids[-1]

    def update_criteria(self, characteristic: str, criteria: Criteria, *, who: str, reason: str,
                        when: str = "", override_lock: bool = False,
                        override_reason: str | None = None) -> int:
        """Change the acceptance criterion, recorded as a ``set_criteria`` decision."""
        ids = self._change(lambda s: s.with_criteria(
            characteristic, criteria, who=who, reason=reason, when=when,
            override_lock=override_lock, override_reason=override_reason))
        return ids[-1]

    def add_comment(self, text: str, *, who: str, characteristic: str | None = None,
                    when: str = "") -> int:
        """Add a comment (allowed on an approved study; it changes no result)."""
        with self._write() as conn:
            study = self._load(conn)
            c = study.with_comment(text, who=who, characteristic=characteristic,
                                   when=when).comments[-1]
            return self._insert_comment(conn, c)

    def add_signoff(self, name: str, *, role: str, decision: str, comment: str = "",
                    when: str = "") -> SignOff:
        """Sign the study as it stands now; returns the SignOff with the content digest."""
        with self._write() as conn:
            study = self._load(conn)
            s = study.sign(name, role=role, decision=decision, comment=comment,
                           when=when).signoffs[-1]
            self._insert_signoff(conn, s, len(study.signoffs))
            return s

    def attach_result(self, kind: str, characteristic: str | None, payload: Mapping[str, Any],
                      *, who: str, override_lock: bool = False,
                      override_reason: str | None = None, reason: str = "") -> int:
        """Keep a result beside the study (e.g. ``kind="gauge_rr"``); returns its id.

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
                voids = study._check_lock(f"attaching a {kind} result{on}", override_lock,
                                          override_reason, who)
                self._insert_decisions(conn, voids)
            at = now_utc()
            cur = conn.execute(
                "INSERT INTO results (kind, characteristic, payload_json, who, at) "
                "VALUES (?, ?, ?, ?, ?)", (kind, characteristic, text, who or "unknown", at),
            )
            self._audit(conn, who=who, what=f"attach {kind} result{on}", why=reason or "",
                        detail={"result_id": cur.lastrowid})
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
        return [AuditEntry(i, at, who, what, why, json.loads(d)) for i, at, who, what, why, d in rows]

    def integrity_check(self) -> str:
        """SQLite's own consistency check of the file: ``"ok"`` when sound."""
        with self._read() as conn:
            return "; ".join(r[0] for r in conn.execute("PRAGMA integrity_check"))


def load_study(path: str | os.PathLike) -> Study:
    """Open a study file and return its current :class:`~studykit.study.Study`.

    Shorthand for ``StudyFile(path).load()``; raises :class:`StudyFileError` like it.
    """
    return StudyFile(path).load()
