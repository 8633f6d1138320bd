"""Assessment sections: one module per section, each with a ``build(protocol, context)`` function.

A section turns the typed protocol (``planner.protocol.Protocol``) and what earlier sections computed
into a :class:`SectionOutput`:

- ``report``: a dataclass (subclass of :class:`planner.results.Result`) whose fields are the section's
  JSON keys, with units in their names (``pressure_if_frozen_mpa``); it carries model, source and flags;
- ``margins``: the quantities judged against the lab's policy (thresholds live in
  ``planner/data/policy.yaml`` under the margin's name);
- ``cautions``: ids of cautions (``planner/data/cautions.yaml``) this section makes apply;
- ``state``: SI domain objects that later sections read from ``context[name].state`` (not serialised).

``build`` returns ``None`` when the section does not apply to the protocol. Sections run in the order of
``planner.assessment.SECTION_ORDER``; ``context`` maps the names of the sections already built to their
outputs.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from planner.results import Result


@dataclass(frozen=True)
class MarginValue:
    """One number to be judged: its policy name, a label for people, the value and its unit.

    ``name`` is the key in ``planner/data/policy.yaml`` (and in ``assessment.margins``); ``unit`` is the
    lab unit the value is given in (``K``, ``MPa``, ``1`` for a ratio or probability).
    """

    name: str
    label: str
    value: float | None
    unit: str
    detail: str = ""


@dataclass
class SectionOutput:
    name: str
    report: Result
    margins: list[MarginValue] = field(default_factory=list)
    cautions: list[str] = field(default_factory=list)
    state: Any = None
