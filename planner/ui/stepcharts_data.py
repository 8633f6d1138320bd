"""A consistent copy of a model's last valid result, for charts drawn on another thread (no altair here)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

STALE_NOTE = '<div class="cm-stale-note">Stale: drawn from the last valid result.</div>'


def with_stale_note(chart_text: str, stale: bool) -> str:
    """A drawn chart's HTML with the stale note put in or taken out (the chart itself is not redrawn)."""
    body = chart_text.replace(STALE_NOTE, "")
    if not stale:
        return body
    end = body.find("</svg></div>")
    at = end + len("</svg></div>") if end >= 0 else len(body)
    return body[:at] + STALE_NOTE + body[at:]


@dataclass(frozen=True)
class Snapshot:
    """The model's last valid result, taken at once, so a chart drawn on another thread stays consistent."""

    protocol: Any
    assessment: Any
    report: Any
    stale: bool


def snapshot(model) -> Snapshot:
    evaluation = model.evaluation
    if evaluation is None:
        return Snapshot(None, None, None, bool(model.stale))
    return Snapshot(evaluation.protocol, evaluation.assessment, evaluation.report, bool(model.stale))
