"""What the app shows of an assessment, as plain data: margin rows, section numbers, states in words.

Everything here reads the assessment's JSON form (``Assessment.to_dict()``), the same numbers the signed
record holds; nothing is recomputed or rounded differently for the screen.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass
from typing import Any

from planner.ui.fields import label_for

# States in words and colours. The word is always shown; the colour and mark only repeat it, so a state
# reads the same in grey-scale and for colour-blind viewers.
STATE_STYLE: dict[str, tuple[str, str, str]] = {
    # state: (word, mark, colour)
    "fine": ("fine", "✓", "#1f6f43"),
    "watch": ("watch", "!", "#8a5a00"),
    "do-not-proceed": ("do not proceed", "✕", "#a1241b"),
    "not-judged": ("not judged", "–", "#555555"),
}
SKIPPED_KEYS = {"flags", "parameters", "model", "source"}


def state_word(state: str) -> str:
    return STATE_STYLE.get(state, (state, "?", "#555555"))[0]


@dataclass(frozen=True)
class MarginRow:
    """One margin as shown: label, value with unit, state word, thresholds and the policy that applied."""

    name: str
    label: str
    value: float | None
    unit: str
    state: str
    watch: float | None
    stop: float | None
    better: str | None
    policy: str
    why: str = ""
    detail: str = ""

    @property
    def word(self) -> str:
        return state_word(self.state)

    @property
    def value_text(self) -> str:
        if self.value is None:
            return "not computed"
        unit = "" if self.unit in ("", "1") else self.unit  # "1": a ratio or a probability
        return f"{fmt(self.value)} {unit}".strip()

    @property
    def threshold_text(self) -> str:
        if self.watch is None or self.stop is None:
            return "no threshold"
        side = "above" if self.better == "lower" else "below"
        unit = "" if self.unit in ("", "1") else f" {self.unit}"
        return f"watch {side} {fmt(self.watch)}, stop {side} {fmt(self.stop)}{unit} ({self.policy} policy)"


def margin_rows(report: dict[str, Any] | None) -> list[MarginRow]:
    """Margin rows from an assessment dict (``margin_states``, or ``margins`` when it is a list)."""
    if not report:
        return []
    items = report.get("margin_states")
    if items is None and isinstance(report.get("margins"), list):
        items = report["margins"]
    rows = []
    for m in items or []:
        rows.append(MarginRow(
            name=str(m.get("name", "")), label=str(m.get("label", m.get("name", ""))), value=m.get("value"),
            unit=str(m.get("unit", "")), state=str(m.get("state", "not-judged")), watch=m.get("watch"),
            stop=m.get("stop"), better=m.get("better"), policy=str(m.get("policy", "")),
            why=str(m.get("why", "") or ""), detail=str(m.get("detail", "") or ""),
        ))
    return rows


def verdict_of(report: dict[str, Any] | None) -> tuple[str, list[str]]:
    if not report or not isinstance(report.get("verdict"), dict):
        return "not-judged", []
    v = report["verdict"]
    return str(v.get("state", "not-judged")), [str(r) for r in v.get("reasons", [])]


def section_names(report: dict[str, Any] | None) -> list[str]:
    """Names of the sections an assessment dict holds (dict entries that carry a model or flags)."""
    if not report:
        return []
    skip = {"schema", "title", "margins", "margin_states", "verdict", "flags", "cautions", "software"}
    return [k for k, v in report.items() if k not in skip and isinstance(v, dict)]


def section_numbers(section: dict[str, Any]) -> list[tuple[str, str]]:
    """(label, value text) for the scalar entries of a section report, keys turned into labels with units."""
    out = []
    for key, value in section.items():
        if key in SKIPPED_KEYS or isinstance(value, (dict, list)):
            continue
        if key.endswith("_label") and isinstance(section.get(key[: -len("_label")]), str):
            continue  # shown with the word it names, on one row
        words = section.get(f"{key}_label")
        if isinstance(value, str) and isinstance(words, str) and words != value:
            out.append((label_for(key), f"{words} ({value})"))  # "Still air (still-air)": the file's word too
            continue
        out.append((label_for(key), fmt(value)))
    return out


def fmt(value: Any) -> str:
    """Numbers to four significant figures (the planner's own precision is in the record)."""
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return "–"
        if value != 0 and (abs(value) < 1e-3 or abs(value) >= 1e6):
            return f"{value:.3e}".replace("e-0", "e-").replace("e+0", "e")
        return f"{value:.4g}"
    return str(value)


# --- HTML pieces (escaped; the view puts them in HTML widgets) -----------------------------------------

def state_badge(state: str) -> str:
    word, mark, colour = STATE_STYLE.get(state, (state, "?", "#555555"))
    return (f'<span class="cm-state cm-state-{html.escape(state)}" style="border-color:{colour};color:{colour}">'
            f'<b>{mark}</b> {html.escape(word)}</span>')


def strip_html(rows: list[MarginRow], verdict: str | None, stale: bool, working: bool) -> str:
    """The summary strip: the verdict and each margin with its state, marked stale or working."""
    if not rows:
        body = '<span class="cm-muted">No margins yet: fill in the steps (an error is shown next to its field).</span>'
    else:
        cells = "".join(
            f'<div class="cm-strip-item cm-margin-{html.escape(r.name)}" title="{html.escape(r.threshold_text)}">'
            f'<div class="cm-strip-label">{html.escape(r.label)}</div>'
            f'<div class="cm-strip-value">{html.escape(r.value_text)}</div>{state_badge(r.state)}</div>'
            for r in rows
        )
        lead = (f'<div class="cm-strip-item cm-verdict"><div class="cm-strip-label">Overall</div>'
                f'{state_badge(verdict)}</div>' if verdict else "")
        body = lead + cells
    note = ""
    if stale:
        note = ('<div class="cm-stale-note">Stale: these are the last valid results. '
                'Fix the field marked in red to update them.</div>')
    elif working:
        note = '<div class="cm-working-note">Working…</div>'
    cls = "cm-strip" + (" cm-stale" if stale else "")
    return f'<div class="{cls}">{body}</div>{note}'


def margins_table_html(rows: list[MarginRow]) -> str:
    if not rows:
        return '<p class="cm-muted">No margins.</p>'
    head = "<tr><th>Margin</th><th>Value</th><th>State</th><th>Thresholds</th><th>Why it matters</th></tr>"
    body = "".join(
        f"<tr><td>{html.escape(r.label)}</td><td>{html.escape(r.value_text)}</td><td>{state_badge(r.state)}</td>"
        f"<td>{html.escape(r.threshold_text)}</td><td>{html.escape(r.why or r.detail)}</td></tr>"
        for r in rows
    )
    return f'<table class="cm-table cm-margins">{head}{body}</table>'


def flags_html(report: dict[str, Any] | None) -> str:
    from planner.results import shown_flags

    flags = shown_flags((report or {}).get("flags") or [])
    if not flags:
        return '<p class="cm-muted">No flags: every model was used inside its range.</p>'
    items = "".join(
        f'<li><b>{html.escape(str(f.get("code", "")))}</b>: {html.escape(str(f.get("message", "")))}'
        + (f' <span class="cm-source">[{html.escape(str(f["source"]))}]</span>' if f.get("source") else "")
        + "</li>"
        for f in flags
    )
    return f'<ul class="cm-flags">{items}</ul>'


def cautions_html(report: dict[str, Any] | None) -> str:
    cautions = (report or {}).get("cautions") or []
    if not cautions:
        return ""
    items = "".join(
        f'<div class="cm-caution cm-caution-{html.escape(str(c.get("id", "")))}">'
        f'<b>{html.escape(str(c.get("title", "")))}</b><br>{html.escape(str(c.get("text", "")))}'
        + (f'<div class="cm-source">{html.escape(str(c.get("citation") or c.get("source") or ""))}</div>')
        + "</div>"
        for c in cautions
    )
    return f'<div class="cm-cautions">{items}</div>'


def section_html(name: str, title: str, section: dict[str, Any]) -> str:
    numbers = section_numbers(section)
    rows = "".join(f"<tr><td>{html.escape(k)}</td><td>{html.escape(v)}</td></tr>" for k, v in numbers)
    model = section.get("model") or ""
    source = section.get("source") or ""
    foot = ""
    if model or source:
        foot = f'<div class="cm-source">{html.escape(str(model))} {("[" + html.escape(str(source)) + "]") if source else ""}</div>'
    flags = section.get("flags") or []
    flag_items = "".join(f'<li><b>{html.escape(str(f.get("code")))}</b>: {html.escape(str(f.get("message")))}</li>'
                         for f in flags)
    flag_html = f'<ul class="cm-flags">{flag_items}</ul>' if flag_items else ""
    return (f'<div class="cm-section cm-section-{html.escape(name)}"><h4>{html.escape(title)}</h4>'
            f'<table class="cm-table">{rows}</table>{flag_html}{foot}</div>')


PLANNING_SUPPORT = (
    "Planning support only. These numbers come from published models, each with a validity range and an "
    "uncertainty; a margin is never a guarantee that a sample will stay unfrozen, survive, or be safe to "
    "handle. Local codes, your institution's biosafety and safety officers, and licensed practice decide."
)


def planning_support_html(report: dict[str, Any] | None) -> str:
    """The planning-support statement: the assessment's own caution text when present, else ours."""
    text = PLANNING_SUPPORT
    for c in (report or {}).get("cautions") or []:
        if c.get("id") == "planning-support":
            text = f'{c.get("title", "")}. {c.get("text", "")}'
    return f'<div class="cm-planning-support">{html.escape(text)}</div>'
