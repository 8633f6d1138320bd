"""The archive: append-only, hash-chained, durable under concurrent writers and a killed writer, and
naming every entry that was deleted, reordered or altered behind its back."""

import hashlib
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from planner import archive as arch
from planner import records
from planner.errors import InputError
from planner.keys import SigningKey

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data"


def _key(name, user_id, seed):
    return SigningKey(name, user_id, Ed25519PrivateKey.from_private_bytes(hashlib.sha256(seed).digest()))


ADA = _key("Ada Author", "ada", b"ada")
RUI = _key("Rui Reviewer", "rui", b"rui")


def _assessment(title):
    a = json.loads((DATA / "record_sample_assessment.json").read_text())
    a.pop("_note")
    a["title"] = title
    return a


def _record(title="Test hold", key=ADA):
    r = records.build_record(f"title: {title}\n", _assessment(title), protocol_name="test.yaml")
    return records.sign_record(r, key, "authored")


@pytest.fixture
def archive(tmp_path):
    a = arch.Archive.open(tmp_path / "archive.sqlite")
    a.register_key(ADA.public_entry())
    a.register_key(RUI.public_entry())
    yield a
    a.close()


def _raw(path):
    """A plain connection that goes behind the tool's back."""
    return sqlite3.connect(path, isolation_level=None)


# ------------------------------------------------------------------------------------------- basics
def test_pragmas_wal_full_and_application_id(archive):
    db = archive._db
    assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert db.execute("PRAGMA synchronous").fetchone()[0] == 2  # FULL [ref:sqlite-docs]
    assert db.execute("PRAGMA application_id").fetchone()[0] == arch.APPLICATION_ID


def test_append_chains_every_entry_and_returns_the_head(archive):
    entries = [archive.append_record(records.record_bytes(_record(f"hold {i}"))) for i in range(3)]
    assert [e.seq for e in entries] == [3, 4, 5]
    assert entries[1].prev_hash == entries[0].entry_hash
    assert archive.head() == (5, entries[-1].entry_hash)
    assert entries[-1].head == f"5:{entries[-1].entry_hash}"
    first = next(archive.entries())
    assert first.prev_hash == arch.GENESIS and first.kind == "key"
    check = archive.verify(expected_head=entries[-1].head)
    assert check.ok and check.entries == 5, check.lines()


def test_same_bytes_twice_is_one_entry(archive):
    data = records.record_bytes(_record())
    assert archive.append_record(data).seq == archive.append_record(data).seq == 3


def test_update_and_delete_refused_by_triggers(archive):
    archive.append_record(records.record_bytes(_record()))
    db = _raw(archive.path)
    with pytest.raises(sqlite3.IntegrityError, match="append-only: UPDATE refused"):
        db.execute("UPDATE entries SET reason = 'x' WHERE seq = 3")
    with pytest.raises(sqlite3.IntegrityError, match="append-only: DELETE refused"):
        db.execute("DELETE FROM entries WHERE seq = 3")
    with pytest.raises(sqlite3.IntegrityError, match="UNIQUE"):
        db.execute("INSERT INTO entries SELECT seq + 100, kind, subject, version, content, content_hash, reason,"
                   " created, prev_hash, entry_hash || 'x' FROM entries WHERE seq = 3")
    db.close()


def test_signatures_added_then_correction_then_void(archive):
    r = _record()
    v1 = records.record_bytes(r)
    archive.append_record(v1)
    v1b = records.record_bytes(records.sign_record(r, RUI, "reviewed"))
    e = archive.append_record(v1b)
    assert e.kind == "record" and e.version == 1
    v2 = records.record_bytes(records.sign_record(records.build_record(
        "title: fixed\n", _assessment("fixed"), protocol_name="test.yaml", previous=v1b, reason="wrong hold time"
    ), ADA, "authored"))
    e = archive.append_record(v2)
    assert (e.kind, e.version, e.reason) == ("supersede", 2, "wrong hold time")
    rid = r["body"]["record_id"]
    assert archive.status(rid)["current_version"] == 2
    with pytest.raises(InputError, match="mandatory"):
        archive.void(rid, "  ", RUI)
    e = archive.void(rid, "protocol withdrawn", RUI)
    assert e.kind == "void" and archive.status(rid)["voided"]["reason"] == "protocol withdrawn"
    with pytest.raises(InputError, match="voided"):
        archive.append_record(records.record_bytes(records.sign_record(records.load_record(v2), RUI, "reviewed")))
    assert archive.verify().ok


def test_refusals_name_the_problem(archive):
    stranger = _key("Sam Stranger", "sam", b"sam")
    with pytest.raises(InputError, match="unknown key"):
        archive.append_record(records.record_bytes(_record(key=stranger)))
    r = _record()
    archive.append_record(records.record_bytes(r))
    other = records.load_record(records.record_bytes(r))
    other["body"]["protocol"]["name"] = "changed.yaml"
    other["signatures"] = []
    with pytest.raises(InputError, match="correction is a new version"):
        archive.append_record(records.record_bytes(records.sign_record(other, ADA, "authored")))
    impostor = SigningKey("Ada Author", "ada", Ed25519PrivateKey.generate())
    with pytest.raises(InputError, match="already has key"):
        archive.register_key(impostor.public_entry())
    with pytest.raises(InputError, match="mandatory|reason"):
        db = _raw(archive.path)
        try:
            db.execute("INSERT INTO entries VALUES (99, 'void', 'x', NULL, x'00', 'h', '', 't', 'p99', 'e99')")
        except sqlite3.IntegrityError as exc:  # the CHECK constraint: a void needs a reason
            raise InputError("reason", "", "mandatory") from exc
        finally:
            db.close()


def test_not_an_archive_refused(tmp_path):
    other = tmp_path / "other.sqlite"
    db = sqlite3.connect(other)
    db.execute("CREATE TABLE t (x)")
    db.close()
    with pytest.raises(InputError, match="something else"):
        arch.Archive.open(other)
    with pytest.raises(InputError, match="existing archive"):
        arch.Archive.open(tmp_path / "missing.sqlite", create=False)
    (tmp_path / "junk.sqlite").write_bytes(b"not sqlite at all" * 100)
    with pytest.raises(InputError, match="archive"):
        arch.Archive.open(tmp_path / "junk.sqlite")


def test_archive_path_precedence(tmp_path):
    assert arch.archive_path("given.sqlite", {"COLDMARGIN_ARCHIVE": "env.sqlite"}) == Path("given.sqlite")
    assert arch.archive_path(None, {"COLDMARGIN_ARCHIVE": "env.sqlite"}) == Path("env.sqlite")
    assert arch.archive_path(None, {}) == Path("protocols/archive.sqlite")


# --------------------------------------------------------------------------- tampering behind its back
def _filled(archive, n=5):
    for i in range(n):
        archive.append_record(records.record_bytes(_record(f"hold {i}")))
    return archive.head()


def _drop_triggers(db):
    for t in ("entries_no_update", "entries_no_delete"):
        db.execute(f"DROP TRIGGER {t}")


def test_deleted_row_is_named(archive):
    _filled(archive)
    db = _raw(archive.path)
    _drop_triggers(db)
    db.execute("DELETE FROM entries WHERE seq = 4")
    db.close()
    check = archive.verify()
    text = "\n".join(check.lines())
    assert not check.ok
    assert "entry 5: entry 4 missing before it" in text
    assert "entry 5: does not follow entry 3" in text
    assert "append-only triggers missing" in text


def test_reordered_rows_are_named(archive):
    _filled(archive)
    db = _raw(archive.path)
    _drop_triggers(db)
    db.execute("UPDATE entries SET seq = -1 WHERE seq = 4")
    db.execute("UPDATE entries SET seq = 4 WHERE seq = 5")
    db.execute("UPDATE entries SET seq = 5 WHERE seq = -1")
    db.close()
    check = archive.verify()
    named = {p.seq for p in check.problems}
    assert not check.ok and {4, 5} <= named
    assert any(p.seq == 4 and "do not match its entry hash" in p.message for p in check.problems)


def test_altered_content_is_named(archive):
    _filled(archive)
    db = _raw(archive.path)
    _drop_triggers(db)
    content = db.execute("SELECT content FROM entries WHERE seq = 6").fetchone()[0]
    db.execute("UPDATE entries SET content = ? WHERE seq = 6", (bytes(content).replace(b"hold 3", b"hold 9"),))
    db.close()
    check = archive.verify()
    assert any(p.seq == 6 and "content does not match" in p.message for p in check.problems)
    assert any(p.seq == 6 and "record does not verify" in p.message for p in check.problems)


def test_truncation_detected_against_a_head_kept_elsewhere(archive):
    seq, head = _filled(archive)
    db = _raw(archive.path)
    _drop_triggers(db)
    db.execute(f"DELETE FROM entries WHERE seq = {seq}")
    db.close()
    assert archive.verify().ok is False  # triggers missing is itself a problem
    check = archive.verify(expected_head=f"{seq}:{head}")
    assert any("expected head" in str(p) and "truncated" in str(p) for p in check.problems)


def test_cli_archive_verify_names_the_entry(archive, capsys):
    from planner.cli_records import main

    _filled(archive)
    db = _raw(archive.path)
    _drop_triggers(db)
    db.execute("DELETE FROM entries WHERE seq = 6")
    db.close()
    assert main(["archive", "verify", "--archive", str(archive.path)]) == 1
    out = capsys.readouterr()
    assert "entry 7: entry 6 missing before it" in out.out
    assert "archive verification failed" in out.err


# --------------------------------------------------------------------------------- export and rebuild
def test_export_then_rebuild_gives_the_same_head(archive, tmp_path):
    _filled(archive, 3)
    summary = archive.export(tmp_path / "export", renderings=False)
    seq, head = archive.head()
    assert summary["head"] == f"{seq}:{head}"
    assert (tmp_path / "export" / "HEAD").read_text().strip() == f"{seq}:{head}"
    for e in archive.entries():
        if e.kind == "record":
            assert (tmp_path / "export" / f"{e.content_hash}.json").read_bytes() == e.content
    check = arch.rebuild(tmp_path / "export", tmp_path / "rebuilt.sqlite")
    assert check.ok and check.head == f"{seq}:{head}"
    with arch.Archive.open(tmp_path / "rebuilt.sqlite", create=False) as again:
        assert [e.entry_hash for e in again.entries()] == [e.entry_hash for e in archive.entries()]
    with pytest.raises(InputError, match="new or empty folder"):
        archive.export(tmp_path / "export")
    with pytest.raises(InputError, match="new file"):
        arch.rebuild(tmp_path / "export", tmp_path / "rebuilt.sqlite")


def test_rebuild_refuses_an_altered_export(archive, tmp_path):
    _filled(archive, 2)
    archive.export(tmp_path / "export", renderings=False)
    victim = next(p for p in (tmp_path / "export").glob("*.json"))
    victim.write_bytes(victim.read_bytes().replace(b"hold", b"HOLD"))
    with pytest.raises(InputError, match="entry .*altered"):
        arch.rebuild(tmp_path / "export", tmp_path / "rebuilt.sqlite")
    assert not (tmp_path / "rebuilt.sqlite").exists()
    assert not (tmp_path / "rebuilt.sqlite.partial").exists()


# ------------------------------------------------------------------------------- concurrency and crashes
WRITER = r"""
import hashlib, sys
sys.path.insert(0, sys.argv[1])
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from planner import archive, records
from planner.keys import SigningKey
path, tag, count = sys.argv[2], sys.argv[3], int(sys.argv[4])
key = SigningKey("Ada Author", "ada", Ed25519PrivateKey.from_private_bytes(hashlib.sha256(b"ada").digest()))
assessment = {"schema": "coldmargin/assessment-1", "title": "", "note": "invented, small on purpose"}
a = archive.Archive.open(path)
i = 0
while count < 0 or i < count:
    assessment["title"] = f"{tag} {i}"
    r = records.build_record(f"title: {tag} {i}\n", assessment, protocol_name="w.yaml")
    e = a.append_record(records.record_bytes(records.sign_record(r, key, "authored")))
    print(f"committed {e.seq} {e.content_hash}", flush=True)
    i += 1
"""


def _writer(path, tag, count):
    return subprocess.Popen(
        [sys.executable, "-c", WRITER, str(ROOT), str(path), tag, str(count)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )


@pytest.mark.slow
def test_two_processes_append_500_each(archive):
    writers = [_writer(archive.path, tag, 500) for tag in ("left", "right")]
    outputs = [w.communicate(timeout=600) for w in writers]
    for w, (out, err) in zip(writers, outputs, strict=True):
        assert w.returncode == 0, err
        assert out.count("committed") == 500
    check = archive.verify()
    assert check.ok, check.lines()
    assert check.entries == 1000 + 2  # and the two key entries
    tags = [json.loads(e.content)["body"]["assessment"]["title"].split()[0] for e in archive.entries() if e.kind == "record"]
    assert len(tags) == 1000 and tags.count("left") == tags.count("right") == 500
    switches = sum(a != b for a, b in zip(tags, tags[1:], strict=False))
    assert switches > 1  # the two writers really did interleave


def test_writer_killed_mid_write_loses_nothing_committed(archive):
    writer = _writer(archive.path, "killed", -1)
    committed = []
    deadline = time.monotonic() + 120
    while len(committed) < 25 and time.monotonic() < deadline:
        line = writer.stdout.readline()
        if line.startswith("committed"):
            committed.append(line.split()[2])
    time.sleep(0.013)  # land somewhere inside the next append
    os.kill(writer.pid, signal.SIGKILL)
    writer.wait(timeout=30)
    writer.stdout.close()
    writer.stderr.close()
    assert len(committed) == 25
    with arch.Archive.open(archive.path) as after:
        check = after.verify()
        assert check.ok, check.lines()
        stored = {e.content_hash for e in after.entries()}
    assert set(committed) <= stored


def test_any_byte_changed_in_any_stored_entry_is_named(tmp_path_factory):
    """Property: one byte of any entry's stored content changed behind the tool's back -> verify names
    that entry (hypothesis over entries, positions and values)."""
    from hypothesis import given, settings
    from hypothesis import strategies as st

    path = tmp_path_factory.mktemp("prop") / "archive.sqlite"
    with arch.Archive.open(path) as a:
        a.register_key(ADA.public_entry())
        for i in range(3):
            a.append_record(records.record_bytes(_record(f"hold {i}")))
    db = _raw(path)
    _drop_triggers(db)
    rows = {seq: bytes(c) for seq, c in db.execute("SELECT seq, content FROM entries")}

    @settings(max_examples=40, deadline=None)
    @given(seq=st.sampled_from(sorted(rows)), data=st.data())
    def check(seq, data):
        original = rows[seq]
        pos = data.draw(st.integers(0, len(original) - 1))
        value = data.draw(st.integers(0, 255).filter(lambda b: b != original[pos]))
        db.execute("UPDATE entries SET content = ? WHERE seq = ?", (original[:pos] + bytes([value]) + original[pos + 1:], seq))
        try:
            with arch.Archive.open(path, create=False) as a:
                result = a.verify()
        finally:
            db.execute("UPDATE entries SET content = ? WHERE seq = ?", (original, seq))
        named = {p.seq for p in result.problems if p.seq is not None}
        assert seq in named
        if seq != 1:  # a record: only it is named; a broken key entry also fails the records it signed
            assert named == {seq}

    check()
    db.close()


def test_validly_chained_but_rule_breaking_insert_is_named(archive):
    """Someone with a signing key writes a second, different version 1 straight into the table, with
    correct hashes: the chain is intact, but verify names the entry that breaks the version rules."""
    r = _record("original")
    archive.append_record(records.record_bytes(r))
    other = records.load_record(records.record_bytes(r))
    other["body"]["protocol"]["text"] = "title: quietly changed\n"
    other["signatures"] = []
    forged = records.record_bytes(records.sign_record(other, ADA, "authored"))
    seq, prev = archive.head()
    meta = {"seq": seq + 1, "kind": "record", "subject": r["body"]["record_id"], "version": 1,
            "content_hash": hashlib.sha256(forged).hexdigest(), "reason": None,
            "created": "2026-01-01T00:00:00.000Z", "prev_hash": prev}
    db = _raw(archive.path)
    db.execute("INSERT INTO entries VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
               (meta["seq"], "record", meta["subject"], 1, forged, meta["content_hash"], None, meta["created"],
                prev, arch.entry_hash(meta)))
    db.close()
    check = archive.verify()
    assert [str(p) for p in check.problems] == [f"entry {seq + 1}: not the archived version 1 with signatures added"]
