"""Records: RFC 8785 canonical bytes, Ed25519 signatures and their order, strict verification from the
exact stored bytes, and refusal of malformed files."""

import base64
import copy
import hashlib
import json
import struct
from pathlib import Path

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner import records
from planner.errors import InputError
from planner.keys import KeyRing, SigningKey

DATA = Path(__file__).parent / "data"
PROTOCOL_TEXT = "# invented test protocol\nschema: coldmargin/protocol-1\ntitle: Test hold\n"


# ------------------------------------------------------------------------------- RFC 8785's own vectors
# RFC 8785 Appendix B, "Number Serialization Samples": IEEE 754 bit pattern -> canonical text [ref:rfc8785]
RFC8785_APPENDIX_B = [
    ("0000000000000000", "0"),
    ("8000000000000000", "0"),
    ("0000000000000001", "5e-324"),
    ("8000000000000001", "-5e-324"),
    ("7fefffffffffffff", "1.7976931348623157e+308"),
    ("ffefffffffffffff", "-1.7976931348623157e+308"),
    ("4340000000000000", "9007199254740992"),
    ("c340000000000000", "-9007199254740992"),
    ("4430000000000000", "295147905179352830000"),
    ("44b52d02c7e14af5", "9.999999999999997e+22"),
    ("44b52d02c7e14af6", "1e+23"),
    ("44b52d02c7e14af7", "1.0000000000000001e+23"),
    ("444b1ae4d6e2ef4e", "999999999999999700000"),
    ("444b1ae4d6e2ef4f", "999999999999999900000"),
    ("444b1ae4d6e2ef50", "1e+21"),
    ("3eb0c6f7a0b5ed8c", "9.999999999999997e-7"),
    ("3eb0c6f7a0b5ed8d", "0.000001"),
    ("41b3de4355555553", "333333333.3333332"),
    ("41b3de4355555554", "333333333.33333325"),
    ("41b3de4355555555", "333333333.3333333"),
    ("41b3de4355555556", "333333333.3333334"),
    ("41b3de4355555557", "333333333.33333343"),
    ("becbf647612f3696", "-0.0000033333333333333333"),
    ("43143ff3c1cb0959", "1424953923781206.2"),
]


def _double(hex_bits: str) -> float:
    return struct.unpack(">d", bytes.fromhex(hex_bits))[0]


@pytest.mark.parametrize(("bits", "expected"), RFC8785_APPENDIX_B)
def test_rfc8785_appendix_b_number_serialization(bits, expected):
    """RFC 8785 Appendix B: each double canonicalises to the RFC's text, and reads back to itself."""
    assert records.canonical_bytes(_double(bits)) == expected.encode("ascii")
    back = records.parse_json_strict(expected.encode("ascii"), "vector")
    assert records.canonical_bytes(back) == expected.encode("ascii")


@pytest.mark.parametrize("bits", ["7fffffffffffffff", "7ff0000000000000"])
def test_rfc8785_appendix_b_nan_and_infinity_are_errors(bits):
    """RFC 8785 Appendix B lists NaN and Infinity as 'error': they have no JSON form."""
    with pytest.raises(InputError, match="record"):
        records.canonical_bytes(_double(bits))


# RFC 8785 section 3.2.2 (the worked example of the whole transformation) [ref:rfc8785]
RFC8785_SECTION_3_2_2_INPUT = (
    '{\n  "numbers": [333333333.33333329, 1E30, 4.50, 2e-3, 0.000000000000000000000000001],\n'
    '  "string": "\\u20ac$\\u000F\\u000aA\'\\u0042\\u0022\\u005c\\\\\\"\\/",\n'
    '  "literals": [null, true, false]\n}'
)
RFC8785_SECTION_3_2_2_OUTPUT = (
    '{"literals":[null,true,false],"numbers":[333333333.3333333,1e+30,4.5,0.002,1e-27],'
    '"string":"€$\\u000f\\nA\'B\\"\\\\\\\\\\"/"}'
)


def test_rfc8785_section_3_2_2_example():
    value = records.parse_json_strict(RFC8785_SECTION_3_2_2_INPUT.encode("utf-8"), "example")
    assert records.canonical_bytes(value) == RFC8785_SECTION_3_2_2_OUTPUT.encode("utf-8")


# RFC 8785 section 3.2.3: property names sorted by their UTF-16 code units [ref:rfc8785]
RFC8785_SECTION_3_2_3_INPUT = (
    '{"\\u20ac": "Euro Sign", "\\r": "Carriage Return", "\\ufb33": "Hebrew Letter Dalet With Dagesh", '
    '"1": "One", "\\ud83d\\ude00": "Emoji: Grinning Face", "\\u0080": "Control", '
    '"\\u00f6": "Latin Small Letter O With Diaeresis"}'
)
RFC8785_SECTION_3_2_3_ORDER = [
    "Carriage Return", "One", "Control", "Latin Small Letter O With Diaeresis", "Euro Sign",
    "Emoji: Grinning Face", "Hebrew Letter Dalet With Dagesh",
]


def test_rfc8785_section_3_2_3_sorting():
    value = records.parse_json_strict(RFC8785_SECTION_3_2_3_INPUT.encode("utf-8"), "example")
    out = records.canonical_bytes(value)
    assert list(json.loads(out, object_pairs_hook=lambda pairs: [v for _, v in pairs])) == RFC8785_SECTION_3_2_3_ORDER
    assert out.startswith(b'{"\\r":"Carriage Return","1":"One","\xc2\x80":"Control"')


def test_sort_keys_json_is_not_canonical():
    """Why the package is needed: json.dumps(sort_keys=True) writes 1e-07 and 1.0 (common practice, no source)."""
    value = {"b": 1.0, "a": 1e-7}
    assert json.dumps(value, sort_keys=True, separators=(",", ":")) == '{"a":1e-07,"b":1.0}'
    assert records.canonical_bytes(value) == b'{"a":1e-7,"b":1}'


# ------------------------------------------------------------------------------------------- fixtures
def _key(name, user_id, seed):
    return SigningKey(name, user_id, Ed25519PrivateKey.from_private_bytes(hashlib.sha256(seed).digest()))


ADA = _key("Ada Author", "ada", b"ada")
RUI = _key("Rui Reviewer", "rui", b"rui")
PIA = _key("Pia Approver", "pia", b"pia")
RING = KeyRing([k.public_entry("2026-01-01T00:00:00.000Z") for k in (ADA, RUI, PIA)])


def sample_assessment():
    data = json.loads((DATA / "record_sample_assessment.json").read_text())
    data.pop("_note")
    return data


def new_record(title="Test hold"):
    a = sample_assessment()
    a["title"] = title
    return records.build_record(PROTOCOL_TEXT, a, protocol_name="test.yaml")


@pytest.fixture(scope="module")
def signed():
    r = records.sign_record(new_record(), ADA, "authored")
    r = records.sign_record(r, RUI, "reviewed")
    r = records.sign_record(r, PIA, "approved")
    return records.record_bytes(r)


# ------------------------------------------------------------------------------------ build and verify
def test_record_has_the_documented_shape(signed):
    r = records.load_record(signed)
    body = r["body"]
    assert r["schema"] == "coldmargin/record-1"
    assert set(body) == {"record_id", "version", "supersedes", "created", "protocol", "assessment", "software"}
    assert body["protocol"]["text"] == PROTOCOL_TEXT  # verbatim, comment included
    assert body["protocol"]["parsed"]["title"] == "Test hold"
    assert body["version"] == 1 and body["supersedes"] is None
    files = body["software"]["data_files"]
    ref = Path(records.__file__).parent / "data" / "references.yaml"
    assert files["data/references.yaml"] == hashlib.sha256(ref.read_bytes()).hexdigest()
    assert [s["meaning"] for s in r["signatures"]] == ["authored", "reviewed", "approved"]
    assert signed == records.canonical_bytes(r) and not signed.endswith(b"\n")


def test_valid_record_verifies_and_reports_each_signature(signed):
    check = records.verify_record(signed, RING)
    assert check.ok, check.problems
    assert [s.status for s in check.signatures] == ["valid"] * 3
    assert check.record_hash == hashlib.sha256(signed).hexdigest()
    assert "verified" in check.lines()[-1]


def test_rfc3339_example_timestamps_accepted():
    """RFC 3339 §5.8 examples in UTC: 1985-04-12T23:20:50.52Z; local offsets are refused (we write UTC) [ref:rfc3339]."""
    assert records.check_time("1985-04-12T23:20:50.52Z", "t")
    with pytest.raises(InputError, match="UTC"):
        records.check_time("1996-12-19T16:39:57-08:00", "t")
    with pytest.raises(InputError, match="calendar"):
        records.check_time("2026-02-30T00:00:00Z", "t")


def test_unknown_key_and_name_mismatch(signed):
    partial = KeyRing([ADA.public_entry()])
    check = records.verify_record(signed, partial)
    assert not check.ok
    assert [s.status for s in check.signatures] == ["valid", "unknown key", "unknown key"]
    renamed = KeyRing([ADA.public_entry(), RUI.public_entry(), SigningKey("Someone Else", "pia", PIA.private_key).public_entry()])
    check = records.verify_record(signed, renamed)
    assert check.signatures[2].status == "invalid" and "registered to Someone Else" in check.signatures[2].reason


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_any_one_byte_change_fails_verification(signed, data):
    position = data.draw(st.integers(0, len(signed) - 1), label="position")
    value = data.draw(st.integers(0, 255).filter(lambda b: b != signed[position]), label="byte")
    changed = signed[:position] + bytes([value]) + signed[position + 1:]
    assert not records.verify_record(changed, RING).ok


@pytest.mark.parametrize("where", ["start", "title", "signature", "end"])
def test_one_byte_change_at_chosen_places(signed, where):
    position = {
        "start": 0,
        "title": signed.index(b"Test hold"),
        "signature": signed.rindex(b'"signature":"') + 14,
        "end": len(signed) - 1,
    }[where]
    changed = bytearray(signed)
    changed[position] ^= 0x01
    check = records.verify_record(bytes(changed), RING)
    assert not check.ok and check.problems


def test_removing_or_adding_bytes_fails(signed):
    assert not records.verify_record(signed + b"\n", RING).ok  # a trailing newline is not the stored form
    assert not records.verify_record(signed[:-1], RING).ok
    pretty = json.dumps(json.loads(signed), indent=1).encode()
    check = records.verify_record(pretty, RING)
    assert not check.ok and "not in canonical form" in check.problems[0]


def test_signature_copied_onto_another_record_fails(signed):
    other = records.sign_record(new_record("Another hold"), ADA, "authored")
    other = records.sign_record(other, RUI, "reviewed")
    original = records.load_record(signed)
    forged = copy.deepcopy(other)
    forged["signatures"] = copy.deepcopy(original["signatures"])
    check = records.verify_record(records.canonical_bytes(forged), RING)
    assert not check.ok
    assert all(s.status == "invalid" and "does not match" in s.reason for s in check.signatures)
    # one signature moved to a record by the same author: still invalid
    forged = copy.deepcopy(other)
    forged["signatures"][0] = original["signatures"][0]
    check = records.verify_record(records.canonical_bytes(forged), RING)
    assert check.signatures[0].status == "invalid"


def test_removing_an_earlier_signature_breaks_the_later_ones(signed):
    r = records.load_record(signed)
    r["signatures"] = [r["signatures"][0], r["signatures"][2]]
    check = records.verify_record(records.canonical_bytes(r), RING)
    assert [s.status for s in check.signatures] == ["valid", "invalid"]
    assert any("no approval before review" in p for p in check.problems)


# -------------------------------------------------------------------------------------------- order rules
def test_no_approval_before_review_and_authored_first():
    r = new_record()
    with pytest.raises(InputError, match="first signature must be 'authored'"):
        records.sign_record(r, RUI, "reviewed")
    r = records.sign_record(r, ADA, "authored")
    with pytest.raises(InputError, match="no approval before review"):
        records.sign_record(r, PIA, "approved")
    with pytest.raises(InputError, match="author cannot also sign as reviewed"):
        records.sign_record(r, ADA, "reviewed")
    r = records.sign_record(r, RUI, "reviewed")
    with pytest.raises(InputError, match="authoring comes before review"):
        records.sign_record(r, PIA, "authored")
    with pytest.raises(InputError, match="already signed as reviewed"):
        records.sign_record(r, RUI, "reviewed")
    with pytest.raises(InputError, match="one of: authored, reviewed, approved"):
        records.sign_record(r, PIA, "okayed")


def test_verification_catches_order_even_with_valid_signatures():
    """A record whose signatures are mathematically valid but out of order does not verify."""
    r = records.sign_record(new_record(), ADA, "authored")
    entry = {"meaning": "approved", "printed_name": PIA.name, "user_id": PIA.user_id,
             "signed": "2026-01-01T00:00:00.000Z", "key_fingerprint": PIA.fingerprint,
             "algorithm": "ed25519", "signature": ""}
    r["signatures"].append(entry)
    entry["signature"] = base64.b64encode(PIA.sign(records.signing_message(r, 1))).decode()
    check = records.verify_record(records.canonical_bytes(r), RING)
    assert [s.status for s in check.signatures] == ["valid", "valid"]
    assert not check.ok and any("no approval before review" in p for p in check.problems)


def test_unsigned_record_does_not_verify():
    data = records.canonical_bytes(new_record())
    check = records.verify_record(data, RING)
    assert not check.ok and "no signatures" in check.problems[0]


# ------------------------------------------------------------------------------------------ corrections
def test_correction_is_a_new_version_naming_the_old_hash(signed):
    new = records.build_record(PROTOCOL_TEXT + "notes: corrected\n", sample_assessment(), protocol_name="test.yaml",
                               previous=signed, reason="hold time was mistyped")
    old = records.load_record(signed)
    assert new["body"]["record_id"] == old["body"]["record_id"]
    assert new["body"]["version"] == 2
    assert new["body"]["supersedes"] == {"record_id": old["body"]["record_id"], "version": 1,
                                         "record_hash": hashlib.sha256(signed).hexdigest(),
                                         "reason": "hold time was mistyped"}
    with pytest.raises(InputError, match="--reason.*mandatory"):
        records.build_record(PROTOCOL_TEXT, sample_assessment(), protocol_name="t", previous=signed, reason=" ")


# ---------------------------------------------------------------------------------- building refusals
@pytest.mark.parametrize(
    ("value", "match"),
    [(float("nan"), r"assessment\.chamber\.bad.*finite"), (2**60, r"assessment\.chamber\.bad.*integers within"),
     (object(), r"assessment\.chamber\.bad.*JSON values")],
)
def test_unrepresentable_values_are_refused_by_name(value, match):
    a = sample_assessment()
    a["chamber"]["bad"] = value
    with pytest.raises(InputError, match=match):
        records.build_record(PROTOCOL_TEXT, a, protocol_name="t.yaml")


def test_numpy_and_dates_become_json():
    import datetime

    import numpy as np

    a = sample_assessment()
    a["chamber"]["arr"] = np.array([1.5, 2.5])
    r = records.build_record("when: 2026-01-02\n", a, protocol_name="t.yaml")
    assert r["body"]["protocol"]["parsed"] == {"when": datetime.date(2026, 1, 2).isoformat()}
    assert r["body"]["assessment"]["chamber"]["arr"] == [1.5, 2.5]


# ------------------------------------------------------------------------------------- malformed files
@pytest.mark.parametrize(
    ("data", "match"),
    [
        (b'{"a":1,"a":2}', "duplicate key 'a'"),
        (b'{"a":NaN}', "NaN"),
        (b'{"a":Infinity}', "Infinity"),
        (b'{"a":-Infinity}', "Infinity"),
        (b'{"a":1e400}', "range of a double"),
        (b"[" * 100_000 + b"]" * 100_000, "nesting 100000 levels deep"),
        (b'{"a":' * 100_000 + b"1" + b"}" * 100_000, "nesting 100000 levels deep"),
        (b"\xef\xbb\xbf{}", "byte-order mark"),
        (b'{"a":"\xff"}', "UTF-8"),
        (b'{"a":', "well-formed JSON"),
        (b"", "well-formed JSON"),
        (b'{"a":"' + b"[" * 200 + b'"}', "schema"),  # brackets inside a string are not nesting
    ],
)
def test_malformed_input_is_a_clear_error(data, match):
    with pytest.raises(InputError, match=match):
        records.load_record(data)
    check = records.verify_record(data, RING)
    assert not check.ok and check.problems


def test_lone_surrogate_refused():
    with pytest.raises(InputError, match="UTF-8"):
        records.load_record(b'{"a":"\\ud800"}')


def test_100_mb_input_refused_before_parsing(tmp_path):
    big = b" " * (100 * 1024 * 1024)
    with pytest.raises(InputError, match=f"at most {records.MAX_RECORD_BYTES} bytes"):
        records.parse_json_strict(big)
    del big
    path = tmp_path / "huge.json"
    with open(path, "wb") as fh:
        fh.truncate(100 * 1024 * 1024)  # sparse: no 100 MB written to disk
    with pytest.raises(InputError, match="more than"):
        records.read_record_file(path)


def test_nesting_limit_is_documented_and_ordinary_records_are_far_below(signed):
    assert records.nesting_depth(signed) < records.MAX_DEPTH / 4
    assert records.nesting_depth(b"[" * records.MAX_DEPTH + b"]" * records.MAX_DEPTH) == records.MAX_DEPTH
    records.parse_json_strict(b"[" * records.MAX_DEPTH + b"]" * records.MAX_DEPTH)
    with pytest.raises(InputError, match="levels"):
        records.parse_json_strict(b"[" * (records.MAX_DEPTH + 1) + b"]" * (records.MAX_DEPTH + 1))


def test_unknown_fields_are_refused(signed):
    r = json.loads(signed)
    r["body"]["extra"] = 1
    with pytest.raises(InputError, match=r"body\.extra.*unknown key"):
        records.load_record(records.canonical_bytes(r))
    r = json.loads(signed)
    del r["signatures"][0]["meaning"]
    with pytest.raises(InputError, match=r"signatures\[0\]\.meaning: no value given"):
        records.load_record(records.canonical_bytes(r))


def test_write_new_file_never_overwrites(tmp_path, signed):
    path = tmp_path / "r.json"
    records.write_new_file(path, signed)
    assert path.read_bytes() == signed
    with pytest.raises(InputError, match="never overwritten"):
        records.write_new_file(path, b"other")
    assert path.read_bytes() == signed


def test_record_from_another_software_version_still_verifies(monkeypatch):
    """Years later, after an upgrade: the record verifies; the difference is a note, not a failure."""
    import planner

    monkeypatch.setattr(planner, "__version__", "0.0.1-old")
    old = records.record_bytes(records.sign_record(new_record(), ADA, "authored"))
    monkeypatch.undo()
    check = records.verify_record(old, RING)
    assert check.ok
    assert any("made with coldmargin 0.0.1-old" in n for n in check.notes)


def test_signing_message_is_the_canonical_record_as_it_stood(signed):
    """The fast path that reuses the body's bytes gives exactly RFC 8785's bytes of the whole object."""
    r = records.load_record(signed)
    for i in range(len(r["signatures"])):
        own = {k: v for k, v in r["signatures"][i].items() if k != "signature"}
        stood = {"schema": r["schema"], "body": r["body"], "signatures": [*r["signatures"][:i], own]}
        assert records.signing_message(r, i) == records.SIGNATURE_CONTEXT + records.canonical_bytes(stood)
