"""The archive: an append-only, hash-chained SQLite file of signed records, corrections, voids and keys.

One table, ``entries``; every row is one entry:

========== ==========================================================================================
kind       what the entry holds (``content`` is always the exact stored bytes)
========== ==========================================================================================
record     a signed record (its first version, or the same version with more signatures)
supersede  the first archived copy of a corrected version (``version`` > 1); ``reason`` is mandatory
void       a signed statement that a record must no longer be used; ``reason`` is mandatory
key        a registered public key (name, user id, fingerprint, raw key, registered time)
========== ==========================================================================================

Every entry carries ``prev_hash``, the ``entry_hash`` of the entry before it (64 zeros for the first),
and its own ``entry_hash`` = SHA-256 of the RFC 8785 canonical JSON [ref:rfc8785] of its fields (seq,
kind, subject, version, content_hash, reason, created, prev_hash). ``prev_hash`` is UNIQUE, so the chain
cannot fork; triggers refuse every UPDATE and DELETE.

Durability and concurrency: WAL journal, ``synchronous=FULL`` (a commit is on disk before it returns),
and every append opens ``BEGIN IMMEDIATE`` before it reads the chain head, so concurrent writers queue
instead of racing for the same head [ref:sqlite-docs]. The new head (seq and entry hash) is returned by
every write and printed by the command line: keep a copy elsewhere, and ``verify(expected_head=...)``
detects an archive that was truncated behind it.

:meth:`Archive.export` writes each record as ``<hash>.json`` (its exact bytes) with its renderings, the
chain as ``chain.jsonl`` and the head as ``HEAD``; :func:`rebuild` makes a new archive from such a folder
alone and checks that it ends at the same head.

The default archive is ``protocols/archive.sqlite`` (relative to the working folder); ``--archive PATH``
or the ``COLDMARGIN_ARCHIVE`` environment variable choose another.
"""

from __future__ import annotations

import base64
import hashlib
import os
import sqlite3
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from planner.errors import InputError
from planner.keys import KeyRing, PublicKeyEntry, SigningKey, check_fingerprint, utc_now
from planner.records import (
    ALGORITHM,
    canonical_bytes,
    check_time,
    load_record,
    parse_json_strict,
    verify_and_load,
    verify_record,
)

ARCHIVE_ENV = "COLDMARGIN_ARCHIVE"
DEFAULT_ARCHIVE = Path("protocols") / "archive.sqlite"
ARCHIVE_SCHEMA = "coldmargin/archive-1"
VOID_SCHEMA = "coldmargin/void-1"
VOID_CONTEXT = b"coldmargin/void-1 signature\n"
GENESIS = "0" * 64
APPLICATION_ID = 0x636D6172  # "cmar" in the SQLite header: says what the file is
BUSY_TIMEOUT_MS = 120_000
KINDS = ("record", "supersede", "void", "key")

_SCHEMA_SQL = """
CREATE TABLE IF NOT EXISTS archive_info (
    key TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS entries (
    seq INTEGER PRIMARY KEY,
    kind TEXT NOT NULL CHECK (kind IN ('record', 'supersede', 'void', 'key')),
    subject TEXT NOT NULL,
    version INTEGER,
    content BLOB NOT NULL,
    content_hash TEXT NOT NULL,
    reason TEXT,
    created TEXT NOT NULL,
    prev_hash TEXT NOT NULL UNIQUE,
    entry_hash TEXT NOT NULL UNIQUE,
    CHECK (kind NOT IN ('supersede', 'void') OR length(trim(reason)) > 0)
);
CREATE INDEX IF NOT EXISTS entries_subject ON entries (subject);
CREATE INDEX IF NOT EXISTS entries_content_hash ON entries (content_hash);
CREATE TRIGGER IF NOT EXISTS entries_no_update BEFORE UPDATE ON entries
BEGIN SELECT RAISE(ABORT, 'the archive is append-only: UPDATE refused'); END;
CREATE TRIGGER IF NOT EXISTS entries_no_delete BEFORE DELETE ON entries
BEGIN SELECT RAISE(ABORT, 'the archive is append-only: DELETE refused'); END;
CREATE TRIGGER IF NOT EXISTS info_no_update BEFORE UPDATE ON archive_info
BEGIN SELECT RAISE(ABORT, 'the archive is append-only: UPDATE refused'); END;
CREATE TRIGGER IF NOT EXISTS info_no_delete BEFORE DELETE ON archive_info
BEGIN SELECT RAISE(ABORT, 'the archive is append-only: DELETE refused'); END;
"""
_TRIGGERS = ("entries_no_update", "entries_no_delete", "info_no_update", "info_no_delete")
_COLUMNS = "seq, kind, subject, version, content, content_hash, reason, created, prev_hash, entry_hash"


def archive_path(given: str | os.PathLike | None = None, environ: dict | None = None) -> Path:
    """The archive to use: ``given`` (``--archive``), else ``COLDMARGIN_ARCHIVE``, else the default."""
    environ = os.environ if environ is None else environ
    if given:
        return Path(given)
    if environ.get(ARCHIVE_ENV):
        return Path(environ[ARCHIVE_ENV])
    return DEFAULT_ARCHIVE


@dataclass(frozen=True)
class Entry:
    """One archive entry (``content`` is the exact stored bytes)."""

    seq: int
    kind: str
    subject: str
    version: int | None
    content: bytes
    content_hash: str
    reason: str | None
    created: str
    prev_hash: str
    entry_hash: str

    @property
    def head(self) -> str:
        """The chain head after this entry, as printed: ``<seq>:<entry hash>``."""
        return f"{self.seq}:{self.entry_hash}"

    def meta(self) -> dict[str, Any]:
        return {
            "seq": self.seq,
            "kind": self.kind,
            "subject": self.subject,
            "version": self.version,
            "content_hash": self.content_hash,
            "reason": self.reason,
            "created": self.created,
            "prev_hash": self.prev_hash,
        }


def entry_hash(meta: dict[str, Any]) -> str:
    """SHA-256 of the canonical JSON of an entry's fields (everything but the content itself)."""
    return hashlib.sha256(canonical_bytes(meta)).hexdigest()


@dataclass
class EntryProblem:
    seq: int | None
    message: str

    def __str__(self) -> str:
        return f"entry {self.seq}: {self.message}" if self.seq is not None else self.message


@dataclass
class ArchiveCheck:
    """The result of :meth:`Archive.verify`."""

    ok: bool
    entries: int
    head_seq: int
    head_hash: str
    problems: list[EntryProblem] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def head(self) -> str:
        return f"{self.head_seq}:{self.head_hash}"

    def lines(self) -> list[str]:
        out = [f"entries      {self.entries}", f"head         {self.head}"]
        out += [f"problem      {p}" for p in self.problems]
        out += [f"note         {n}" for n in self.notes]
        out.append("archive verified" if self.ok else "ARCHIVE VERIFICATION FAILED")
        return out


@dataclass
class _Versions:
    """While verifying: the latest archived copy of each (record id, version), and the record ids seen."""

    latest: dict[tuple[str, int], dict] = field(default_factory=dict)
    subjects: set[str] = field(default_factory=set)


def _row_entry(row: tuple) -> Entry:
    return Entry(row[0], row[1], row[2], row[3], bytes(row[4]), row[5], row[6], row[7], row[8], row[9])


def void_message(statement: dict) -> bytes:
    return VOID_CONTEXT + canonical_bytes({k: v for k, v in statement.items() if k != "signature"})


class Archive:
    """An open archive file. Use :meth:`open`; close with :meth:`close` or a ``with`` block."""

    def __init__(self, path: Path, connection: sqlite3.Connection):
        self.path = path
        self._db = connection

    # ------------------------------------------------------------------------------------------ opening
    @classmethod
    def open(cls, path: str | os.PathLike, create: bool = True) -> Archive:
        """Open (and with ``create``, make) the archive at ``path``."""
        path = Path(path)
        if not path.exists():
            if not create:
                raise InputError("--archive", str(path), "an existing archive file", "nothing was archived there yet")
            if path.parent and not path.parent.exists():
                path.parent.mkdir(parents=True, exist_ok=True)
        elif path.is_dir():
            raise InputError("--archive", str(path), "a file path, not a folder")
        try:
            db = sqlite3.connect(path, timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None)
        except sqlite3.Error as exc:
            raise InputError("--archive", str(path), f"an SQLite file that can be opened ({exc})") from None
        try:
            db.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
            app_id = db.execute("PRAGMA application_id").fetchone()[0]
            tables = {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            if tables and app_id != APPLICATION_ID:
                raise InputError("--archive", str(path), "a coldmargin archive", "this SQLite file is something else")
            for _ in range(50):  # switching to WAL needs a moment alone with the file
                try:
                    mode = db.execute("PRAGMA journal_mode = WAL").fetchone()[0]
                    break
                except sqlite3.OperationalError:
                    time.sleep(0.05)
            else:
                raise InputError("--archive", str(path), "an archive not locked by another program")
            if mode.lower() != "wal":
                raise InputError("--archive", str(path), "a file system where SQLite can use WAL", f"journal mode {mode}")
            db.execute("PRAGMA synchronous = FULL")
            if not tables:
                # one script, one transaction: two programs creating the same archive at once do it once
                try:
                    db.executescript(
                        "BEGIN IMMEDIATE;" + _SCHEMA_SQL
                        + f"PRAGMA application_id = {APPLICATION_ID}; PRAGMA user_version = 1;"
                        + "INSERT OR IGNORE INTO archive_info (key, value) VALUES "
                        + f"('schema', '{ARCHIVE_SCHEMA}'), ('created', '{utc_now()}'); COMMIT;"
                    )
                except BaseException:
                    if db.in_transaction:
                        db.execute("ROLLBACK")
                    raise
        except sqlite3.DatabaseError as exc:
            db.close()
            raise InputError("--archive", str(path), f"a coldmargin archive ({exc})") from None
        except BaseException:
            db.close()
            raise
        return cls(path, db)

    def close(self) -> None:
        self._db.close()

    def __enter__(self) -> Archive:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------------------------------ reading
    def entries(self) -> Iterator[Entry]:
        for row in self._db.execute(f"SELECT {_COLUMNS} FROM entries ORDER BY seq"):
            yield _row_entry(row)

    def head(self) -> tuple[int, str]:
        """``(seq, entry_hash)`` of the last entry; ``(0, 64 zeros)`` for an empty archive."""
        row = self._db.execute("SELECT seq, entry_hash FROM entries ORDER BY seq DESC LIMIT 1").fetchone()
        return (row[0], row[1]) if row else (0, GENESIS)

    def keyring(self) -> KeyRing:
        ring = KeyRing()
        for (content,) in self._db.execute("SELECT content FROM entries WHERE kind = 'key' ORDER BY seq"):
            ring.add(PublicKeyEntry.from_dict(parse_json_strict(bytes(content), "key entry")))
        return ring

    def find(self, ident: str) -> list[Entry]:
        """Entries for a record id, a record hash (full or a prefix of 8+ digits) or an entry number."""
        ident = ident.strip().removeprefix("sha256:")
        if ident.isdigit() and len(ident) < 8:
            rows = self._db.execute(f"SELECT {_COLUMNS} FROM entries WHERE seq = ?", (int(ident),)).fetchall()
        elif len(ident) >= 8:
            rows = self._db.execute(
                f"SELECT {_COLUMNS} FROM entries WHERE subject LIKE ? OR content_hash LIKE ? ORDER BY seq",
                (ident.lower() + "%", ident.lower() + "%"),
            ).fetchall()
            subjects = {r[2] for r in rows}
            if len(subjects) == 1 and rows:  # a hash found: show the whole record it belongs to
                rows = self._db.execute(
                    f"SELECT {_COLUMNS} FROM entries WHERE subject = ? ORDER BY seq", (rows[0][2],)
                ).fetchall()
            elif len(subjects) > 1:
                raise InputError("ID", ident, "a prefix that names one record", f"{len(subjects)} records match")
        else:
            raise InputError("ID", ident, "a record id or hash (8 or more characters) or an entry number")
        if not rows:
            raise InputError("ID", ident, "a record id, record hash or entry number in this archive")
        return [_row_entry(r) for r in rows]

    def record_entries(self, record_id: str) -> list[Entry]:
        rows = self._db.execute(
            f"SELECT {_COLUMNS} FROM entries WHERE subject = ? ORDER BY seq", (record_id,)
        ).fetchall()
        return [_row_entry(r) for r in rows]

    def status(self, record_id: str) -> dict[str, Any]:
        """Versions of a record, the latest archived copy of each, and whether it was voided."""
        versions: dict[int, list[Entry]] = {}
        voided = None
        for e in self.record_entries(record_id):
            if e.kind == "void":
                voided = e
            elif e.kind in ("record", "supersede"):
                versions.setdefault(e.version, []).append(e)
        current = max(versions) if versions else None
        return {
            "record_id": record_id,
            "versions": {v: [e.content_hash for e in es] for v, es in sorted(versions.items())},
            "current_version": current,
            "voided": None if voided is None else {"seq": voided.seq, "reason": voided.reason},
        }

    # ------------------------------------------------------------------------------------------ writing
    def _append(self, subject: str, version: int | None, content: bytes, check) -> Entry:
        """Append one entry under ``BEGIN IMMEDIATE``.

        ``check(db)`` runs inside the transaction, after the lock is held: it raises to refuse, returns an
        existing :class:`Entry` when there is nothing to add, or returns ``(kind, reason)`` for the new entry.
        """
        db = self._db
        db.execute("BEGIN IMMEDIATE")
        try:
            decided = check(db)
            if isinstance(decided, Entry):
                db.execute("ROLLBACK")
                return decided
            kind, reason = decided
            seq, prev = self.head()
            meta = {
                "seq": seq + 1,
                "kind": kind,
                "subject": subject,
                "version": version,
                "content_hash": hashlib.sha256(content).hexdigest(),
                "reason": reason,
                "created": utc_now(),
                "prev_hash": prev,
            }
            digest = entry_hash(meta)
            db.execute(
                f"INSERT INTO entries ({_COLUMNS}) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (meta["seq"], kind, subject, version, content, meta["content_hash"], reason, meta["created"], prev, digest),
            )
            db.execute("COMMIT")
        except BaseException:
            if db.in_transaction:
                db.execute("ROLLBACK")
            raise
        return Entry(meta["seq"], kind, subject, version, content, meta["content_hash"], reason, meta["created"], prev, digest)

    def register_key(self, key: PublicKeyEntry, allow_second_key: bool = False) -> Entry:
        """Register a public key. The same key again is a no-op; a second key for a user id needs
        ``allow_second_key`` (a new key after a lost one is an explicit act, never a side effect)."""
        key = PublicKeyEntry(key.name, key.user_id, key.fingerprint, key.public_key, key.registered or utc_now())
        content = canonical_bytes(key.to_dict())
        PublicKeyEntry.from_dict(parse_json_strict(content, "key"))  # fingerprint matches the key

        def check(db):
            ring = self.keyring()
            same = ring.get(key.fingerprint)
            if same is not None:
                if (same.name, same.user_id) != (key.name, key.user_id):
                    raise InputError("key", key.fingerprint, "a key not yet registered", f"registered to {same.name} <{same.user_id}>")
                return self._key_entry(key.fingerprint)
            others = ring.for_user(key.user_id)
            if others and not allow_second_key:
                raise InputError(
                    "user_id", key.user_id, "a user id without a registered key",
                    f"{key.user_id} already has key {others[0].fingerprint}; register a new key with 'coldmargin keygen'",
                )
            return ("key", None)

        return self._append(key.fingerprint, None, content, check)

    def _key_entry(self, key_fingerprint: str) -> Entry:
        row = self._db.execute(
            f"SELECT {_COLUMNS} FROM entries WHERE kind = 'key' AND subject = ? ORDER BY seq LIMIT 1", (key_fingerprint,)
        ).fetchone()
        return _row_entry(row)

    def append_record(self, data: bytes) -> Entry:
        """Append a signed record (exact stored bytes). Every signature must verify with keys registered here.

        The same bytes again return the existing entry. A copy of an archived version with more signatures
        is a ``record`` entry; the first copy of version ``n > 1`` is a ``supersede`` entry with the record's
        reason; a voided record takes no new entries.
        """
        data = bytes(data)
        # keys are only ever added, so a key ring read before the transaction stays valid inside it
        result, record = verify_and_load(data, self.keyring())
        if record is None:
            raise InputError("record", "; ".join(result.problems), "a well-formed record file")
        body = record["body"]
        rid, version = body["record_id"], body["version"]
        digest = result.record_hash

        def check(db):
            row = db.execute(f"SELECT {_COLUMNS} FROM entries WHERE content_hash = ? AND kind IN ('record', 'supersede')", (digest,)).fetchone()
            if row is not None:
                return _row_entry(row)
            if not result.ok:
                raise InputError(
                    "record", "; ".join(result.problems), "a record whose every signature verifies with keys registered in this archive",
                    "; ".join(f"signature {s.index + 1}: {s.status} {s.reason}" for s in result.signatures if s.status != "valid") or None,
                )
            status = self.status(rid)
            if status["voided"]:
                raise InputError("record", rid, "a record that was not voided", f"voided: {status['voided']['reason']}")
            versions = status["versions"]
            if version in versions:
                latest = load_record(self._content(versions[version][-1]))
                n = len(latest["signatures"])
                if record["body"] != latest["body"] or record["signatures"][:n] != latest["signatures"]:
                    raise InputError(
                        "record", f"{rid} version {version}",
                        "the archived version with signatures added after its own (a correction is a new version)",
                    )
                if len(record["signatures"]) <= n:
                    raise InputError("record", f"{rid} version {version}", "more signatures than the archived copy has")
            elif version == 1:
                if versions:
                    raise InputError("record", rid, "a record id not yet archived")
            else:
                if version - 1 not in versions or max(versions) != version - 1:
                    raise InputError(
                        "body.version", version, f"the next version of {rid} (archived: {sorted(versions) or 'none'})"
                    )
                if body["supersedes"]["record_hash"] not in versions[version - 1]:
                    raise InputError(
                        "body.supersedes.record_hash", body["supersedes"]["record_hash"],
                        f"the hash of an archived copy of {rid} version {version - 1}",
                    )
                return ("supersede", body["supersedes"]["reason"])
            return ("record", None)

        return self._append(rid, version, data, check)

    def _content(self, content_hash: str) -> bytes:
        row = self._db.execute("SELECT content FROM entries WHERE content_hash = ? LIMIT 1", (content_hash,)).fetchone()
        return bytes(row[0])

    def void(self, record_id: str, reason: str, key: SigningKey, signed: str | None = None) -> Entry:
        """Void a record (every version): a signed statement with a mandatory reason."""
        if not isinstance(reason, str) or not reason.strip():
            raise InputError("--reason", reason, "the reason for voiding, in words (mandatory)")
        statement = {
            "schema": VOID_SCHEMA,
            "record_id": record_id,
            "reason": reason.strip(),
            "printed_name": key.name,
            "user_id": key.user_id,
            "signed": check_time(signed, "signed") if signed else utc_now(),
            "key_fingerprint": key.fingerprint,
            "algorithm": ALGORITHM,
        }
        statement["signature"] = base64.b64encode(key.sign(void_message(statement))).decode("ascii")
        content = canonical_bytes(statement)

        def check(db):
            registered = self.keyring().get(key.fingerprint)
            if registered is None or (registered.name, registered.user_id) != (key.name, key.user_id):
                raise InputError("--key", key.fingerprint, "a key registered in this archive")
            status = self.status(record_id)
            if status["current_version"] is None:
                raise InputError("ID", record_id, "a record id in this archive")
            if status["voided"]:
                raise InputError("ID", record_id, "a record not voided yet", f"voided in entry {status['voided']['seq']}")
            return ("void", reason.strip())

        return self._append(record_id, None, content, check)

    # -------------------------------------------------------------------------------------- verification
    def verify(self, expected_head: str | None = None, check_records: bool = True) -> ArchiveCheck:
        """Walk the whole chain and name every entry that is missing, out of place, altered or invalid.

        ``expected_head`` is a head kept elsewhere (``<seq>:<hash>`` or the hash alone): an archive that no
        longer contains it was truncated or replaced.
        """
        db = self._db
        db.execute("BEGIN")  # one consistent snapshot while writers go on
        try:
            return self._verify(expected_head, check_records)
        finally:
            db.execute("ROLLBACK")

    def _verify(self, expected_head: str | None, check_records: bool) -> ArchiveCheck:
        problems: list[EntryProblem] = []
        notes: list[str] = []
        triggers = {r[0] for r in self._db.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'")}
        missing = [t for t in _TRIGGERS if t not in triggers]
        if missing:
            problems.append(EntryProblem(None, f"append-only triggers missing ({', '.join(missing)}): rows can be changed behind the tool's back"))
        ring = KeyRing()
        prev_seq, prev_hash = 0, GENESIS
        seen_hashes: dict[str, int] = {}
        voided: set[str] = set()
        copies = _Versions()
        count = 0
        for e in self.entries():
            count += 1
            if e.seq != prev_seq + 1:
                gap = f"entry {prev_seq + 1}" if e.seq == prev_seq + 2 else f"entries {prev_seq + 1} to {e.seq - 1}"
                problems.append(EntryProblem(e.seq, f"{gap} missing before it (deleted or renumbered)"))
            if e.prev_hash != prev_hash:
                problems.append(EntryProblem(
                    e.seq, f"does not follow entry {prev_seq}: its prev_hash is not that entry's hash (an entry was deleted, inserted or reordered)"
                ))
            if entry_hash(e.meta()) != e.entry_hash:
                problems.append(EntryProblem(e.seq, "its fields do not match its entry hash (altered)"))
            if hashlib.sha256(e.content).hexdigest() != e.content_hash:
                problems.append(EntryProblem(e.seq, "its content does not match its content hash (altered)"))
            seen_hashes[e.entry_hash] = e.seq
            prev_seq, prev_hash = e.seq, e.entry_hash
            problems += self._check_entry(e, ring, voided, check_records, copies)
        if expected_head:
            want = expected_head.strip().split(":")[-1]
            if want == prev_hash:
                pass
            elif want in seen_hashes:
                notes.append(f"{prev_seq - seen_hashes[want]} entries were added after the expected head (entry {seen_hashes[want]})")
            else:
                problems.append(EntryProblem(
                    None, f"the expected head {want} is not in this archive: it was truncated, rebuilt differently or is another archive"
                ))
        return ArchiveCheck(not problems, count, prev_seq, prev_hash, problems, notes)

    def _check_entry(
        self, e: Entry, ring: KeyRing, voided: set[str], check_records: bool, copies: _Versions
    ) -> list[EntryProblem]:
        out = []
        try:
            if e.kind == "key":
                key = PublicKeyEntry.from_dict(parse_json_strict(e.content, "key entry"))
                if key.fingerprint != e.subject:
                    out.append(EntryProblem(e.seq, f"key entry for {key.fingerprint} filed under {e.subject}"))
                ring.add(key)
            elif e.kind == "void":
                st = parse_json_strict(e.content, "void entry")
                if not isinstance(st, dict) or st.get("schema") != VOID_SCHEMA or st.get("record_id") != e.subject:
                    out.append(EntryProblem(e.seq, "void statement does not name this entry's record"))
                else:
                    key = ring.get(check_fingerprint(st.get("key_fingerprint", "")))
                    try:
                        sig = base64.b64decode(st.get("signature", ""), validate=True)
                    except ValueError:
                        sig = b""
                    if key is None:
                        out.append(EntryProblem(e.seq, "void signed with a key not registered before it"))
                    elif (key.name, key.user_id) != (st.get("printed_name"), st.get("user_id")) or not key.verify(sig, void_message(st)):
                        out.append(EntryProblem(e.seq, "void statement's signature is not valid"))
                    if st.get("reason") != e.reason or not str(e.reason or "").strip():
                        out.append(EntryProblem(e.seq, "void reason missing or different from the signed statement"))
                voided.add(e.subject)
            elif e.kind in ("record", "supersede"):
                if e.subject in voided:
                    out.append(EntryProblem(e.seq, f"record {e.subject} archived after it was voided"))
                record = None
                if check_records:
                    result, record = verify_and_load(e.content, ring)
                    if not result.ok:
                        out.append(EntryProblem(e.seq, "record does not verify: " + "; ".join(result.problems)))
                    if (result.record_id, result.version) != (e.subject, e.version):
                        out.append(EntryProblem(e.seq, f"record {result.record_id} v{result.version} filed as {e.subject} v{e.version}"))
                if record is None:
                    record = load_record(e.content)
                body = record["body"]
                if e.kind == "supersede" and (not body["supersedes"] or body["supersedes"]["reason"] != e.reason):
                    out.append(EntryProblem(e.seq, "supersede reason missing or different from the record's"))
                out += self._check_versions(e, record, copies)
            else:
                out.append(EntryProblem(e.seq, f"unknown kind {e.kind!r}"))
        except InputError as exc:
            out.append(EntryProblem(e.seq, str(exc)))
        return out

    @staticmethod
    def _check_versions(e: Entry, record: dict, copies: _Versions) -> list[EntryProblem]:
        """The rules append_record keeps: a later copy of a version only adds signatures; version n > 1
        first arrives as a supersede entry naming an archived copy of version n - 1."""
        out = []
        body, key = record["body"], (e.subject, e.version)
        earlier = copies.latest.get(key)
        if earlier is not None:
            n = len(earlier["signatures"])
            if e.kind != "record" or body != earlier["body"] or record["signatures"][:n] != earlier["signatures"]:
                out.append(EntryProblem(e.seq, f"not the archived version {e.version} with signatures added"))
        elif e.version == 1:
            if e.kind != "record" or e.subject in copies.subjects:
                out.append(EntryProblem(e.seq, "version 1 of a record that already has versions"))
        else:
            before = copies.latest.get((e.subject, e.version - 1))
            if e.kind != "supersede" or before is None or body["supersedes"]["record_hash"] not in before["hashes"]:
                out.append(EntryProblem(e.seq, f"version {e.version} does not supersede an archived version {e.version - 1}"))
        hashes = (earlier or {}).get("hashes", set()) | {e.content_hash}
        copies.latest[key] = {"body": body, "signatures": record["signatures"], "hashes": hashes}
        copies.subjects.add(e.subject)
        return out

    # ------------------------------------------------------------------------------------------- export
    def export(self, folder: str | os.PathLike, renderings: bool = True) -> dict[str, Any]:
        """Write every record as ``<hash>.json`` (with ``.html`` and ``.pdf`` renderings), the chain as
        ``chain.jsonl`` and the head as ``HEAD`` into ``folder`` (new or empty). Returns a summary."""
        folder = Path(folder)
        if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
            raise InputError("DIR", str(folder), "a new or empty folder (an export never overwrites)")
        folder.mkdir(parents=True, exist_ok=True)
        self._db.execute("BEGIN")
        try:
            entries = list(self.entries())
            ring = self.keyring()
        finally:
            self._db.execute("ROLLBACK")
        lines = []
        written = 0
        for e in entries:
            line = {**e.meta(), "entry_hash": e.entry_hash, "content": None}
            if e.kind in ("record", "supersede"):
                _write_once(folder / f"{e.content_hash}.json", e.content)
                written += 1
                if renderings:
                    from planner.render import render_html, render_pdf

                    check = verify_record(e.content, ring)
                    _write_once(folder / f"{e.content_hash}.html", render_html(e.content, check).encode("utf-8"))
                    _write_once(folder / f"{e.content_hash}.pdf", render_pdf(e.content, check))
            else:
                line["content"] = e.content.decode("utf-8")
            lines.append(canonical_bytes(line))
        _write_once(folder / "chain.jsonl", b"".join(line + b"\n" for line in lines))
        seq, head = (entries[-1].seq, entries[-1].entry_hash) if entries else (0, GENESIS)
        _write_once(folder / "HEAD", f"{seq}:{head}\n".encode("ascii"))
        return {"folder": str(folder), "entries": len(entries), "records": written, "head": f"{seq}:{head}"}


def _write_once(path: Path, data: bytes) -> None:
    from planner.records import write_new_file

    write_new_file(path, data, "DIR")


def rebuild(folder: str | os.PathLike, new_archive: str | os.PathLike) -> ArchiveCheck:
    """Make a new archive at ``new_archive`` from an export folder alone, and verify it.

    The new archive holds the same entries with the same hashes, so it ends at the head written in
    ``HEAD``; anything missing or altered in the export is an :class:`InputError` naming the entry, and
    no archive file is left behind.
    """
    folder, target = Path(folder), Path(new_archive)
    if target.exists():
        raise InputError("--archive", str(target), "a new file (rebuild never writes into an existing archive)")
    try:
        chain = (folder / "chain.jsonl").read_bytes()
        head_text = (folder / "HEAD").read_text(encoding="ascii").strip()
    except FileNotFoundError as exc:
        raise InputError("DIR", str(folder), "an export folder with chain.jsonl and HEAD", f"missing {Path(exc.filename).name}") from None
    partial = target.with_name(target.name + ".partial")
    if partial.exists():
        raise InputError("--archive", str(partial), "no unfinished rebuild in the way (remove it after checking)")
    rows = []
    for n, line in enumerate(chain.splitlines(), start=1):
        meta = parse_json_strict(line, f"chain.jsonl line {n}")
        if not isinstance(meta, dict) or meta.get("kind") not in KINDS:
            raise InputError(f"chain.jsonl line {n}", str(meta)[:60], "an archive entry")
        if meta["kind"] in ("record", "supersede"):
            try:
                content = (folder / f"{meta['content_hash']}.json").read_bytes()
            except FileNotFoundError:
                raise InputError(f"entry {meta['seq']}", f"{meta['content_hash']}.json", "a record file in the export", "missing") from None
        else:
            content = str(meta["content"]).encode("utf-8")
        if hashlib.sha256(content).hexdigest() != meta["content_hash"]:
            raise InputError(f"entry {meta['seq']}", meta["content_hash"], "content whose SHA-256 matches (the file was altered)")
        rows.append((meta["seq"], meta["kind"], meta["subject"], meta["version"], content, meta["content_hash"],
                     meta["reason"], meta["created"], meta["prev_hash"], meta["entry_hash"]))
    archive = Archive.open(partial)
    try:
        db = archive._db
        db.execute("BEGIN IMMEDIATE")
        try:
            db.executemany(f"INSERT INTO entries ({_COLUMNS}) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", rows)
            db.execute("COMMIT")
        except BaseException:
            db.execute("ROLLBACK")
            raise
        check = archive.verify(expected_head=head_text)
        if check.ok and check.head != head_text:
            check.ok = False
            check.problems.append(EntryProblem(None, f"rebuilt head {check.head} differs from HEAD {head_text}"))
    finally:
        archive.close()
    if not check.ok:
        for suffix in ("", "-wal", "-shm"):
            Path(str(partial) + suffix).unlink(missing_ok=True)
        raise InputError("DIR", str(folder), "an intact export", "; ".join(str(p) for p in check.problems))
    os.link(partial, target)  # never replaces an existing file
    partial.unlink()
    return check
