"""Signing keys: Ed25519 against RFC 8032, the OpenSSH file format with the bcrypt KDF, file permissions,
passphrase handling, fingerprints."""

import base64
import hashlib
import os
import stat
import struct

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from planner import keys
from planner.errors import InputError

PASS = "correct horse battery"


# RFC 8032 section 7.1, TEST 1 (empty message) [ref:rfc8032]
RFC8032_TEST1_SECRET = "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60"
RFC8032_TEST1_PUBLIC = "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
RFC8032_TEST1_SIGNATURE = (
    "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b"
)


def test_rfc8032_section_7_1_test_1_signature():
    """RFC 8032 §7.1 TEST 1: our SigningKey signs exactly as the RFC says, and the key entry verifies it."""
    private = Ed25519PrivateKey.from_private_bytes(bytes.fromhex(RFC8032_TEST1_SECRET))
    key = keys.SigningKey("Test Vector", "rfc8032", private)
    assert key.public_key.hex() == RFC8032_TEST1_PUBLIC
    assert key.sign(b"").hex() == RFC8032_TEST1_SIGNATURE
    entry = key.public_entry()
    assert entry.verify(bytes.fromhex(RFC8032_TEST1_SIGNATURE), b"")
    assert not entry.verify(bytes.fromhex(RFC8032_TEST1_SIGNATURE), b"x")


def test_fingerprint_is_sha256_of_raw_public_key():
    raw = bytes.fromhex(RFC8032_TEST1_PUBLIC)
    fp = keys.fingerprint(raw)
    assert fp == "sha256:" + hashlib.sha256(raw).hexdigest()
    assert keys.check_fingerprint(fp) == fp
    with pytest.raises(InputError, match="32 bytes"):
        keys.fingerprint(raw[:31])
    with pytest.raises(InputError, match="64 lowercase hex"):
        keys.check_fingerprint("SHA256:abc")


def _openssh_header(path):
    """ciphername, kdfname and bcrypt rounds from an openssh-key-v1 file [ref:openssh-protocol-key]."""
    text = path.read_text()
    blob = base64.b64decode("".join(text.strip().splitlines()[1:-1]))
    assert blob.startswith(b"openssh-key-v1\x00")
    pos = len(b"openssh-key-v1\x00")

    def string():
        nonlocal pos
        (n,) = struct.unpack(">I", blob[pos:pos + 4])
        pos += 4
        value = blob[pos:pos + n]
        pos += n
        return value

    cipher, kdf, options = string(), string(), string()
    (salt_len,) = struct.unpack(">I", options[:4])
    (rounds,) = struct.unpack(">I", options[4 + salt_len:8 + salt_len])
    return cipher, kdf, salt_len, rounds


def test_key_file_is_openssh_with_bcrypt_kdf_mode_0600(tmp_path):
    """PROTOCOL.key: 'openssh-key-v1', cipher aes256-ctr, KDF bcrypt with a 16-byte salt [ref:openssh-protocol-key]."""
    key = keys.generate_key("Ada Author", "ada", tmp_path / "ada", PASS, kdf_rounds=2)
    cipher, kdf, salt_len, rounds = _openssh_header(tmp_path / "ada")
    assert (cipher, kdf, salt_len, rounds) == (b"aes256-ctr", b"bcrypt", 16, 2)
    assert stat.S_IMODE((tmp_path / "ada").stat().st_mode) == 0o600
    pub = (tmp_path / "ada.pub").read_text()
    assert pub.startswith("ssh-ed25519 ") and pub.strip().endswith("Ada Author <ada>")
    again = keys.load_key(tmp_path / "ada", PASS)
    assert again.fingerprint == key.fingerprint and (again.name, again.user_id) == ("Ada Author", "ada")


def test_production_default_rounds_are_not_lowered():
    # tests pass kdf_rounds=1 or 2; the default stays at least OpenSSH's own default of 16 (common practice)
    assert keys.DEFAULT_KDF_ROUNDS >= 16
    assert keys.generate_key.__defaults__[-1] == keys.DEFAULT_KDF_ROUNDS


def test_key_file_created_with_o_excl_never_overwritten(tmp_path):
    (tmp_path / "k").write_text("someone's file")
    with pytest.raises(InputError, match="never overwritten"):
        keys.generate_key("Ada Author", "ada", tmp_path / "k", PASS, kdf_rounds=1)
    assert (tmp_path / "k").read_text() == "someone's file"
    keys.generate_key("Ada Author", "ada", tmp_path / "k2", PASS, kdf_rounds=1)
    with pytest.raises(InputError, match="never overwritten"):
        keys.generate_key("Ada Author", "ada", tmp_path / "k2", PASS, kdf_rounds=1)


def test_umask_cannot_widen_permissions(tmp_path):
    old = os.umask(0)
    try:
        keys.generate_key("Ada Author", "ada", tmp_path / "k", PASS, kdf_rounds=1)
    finally:
        os.umask(old)
    assert stat.S_IMODE((tmp_path / "k").stat().st_mode) == 0o600


@pytest.mark.parametrize("mode", [0o640, 0o604, 0o660, 0o644, 0o666])
def test_key_readable_by_others_is_refused(tmp_path, mode):
    keys.generate_key("Ada Author", "ada", tmp_path / "k", PASS, kdf_rounds=1)
    os.chmod(tmp_path / "k", mode)
    with pytest.raises(InputError, match=rf"mode {mode:04o}.*0600.*chmod 600"):
        keys.load_key(tmp_path / "k", PASS)


def test_wrong_passphrase_is_a_clear_error(tmp_path):
    keys.generate_key("Ada Author", "ada", tmp_path / "k", PASS, kdf_rounds=1)
    with pytest.raises(InputError, match="passphrase.*wrong passphrase") as info:
        keys.load_key(tmp_path / "k", "not the passphrase")
    assert "not the passphrase" not in str(info.value)  # the attempt is never echoed


def test_short_passphrase_refused(tmp_path):
    with pytest.raises(InputError, match="at least 8 characters"):
        keys.generate_key("Ada Author", "ada", tmp_path / "k", "short", kdf_rounds=1)
    assert not (tmp_path / "k").exists()


def test_unencrypted_or_foreign_key_refused(tmp_path):
    from cryptography.hazmat.primitives import serialization

    plain = Ed25519PrivateKey.generate().private_bytes(
        serialization.Encoding.PEM, serialization.PrivateFormat.OpenSSH, serialization.NoEncryption()
    )
    path = tmp_path / "plain"
    path.write_bytes(plain)
    os.chmod(path, 0o600)
    with pytest.raises(InputError, match="passphrase-protected"):
        keys.load_key(path, PASS)
    other = tmp_path / "other"
    other.write_text("not a key at all")
    os.chmod(other, 0o600)
    with pytest.raises(InputError, match="OpenSSH private key"):
        keys.load_key(other, PASS)


def test_mismatched_public_file_refused(tmp_path):
    keys.generate_key("Ada Author", "ada", tmp_path / "a", PASS, kdf_rounds=1)
    keys.generate_key("Bo Other", "bo", tmp_path / "b", PASS, kdf_rounds=1)
    (tmp_path / "a.pub").unlink()
    (tmp_path / "a.pub").write_text((tmp_path / "b.pub").read_text())
    with pytest.raises(InputError, match="do not belong together"):
        keys.load_key(tmp_path / "a", PASS)


def test_passphrase_from_environment_never_argv(monkeypatch):
    assert keys.read_passphrase(environ={keys.PASSPHRASE_ENV: PASS}) == PASS
    # no variable and no terminal: a clear error instead of a hang
    monkeypatch.setattr("sys.stdin", open(os.devnull))
    with pytest.raises(InputError, match="COLDMARGIN_PASSPHRASE"):
        keys.read_passphrase(environ={})


def test_passphrase_prompt_confirms_new_passphrase(monkeypatch):
    class Tty:
        def isatty(self):
            return True

    answers = iter([PASS, PASS + "x"])
    monkeypatch.setattr("sys.stdin", Tty())
    monkeypatch.setattr("getpass.getpass", lambda prompt="": next(answers))
    with pytest.raises(InputError, match="the two entries differ"):
        keys.read_passphrase(confirm=True, environ={})
    answers = iter([PASS])
    assert keys.read_passphrase(environ={}) == PASS


@pytest.mark.parametrize(("field", "value"), [("user_id", "has space"), ("user_id", ""), ("name", " "), ("name", "x" * 201)])
def test_identity_words_checked(tmp_path, field, value):
    kwargs = {"name": "Ada Author", "user_id": "ada", field: value}
    with pytest.raises(InputError, match=field):
        keys.generate_key(out=tmp_path / "k", passphrase=PASS, kdf_rounds=1, **kwargs)


def test_keyring_lookup_and_entry_round_trip():
    a = keys.SigningKey("Ada Author", "ada", Ed25519PrivateKey.generate())
    entry = a.public_entry("2026-01-01T00:00:00.000Z")
    back = keys.PublicKeyEntry.from_dict(entry.to_dict())
    assert back == entry
    ring = keys.KeyRing([back])
    assert ring.get(a.fingerprint) == entry and len(ring) == 1 and ring.for_user("ada") == [entry]
    tampered = {**entry.to_dict(), "fingerprint": "sha256:" + "0" * 64}
    with pytest.raises(InputError, match="fingerprint"):
        keys.PublicKeyEntry.from_dict(tampered)


def test_utc_now_is_rfc3339():
    from planner.records import check_time

    assert check_time(keys.utc_now(), "now").endswith("Z")
