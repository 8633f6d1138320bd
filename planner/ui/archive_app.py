"""The archive notebook: list archived records, open one, verify signatures and chain, view, download."""

from __future__ import annotations

import html
import os

import ipywidgets as w

from planner.errors import PlannerError
from planner.ui.archive_model import ArchiveModel
from planner.ui.style import style_html
from planner.ui.summary import planning_support_html
from planner.ui.widgets import add_classes, button, download_link, dropdown, html_box, text_box


class ArchiveApp:
    """Archived records: open one, check its signatures and the chain, view its rendering, download it.

    Parameters
    ----------
    path : str, optional
        The archive; default ``$COLDMARGIN_ARCHIVE`` or ``protocols/archive.sqlite``.
    """

    def __init__(self, path: str | os.PathLike | None = None, model: ArchiveModel | None = None):
        self.model = model or ArchiveModel(path)
        self.path = text_box("Archive file", self.model.path, "cm-archive-path")
        self.open_button = button("Open archive", "cm-archive-open", "primary")
        self.open_button.on_click(lambda _b: self._load())
        self.records = dropdown("Record", [("(open an archive first)", "")], "", "cm-archive-records")
        self.expected = text_box("Head kept elsewhere (optional)", "", "cm-archive-expected")
        self.verify_button = button("Open and verify", "cm-archive-verify", "primary")
        self.verify_button.on_click(lambda _b: self._open())
        self.message = html_box("", "cm-archive-message")
        self.summary = html_box("", "cm-archive-summary")
        self.result = html_box("", "cm-archive-result")
        self.downloads = html_box("", "cm-archive-downloads")
        self.view = html_box("", "cm-archive-view")
        self.large = w.ToggleButton(value=False, description="Large type", layout=w.Layout(width="auto"))
        self.large.observe(lambda ch: self._large(ch["new"]), names="value")
        self.widget = w.VBox([
            html_box(style_html()),
            html_box("<h2>coldmargin: archived records</h2><div class='cm-links'><a href='./plan.ipynb'>back to the "
                     "planner</a></div>"),
            w.HBox([self.path, self.open_button, self.large]), self.message, self.summary,
            w.HBox([self.records]), w.HBox([self.expected, self.verify_button]),
            self.result, self.downloads, self.view, html_box(planning_support_html(None)),
        ])
        add_classes(self.widget, "cm-app cm-archive")
        if os.path.isfile(os.path.expanduser(self.model.path)):
            self._load()

    def _large(self, on: bool) -> None:
        (self.widget.add_class if on else self.widget.remove_class)("cm-large")

    def _say(self, text: str) -> None:
        self.message.value = f"<div class='cm-message'>{html.escape(text)}</div>" if text else ""

    def _load(self) -> None:
        try:
            self.model.load(self.path.value)
        except PlannerError as exc:
            self._say(str(exc))
            return
        except OSError as exc:
            self._say(f"archive: {exc}")
            return
        self._say("")
        rows = self.model.rows
        self.records.options = [(r.label, r.record_hash) for r in rows] or [("(no records yet)", "")]
        self.records.value = rows[-1].record_hash if rows else ""
        copies = "1 archived record copy" if len(rows) == 1 else f"{len(rows)} archived record copies"
        self.summary.value = (f"<p>{copies}. Chain head "
                              f"<code class='cm-archive-head'>{html.escape(self.model.head)}</code>: keep a copy "
                              "elsewhere to detect truncation later.</p>")
        self.result.value = self.downloads.value = self.view.value = ""

    def _open(self) -> None:
        if not self.records.value:
            self._say("record: none chosen; open an archive and choose a record")
            return
        try:
            opened = self.model.open_record(self.records.value, self.expected.value.strip() or None)
            rendering = self.model.rendering_html()
            pdf = self.model.rendering_pdf()
        except PlannerError as exc:
            self._say(str(exc))
            return
        self._say("")
        self.result.value = verification_html(opened)
        row = opened.row
        stem = f"record-{row.record_id}-v{row.version}"
        self.downloads.value = " · ".join([
            download_link(f"{stem}.json", opened.data, "record (JSON, exact stored bytes)", "application/json"),
            download_link(f"{stem}.html", rendering.encode("utf-8"), "rendering (HTML)", "text/html"),
            download_link(f"{stem}.pdf", pdf, "rendering (PDF)", "application/pdf"),
        ])
        self.view.value = (f'<iframe class="cm-record-frame" title="record rendering" sandbox="" '
                           f'style="width:100%;height:720px;border:1px solid #c9ced6" '
                           f'srcdoc="{html.escape(rendering, quote=True)}"></iframe>')

    def _repr_mimebundle_(self, **kwargs):
        return self.widget._repr_mimebundle_(**kwargs)


def verification_html(opened) -> str:
    check, chain = opened.check, opened.chain
    ok = check.ok and chain.ok
    head = ("<div class='cm-verify-ok cm-verified'>✓ Verified: every signature is valid and the archive chain is "
            "intact.</div>" if ok else
            "<div class='cm-verify-bad cm-not-verified'>✕ NOT verified: see the problems below.</div>")
    sig_rows = "".join(
        f"<tr><td>{s.index + 1}</td><td>{'✓' if s.status == 'valid' else '✕'} {html.escape(s.status)}</td>"
        f"<td>{html.escape(s.meaning)}</td><td>{html.escape(s.printed_name)} &lt;{html.escape(s.user_id)}&gt;</td>"
        f"<td>{html.escape(s.signed)}</td><td><code>{html.escape(s.key_fingerprint[:23])}…</code></td>"
        f"<td>{html.escape(s.reason)}</td></tr>"
        for s in check.signatures
    )
    problems = [*check.problems, *[str(p) for p in chain.problems]]
    notes = [*check.notes, *chain.notes]
    status = opened.status or {}
    voided = status.get("voided")
    extra = ""
    if voided:
        extra += f"<p class='cm-verify-bad'>This record was voided: {html.escape(str(voided.get('reason')))}</p>"
    if status.get("current_version") and status["current_version"] != opened.row.version:
        extra += (f"<p class='cm-message'>A newer version ({status['current_version']}) supersedes this one.</p>")
    return (head + extra
            + f"<p>Record <code>{html.escape(opened.row.record_id)}</code> version {opened.row.version}, hash "
              f"<code class='cm-record-hash'>sha256:{html.escape(check.record_hash)}</code></p>"
            + "<table class='cm-table cm-signatures'><tr><th>#</th><th>Status</th><th>Meaning</th><th>Signer</th>"
              f"<th>Signed (UTC)</th><th>Key</th><th>Reason</th></tr>{sig_rows}</table>"
            + f"<p>Archive chain: {chain.entries} entries, "
              f"{'intact' if chain.ok else 'PROBLEMS'}.</p>"
            + "".join(f"<div class='cm-verify-bad'>problem: {html.escape(p)}</div>" for p in problems)
            + "".join(f"<div class='cm-muted'>note: {html.escape(n)}</div>" for n in notes))
