"""The Review and Sign & archive steps of the plan notebook."""

from __future__ import annotations

import html
import os
import threading

import ipywidgets as w

from planner.errors import PlannerError
from planner.ui import steps as registry
from planner.ui.planner_model import ARCHIVE_ENV, KEY_ENV
from planner.ui.summary import (
    cautions_html,
    flags_html,
    margins_table_html,
    section_html,
    section_names,
    state_badge,
    state_word,
)
from planner.ui.widgets import add_classes, button, download_link, dropdown, html_box, text_box


class ReviewView:
    """Margins with states and thresholds, the verdict, flags, cautions, every section, suggestions."""

    def __init__(self, app):
        self.app = app
        self.verdict = html_box("", "cm-review-verdict")
        self.margins = html_box("", "cm-review-margins")
        self.flags = html_box("", "cm-review-flags")
        self.cautions = html_box("", "cm-review-cautions")
        self.sections = html_box("", "cm-review-sections")
        self.suggest_button = button("Look for changes that help", "cm-suggest")
        self.suggest_button.on_click(lambda _b: self._suggest())
        self.progress = w.IntProgress(value=0, min=0, max=1, description="", layout=w.Layout(display="none"))
        self.progress.add_class("cm-suggest-progress")
        self.suggestions = html_box("", "cm-suggestions")
        self.box = w.VBox([
            html_box("<h3>Review</h3>"), self.verdict,
            html_box("<h4>Margins</h4>"), self.margins,
            html_box("<h4>What would it take</h4><p class='cm-intro'>Each change below is assessed in full; "
                     "only changes that move a margin to a better state are listed.</p>"),
            w.HBox([self.suggest_button, self.progress]), self.suggestions,
            html_box("<h4>Flags</h4>"), self.flags,
            html_box("<h4>Cautions</h4>"), self.cautions,
            html_box("<h4>Every section</h4>"), self.sections,
        ])
        add_classes(self.box, "cm-step cm-step-review")
        self._suggested_for = -1

    def refresh(self) -> None:
        model = self.app.model
        report = model.report
        state, reasons = model.verdict()
        stale = " <b>(stale: last valid result)</b>" if model.stale else ""
        items = "".join(f"<li>{html.escape(r)}</li>" for r in reasons)
        self.verdict.value = (f"<div>Overall: {state_badge(state)}{stale}</div><ul>{items}</ul>"
                              if report else "<p class='cm-muted'>No assessment yet.</p>")
        self.margins.value = margins_table_html(model.margins())
        self.flags.value = flags_html(report)
        self.cautions.value = cautions_html(report)
        parts = []
        for name in section_names(report):
            parts.append(section_html(name, registry.SECTION_TITLES.get(name, name), report[name]))
        self.sections.value = "".join(parts)
        if self._suggested_for != model.revision:
            self.suggestions.value = ""

    def _suggest(self) -> None:
        model = self.app.model
        if model.report is None or not model.current:
            self.suggestions.value = "<p class='cm-message'>Fix the fields marked in red first.</p>"
            return
        from planner.ui.whatif import suggestions

        document, report, revision = model.draft.document, model.report, model.revision
        name, base_dir = model.source_name, model.base_dir
        self.progress.layout.display = ""
        self.progress.value, self.progress.max = 0, 1
        self.suggest_button.disabled = True
        self.suggestions.value = "<p class='cm-working-note'>Assessing each change…</p>"

        def evaluate(doc):
            return model._evaluate(doc, name, base_dir).report

        def progress(done, total):
            self.progress.max = total
            self.progress.value = done

        def run():
            try:
                found = suggestions(document, report, evaluate, progress)
                self.suggestions.value = suggestions_html(found)
            except Exception as exc:  # shown as a message, never a traceback
                self.suggestions.value = f"<p class='cm-message'>{html.escape(type(exc).__name__)}: {html.escape(str(exc))}</p>"
            finally:
                self._suggested_for = revision
                self.progress.layout.display = "none"
                self.suggest_button.disabled = False

        if model.worker.inline:
            run()
        else:
            threading.Thread(target=run, daemon=True).start()


def suggestions_html(found) -> str:
    if not found:
        return ("<p class='cm-muted'>None of the single changes tried moves a margin to a better state "
                "(or every margin is already fine).</p>")
    rows = "".join(
        f"<tr><td>{html.escape(s.label)}</td><td>"
        + "; ".join(f"{html.escape(lbl)}: {html.escape(state_word(a))} → {html.escape(state_word(b))}"
                    for lbl, a, b in s.improved)
        + f"</td><td>{state_badge(s.verdict_after)}</td></tr>"
        for s in found
    )
    return (f"<table class='cm-table cm-suggest-table'><tr><th>Change</th><th>Margins</th><th>Overall after</th></tr>"
            f"{rows}</table>")


class SignView:
    """Cautions first, then the signer's name, meaning, key file, passphrase and archive; then the record."""

    def __init__(self, app):
        self.app = app
        self.cautions = html_box("", "cm-sign-cautions")
        self.seen = w.Checkbox(value=False, description="I have read the cautions above", indent=False)
        self.seen.add_class("cm-sign-seen")
        self.name = text_box("Printed name", "", "cm-sign-name")
        self.meaning = dropdown("Meaning of the signature", [(m, m) for m in ("authored", "reviewed", "approved")],
                                "authored", "cm-sign-meaning")
        self.key_file = text_box("Key file (on this computer)", os.environ.get(KEY_ENV, ""), "cm-sign-key")
        self.passphrase = text_box("Passphrase", "", "cm-sign-passphrase", password=True)
        self.archive = text_box("Archive file", os.environ.get(ARCHIVE_ENV, "protocols/archive.sqlite"),
                                "cm-sign-archive")
        self.register = w.Checkbox(value=False, description="Register my key in this archive (first use)",
                                   indent=False)
        self.register.add_class("cm-sign-register")
        self.sign_button = button("Sign and archive", "cm-sign-button", "primary")
        self.sign_button.on_click(lambda _b: self._sign())
        self.status = html_box("", "cm-sign-status")
        self.result = html_box("", "cm-sign-result")
        self.box = w.VBox([
            html_box("<h3>Sign &amp; archive</h3><h4>Cautions</h4>"), self.cautions, self.seen,
            html_box("<h4>Signature</h4><p class='cm-intro'>The key is read and unlocked on the computer "
                     "running the planner; it never goes to the browser.</p>"),
            self.name, self.meaning, self.key_file, self.passphrase, self.archive, self.register,
            w.HBox([self.sign_button]), self.status, self.result,
        ])
        add_classes(self.box, "cm-step cm-step-sign")

    def refresh(self) -> None:
        model = self.app.model
        self.cautions.value = cautions_html(model.report) or "<p class='cm-muted'>No assessment yet.</p>"
        if model.report is None or not model.current:
            self.status.value = ("<p class='cm-message'>The assessment is not current: fix the fields marked "
                                 "in red before signing.</p>" if model.report else "")
        elif model.verdict()[0] == "do-not-proceed":
            self.status.value = ("<p class='cm-message'>The overall state is <b>do not proceed</b>. A signature "
                                 "records the plan and its numbers as they are; it does not make the plan safe.</p>")
        else:
            self.status.value = ""

    def _sign(self) -> None:
        from planner.ui.signing import sign_into_archive

        passphrase = self.passphrase.value
        self.passphrase.value = ""
        self.sign_button.disabled = True
        self.status.value = "<p class='cm-working-note'>Signing…</p>"
        try:
            done = sign_into_archive(self.app.model, self.name.value, self.meaning.value, self.key_file.value,
                                     passphrase, self.archive.value, self.register.value, self.seen.value)
        except PlannerError as exc:
            self.status.value = f"<p class='cm-message'>{html.escape(str(exc))}</p>"
            return
        except OSError as exc:
            self.status.value = f"<p class='cm-message'>{html.escape(str(exc))}</p>"
            return
        finally:
            self.sign_button.disabled = False
        self.status.value = ""
        self.result.value = signed_html(done)


def signed_html(done) -> str:
    links = [download_link(f"record-{done.record_id}-v{done.version}.json", done.data, "record (JSON)",
                           "application/json")]
    try:
        from planner import render
    except ImportError:
        render = None
    if render is not None:
        links.append(download_link(f"record-{done.record_id}-v{done.version}.html",
                                   render.render_html(done.data).encode("utf-8"), "record (HTML)", "text/html"))
        links.append(download_link(f"record-{done.record_id}-v{done.version}.pdf", render.render_pdf(done.data),
                                   "record (PDF)", "application/pdf"))
    import json

    verdict = (json.loads(done.data).get("body", {}).get("assessment", {}).get("verdict") or {}).get("state")
    recorded = (f"The record keeps the overall state it was signed with: {state_badge(verdict)}<br>"
                if verdict else "")
    return (f"<div class='cm-record'><b>Signed and archived.</b><br>"
            f"Record <code class='cm-record-id'>{html.escape(done.record_id)}</code> version {done.version}, "
            f"signed {html.escape(done.meaning)} by {html.escape(done.printed_name)}<br>{recorded}"
            f"Record hash <code class='cm-record-hash'>sha256:{html.escape(done.record_hash)}</code><br>"
            f"Archive {html.escape(done.archive)}, head <code>{html.escape(done.head)}</code> "
            f"(keep a copy of the head elsewhere)<br>{' · '.join(links)}</div>")
