"""Signing an assessed protocol into an archive, for the Sign & archive step (no widgets).

The private key is read from its file on the server and unlocked with the passphrase there; it never
leaves the kernel process. A record is only made from an assessment that belongs to the draft as it is
now (never from a stale one), and the cautions must have been shown (``cautions_seen``).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from planner.errors import InputError, choice_error

MEANINGS = ("authored", "reviewed", "approved")


@dataclass(frozen=True)
class SignedRecord:
    """What the sign step reports: the record's id, version, hash, the archive head and its bytes."""

    record_id: str
    version: int
    record_hash: str
    archive: str
    head: str
    data: bytes
    printed_name: str
    meaning: str


def sign_into_archive(model, printed_name: str, meaning: str, key_file: str, passphrase: str,
                      archive_file: str, register_key: bool = False, cautions_seen: bool = False) -> SignedRecord:
    """Build the record of the model's current assessment, sign it and append it to the archive.

    Parameters
    ----------
    model : PlannerModel
        Its assessment must be current (the draft unchanged since it was assessed).
    printed_name : str
        Must equal the name written in the key file (the signer confirms who signs).
    meaning : str
        ``authored``, ``reviewed`` or ``approved``.
    key_file : str
        Path of the private key file on the server.
    passphrase : str
        Unlocks the key; used once and not kept.
    archive_file : str
        The archive (created if it does not exist).
    register_key : bool
        Register the key's public half in the archive when it is not there yet (first use).
    cautions_seen : bool
        The signer has seen the cautions (the step shows them above the form).
    """
    from planner.archive import Archive
    from planner.keys import load_key
    from planner.records import build_record, record_bytes, record_hash, sign_record

    if not cautions_seen:
        raise InputError("cautions", "not confirmed", "the box ticked after reading the cautions above")
    if model.evaluation is None or not model.current:
        raise InputError("assessment", "stale" if model.evaluation else "none",
                         "a current assessment of the draft (fix the fields marked in red first)")
    if meaning not in MEANINGS:
        raise choice_error("meaning", meaning, MEANINGS)
    if not printed_name or not printed_name.strip():
        raise InputError("printed name", printed_name, "your name as it will appear in the signature")
    if not key_file or not key_file.strip():
        raise InputError("key file", key_file, "the path of your private key file on this computer")
    if not archive_file or not archive_file.strip():
        raise InputError("archive", archive_file, "the path of the archive file")
    key = load_key(Path(key_file.strip()).expanduser(), passphrase)
    if key.name != printed_name.strip():
        raise InputError("printed name", printed_name, f"the name written in the key file: {key.name!r}")
    protocol_text = model.protocol_yaml()
    report: dict[str, Any] = model.report
    record = build_record(protocol_text, report, protocol_name=model.download_name(),
                          protocol_parsed=model.draft.document)
    signed = sign_record(record, key, meaning)
    data = record_bytes(signed)
    path = Path(archive_file.strip()).expanduser()
    with Archive.open(path) as archive:
        if archive.keyring().get(key.fingerprint) is None:
            if not register_key:
                raise InputError("key file", key_file,
                                 "a key registered in this archive (tick 'register my key' for its first use)")
            archive.register_key(key.public_entry())
        entry = archive.append_record(data)
    body = signed["body"]
    return SignedRecord(body["record_id"], body["version"], record_hash(data), str(path), entry.head, data,
                        key.name, meaning)
