"""One function turns a protocol into an Assessment: every section, the judged margins, a verdict, the
flags and the cautions that apply.

Margin states, in our own words (three levels, judged against the lab's policy):

- ``fine``: inside the policy's comfortable range;
- ``watch``: past the ``watch`` threshold – proceed only knowingly, and look at what would change it;
- ``do-not-proceed``: at or past the ``stop`` threshold.

A margin with no threshold for this kind of protocol is reported as ``not-judged`` with the reason. The
verdict is the worst state among the judged margins, with the margins that set it as its reasons; it is
at least ``watch`` when no margin could be judged or when a numerical solution missed its tolerance
(a ``not-converged`` flag: the figures that depend on it are withheld). A margin is never a guarantee;
the ``planning-support`` caution says so in every assessment.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from typing import Any

from planner import __version__
from planner.protocol import CELSIUS_OFFSET, Protocol
from planner.references import cite
from planner.results import Flag, to_jsonable
from planner.sections import MarginValue, SectionOutput
from planner.yamlio import load_yaml

ASSESSMENT_SCHEMA = "coldmargin/assessment-1"
SECTION_ORDER = ("solution", "thermal", "chamber", "nucleation", "cells", "vitrification", "freezing")
STATES = ("fine", "watch", "do-not-proceed")
# Margins that measure the risk of ice in a hold meant to stay liquid: not judged when ice is intended.
LIQUID_HOLD_MARGINS = ("supercooling_k", "freeze_probability", "freeze_probability_upper")
STATE_WORDS = {"fine": "fine", "watch": "watch", "do-not-proceed": "do not proceed", "not-judged": "not judged"}


@dataclass(frozen=True)
class Margin:
    """A margin judged against the policy that applied (``policy``: ``default`` or ``protocol``)."""

    name: str
    label: str
    value: float | None
    unit: str
    better: str | None
    watch: float | None
    stop: float | None
    state: str
    policy: str
    why: str = ""
    source: str | None = None
    detail: str = ""


@dataclass(frozen=True)
class Caution:
    id: str
    title: str
    text: str
    source: str
    citation: str


@dataclass(frozen=True)
class Verdict:
    state: str
    reasons: list[str]


@dataclass
class Assessment:
    title: str
    sections: dict[str, SectionOutput]
    margins: list[Margin]
    verdict: Verdict
    flags: list[Flag]
    cautions: list[Caution]
    schema: str = ASSESSMENT_SCHEMA
    software: dict[str, str] = field(default_factory=lambda: {"coldmargin": __version__})

    def to_dict(self) -> dict[str, Any]:
        """The assessment as JSON types (the shape ``coldmargin assess --json`` prints)."""
        out: dict[str, Any] = {"schema": self.schema, "title": self.title}
        for name, section in self.sections.items():
            out[name] = to_jsonable(section.report)
        out["margins"] = {m.name: to_jsonable(m.value) for m in self.margins}
        out["margin_states"] = to_jsonable(self.margins)
        out["verdict"] = to_jsonable(self.verdict)
        out["flags"] = to_jsonable(self.flags)
        out["cautions"] = to_jsonable(self.cautions)
        out["software"] = dict(self.software)
        return out


@lru_cache(maxsize=1)
def default_policy() -> dict[str, dict[str, Any]]:
    """Default thresholds, keyed by margin name (planner/data/policy.yaml)."""
    text = resources.files("planner").joinpath("data/policy.yaml").read_text(encoding="utf-8")
    return load_yaml(text, "policy.yaml")


@lru_cache(maxsize=1)
def caution_catalogue() -> dict[str, dict[str, Any]]:
    """Every caution the planner can show (planner/data/cautions.yaml)."""
    text = resources.files("planner").joinpath("data/cautions.yaml").read_text(encoding="utf-8")
    return load_yaml(text, "cautions.yaml")


def judge(value: float | None, better: str, watch: float, stop: float) -> str:
    """State of a value against two thresholds (see the module docstring)."""
    if value is None:
        return "not-judged"
    if better == "higher":
        return "do-not-proceed" if value <= stop else "watch" if value <= watch else "fine"
    return "do-not-proceed" if value >= stop else "watch" if value >= watch else "fine"


def _judge_margin(mv: MarginValue, protocol: Protocol, judged: bool = True) -> Margin:
    entry = default_policy().get(mv.name)
    if entry is None or not judged:
        why = "no threshold set for this margin" if entry is None else mv.detail
        return Margin(mv.name, mv.label, mv.value, mv.unit, None, None, None, "not-judged", "none",
                      why, None, mv.detail)
    watch, stop, which = entry["watch"], entry["stop"], "default"
    override = protocol.policy.margins.get(mv.name)
    if override:
        watch, stop, which = override["watch"], override["stop"], "protocol"
    state = judge(mv.value, entry["better"], watch, stop)
    return Margin(mv.name, mv.label, mv.value, mv.unit, entry["better"], watch, stop, state, which,
                  entry.get("why", ""), entry.get("source"), mv.detail)


def _section_builder(name: str):
    module = importlib.import_module(f"planner.sections.{name}")
    return module.build


def _coldest_point(protocol: Protocol, context: dict[str, SectionOutput]) -> tuple[float, str]:
    thermal = context.get("thermal")
    if thermal is not None and getattr(thermal.state, "coldest_temperature", None) is not None:
        return float(thermal.state.coldest_temperature), "sample's coldest point (heat-transfer model)"
    return protocol.schedule.coldest_temperature, "bath schedule"


def _meant_to_stay_liquid(protocol: Protocol, context: dict[str, SectionOutput]) -> bool:
    seeded = any(step.kind == "seed" for step in protocol.schedule.steps)
    return not seeded and "vitrification" not in context and "freezing" not in context


def _condition_holds(word: str, protocol: Protocol) -> bool:
    agents = {c.agent for c in protocol.solution.cryoprotectants}
    return {
        "always": True,
        "rigid": protocol.container.kind == "rigid",
        "ln2": protocol.schedule.uses_liquid_nitrogen,
        "cryoprotectant": bool(agents),
        "dmso": "dmso" in agents,
        "human-material": protocol.sample.origin == "human",
        "animal-material": protocol.sample.origin == "animal",
        "section": False,
    }[word]


def assess(protocol: Protocol, sections: tuple[str, ...] = SECTION_ORDER) -> Assessment:
    """Assess a validated protocol.

    Parameters
    ----------
    protocol : Protocol
        From :func:`planner.protocol.load_protocol` or :func:`planner.protocol.parse_protocol`.
    sections : tuple of str
        Section names to build, in order (later sections read earlier ones).

    Returns
    -------
    Assessment
        Sections, judged margins, verdict, flags and cautions.
    """
    context: dict[str, SectionOutput] = {}
    for name in sections:
        output = _section_builder(name)(protocol, context)
        if output is not None:
            context[name] = output

    margin_values: list[tuple[MarginValue, bool]] = []
    solution = context.get("solution")
    if solution is not None:
        freezing_point = solution.state.properties.freezing_point
        coldest, where = _coldest_point(protocol, context)
        stays_liquid = _meant_to_stay_liquid(protocol, context)
        detail = f"solution liquidus {freezing_point - CELSIUS_OFFSET:.2f} C minus the coldest {where}"
        if not stays_liquid:
            detail = "not judged: the protocol freezes or vitrifies on purpose; " + detail
        margin_values.append((MarginValue("supercooling_k", "Supercooling below the liquidus",
                                          round(float(freezing_point - coldest), 3), "K", detail), stays_liquid))
    stays_liquid = _meant_to_stay_liquid(protocol, context)
    for output in context.values():
        for mv in output.margins:
            judged = stays_liquid or mv.name not in LIQUID_HOLD_MARGINS
            if not judged:
                mv = MarginValue(mv.name, mv.label, mv.value, mv.unit,
                                 "not judged: the protocol freezes or vitrifies on purpose, so ice before that "
                                 "point is not the risk this margin measures" + (f"; {mv.detail}" if mv.detail else ""))
            margin_values.append((mv, judged))
    margins = [_judge_margin(mv, protocol, judged) for mv, judged in margin_values]

    flags: list[Flag] = []
    for name, output in context.items():
        for flag in getattr(output.report, "flags", []):
            flags.append(Flag(flag.code, f"{name}: {flag.message}", flag.source))

    catalogue = caution_catalogue()
    wanted = [cid for cid, c in catalogue.items() if _condition_holds(c["applies"], protocol)]
    for output in context.values():
        wanted.extend(output.cautions)
    cautions = []
    for cid in dict.fromkeys(wanted):  # keep order, drop repeats
        entry = catalogue[cid]
        cautions.append(Caution(cid, entry["title"], entry["text"], entry["source"],
                                cite(entry["source"]).citation()))

    return Assessment(protocol.title, context, margins, _verdict(margins, flags), flags, cautions)


def _verdict(margins: list[Margin], flags: list[Flag] | tuple[Flag, ...] = ()) -> Verdict:
    """The worst judged state, with the margins that set it; at least ``watch`` when no margin could be
    judged or when a numerical solution missed its tolerance (its figures are withheld, so a "fine" would
    rest on numbers that were not computed)."""
    judged = [m for m in margins if m.state in STATES]
    if not judged:
        worst, reasons = "watch", ["no margin could be judged for this protocol"]
    else:
        worst = max(judged, key=lambda m: STATES.index(m.state)).state
        reasons = [
            f"{m.label}: {_fmt(m.value)}{'' if m.unit == '1' else ' ' + m.unit} ({STATE_WORDS[m.state]}; "
            f"watch at {_fmt(m.watch)}, stop at {_fmt(m.stop)})"
            for m in judged
            if m.state == worst
        ][:5]
    unsolved = [f for f in flags if f.code == "not-converged"]
    if unsolved:
        if worst == "fine":
            worst, reasons = "watch", []
        reasons += [f"not computed – {f.message} (the figures that depend on it are withheld)" for f in unsolved[:3]]
    return Verdict(worst, reasons)


def _fmt(x: float | None) -> str:
    if x is None:
        return "n/a"
    return f"{x:.3g}"
