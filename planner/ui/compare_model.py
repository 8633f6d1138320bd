"""The compare notebook's state without widgets: two to four scenarios, each a full plan of its own.

Each scenario is a :class:`~planner.ui.planner_model.PlannerModel` (its own draft, its own last valid
assessment, its own errors), so a scenario is exactly as trustworthy as the same protocol in the planner.
The comparison only lines their results up: a margins table, overlaid histories and one freeze map.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from typing import Any
from urllib.parse import parse_qs

import traitlets

from planner.errors import InputError, choice_error
from planner.ui.planner_model import PlannerModel, demo_files
from planner.ui.summary import margin_rows

MIN_SCENARIOS, MAX_SCENARIOS = 2, 4
LETTERS = "ABCD"


@dataclass(frozen=True)
class CompareCell:
    value_text: str
    state: str


def coldest_ramp_path(model: PlannerModel) -> str | None:
    """Key path of the coldest ``ramp_to_c`` (the hold temperature of a supercooled-hold protocol)."""
    steps = model.value("schedule.steps") or []
    best, where = None, None
    for i, s in enumerate(steps):
        if isinstance(s, dict) and isinstance(s.get("ramp_to_c"), (int, float)):
            if best is None or s["ramp_to_c"] < best:
                best, where = s["ramp_to_c"], f"schedule.steps[{i}].ramp_to_c"
    return where


def first_hold_path(model: PlannerModel) -> str | None:
    for i, s in enumerate(model.value("schedule.steps") or []):
        if isinstance(s, dict) and "hold_h" in s:
            return f"schedule.steps[{i}].hold_h"
    return None


def concentration_path(model: PlannerModel) -> str | None:
    row = "solution.cryoprotectants[0]"
    if not model.draft.has(row):
        return None
    unit = model.unit_of_row(row)
    return f"{row}.{unit}" if unit else None


# The few numbers a lab meeting changes, as (name, label, key path finder).
QUICK_FIELDS: tuple[tuple[str, str, Any], ...] = (
    ("volume", "Sample volume (mL)", lambda m: "sample.volume_ml"),
    ("concentration", "First cryoprotectant", concentration_path),
    ("hold", "Coldest ramp target (°C)", coldest_ramp_path),
    ("hold_time", "First hold (h)", first_hold_path),
    ("container", "Container", lambda m: "container.kind"),
    ("interface", "Liquid–air interface", lambda m: "container.interface"),
)


def scenarios_from_query(query: str | None) -> list[str]:
    """Demo names asked for in the page address (``?scenario=a&scenario=b``), known ones only."""
    if not query:
        return []
    names = parse_qs(query).get("scenario", [])
    known = demo_files()
    return [n for n in names if re.fullmatch(r"[A-Za-z0-9._-]+", n) and n in known][:MAX_SCENARIOS]


class CompareModel(traitlets.HasTraits):
    """Two to four scenarios side by side."""

    revision = traitlets.Int(0)

    def __init__(self, demos: list[str] | None = None, inline: bool = False, evaluate=None, **kwargs):
        super().__init__(**kwargs)
        self.inline = inline
        self._evaluate = evaluate
        self.scenarios: list[PlannerModel] = []
        self.names: list[str] = []
        names = demos or scenarios_from_query(os.environ.get("QUERY_STRING")) or self._default_demos()
        for name in names:
            self.add_demo(name)
        while len(self.scenarios) < MIN_SCENARIOS and self.scenarios:
            self.duplicate(0)

    @staticmethod
    def _default_demos() -> list[str]:
        demos = list(demo_files())
        start = os.environ.get("COLDMARGIN_PROTOCOL")
        if start:
            from pathlib import Path

            stem = Path(start).stem
            if stem in demos:
                return [stem, stem]
        return demos[:1] * 2 if demos else []

    def _new(self) -> PlannerModel:
        m = PlannerModel(evaluate=self._evaluate, inline=self.inline)
        m.observe(lambda _ch: self._bump(), names="result_revision")
        return m

    def _bump(self) -> None:
        self.revision += 1

    def _room(self) -> None:
        if len(self.scenarios) >= MAX_SCENARIOS:
            raise InputError("scenarios", len(self.scenarios) + 1, f"{MIN_SCENARIOS} to {MAX_SCENARIOS} scenarios")

    def add_demo(self, name: str) -> int:
        self._room()
        demos = demo_files()
        if name not in demos:
            raise choice_error("demo", name, list(demos))
        m = self._new()
        m.load_demo(name)
        self.scenarios.append(m)
        self.names.append(f"{LETTERS[len(self.scenarios) - 1]}: {name}")
        self._bump()
        return len(self.scenarios) - 1

    def add_upload(self, filename: str, content: bytes) -> int:
        self._room()
        m = self._new()
        m.load_upload(filename, content)
        self.scenarios.append(m)
        self.names.append(f"{LETTERS[len(self.scenarios) - 1]}: {m.source_name}")
        self._bump()
        return len(self.scenarios) - 1

    def duplicate(self, index: int) -> int:
        self._room()
        src = self.scenarios[index]
        m = self._new()
        m.load_upload(src.download_name(), src.protocol_yaml().encode("utf-8"))
        m.source_name = src.source_name
        self.scenarios.append(m)
        self.names.append(f"{LETTERS[len(self.scenarios) - 1]}: copy of {self.names[index].split(': ', 1)[-1]}")
        self._bump()
        return len(self.scenarios) - 1

    def remove(self, index: int) -> None:
        if len(self.scenarios) <= MIN_SCENARIOS:
            raise InputError("scenarios", len(self.scenarios) - 1, f"{MIN_SCENARIOS} to {MAX_SCENARIOS} scenarios")
        del self.scenarios[index]
        del self.names[index]
        self.names = [f"{LETTERS[i]}: {n.split(': ', 1)[-1]}" for i, n in enumerate(self.names)]
        self._bump()

    def set_value(self, index: int, path: str, value: Any) -> None:
        self.scenarios[index].set_value(path, value)

    def wait(self) -> None:
        for m in self.scenarios:
            m.wait()

    @property
    def letters(self) -> list[str]:
        return [n.split(":", 1)[0] for n in self.names]

    def margins_table(self) -> tuple[list[str], list[tuple[str, list[CompareCell]]]]:
        """(scenario names, rows of (margin label, one cell per scenario)), margins in first-seen order."""
        per = [{r.name: r for r in margin_rows(m.report)} for m in self.scenarios]
        order: dict[str, str] = {}
        for rows in per:
            for name, r in rows.items():
                order.setdefault(name, r.label)
        out = []
        for name, label in order.items():
            cells = []
            for m, rows in zip(self.scenarios, per, strict=True):
                r = rows.get(name)
                if r is None:
                    cells.append(CompareCell("–", "not-judged"))
                else:
                    cells.append(CompareCell(r.value_text + (" (stale)" if m.stale else ""), r.state))
            out.append((label, cells))
        verdicts = [CompareCell("(stale)" if m.stale else "", m.verdict()[0]) for m in self.scenarios]
        return list(self.names), [("Overall", verdicts), *out]
