"""Assessment section ``solution``: the solution as prepared – liquidus, osmolality, water activity, glass.

The report gives lab units (°C, osmol/kg) and the composition per agent in mass percent and molal; the
state carries the SI :class:`~planner.solution.Composition` and
:class:`~planner.solution.SolutionProperties` that later sections (chamber, nucleation, cells,
vitrification) read.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from planner.protocol import CELSIUS_OFFSET, Protocol
from planner.results import Result
from planner.sections import SectionOutput
from planner.solution import (
    Composition,
    SolutionProperties,
    composition,
    concentration,
    solution_properties,
)


@dataclass
class SolutionReport(Result):
    """The ``solution`` section of an assessment (keys are the JSON keys of the record)."""

    freezing_point_c: float | None = None
    freezing_point_uncertainty_k: float | None = None
    osmolality_osmol_per_kg: float | None = None
    water_activity: float | None = None
    glass_transition_c: float | None = None
    glass_transition_prime_c: float | None = None
    density_kg_per_m3: float | None = None
    carrier: str = ""
    composition: list[dict[str, Any]] = field(default_factory=list)


@dataclass(frozen=True)
class SolutionState:
    """What later sections read: the composition [mol/kg water] and its properties (SI)."""

    composition: Composition
    properties: SolutionProperties


def _celsius(kelvin: float | None, digits: int = 3) -> float | None:
    return None if kelvin is None else round(kelvin - CELSIUS_OFFSET, digits)


def build(protocol: Protocol, context: dict[str, SectionOutput]) -> SectionOutput:
    """Build the ``solution`` section (it always applies).

    Parameters
    ----------
    protocol : Protocol
        The validated protocol; ``protocol.solution`` is converted with
        :func:`planner.solution.composition` (errors name ``solution.cryoprotectants[i].<unit>``).
    context : dict
        Sections already built (not used: this section comes first).

    Returns
    -------
    SectionOutput
        Report, no margins (the assessment judges supercooling against the liquidus), cautions
        ``cryoprotectant-toxicity`` when any agent is given and ``dmso-skin`` when DMSO is, and a
        :class:`SolutionState`.
    """
    given = protocol.solution.cryoprotectants
    comp = composition(protocol.solution.carrier, [(c.agent, c.unit, c.value) for c in given], "solution")
    props = solution_properties(comp)
    rows = []
    for agent, molality in zip(comp.agents, comp.molality, strict=True):
        rows.append({
            "agent": agent,
            "from_carrier": agent == "nacl" and protocol.solution.carrier == "isotonic-saline",
            "mass_percent": round(concentration(comp, agent, "mass_percent"), 4),
            "molal_mol_per_kg": round(molality, 5),
        })
    uncertainty = props.freezing_point_uncertainty
    report = SolutionReport(
        model=props.model,
        source=props.source,
        parameters=props.parameters,
        flags=list(props.flags),
        freezing_point_c=_celsius(props.freezing_point),
        freezing_point_uncertainty_k=None if uncertainty is None else round(uncertainty, 3),
        osmolality_osmol_per_kg=round(props.osmolality, 4),
        water_activity=None if props.water_activity is None else round(props.water_activity, 5),
        glass_transition_c=_celsius(props.glass_transition, 1),
        glass_transition_prime_c=_celsius(props.glass_transition_prime, 1),
        density_kg_per_m3=round(props.density, 1),
        carrier=protocol.solution.carrier,
        composition=rows,
    )
    cautions = []
    if given:
        cautions.append("cryoprotectant-toxicity")
    if any(c.agent == "dmso" for c in given):
        cautions.append("dmso-skin")
    return SectionOutput("solution", report, [], cautions, SolutionState(comp, props))
