"""The record commands: sign, verify, render, keygen, archive …; --help everywhere, exit codes 0 ok,
1 verification failed, 2 bad input or usage, and messages that name what failed."""

import json
import os
import stat
import subprocess
import sys
from pathlib import Path

import pytest

from planner import keys, records
from planner.archive import Archive
from planner.cli_records import main

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data"
PASS = "correct horse battery"
PROTOCOL = ROOT / "protocols" / "supercooled-open-vial.yaml"


@pytest.fixture
def lab(tmp_path, monkeypatch):
    """An archive, two registered keys (fast KDF) and the passphrase in the environment."""
    monkeypatch.setenv("COLDMARGIN_PASSPHRASE", PASS)
    monkeypatch.setenv("COLDMARGIN_ARCHIVE", str(tmp_path / "archive.sqlite"))
    monkeypatch.chdir(tmp_path)
    ada = keys.generate_key("Ada Author", "ada", tmp_path / "ada", PASS, kdf_rounds=1)
    rui = keys.generate_key("Rui Reviewer", "rui", tmp_path / "rui", PASS, kdf_rounds=1)
    pia = keys.generate_key("Pia Approver", "pia", tmp_path / "pia", PASS, kdf_rounds=1)
    with Archive.open(tmp_path / "archive.sqlite") as a:
        for k in (ada, rui, pia):
            a.register_key(k.public_entry())
    return tmp_path


def _sample_record(lab, name="authored.json"):
    a = json.loads((DATA / "record_sample_assessment.json").read_text())
    a.pop("_note")
    for heavy in ("series", "curve"):  # charts are tested in test_render.py; keep these runs lean
        a["chamber"].pop(heavy)
    key = keys.load_key(lab / "ada", PASS)
    data = records.record_bytes(records.sign_record(
        records.build_record("title: invented test\n", a, protocol_name="t.yaml"), key, "authored"))
    (lab / name).write_bytes(data)
    with Archive.open(lab / "archive.sqlite") as archive:
        archive.append_record(data)
    return lab / name


COMMANDS = [
    ["sign"], ["verify"], ["render"], ["keygen"], ["archive"], ["archive", "list"], ["archive", "show"],
    ["archive", "verify"], ["archive", "export"], ["archive", "rebuild"], ["archive", "void"], ["archive", "head"],
]


@pytest.mark.parametrize("command", COMMANDS, ids=" ".join)
def test_every_command_has_help(command, capsys):
    with pytest.raises(SystemExit) as info:
        main([*command, "--help"])
    assert info.value.code == 0
    assert "usage: coldmargin " + " ".join(command) in capsys.readouterr().out


def test_usage_error_is_exit_2(capsys):
    with pytest.raises(SystemExit) as info:
        main(["sign", "x.yaml", "--meaning", "authored", "--out", "r.json"])
    assert info.value.code == 2 and "--key" in capsys.readouterr().err
    with pytest.raises(SystemExit) as info:
        main(["sign", "x.yaml", "--key", "k", "--meaning", "okayed", "--out", "r.json"])
    assert info.value.code == 2


def test_sign_protocol_review_approve_verify(lab, capsys):
    """The whole path: a protocol file is assessed, signed, reviewed, approved, archived and verified."""
    assert main(["sign", str(PROTOCOL), "--key", "ada", "--meaning", "authored", "--out", "v1a.json"]) == 0
    out = capsys.readouterr().out
    assert "signed       authored by Ada Author <ada>" in out and "archive head" in out
    assert main(["sign", "v1a.json", "--key", "rui", "--meaning", "reviewed", "--out", "v1b.json"]) == 0
    assert main(["sign", "v1b.json", "--key", "pia", "--meaning", "approved", "--out", "v1c.json"]) == 0
    capsys.readouterr()
    assert main(["verify", "v1c.json"]) == 0
    out = capsys.readouterr().out
    assert out.count(" valid ") == 3 and "this exact file is archived" in out and out.strip().endswith("verified")
    record = records.load_record((lab / "v1c.json").read_bytes())
    assert record["body"]["protocol"]["text"] == PROTOCOL.read_text()
    assert record["body"]["assessment"]["schema"] == "coldmargin/assessment-1"
    assert main(["archive", "verify"]) == 0
    # a correction: a new version with a mandatory reason
    assert main(["sign", str(PROTOCOL), "--key", "ada", "--meaning", "authored", "--out", "v2.json",
                 "--supersedes", "v1c.json"]) == 2
    assert "--reason" in capsys.readouterr().err
    assert main(["sign", str(PROTOCOL), "--key", "ada", "--meaning", "authored", "--out", "v2.json",
                 "--supersedes", "v1c.json", "--reason", "hold time corrected"]) == 0
    assert "(supersede)" in capsys.readouterr().out
    assert main(["verify", "v1c.json"]) == 0
    assert "superseded: version 2 is current" in capsys.readouterr().out


def test_order_rules_at_the_command_line(lab, capsys):
    rec = _sample_record(lab)
    assert main(["sign", str(rec), "--key", "pia", "--meaning", "approved", "--out", "x.json"]) == 2
    assert "no approval before review" in capsys.readouterr().err
    assert not (lab / "x.json").exists()
    assert main(["sign", str(rec), "--key", "ada", "--meaning", "reviewed", "--out", "x.json"]) == 2
    assert "an author cannot also sign as reviewed" in capsys.readouterr().err


def test_verify_reports_tampering_with_exit_1(lab, capsys):
    rec = _sample_record(lab)
    data = bytearray(rec.read_bytes())
    data[data.index(b"invented test")] ^= 0x20
    (lab / "tampered.json").write_bytes(bytes(data))
    assert main(["verify", "tampered.json"]) == 1
    captured = capsys.readouterr()
    assert "invalid" in captured.out and "signature does not match the signed content" in captured.out
    assert "VERIFICATION FAILED" in captured.out and "tampered.json" in captured.err


@pytest.mark.parametrize(
    ("content", "message"),
    [
        (b'{"a":1,"a":2}', "duplicate key 'a'"),
        (b'{"schema":NaN}', "NaN"),
        (b"[" * 100_000 + b"]" * 100_000, "nesting 100000 levels deep"),
        (b"not json at all", "well-formed JSON"),
    ],
    ids=["duplicates", "nan", "deep", "garbage"],
)
def test_verify_malformed_files_is_a_clear_failure(lab, capsys, content, message):
    (lab / "bad.json").write_bytes(content)
    assert main(["verify", "bad.json"]) == 1
    captured = capsys.readouterr()
    assert message in captured.out and message in captured.err
    assert "Traceback" not in captured.err


def test_verify_100_mb_file_refused_without_reading_it(lab, capsys):
    with open(lab / "huge.json", "wb") as fh:
        fh.truncate(100 * 1024 * 1024)
    assert main(["verify", "huge.json"]) == 2
    assert "more than" in capsys.readouterr().err


def test_verify_in_a_real_process_exit_codes(lab):
    """The same through a real process: exit status, message, no traceback."""
    (lab / "deep.json").write_bytes(b"[" * 100_000 + b"]" * 100_000)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    done = subprocess.run([sys.executable, "-m", "planner.cli_records", "verify", "deep.json"], cwd=lab,
                          capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 1 and "nesting 100000 levels deep" in done.stderr and "Traceback" not in done.stderr
    done = subprocess.run([sys.executable, "-m", "planner.cli_records", "verify", "missing.json"], cwd=lab,
                          capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 2 and "missing.json" in done.stderr


def test_unknown_key_without_archive(lab, capsys, monkeypatch):
    rec = _sample_record(lab)
    assert main(["verify", str(rec), "--archive", str(lab / "elsewhere.sqlite")]) == 1
    assert "no key to check signatures against" in capsys.readouterr().out
    assert main(["verify", str(rec), "--archive", str(lab / "elsewhere.sqlite"), "--public-key", "ada.pub"]) == 0


def test_wrong_passphrase_and_open_key_file(lab, capsys, monkeypatch):
    rec = _sample_record(lab)
    monkeypatch.setenv("COLDMARGIN_PASSPHRASE", "this is not it")
    assert main(["sign", str(rec), "--key", "rui", "--meaning", "reviewed", "--out", "x.json"]) == 2
    assert "wrong passphrase" in capsys.readouterr().err
    monkeypatch.setenv("COLDMARGIN_PASSPHRASE", PASS)
    os.chmod(lab / "rui", 0o644)
    assert main(["sign", str(rec), "--key", "rui", "--meaning", "reviewed", "--out", "x.json"]) == 2
    err = capsys.readouterr().err
    assert "mode 0644" in err and "chmod 600" in err
    assert not (lab / "x.json").exists()


def test_outputs_are_never_overwritten(lab, capsys):
    rec = _sample_record(lab)
    (lab / "taken.json").write_text("keep me")
    assert main(["sign", str(rec), "--key", "rui", "--meaning", "reviewed", "--out", "taken.json"]) == 2
    assert "never overwritten" in capsys.readouterr().err
    assert (lab / "taken.json").read_text() == "keep me"


def test_keygen_writes_0600_and_registers(lab, capsys):
    assert main(["keygen", "--name", "Kim Keymaker", "--user-id", "kim", "--out", "kim"]) == 0
    out = capsys.readouterr().out
    assert stat.S_IMODE((lab / "kim").stat().st_mode) == 0o600
    fp = keys.load_key(lab / "kim", PASS).fingerprint
    assert f"fingerprint  {fp}" in out and "archive head" in out
    with Archive.open(lab / "archive.sqlite") as a:
        assert a.keyring().get(fp).name == "Kim Keymaker"
    assert main(["keygen", "--name", "Kim Keymaker", "--user-id", "kim", "--out", "kim"]) == 2
    assert "never overwritten" in capsys.readouterr().err
    assert main(["keygen", "--name", "Kim", "--user-id", "has space", "--out", "kim2"]) == 2
    assert "--user-id" in capsys.readouterr().err


def test_keygen_without_passphrase_source_fails_cleanly(lab, capsys, monkeypatch):
    monkeypatch.delenv("COLDMARGIN_PASSPHRASE")
    monkeypatch.setattr("sys.stdin", open(os.devnull))
    assert main(["keygen", "--name", "Kim Keymaker", "--user-id", "kim", "--out", "kim"]) == 2
    assert "COLDMARGIN_PASSPHRASE" in capsys.readouterr().err
    assert not (lab / "kim").exists()


def test_render_html_and_pdf(lab, capsys):
    rec = _sample_record(lab)
    assert main(["render", str(rec), "--html", "r.html", "--pdf", "r.pdf"]) == 0
    assert (lab / "r.pdf").read_bytes().startswith(b"%PDF-")
    assert "verified: every signature valid" in (lab / "r.html").read_text()
    assert main(["render", str(rec), "--html", "r.html"]) == 2
    assert "--replace" in capsys.readouterr().err
    assert main(["render", str(rec), "--html", "r.html", "--replace"]) == 0
    assert main(["render", str(rec)]) == 2


def test_archive_list_show_export_rebuild_void(lab, capsys):
    rec = _sample_record(lab)
    rid = records.load_record(rec.read_bytes())["body"]["record_id"]
    assert main(["archive", "list"]) == 0
    out = capsys.readouterr().out
    assert "Rigid chamber hold at -4 C (invented test example) [authored]" in out and "archive head 4:" in out
    assert main(["archive", "show", rid[:8]]) == 0
    assert "valid" in capsys.readouterr().out
    assert main(["archive", "head"]) == 0
    head = capsys.readouterr().out.strip()
    assert main(["archive", "verify", "--head", head]) == 0
    assert main(["archive", "export", "export"]) == 0
    names = {p.suffix for p in (lab / "export").iterdir()}
    assert {".json", ".html", ".pdf", ".jsonl"} <= names and (lab / "export" / "HEAD").exists()
    assert main(["archive", "rebuild", "export", "--archive", "rebuilt.sqlite"]) == 0
    assert main(["archive", "verify", "--archive", "rebuilt.sqlite", "--head", head]) == 0
    capsys.readouterr()
    assert main(["archive", "void", rid, "--key", "rui", "--reason", "withdrawn: wrong cell line"]) == 0
    assert "archive head 5:" in capsys.readouterr().out
    assert main(["verify", str(rec)]) == 1
    assert "VOIDED" in capsys.readouterr().out
    assert main(["render", str(rec), "--html", "void.html"]) == 1
    assert "voided in the archive: withdrawn: wrong cell line" in (lab / "void.html").read_text()
    assert main(["archive", "show", "nothing-like-this"]) == 2


def test_lead_command_line_dispatches_record_commands(lab, capsys):
    from planner import cli

    rec = _sample_record(lab)
    assert cli.main(["verify", str(rec)]) == 0
    (lab / "bad.json").write_bytes(b'{"a":1,"a":1}')
    assert cli.main(["verify", "bad.json"]) == 1


def test_verify_says_when_a_file_is_not_the_archived_copy(lab, capsys):
    rec = _sample_record(lab)
    key = keys.load_key(lab / "rui", PASS)
    reviewed = records.record_bytes(records.sign_record(records.load_record(rec.read_bytes()), key, "reviewed"))
    (lab / "reviewed.json").write_bytes(reviewed)  # signed, but never archived
    assert main(["verify", "reviewed.json"]) == 0
    assert "this exact file is NOT archived" in capsys.readouterr().out
