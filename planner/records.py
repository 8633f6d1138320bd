"""The protocol record: what was planned, what the numbers were, who signed it, in bytes that verify.

A record (schema ``coldmargin/record-1``) is one JSON object in the canonical form of RFC 8785
[ref:rfc8785]::

    {"schema": "coldmargin/record-1",
     "body": {"record_id": uuid4, "version": 1, "supersedes": null | {...}, "created": RFC 3339 UTC,
              "protocol": {"name": ..., "text": the YAML as entered, "parsed": the parsed document},
              "assessment": the full assessment, "software": {"package", "version", "data_files"}},
     "signatures": [{"meaning", "printed_name", "user_id", "signed", "key_fingerprint", "algorithm",
                     "signature"}, ...]}

Signatures
----------
Signature ``i`` is an Ed25519 signature [ref:rfc8032] over :data:`SIGNATURE_CONTEXT` followed by the
canonical bytes of the record as it stood when it was signed: schema, body, the earlier signatures
``0 .. i-1`` complete, and signature ``i`` itself without its ``signature`` field. So every signature
covers the body, the signer's printed name, user id, meaning and signed time (the signature
manifestation of [ref:cfr-21-part-11] §11.50 and [ref:eu-gmp-annex-11] §14), and every signature before
it. Meanings are ``authored``, ``reviewed`` and ``approved``; the order rules are in
:func:`order_problems`.

Corrections are new versions: same ``record_id``, ``version`` + 1, and ``supersedes`` naming the hash of
the stored version they replace and the reason (mandatory). A record is never edited.

Stored bytes and verification
-----------------------------
A record is stored as exactly its canonical bytes (UTF-8, no byte-order mark, no trailing newline). Its
hash is the SHA-256 of those stored bytes. Verification (:func:`verify_record`) starts from the exact
stored bytes: it refuses input above :data:`MAX_RECORD_BYTES`, nesting deeper than :data:`MAX_DEPTH`,
duplicate keys, NaN/Infinity and numbers that overflow a double, and it refuses any file that is not
byte for byte its own canonical form; only then are the signed messages derived and checked. Each
signature is reported as ``valid``, ``invalid`` or ``unknown key`` (fingerprint not in the key ring).
"""

from __future__ import annotations

import base64
import hashlib
import json
import os
import re
import uuid
from dataclasses import dataclass, field
from datetime import date, datetime
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np
import rfc8785

import planner
from planner.errors import InputError, choice_error
from planner.keys import KeyRing, SigningKey, check_fingerprint, check_printed_name, check_user_id, utc_now
from planner.results import to_jsonable

SCHEMA = "coldmargin/record-1"
MEANINGS = ("authored", "reviewed", "approved")
ALGORITHM = "ed25519"
SIGNATURE_CONTEXT = b"coldmargin/record-1 signature\n"
MAX_RECORD_BYTES = 32 * 1024 * 1024  # a record with every section and its series is well under 1 MB
MAX_DEPTH = 64  # objects and arrays nested in each other; an assessment needs about 10
MAX_PROTOCOL_BYTES = 1024 * 1024
SAFE_INTEGER = 2**53 - 1  # I-JSON / RFC 8785: integers beyond this are not exact as doubles

_RFC3339_UTC = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d{1,9})?Z")
_UUID4 = re.compile(r"[0-9a-f]{8}-[0-9a-f]{4}-4[0-9a-f]{3}-[89ab][0-9a-f]{3}-[0-9a-f]{12}")
_SHA256_HEX = re.compile(r"[0-9a-f]{64}")
_STRING = re.compile(rb'"(?:[^"\\]|\\.)*"', re.S)
_SIGNATURE_FIELDS = ("meaning", "printed_name", "user_id", "signed", "key_fingerprint", "algorithm", "signature")
_BODY_FIELDS = ("record_id", "version", "supersedes", "created", "protocol", "assessment", "software")


# --------------------------------------------------------------------------------------- canonical bytes
def canonical_bytes(value: Any) -> bytes:
    """RFC 8785 canonical JSON of ``value`` [ref:rfc8785]; refusals become :class:`InputError`."""
    try:
        return rfc8785.dumps(value)
    except rfc8785.CanonicalizationError as exc:
        raise InputError("record", str(exc), "JSON values: finite numbers, integers within ±(2^53-1), valid UTF-8") from None
    except RecursionError:
        raise InputError("record", "nesting too deep", f"at most {MAX_DEPTH} levels") from None


def record_hash(data: bytes) -> str:
    """SHA-256 of the stored bytes of a record, 64 lowercase hex digits."""
    return hashlib.sha256(data).hexdigest()


def check_time(text: Any, field: str) -> str:
    """Return ``text`` if it is an RFC 3339 UTC timestamp ending in ``Z`` [ref:rfc3339], else refuse."""
    if not isinstance(text, str) or not _RFC3339_UTC.fullmatch(text):
        raise InputError(field, text, "an RFC 3339 time in UTC, e.g. 2026-01-31T14:05:09.120Z")
    try:
        datetime.fromisoformat(text[:19])
    except ValueError:
        raise InputError(field, text, "a real calendar date and time") from None
    return text


# ------------------------------------------------------------------------------------------ strict parse
def _reject_constant(name: str):
    raise InputError("record", name, "finite numbers only (JSON has no NaN or Infinity)")


def _pairs(pairs: list[tuple[str, Any]]) -> dict:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise InputError("record", f"duplicate key {key!r}", "each key once per object")
        out[key] = value
    return out


def _parse_int(text: str) -> int | float:
    n = int(text)
    # RFC 8785 reads every number as a double: a large canonical integer (1e20 is written
    # 100000000000000000000) is a float, and it must canonicalise back to the same digits
    return n if -SAFE_INTEGER <= n <= SAFE_INTEGER else float(text)


def _parse_float(text: str) -> float:
    x = float(text)
    if not np.isfinite(x):
        raise InputError("record", text, "numbers within the range of a double")
    return x


def nesting_depth(data: bytes) -> int:
    """Deepest nesting of ``[`` and ``{`` in JSON text (brackets inside strings do not count)."""
    stripped = _STRING.sub(b'""', data)
    codes = np.frombuffer(stripped, dtype=np.uint8)
    step = (np.isin(codes, (0x5B, 0x7B))).astype(np.int32) - (np.isin(codes, (0x5D, 0x7D))).astype(np.int32)
    return int(np.cumsum(step).max(initial=0))


def parse_json_strict(data: bytes, what: str = "record") -> Any:
    """Parse JSON bytes strictly, without trusting anything about them.

    Refuses (with an :class:`InputError` naming ``what``): more than :data:`MAX_RECORD_BYTES`, bytes that
    are not UTF-8 or start with a byte-order mark, nesting deeper than :data:`MAX_DEPTH`, duplicate keys,
    NaN/Infinity, numbers beyond a double, and anything that is not well-formed JSON.
    """
    if not isinstance(data, bytes | bytearray):
        raise InputError(what, type(data).__name__, "bytes")
    if len(data) > MAX_RECORD_BYTES:
        raise InputError(what, f"{len(data)} bytes", f"at most {MAX_RECORD_BYTES} bytes")
    if data.startswith(b"\xef\xbb\xbf"):
        raise InputError(what, "byte-order mark", "UTF-8 without a byte-order mark")
    try:
        text = bytes(data).decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(what, f"byte {exc.start}", "UTF-8 text") from None
    depth = nesting_depth(bytes(data))
    if depth > MAX_DEPTH:
        raise InputError(what, f"nesting {depth} levels deep", f"at most {MAX_DEPTH} levels")
    try:
        return json.loads(
            text,
            object_pairs_hook=_pairs,
            parse_constant=_reject_constant,
            parse_int=_parse_int,
            parse_float=_parse_float,
        )
    except InputError as exc:
        raise InputError(what, exc.value, exc.allowed) from None
    except json.JSONDecodeError as exc:
        raise InputError(what, f"line {exc.lineno} column {exc.colno}: {exc.msg}", "well-formed JSON") from None
    except (RecursionError, ValueError) as exc:  # ValueError: e.g. an integer with too many digits
        raise InputError(what, type(exc).__name__, "well-formed JSON") from None


# ------------------------------------------------------------------------------------------- structure
def _require(mapping: Any, fields: tuple[str, ...], where: str) -> None:
    if not isinstance(mapping, dict):
        raise InputError(where, type(mapping).__name__, "a JSON object")
    missing = [f for f in fields if f not in mapping]
    if missing:
        raise InputError(f"{where}.{missing[0]}", "missing", "present")
    extra = sorted(set(mapping) - set(fields))
    if extra:
        raise InputError(f"{where}.{extra[0]}", "unknown key", "one of: " + ", ".join(fields))


def check_structure(record: Any) -> dict:
    """Check a parsed record has the shape of ``coldmargin/record-1``; return it."""
    _require(record, ("schema", "body", "signatures"), "record")
    if record["schema"] != SCHEMA:
        raise InputError("record.schema", record["schema"], SCHEMA)
    body = record["body"]
    _require(body, _BODY_FIELDS, "body")
    if not isinstance(body["record_id"], str) or not _UUID4.fullmatch(body["record_id"]):
        raise InputError("body.record_id", body["record_id"], "a version-4 UUID in lowercase")
    version = body["version"]
    if not isinstance(version, int) or isinstance(version, bool) or not 1 <= version <= 10**6:
        raise InputError("body.version", version, "an integer 1 to 1000000")
    check_time(body["created"], "body.created")
    sup = body["supersedes"]
    if version == 1 and sup is not None:
        raise InputError("body.supersedes", sup, "null for version 1")
    if version > 1:
        _require(sup, ("record_id", "version", "record_hash", "reason"), "body.supersedes")
        if sup["record_id"] != body["record_id"] or sup["version"] != version - 1:
            raise InputError("body.supersedes", f"{sup['record_id']} v{sup['version']}", f"{body['record_id']} v{version - 1}")
        if not isinstance(sup["record_hash"], str) or not _SHA256_HEX.fullmatch(sup["record_hash"]):
            raise InputError("body.supersedes.record_hash", sup["record_hash"], "64 lowercase hex digits")
        if not isinstance(sup["reason"], str) or not sup["reason"].strip():
            raise InputError("body.supersedes.reason", sup["reason"], "the reason for the correction, in words")
    _require(body["protocol"], ("name", "text", "parsed"), "body.protocol")
    if not isinstance(body["protocol"]["text"], str):
        raise InputError("body.protocol.text", type(body["protocol"]["text"]).__name__, "the protocol text")
    if not isinstance(body["assessment"], dict):
        raise InputError("body.assessment", type(body["assessment"]).__name__, "a JSON object")
    _require(body["software"], ("package", "version", "data_files"), "body.software")
    signatures = record["signatures"]
    if not isinstance(signatures, list):
        raise InputError("record.signatures", type(signatures).__name__, "a list")
    for i, sig in enumerate(signatures):
        where = f"signatures[{i}]"
        _require(sig, _SIGNATURE_FIELDS, where)
        if sig["meaning"] not in MEANINGS:
            raise choice_error(f"{where}.meaning", sig["meaning"], MEANINGS)
        check_printed_name(sig["printed_name"], f"{where}.printed_name")
        check_user_id(sig["user_id"], f"{where}.user_id")
        check_time(sig["signed"], f"{where}.signed")
        check_fingerprint(sig["key_fingerprint"], f"{where}.key_fingerprint")
        if sig["algorithm"] != ALGORITHM:
            raise InputError(f"{where}.algorithm", sig["algorithm"], ALGORITHM)
        if not isinstance(sig["signature"], str):
            raise InputError(f"{where}.signature", sig["signature"], "base64 of 64 bytes")
    return record


def _assemble(schema: Any, body_bytes: bytes, signatures: Any) -> bytes:
    # the canonical form of {"body", "schema", "signatures"} (keys in RFC 8785 order), with the body's
    # canonical bytes computed once and reused for every signed message
    return b'{"body":' + body_bytes + b',"schema":' + canonical_bytes(schema) + b',"signatures":' + canonical_bytes(signatures) + b"}"


def _load(data: bytes, what: str) -> tuple[dict, bytes]:
    record = parse_json_strict(data, what)
    if isinstance(record, dict) and set(record) == {"schema", "body", "signatures"}:
        body_bytes = canonical_bytes(record["body"])
        canonical = _assemble(record["schema"], body_bytes, record["signatures"])
    else:
        body_bytes, canonical = b"", canonical_bytes(record)
    if canonical != bytes(data):
        raise InputError(
            what, "not in canonical form",
            "the exact bytes coldmargin wrote (RFC 8785); a record that was reformatted or edited cannot be verified",
        )
    try:
        return check_structure(record), body_bytes
    except InputError as exc:
        raise InputError(f"{what}: {exc.field}", exc.value, exc.allowed, exc.hint) from None


def load_record(data: bytes, what: str = "record") -> dict:
    """Parse stored record bytes strictly and check they are canonical and well-formed.

    Raises :class:`InputError` naming what is wrong. This does not check signatures: see
    :func:`verify_record`.
    """
    return _load(data, what)[0]


def record_bytes(record: dict) -> bytes:
    """The stored form of a record: its canonical bytes, after checking its structure."""
    check_structure(record)
    data = canonical_bytes(record)
    if parse_json_strict(data) != record:  # what we write must read back as the same record
        raise InputError("record", "does not read back as written", "JSON values that survive a round trip")
    return data


# -------------------------------------------------------------------------------------------- building
def _json_ready(value: Any, where: str, depth: int = 0) -> Any:
    """Turn parsed YAML / assessment values into JSON values, refusing what JSON cannot hold exactly."""
    if depth > MAX_DEPTH - 8:
        raise InputError(where, "nested too deep", f"at most {MAX_DEPTH - 8} levels")
    if isinstance(value, dict):
        out = {}
        for key, item in value.items():
            if not isinstance(key, str):
                raise InputError(f"{where}.{key}", key, "text keys (quote numbers used as keys)")
            out[key] = _json_ready(item, f"{where}.{key}", depth + 1)
        return out
    if isinstance(value, list | tuple):
        return [_json_ready(v, f"{where}[{i}]", depth + 1) for i, v in enumerate(value)]
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, str):
        try:
            value.encode("utf-8")
        except UnicodeEncodeError:
            raise InputError(where, value[:40], "text that is valid Unicode (no lone surrogates)") from None
        return value
    if value is None or isinstance(value, bool):
        return value
    if isinstance(value, int):
        if abs(value) > SAFE_INTEGER:
            raise InputError(where, value, f"integers within ±{SAFE_INTEGER} (write large numbers as decimals)")
        return value
    if isinstance(value, float):
        if not np.isfinite(value):
            raise InputError(where, value, "a finite number")
        return value
    converted = to_jsonable(value)
    if converted is value:
        raise InputError(where, type(value).__name__, "JSON values (text, numbers, true/false, null, lists, mappings)")
    return _json_ready(converted, where, depth)


def data_versions() -> dict[str, str]:
    """SHA-256 of every file in the package's ``planner/data/`` folder, keyed by its path there."""
    out: dict[str, str] = {}

    def walk(node, prefix: str) -> None:
        for child in sorted(node.iterdir(), key=lambda c: c.name):
            if child.name.startswith(".") or child.name == "__pycache__":
                continue
            if child.is_dir():
                walk(child, f"{prefix}{child.name}/")
            else:
                out[f"{prefix}{child.name}"] = hashlib.sha256(child.read_bytes()).hexdigest()

    walk(resources.files("planner").joinpath("data"), "data/")
    return out


def software_versions() -> dict[str, Any]:
    return {"package": "coldmargin", "version": planner.__version__, "data_files": data_versions()}


def build_record(
    protocol_text: str,
    assessment: dict,
    *,
    protocol_name: str,
    protocol_parsed: dict | None = None,
    previous: bytes | None = None,
    reason: str | None = None,
    created: str | None = None,
    record_id: str | None = None,
) -> dict:
    """A new, unsigned record of a protocol and its assessment.

    Parameters
    ----------
    protocol_text : str
        The protocol file exactly as entered (stored verbatim).
    assessment : dict
        The full assessment (``Assessment.to_dict()``).
    protocol_name : str
        The protocol's file name, for people.
    protocol_parsed : dict, optional
        The parsed document (``Protocol.entered``); parsed from ``protocol_text`` when omitted.
    previous : bytes, optional
        The stored bytes of the version this one corrects; the new record keeps its ``record_id``, takes
        the next ``version`` and names ``previous``'s hash in ``supersedes``.
    reason : str, optional
        Why the previous version is corrected; mandatory with ``previous``.
    created : str, optional
        RFC 3339 UTC time; now by default.
    record_id : str, optional
        A version-4 UUID for a new record; a fresh one by default.
    """
    if not isinstance(protocol_text, str):
        raise InputError("protocol", type(protocol_text).__name__, "the protocol file's text")
    if len(protocol_text.encode("utf-8")) > MAX_PROTOCOL_BYTES:
        raise InputError("protocol", f"{len(protocol_text.encode('utf-8'))} bytes", f"at most {MAX_PROTOCOL_BYTES} bytes")
    if protocol_parsed is None:
        from planner.yamlio import load_yaml

        protocol_parsed = load_yaml(protocol_text, protocol_name)
    supersedes = None
    version = 1
    if previous is not None:
        old = load_record(previous, "previous record")
        if not isinstance(reason, str) or not reason.strip():
            raise InputError("--reason", reason, "the reason for the correction, in words (mandatory)")
        if not old["signatures"]:
            raise InputError("previous record", "unsigned", "a signed record")
        record_id = old["body"]["record_id"]
        version = old["body"]["version"] + 1
        supersedes = {
            "record_id": record_id,
            "version": old["body"]["version"],
            "record_hash": record_hash(previous),
            "reason": reason.strip(),
        }
    elif reason is not None:
        raise InputError("--reason", reason, "only with the record being corrected (--supersedes)")
    record_id = record_id or str(uuid.uuid4())
    record = {
        "schema": SCHEMA,
        "body": {
            "record_id": record_id,
            "version": version,
            "supersedes": supersedes,
            "created": check_time(created, "created") if created else utc_now(),
            "protocol": {
                "name": str(protocol_name),
                "text": protocol_text,
                "parsed": _json_ready(protocol_parsed, "protocol"),
            },
            "assessment": _json_ready(assessment, "assessment"),
            "software": software_versions(),
        },
        "signatures": [],
    }
    check_structure(record)
    return record


# ------------------------------------------------------------------------------------------- signatures
def signing_message(record: dict, index: int, body_bytes: bytes | None = None) -> bytes:
    """The bytes signature ``index`` signs: context, then the record as it stood (see module notes).

    ``body_bytes`` are the body's canonical bytes when the caller has them already.
    """
    signatures = record["signatures"]
    own = {k: v for k, v in signatures[index].items() if k != "signature"}
    if body_bytes is None:
        body_bytes = canonical_bytes(record["body"])
    return SIGNATURE_CONTEXT + _assemble(record["schema"], body_bytes, [*signatures[:index], own])


def order_problems(signatures: list[dict]) -> list[str]:
    """What breaks the order rules, in words (empty when the order is right).

    Rules: the first signature is ``authored``; every ``authored`` signature comes before any review or
    approval; ``reviewed`` needs an earlier ``authored`` and ``approved`` an earlier ``reviewed`` (no
    approval before review); a reviewer or approver is not one of the authors (four eyes, common
    practice); nobody signs with the same meaning twice.
    """
    problems = []
    authors: set[str] = set()
    seen: set[tuple[str, str]] = set()
    reviewed = False
    later_than_authoring = False
    for i, sig in enumerate(signatures):
        meaning, user = sig.get("meaning"), sig.get("user_id")
        where = f"signature {i + 1} ({meaning} by {user})"
        if (user, meaning) in seen:
            problems.append(f"{where}: {user} already signed as {meaning}")
        seen.add((user, meaning))
        if i == 0 and meaning != "authored":
            problems.append(f"{where}: the first signature must be 'authored'")
        if meaning == "authored":
            authors.add(user)
            if later_than_authoring:
                problems.append(f"{where}: authoring comes before review and approval")
        else:
            later_than_authoring = True
            if user in authors:
                problems.append(f"{where}: an author cannot also sign as {meaning}")
        if meaning == "reviewed":
            reviewed = True
        if meaning == "approved" and not reviewed:
            problems.append(f"{where}: no approval before review")
    return problems


def sign_record(record: dict, key: SigningKey, meaning: str, signed: str | None = None) -> dict:
    """Return a copy of ``record`` with one more signature, by ``key``, with ``meaning``.

    The order rules (:func:`order_problems`) are checked first: a signature that would break them is
    refused with an :class:`InputError`.
    """
    if meaning not in MEANINGS:
        raise choice_error("--meaning", meaning, MEANINGS)
    check_structure(record)
    entry = {
        "meaning": meaning,
        "printed_name": key.name,
        "user_id": key.user_id,
        "signed": check_time(signed, "signed") if signed else utc_now(),
        "key_fingerprint": key.fingerprint,
        "algorithm": ALGORITHM,
        "signature": "",
    }
    problems = order_problems([*record["signatures"], entry])
    if problems:
        raise InputError("--meaning", meaning, "a signature that keeps the order rules", problems[-1])
    new = {"schema": record["schema"], "body": record["body"], "signatures": [*record["signatures"], entry]}
    signature = key.sign(signing_message(new, len(new["signatures"]) - 1))
    new["signatures"][-1] = {**entry, "signature": base64.b64encode(signature).decode("ascii")}
    return new


# ------------------------------------------------------------------------------------------ verification
@dataclass
class SignatureCheck:
    """One signature's verdict: ``valid``, ``invalid`` or ``unknown key``, with the reason."""

    index: int
    meaning: str
    printed_name: str
    user_id: str
    signed: str
    key_fingerprint: str
    status: str
    reason: str = ""


@dataclass
class RecordCheck:
    """The verification of one stored record."""

    record_hash: str
    ok: bool
    record_id: str | None = None
    version: int | None = None
    problems: list[str] = field(default_factory=list)
    signatures: list[SignatureCheck] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def lines(self) -> list[str]:
        """A plain-text report for people."""
        out = [f"record hash  sha256:{self.record_hash}"]
        if self.record_id:
            out.append(f"record       {self.record_id} version {self.version}")
        for s in self.signatures:
            out.append(
                f"signature {s.index + 1}  {s.status:<11} {s.meaning:<8} {s.printed_name} <{s.user_id}> "
                f"{s.signed} {s.key_fingerprint}" + (f" – {s.reason}" if s.reason else "")
            )
        out += [f"problem      {p}" for p in self.problems]
        out += [f"note         {n}" for n in self.notes]
        out.append("verified" if self.ok else "VERIFICATION FAILED")
        return out

    def to_dict(self) -> dict:
        return to_jsonable(self)


def verify_record(data: bytes, keyring: KeyRing) -> RecordCheck:
    """Verify a stored record from its exact bytes against the public keys in ``keyring``.

    Never raises for bad content: a malformed, non-canonical or tampered file gives ``ok=False`` with the
    reason in ``problems``. ``ok`` needs: well-formed canonical bytes, at least one signature, every
    signature ``valid`` and the order rules kept.
    """
    return verify_and_load(data, keyring)[0]


def verify_and_load(data: bytes, keyring: KeyRing) -> tuple[RecordCheck, dict | None]:
    """:func:`verify_record`, and the parsed record (None when the bytes are not a well-formed record)."""
    check = RecordCheck(record_hash=record_hash(bytes(data)), ok=False)
    try:
        record, body_bytes = _load(data, "record")
    except InputError as exc:
        check.problems.append(str(exc))
        return check, None
    body = record["body"]
    check.record_id, check.version = body["record_id"], body["version"]
    signatures = record["signatures"]
    if not signatures:
        check.problems.append("the record has no signatures")
    for i, sig in enumerate(signatures):
        result = SignatureCheck(
            i, sig["meaning"], sig["printed_name"], sig["user_id"], sig["signed"], sig["key_fingerprint"], "invalid"
        )
        check.signatures.append(result)
        key = keyring.get(sig["key_fingerprint"])
        if key is None:
            result.status, result.reason = "unknown key", "fingerprint not among the registered public keys"
            continue
        try:
            raw = base64.b64decode(sig["signature"], validate=True)
        except ValueError:
            result.reason = "signature is not base64"
            continue
        if len(raw) != 64 or base64.b64encode(raw).decode("ascii") != sig["signature"]:
            result.reason = "signature is not 64 bytes in standard base64"
            continue
        if key.user_id != sig["user_id"] or key.name != sig["printed_name"]:
            result.reason = f"key is registered to {key.name} <{key.user_id}>"
            continue
        if not key.verify(raw, signing_message(record, i, body_bytes)):
            result.reason = "signature does not match the signed content"
            continue
        result.status = "valid"
    check.problems += order_problems(signatures)
    bad = [s for s in check.signatures if s.status != "valid"]
    if bad:
        check.problems.append(f"{len(bad)} of {len(signatures)} signatures not valid")
    current = data_versions()
    if body["software"].get("data_files") != current or body["software"].get("version") != planner.__version__:
        check.notes.append(
            f"made with coldmargin {body['software'].get('version')}; installed now: {planner.__version__}"
            + ("" if body["software"].get("data_files") == current else " (data files differ)")
        )
    check.ok = not check.problems
    return check, record


# ------------------------------------------------------------------------------------------------ files
def read_record_file(path: str | os.PathLike) -> bytes:
    """The exact bytes of a record file, refusing files above :data:`MAX_RECORD_BYTES` without reading them."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            data = fh.read(MAX_RECORD_BYTES + 1)
    except FileNotFoundError:
        raise InputError("record file", str(path), "an existing file") from None
    except IsADirectoryError:
        raise InputError("record file", str(path), "a file, not a folder") from None
    if len(data) > MAX_RECORD_BYTES:
        raise InputError(str(path), f"more than {MAX_RECORD_BYTES} bytes", f"at most {MAX_RECORD_BYTES} bytes")
    return data


def write_new_file(path: str | os.PathLike, data: bytes, field: str = "--out") -> None:
    """Write ``data`` to a file that must not exist yet (never overwrites), and flush it to disk."""
    path = Path(path)
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    except FileExistsError:
        raise InputError(field, str(path), "a file that does not exist yet (saved files are never overwritten)") from None
    except OSError as exc:
        raise InputError(field, str(path), f"a writable path ({exc.strerror})") from None
    try:
        view = memoryview(data)
        while view:
            view = view[os.write(fd, view):]
        os.fsync(fd)
    finally:
        os.close(fd)
