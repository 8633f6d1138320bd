""""What would it take": single changes to the draft that move a margin to a better state.

Each candidate is one plain edit of the protocol as entered (warmer hold, smaller sample, sealed
interface, more cryoprotectant, slower ramps). Every candidate is assessed by the same assessment as the
plan itself; a suggestion is shown only when that assessment says a margin improves. Nothing is estimated
by a shortcut, so a suggestion is exactly as trustworthy as the plan's own numbers.
"""

from __future__ import annotations

import copy
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from planner.ui.summary import margin_rows

STATE_RANK = {"fine": 0, "watch": 1, "do-not-proceed": 2}


@dataclass(frozen=True)
class Candidate:
    label: str
    edit: Callable[[dict[str, Any]], bool]  # changes the document in place; False when it does not apply


@dataclass(frozen=True)
class Suggestion:
    label: str
    improved: list[tuple[str, str, str]]  # (margin label, state before, state after)
    verdict_before: str
    verdict_after: str


def _steps(doc: dict[str, Any]) -> list[dict[str, Any]]:
    steps = (doc.get("schedule") or {}).get("steps") or []
    return [s for s in steps if isinstance(s, dict)]


def _warmer(kelvin: float) -> Callable[[dict[str, Any]], bool]:
    def edit(doc: dict[str, Any]) -> bool:
        coldest = min((s["ramp_to_c"] for s in _steps(doc) if isinstance(s.get("ramp_to_c"), (int, float))),
                      default=None)
        if coldest is None or coldest >= 0:
            return False
        for s in _steps(doc):
            if s.get("ramp_to_c") == coldest:
                s["ramp_to_c"] = round(coldest + kelvin, 3)
        return True

    return edit


def _scale_volume(factor: float) -> Callable[[dict[str, Any]], bool]:
    def edit(doc: dict[str, Any]) -> bool:
        sample = doc.get("sample") or {}
        v = sample.get("volume_ml")
        if not isinstance(v, (int, float)):
            return False
        sample["volume_ml"] = round(v * factor, 6)
        # keep the shape consistent: a cylinder of the same diameter gets shorter; drop a given height
        sample.pop("height_mm", None)
        if sample.get("geometry") == "sphere":
            sample.pop("diameter_mm", None)
        if sample.get("geometry") == "slab" and isinstance(sample.get("thickness_mm"), (int, float)):
            pass  # same thickness, smaller face
        return True

    return edit


def _seal(doc: dict[str, Any]) -> bool:
    container = doc.get("container") or {}
    if container.get("kind") != "open" or container.get("interface") == "sealed":
        return False
    container["interface"] = "sealed"
    return True


def _more_agent(factor: float) -> Callable[[dict[str, Any]], bool]:
    def edit(doc: dict[str, Any]) -> bool:
        rows = (doc.get("solution") or {}).get("cryoprotectants") or []
        changed = False
        for row in rows:
            for key, value in list(row.items()):
                if key != "agent" and isinstance(value, (int, float)):
                    row[key] = round(value * factor, 4)
                    changed = True
        return changed

    return edit


def _slower(factor: float) -> Callable[[dict[str, Any]], bool]:
    def edit(doc: dict[str, Any]) -> bool:
        changed = False
        for s in _steps(doc):
            if isinstance(s.get("rate_c_per_min"), (int, float)):
                s["rate_c_per_min"] = round(s["rate_c_per_min"] * factor, 6)
                changed = True
        return changed

    return edit


CANDIDATES: tuple[Candidate, ...] = (
    Candidate("hold 1 °C warmer", _warmer(1.0)),
    Candidate("hold 2 °C warmer", _warmer(2.0)),
    Candidate("half the sample volume", _scale_volume(0.5)),
    Candidate("seal the liquid–air interface (e.g. an oil overlay)", _seal),
    Candidate("a quarter more cryoprotectant (every agent × 1.25)", _more_agent(1.25)),
    Candidate("ramps at half the rate", _slower(0.5)),
)


def suggestions(document: dict[str, Any], report: dict[str, Any],
                evaluate: Callable[[dict[str, Any]], dict[str, Any]],
                progress: Callable[[int, int], None] | None = None) -> list[Suggestion]:
    """Assess each candidate change and keep those that improve a margin that is not fine.

    Parameters
    ----------
    document : dict
        The protocol as entered (not changed).
    report : dict
        Its assessment (``Assessment.to_dict()``).
    evaluate : callable
        ``evaluate(document) -> report`` for a changed document; errors make a candidate drop out.
    progress : callable, optional
        ``progress(done, total)`` after each candidate.
    """
    before = {r.name: r for r in margin_rows(report)}
    troubled = {n for n, r in before.items() if STATE_RANK.get(r.state, 0) > 0}
    verdict_before = (report.get("verdict") or {}).get("state", "not-judged")
    out: list[Suggestion] = []
    for i, cand in enumerate(CANDIDATES):
        doc = copy.deepcopy(document)
        applies = cand.edit(doc)
        new_report = None
        if applies and troubled:
            try:
                new_report = evaluate(doc)
            except Exception:  # a change the loader refuses is simply not a suggestion
                new_report = None
        if new_report is not None:
            after = {r.name: r for r in margin_rows(new_report)}
            improved = [
                (before[n].label, before[n].state, after[n].state)
                for n in troubled
                if n in after and STATE_RANK.get(after[n].state, 9) < STATE_RANK[before[n].state]
            ]
            worse = [n for n in after if n in before
                     and STATE_RANK.get(after[n].state, 0) > STATE_RANK.get(before[n].state, 0)]
            if improved and not worse:
                out.append(Suggestion(cand.label, improved, verdict_before,
                                      (new_report.get("verdict") or {}).get("state", "not-judged")))
        if progress is not None:
            progress(i + 1, len(CANDIDATES))
    return out
