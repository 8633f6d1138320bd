"""Command-line commands for records: ``sign``, ``verify``, ``render``, ``keygen`` and ``archive ...``.

:func:`add_commands` registers them on the ``coldmargin`` parser; each handler returns the exit code:
0 ok, 1 verification failed, 2 bad input or usage. Messages name what failed.

The archive
-----------
Every command that writes (``sign``, ``keygen``, ``archive void``) appends to an archive: the one named
by ``--archive PATH``, else by ``COLDMARGIN_ARCHIVE``, else ``protocols/archive.sqlite``. A signed record
is always archived, so nothing signed is lost; ``--no-archive`` is for trying things out and says so.
Every write prints the archive's new head (``<entry>:<hash>``): keep it somewhere else (a lab notebook,
an e-mail) and ``coldmargin archive verify --head`` will notice if the archive was cut short.

Files
-----
A path ending in ``.json`` given to ``sign`` is a record (a signature is added); anything else is a
protocol file (a new record is made and signed as ``authored``). Output files are never overwritten.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from planner.errors import InputError, PlannerError

EXIT_OK, EXIT_FAILED, EXIT_INPUT = 0, 1, 2


def _say(*lines: str) -> None:
    for line in lines:
        print(line)


def _fail(message: str) -> None:
    print(f"coldmargin: {message}", file=sys.stderr)


def _guarded(handler):
    """Run a handler; bad input or an unreadable file is exit 2 with the message."""

    def run(args: argparse.Namespace) -> int:
        try:
            return handler(args)
        except PlannerError as exc:
            _fail(str(exc))
            return EXIT_INPUT
        except OSError as exc:
            _fail(f"{exc.filename or ''}: {exc.strerror or exc}")
            return EXIT_INPUT

    run.__doc__ = handler.__doc__
    return run


# ------------------------------------------------------------------------------------------ shared bits
def _archive_options(parser: argparse.ArgumentParser, writes: bool) -> None:
    parser.add_argument(
        "--archive", metavar="PATH",
        help="archive file (default: $COLDMARGIN_ARCHIVE, else protocols/archive.sqlite)",
    )
    if writes:
        parser.add_argument(
            "--no-archive", action="store_true",
            help="do not append to any archive (for trying things out; the result is not archived)",
        )


def _key_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--public-key", metavar="PUB", action="append", default=[],
        help="also trust this .pub file when checking signatures (repeatable)",
    )


def _open_archive(args: argparse.Namespace, create: bool):
    from planner.archive import Archive, archive_path

    if getattr(args, "no_archive", False):
        return None
    path = archive_path(args.archive)
    if not create and not path.exists():
        return None
    return Archive.open(path, create=create)


def _keyring(args: argparse.Namespace, archive):
    from planner.keys import KeyRing, read_public_key_file

    ring = archive.keyring() if archive is not None else KeyRing()
    for pub in args.public_key:
        ring.add(read_public_key_file(pub))
    return ring


def _head_line(archive, entry) -> str:
    return f"archive head {entry.head}  ({archive.path})"


# ------------------------------------------------------------------------------------------------ sign
def _sign(args: argparse.Namespace) -> int:
    from planner.keys import load_key, read_passphrase
    from planner.records import (
        load_record,
        read_record_file,
        record_bytes,
        record_hash,
        sign_record,
        verify_record,
        write_new_file,
    )

    out = Path(args.out)
    if out.exists():
        raise InputError("--out", str(out), "a file that does not exist yet (saved files are never overwritten)")
    source = Path(args.file)
    if not source.is_file():
        raise InputError("PROTOCOL_OR_RECORD", str(source), "an existing protocol (.yaml) or record (.json) file")
    key = load_key(args.key, read_passphrase())
    archive = _open_archive(args, create=True)
    try:
        ring = _keyring(args, archive)
        if source.suffix.lower() == ".json":
            if args.supersedes or args.reason:
                raise InputError("--supersedes", args.supersedes, "only when signing a protocol file (a new version)")
            data = read_record_file(source)
            check = verify_record(data, ring)
            if not check.ok:
                _say(*check.lines())
                _fail(f"{source} does not verify, so it is not signed again: " + "; ".join(check.problems))
                return EXIT_FAILED
            record = sign_record(load_record(data), key, args.meaning)
        else:
            record = _new_record(source, args, ring)
            record = sign_record(record, key, args.meaning)
        data = record_bytes(record)
        if archive is not None:
            _ensure_key_registered(archive, key)
            entry = archive.append_record(data)
        write_new_file(out, data)
        body = record["body"]
        _say(
            f"signed       {args.meaning} by {key.name} <{key.user_id}> ({key.fingerprint})",
            f"record       {body['record_id']} version {body['version']}",
            f"record hash  sha256:{record_hash(data)}",
            f"wrote        {out}",
        )
        if archive is not None:
            _say(f"archived     entry {entry.seq} ({entry.kind})", _head_line(archive, entry))
        else:
            _say("not archived (--no-archive)")
        return EXIT_OK
    finally:
        if archive is not None:
            archive.close()


def _new_record(source: Path, args: argparse.Namespace, ring) -> dict:
    from planner.records import MAX_PROTOCOL_BYTES, build_record, read_record_file, verify_record

    raw = source.read_bytes()[: MAX_PROTOCOL_BYTES + 1]
    if len(raw) > MAX_PROTOCOL_BYTES:
        raise InputError(str(source), f"more than {MAX_PROTOCOL_BYTES} bytes", f"a protocol file of at most {MAX_PROTOCOL_BYTES} bytes")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(str(source), f"byte {exc.start}", "UTF-8 text") from None
    from planner.assessment import assess
    from planner.protocol import load_protocol

    protocol = load_protocol(source)
    if source.read_bytes() != raw:
        raise InputError(str(source), "changed while it was read", "a protocol file nobody is editing")
    assessment = assess(protocol).to_dict()
    previous = None
    if args.supersedes:
        previous = read_record_file(args.supersedes)
        check = verify_record(previous, ring)
        if not check.ok:
            raise InputError("--supersedes", args.supersedes, "a record that verifies", "; ".join(check.problems))
    elif args.reason:
        raise InputError("--reason", args.reason, "only with --supersedes RECORD.json")
    return build_record(
        text, assessment, protocol_name=source.name, protocol_parsed=protocol.entered,
        previous=previous, reason=args.reason,
    )


def _ensure_key_registered(archive, key) -> None:
    ring = archive.keyring()
    known = ring.get(key.fingerprint)
    if known is None:
        entry = archive.register_key(key.public_entry())
        _say(f"registered   key {key.fingerprint} for {key.name} <{key.user_id}> (entry {entry.seq})")


# ---------------------------------------------------------------------------------------------- verify
def _verify(args: argparse.Namespace) -> int:
    from planner.records import read_record_file, verify_record

    data = read_record_file(args.record)
    archive = _open_archive(args, create=False)
    try:
        ring = _keyring(args, archive)
        check = verify_record(data, ring)
        _say(*check.lines()[:-1])
        voided = False
        if archive is not None and check.record_id:
            status = archive.status(check.record_id)
            archived = any(check.record_hash in hashes for hashes in status["versions"].values())
            _say(f"archive      {archive.path}: " + ("this exact file is archived" if archived else "this exact file is NOT archived"))
            if status["current_version"] and status["current_version"] > (check.version or 0):
                _say(f"archive      superseded: version {status['current_version']} is current")
            if status["voided"]:
                voided = True
                _say(f"archive      VOIDED (entry {status['voided']['seq']}): {status['voided']['reason']}")
        elif archive is None and not args.public_key:
            _say("note         no archive and no --public-key: no key to check signatures against")
        ok = check.ok and not voided
        _say("verified" if ok else "VERIFICATION FAILED")
        if not ok:
            _fail(f"{args.record}: " + "; ".join(check.problems + (["the record was voided"] if voided else [])))
        return EXIT_OK if ok else EXIT_FAILED
    finally:
        if archive is not None:
            archive.close()


# ---------------------------------------------------------------------------------------------- render
def _render(args: argparse.Namespace) -> int:
    from planner.records import load_record, read_record_file, verify_record, write_new_file
    from planner.render import render_html, render_pdf

    if not args.html and not args.pdf:
        raise InputError("--html/--pdf", None, "at least one output file")
    for path in (args.html, args.pdf):
        if path and Path(path).exists() and not args.replace:
            raise InputError("--html/--pdf", path, "a new file (or --replace to write the rendering again)")
    data = read_record_file(args.record)
    archive = _open_archive(args, create=False)
    try:
        check = verify_record(data, _keyring(args, archive))
        if archive is not None and check.record_id:
            status = archive.status(check.record_id)
            if status["voided"]:  # the rendering must say so as loudly as a failed signature
                check.problems.append(f"voided in the archive: {status['voided']['reason']}")
                check.ok = False
            elif status["current_version"] and status["current_version"] > (check.version or 0):
                check.notes.append(f"superseded: version {status['current_version']} is current in the archive")
    finally:
        if archive is not None:
            archive.close()
    try:
        load_record(data)
    except InputError as exc:
        _fail(f"{args.record} cannot be rendered: {exc}")
        return EXIT_FAILED
    for path, make in ((args.html, lambda: render_html(data, check).encode("utf-8")), (args.pdf, lambda: render_pdf(data, check))):
        if not path:
            continue
        content = make()
        if args.replace:
            Path(path).unlink(missing_ok=True)
        write_new_file(path, content, "--html/--pdf")
        _say(f"wrote        {path}")
    if not check.ok:
        _fail(f"{args.record} does not verify (the rendering says so): " + "; ".join(check.problems))
        return EXIT_FAILED
    return EXIT_OK


# ---------------------------------------------------------------------------------------------- keygen
def _keygen(args: argparse.Namespace) -> int:
    from planner.keys import check_printed_name, check_user_id, generate_key, read_passphrase

    check_printed_name(args.name, "--name")
    check_user_id(args.user_id, "--user-id")
    for path in (Path(args.out), Path(args.out + ".pub")):
        if path.exists():
            raise InputError("--out", str(path), "a file that does not exist yet (keys are never overwritten)")
    archive = _open_archive(args, create=True)
    try:
        passphrase = read_passphrase(confirm=True)
        key = generate_key(args.name, args.user_id, args.out, passphrase)
        _say(
            f"key          {key.name} <{key.user_id}>",
            f"fingerprint  {key.fingerprint}",
            f"private key  {args.out} (mode 0600; keep it and its passphrase to yourself)",
            f"public key   {args.out}.pub",
        )
        if archive is not None:
            entry = archive.register_key(key.public_entry(), allow_second_key=True)
            _say(f"registered   entry {entry.seq}", _head_line(archive, entry))
        else:
            _say("not registered in any archive (--no-archive)")
        return EXIT_OK
    finally:
        if archive is not None:
            archive.close()


# --------------------------------------------------------------------------------------------- archive
def _archive_list(args: argparse.Namespace) -> int:
    from planner.records import load_record

    archive = _open_archive(args, create=False)
    if archive is None:
        from planner.archive import archive_path

        raise InputError("--archive", str(archive_path(args.archive)), "an existing archive file")
    with archive:
        _say(f"{'entry':>5}  {'kind':<9} {'subject':<36} {'v':>3}  {'hash':<12}  {'appended (UTC)':<24} what")
        for e in archive.entries():
            what = e.reason or ""
            if e.kind in ("record", "supersede"):
                try:
                    r = load_record(e.content)
                    title = r["body"]["assessment"].get("title") or r["body"]["protocol"]["name"]
                    meanings = ",".join(s["meaning"] for s in r["signatures"])
                    what = f"{title} [{meanings}]" + (f" – {e.reason}" if e.reason else "")
                except InputError:
                    what = "(unreadable record)"
            elif e.kind == "key":
                what = "public key"
            _say(f"{e.seq:>5}  {e.kind:<9} {e.subject[:36]:<36} {e.version or '':>3}  {e.content_hash[:12]}  {e.created:<24} {what}")
        seq, head = archive.head()
        _say(f"archive head {seq}:{head}")
    return EXIT_OK


def _archive_show(args: argparse.Namespace) -> int:
    from planner.records import verify_record

    archive = _open_archive(args, create=False)
    if archive is None:
        from planner.archive import archive_path

        raise InputError("--archive", str(archive_path(args.archive)), "an existing archive file")
    with archive:
        entries = archive.find(args.id)
        ring = archive.keyring()
        failed = False
        for e in entries:
            _say(f"entry {e.seq}  {e.kind}  {e.subject}" + (f" v{e.version}" if e.version else ""),
                 f"  appended {e.created}  entry hash {e.entry_hash}")
            if e.reason:
                _say(f"  reason   {e.reason}")
            if e.kind in ("record", "supersede"):
                check = verify_record(e.content, ring)
                failed |= not check.ok
                _say(*("  " + line for line in check.lines()))
            else:
                _say("  " + e.content.decode("utf-8"))
        subjects = {e.subject for e in entries if e.kind != "key"}
        for rid in subjects:
            status = archive.status(rid)
            _say(f"record {rid}: current version {status['current_version']}" +
                 (f"; VOIDED: {status['voided']['reason']}" if status["voided"] else ""))
    return EXIT_FAILED if failed else EXIT_OK


def _archive_verify(args: argparse.Namespace) -> int:
    archive = _open_archive(args, create=False)
    if archive is None:
        from planner.archive import archive_path

        raise InputError("--archive", str(archive_path(args.archive)), "an existing archive file")
    with archive:
        check = archive.verify(expected_head=args.head)
    _say(*check.lines())
    if not check.ok:
        _fail("archive verification failed: " + "; ".join(str(p) for p in check.problems))
    return EXIT_OK if check.ok else EXIT_FAILED


def _archive_export(args: argparse.Namespace) -> int:
    archive = _open_archive(args, create=False)
    if archive is None:
        from planner.archive import archive_path

        raise InputError("--archive", str(archive_path(args.archive)), "an existing archive file")
    with archive:
        check = archive.verify()
        summary = archive.export(args.dir, renderings=not args.no_renderings)
    _say(f"exported     {summary['records']} record files, {summary['entries']} entries to {summary['folder']}",
         f"archive head {summary['head']} (also in {Path(summary['folder']) / 'HEAD'})")
    if not check.ok:
        _fail("the archive does not verify; the export copies it as it is: " + "; ".join(str(p) for p in check.problems))
        return EXIT_FAILED
    return EXIT_OK


def _archive_rebuild(args: argparse.Namespace) -> int:
    from planner.archive import archive_path, rebuild

    target = archive_path(args.archive)
    check = rebuild(args.dir, target)
    _say(*check.lines(), f"rebuilt      {target}")
    return EXIT_OK


def _archive_void(args: argparse.Namespace) -> int:
    from planner.keys import load_key, read_passphrase

    archive = _open_archive(args, create=False)
    if archive is None:
        from planner.archive import archive_path

        raise InputError("--archive", str(archive_path(args.archive)), "an existing archive file")
    with archive:
        rid = {e.subject for e in archive.find(args.id) if e.kind in ("record", "supersede")}
        if len(rid) != 1:
            raise InputError("ID", args.id, "one record id, record hash or entry number of a record")
        key = load_key(args.key, read_passphrase())
        entry = archive.void(rid.pop(), args.reason, key)
        _say(f"voided       {entry.subject}: {entry.reason} (entry {entry.seq})", _head_line(archive, entry))
    return EXIT_OK


def _archive_head(args: argparse.Namespace) -> int:
    archive = _open_archive(args, create=False)
    if archive is None:
        from planner.archive import archive_path

        raise InputError("--archive", str(archive_path(args.archive)), "an existing archive file")
    with archive:
        seq, head = archive.head()
    _say(f"{seq}:{head}")
    return EXIT_OK


# ---------------------------------------------------------------------------------------- registration
def add_commands(subparsers) -> None:
    """Register ``sign``, ``verify``, ``render``, ``keygen`` and ``archive`` on ``subparsers``."""
    from planner.records import MEANINGS

    p = subparsers.add_parser(
        "sign", help="make a signed record of a protocol, or add a signature to a record",
        description="Sign a protocol file (a new record, meaning 'authored') or a record file (.json: one more "
        "signature). The passphrase is read from a prompt or COLDMARGIN_PASSPHRASE, never from the command line. "
        "The signed record is appended to the archive.",
    )
    p.add_argument("file", metavar="PROTOCOL_OR_RECORD", help="protocol YAML file, or record .json file")
    p.add_argument("--key", required=True, metavar="FILE", help="your private key file (from 'coldmargin keygen')")
    p.add_argument("--meaning", required=True, choices=MEANINGS, help="what your signature means")
    p.add_argument("--out", required=True, metavar="RECORD.json", help="the signed record to write (must not exist)")
    p.add_argument("--supersedes", metavar="RECORD.json", help="the record this protocol corrects (a new version)")
    p.add_argument("--reason", help="why the earlier version is corrected (mandatory with --supersedes)")
    _archive_options(p, writes=True)
    _key_options(p)
    p.set_defaults(handler=_guarded(_sign))

    p = subparsers.add_parser(
        "verify", help="verify a record file's signatures",
        description="Verify a record from its exact bytes: canonical form, each signature (valid / invalid / "
        "unknown key) against the keys registered in the archive, the order of signatures, and the record's "
        "status in the archive. Exit 0 verified, 1 not.",
    )
    p.add_argument("record", metavar="RECORD.json")
    _archive_options(p, writes=False)
    _key_options(p)
    p.set_defaults(handler=_guarded(_verify))

    p = subparsers.add_parser(
        "render", help="write a record as an HTML page and/or a PDF",
        description="Render a record for people: inputs, margins and their states, charts, cautions, flags, "
        "signatures and the record hash. The rendering shows whether the record verified.",
    )
    p.add_argument("record", metavar="RECORD.json")
    p.add_argument("--html", metavar="OUT", help="HTML file to write (self-contained)")
    p.add_argument("--pdf", metavar="OUT", help="PDF file to write")
    p.add_argument("--replace", action="store_true", help="write over existing rendering files")
    _archive_options(p, writes=False)
    _key_options(p)
    p.set_defaults(handler=_guarded(_render))

    p = subparsers.add_parser(
        "keygen", help="make your signing key",
        description="Make an Ed25519 key pair: FILE (private, OpenSSH format, bcrypt KDF, mode 0600) and FILE.pub. "
        "The passphrase is asked twice at a prompt, or read from COLDMARGIN_PASSPHRASE. The public key is "
        "registered in the archive.",
    )
    p.add_argument("--name", required=True, help="your printed name, as it appears in signatures")
    p.add_argument("--user-id", required=True, help="your user id in the lab (one word)")
    p.add_argument("--out", required=True, metavar="FILE", help="private key file to create (must not exist)")
    _archive_options(p, writes=True)
    p.set_defaults(handler=_guarded(_keygen))

    a = subparsers.add_parser(
        "archive", help="list, show, verify, export, rebuild or void in the archive",
        description="The archive of signed records: append-only and hash-chained.",
    )
    sub = a.add_subparsers(dest="archive_command", metavar="ACTION")
    sub.required = True
    s = sub.add_parser("list", help="list every entry", description="List every archive entry and print the head.")
    _archive_options(s, writes=False)
    s.set_defaults(handler=_guarded(_archive_list))
    s = sub.add_parser("show", help="show one record", description="Show a record's entries, signatures and status.")
    s.add_argument("id", metavar="ID", help="record id, record hash (8+ characters) or entry number")
    _archive_options(s, writes=False)
    s.set_defaults(handler=_guarded(_archive_show))
    s = sub.add_parser(
        "verify", help="verify the whole chain",
        description="Check every entry: numbering, hash chain, hashes, record signatures, triggers. Exit 0 intact, 1 not.",
    )
    s.add_argument("--head", metavar="SEQ:HASH", help="a head kept elsewhere: detects truncation")
    _archive_options(s, writes=False)
    s.set_defaults(handler=_guarded(_archive_verify))
    s = sub.add_parser(
        "export", help="export records, renderings and the chain",
        description="Write each record as <hash>.json with <hash>.html and <hash>.pdf, the chain as chain.jsonl "
        "and the head as HEAD into DIR (new or empty). The export alone can rebuild the archive.",
    )
    s.add_argument("dir", metavar="DIR")
    s.add_argument("--no-renderings", action="store_true", help="only the record files and the chain (faster)")
    _archive_options(s, writes=False)
    s.set_defaults(handler=_guarded(_archive_export))
    s = sub.add_parser(
        "rebuild", help="make a new archive from an export",
        description="Rebuild an archive from an export folder into a new file (--archive, which must not exist).",
    )
    s.add_argument("dir", metavar="DIR")
    _archive_options(s, writes=False)
    s.set_defaults(handler=_guarded(_archive_rebuild))
    s = sub.add_parser(
        "void", help="void a record (with a reason)",
        description="Append a signed statement that a record must no longer be used. The reason is mandatory.",
    )
    s.add_argument("id", metavar="ID", help="record id, record hash or entry number")
    s.add_argument("--reason", required=True, help="why the record is void")
    s.add_argument("--key", required=True, metavar="FILE", help="your private key file")
    _archive_options(s, writes=False)
    s.set_defaults(handler=_guarded(_archive_void))
    s = sub.add_parser("head", help="print the head", description="Print the archive head as SEQ:HASH.")
    _archive_options(s, writes=False)
    s.set_defaults(handler=_guarded(_archive_head))


def main(argv: Sequence[str] | None = None) -> int:
    """Run the record commands alone (``python -m planner.cli_records ...``)."""
    parser = argparse.ArgumentParser(prog="coldmargin", description="Signed protocol records.")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    add_commands(sub)
    args = parser.parse_args(argv)
    return int(args.handler(args))


if __name__ == "__main__":
    sys.exit(main())
