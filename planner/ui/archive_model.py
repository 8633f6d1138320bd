"""The archive notebook's state without widgets: the records in an archive, one opened and verified.

Verification always starts from the exact stored bytes (``planner.records.verify_record``) and the whole
hash chain (``planner.archive.Archive.verify``); the app shows what they say and never re-judges.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import traitlets

from planner.errors import InputError


@dataclass(frozen=True)
class RecordRow:
    """One archived copy of a record, as listed."""

    seq: int
    kind: str  # record | supersede
    record_id: str
    version: int
    record_hash: str
    title: str
    created: str
    signatures: int
    voided: bool = False

    @property
    def label(self) -> str:
        mark = " (voided)" if self.voided else ""
        return (f"#{self.seq} {self.title} – v{self.version}, {self.signatures} signature(s), "
                f"{self.created[:19]} – {self.record_hash[:12]}{mark}")


@dataclass
class Opened:
    """A record opened from the archive, with its verification and renderings."""

    row: RecordRow
    data: bytes
    check: Any  # planner.records.RecordCheck
    chain: Any  # planner.archive.ArchiveCheck
    status: dict[str, Any] = field(default_factory=dict)


def default_archive() -> str:
    from planner.archive import archive_path

    return str(archive_path(None, os.environ))


class ArchiveModel(traitlets.HasTraits):
    """Open an archive, list its records, open one and verify it."""

    path = traitlets.Unicode("")
    message = traitlets.Unicode("")
    revision = traitlets.Int(0)

    def __init__(self, path: str | os.PathLike | None = None, **kwargs):
        super().__init__(**kwargs)
        self.rows: list[RecordRow] = []
        self.opened: Opened | None = None
        self.head: str = ""
        self.path = str(path) if path is not None else default_archive()

    def load(self, path: str | os.PathLike | None = None) -> None:
        """Read the list of records (an archive that does not exist is an error, never created here)."""
        from planner.archive import Archive
        from planner.records import load_record

        path = Path(path if path is not None else self.path).expanduser()
        if not path.is_file():
            raise InputError("archive", str(path), "an existing archive file (made when a record is signed)")
        rows: list[RecordRow] = []
        voided: set[str] = set()
        with Archive.open(path, create=False) as archive:
            for e in archive.entries():
                if e.kind == "void":
                    voided.add(e.subject)
                if e.kind not in ("record", "supersede"):
                    continue
                record = load_record(e.content, f"entry {e.seq}")
                body = record["body"]
                title = str(body["assessment"].get("title") or body["protocol"]["name"])
                rows.append(RecordRow(e.seq, e.kind, body["record_id"], body["version"], e.content_hash, title,
                                      body["created"], len(record["signatures"])))
            seq, digest = archive.head()
        self.rows = [RecordRow(**{**r.__dict__, "voided": r.record_id in voided}) for r in rows]
        self.head = f"{seq}:{digest}"
        self.path = str(path)
        self.opened = None
        self.message = ""
        self.revision += 1

    def open_record(self, record_hash: str, expected_head: str | None = None) -> Opened:
        """Open one archived copy by its hash and verify it and the chain it sits in."""
        from planner.archive import Archive
        from planner.records import verify_record

        row = next((r for r in self.rows if r.record_hash == record_hash), None)
        if row is None:
            raise InputError("record", record_hash, "a record listed in this archive")
        with Archive.open(Path(self.path), create=False) as archive:
            entry = next(e for e in archive.entries() if e.seq == row.seq)
            check = verify_record(entry.content, archive.keyring())
            chain = archive.verify(expected_head=expected_head or None)
            status = archive.status(row.record_id)
        self.opened = Opened(row, bytes(entry.content), check, chain, status)
        self.revision += 1
        return self.opened

    def rendering_html(self) -> str:
        from planner.render import render_html

        if self.opened is None:
            raise InputError("record", "none", "a record opened first")
        return render_html(self.opened.data, self.opened.check)

    def rendering_pdf(self) -> bytes:
        from planner.render import render_pdf

        if self.opened is None:
            raise InputError("record", "none", "a record opened first")
        return render_pdf(self.opened.data, self.opened.check)
