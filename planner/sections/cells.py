"""Assessment section ``cells``: cell volume through loading and unloading, and the cell during cooling.

Applies when the protocol has a ``cells:`` section. It resolves the cell parameters (preset plus what
the protocol gives, :func:`planner.cells.resolve_cell`), then

- simulates the loading steps from isotonic cells, and the unloading steps from cells equilibrated
  with the sample's solution, with the two-parameter model and the non-ideal osmolality
  (:class:`planner.cells.VirialSolution`);
- judges the smallest and largest volume against the cell's osmotic tolerance limits, and when a stage
  leaves them suggests the fewest equal steps that would not;
- gives the toxicity cost of the steps (indicative);
- when the schedule freezes the sample with ice outside (a seed step, or a ramp to −20 C or colder),
  runs the Mazur model at the planned cooling rate (the sample's own rate near the liquidus when the
  ``thermal`` section has run, else the first ramp below 0 C) and over a range of rates (the trade-off).

Margins (names of ``planner/data/policy.yaml``):

- ``cell_min_volume_fraction_margin``: smallest volume minus the lower tolerance limit (fractions of
  isotonic volume; above 0 is inside the limit);
- ``cell_max_volume_fraction_margin``: upper tolerance limit minus the largest volume;
- ``intracellular_supercooling_k``: intracellular supercooling at the cell's nucleation temperature
  (or the largest supercooling when that temperature is unknown) at the planned cooling rate.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from planner.errors import ModelRangeError
from planner.protocol import CELSIUS_OFFSET, Protocol, Step
from planner.results import Flag, Result
from planner.schedule import segments
from planner.sections import MarginValue, SectionOutput

if TYPE_CHECKING:  # the cell model (and scipy.integrate) loads only for a protocol with cells
    from planner import cells as cellmodel

TRADEOFF_RATES_C_PER_MIN = (0.1, 0.3, 1.0, 3.0, 10.0, 30.0, 100.0)
MAZUR_LOWEST_END = 233.15  # K: the Mazur run stops at -40 C unless the cell's nucleation temperature is colder
FREEZING_RAMP_TARGET = 253.15  # K: a ramp to -20 C or colder is read as slow freezing with ice outside


@dataclass
class CellsReport(Result):
    """The ``cells`` section of an assessment (keys are the JSON keys of the record)."""

    cell_type: str = ""
    preset: str | None = None
    entered: list[str] = field(default_factory=list)
    min_volume_fraction: float | None = None
    max_volume_fraction: float | None = None
    tolerance_min_volume_fraction: float | None = None
    tolerance_max_volume_fraction: float | None = None
    within_tolerance: bool | None = None
    toxicity_cost: float | None = None
    toxicity_cost_unit: str = "(mol/kg)^1.6 min, relative to other protocols for the same cells and agent"
    steps: list[dict[str, Any]] = field(default_factory=list)
    suggestion: dict[str, Any] | None = None
    unloading_suggestion: dict[str, Any] | None = None
    cooling_applies: bool = False
    cooling_note: str = ""
    cooling_rate_c_per_min: float | None = None
    cooling_rate_from: str | None = None
    ice_forms_outside_c: float | None = None
    max_intracellular_supercooling_k: float | None = None
    intracellular_nucleation_c: float | None = None
    supercooling_at_nucleation_k: float | None = None
    intracellular_ice: str = "not-assessed"
    min_volume_fraction_cooling: float | None = None
    tradeoff: list[dict[str, Any]] = field(default_factory=list)
    solution_model: str = ""


@dataclass
class CellsState:
    """SI objects for charts and later sections."""

    parameters: cellmodel.CellParameters
    time: np.ndarray  # s, loading then unloading (unloading time continues after loading)
    relative_volume: np.ndarray  # V/V_iso
    stage: np.ndarray  # "loading" | "unloading" per sample
    intracellular_molality: dict[str, np.ndarray]  # mol/kg
    loading: cellmodel.TransportHistory | None = None
    unloading: cellmodel.TransportHistory | None = None
    cooling: cellmodel.CoolingHistory | None = None
    tradeoff: cellmodel.SupercoolingTradeOff | None = None


def _r(x: float | None, digits: int = 4) -> float | None:
    return None if x is None or not np.isfinite(x) else round(float(x), digits)


def _step_dict(e: cellmodel.StepExtremes) -> dict[str, Any]:
    return {
        "stage": e.stage, "index": e.index, "temperature_c": _r(e.temperature_c, 2),
        "duration_min": _r(e.duration_min, 3), "min_volume_fraction": _r(e.min_volume_fraction),
        "time_of_min_s": _r(e.time_of_min_s, 2), "max_volume_fraction": _r(e.max_volume_fraction),
        "time_of_max_s": _r(e.time_of_max_s, 2), "end_volume_fraction": _r(e.end_volume_fraction),
        "end_intracellular_molal": {a: _r(m) for a, m in e.end_intracellular_molality.items()},
        "outside_osmolality_osmol_per_kg": _r(e.outside_osmolality), "equilibrated": e.equilibrated,
    }


def _suggestion_dict(s: cellmodel.Suggestion) -> dict[str, Any]:
    return {
        "stage": s.stage, "feasible": s.feasible, "step_count": s.step_count,
        "steps": [{"concentration_fraction": _r(st.concentration_fraction), "cryoprotectants":
                   [{"agent": a, "unit": u, "value": _r(v)} for a, u, v in st.cryoprotectants],
                   "duration_min": _r(st.duration_min, 1)} for st in s.steps],
        "min_volume_fraction": _r(s.min_volume_fraction), "max_volume_fraction": _r(s.max_volume_fraction),
        "toxicity_cost": _r(s.toxicity_cost, 3), "note": s.note,
    }


def _freezing_ramp(protocol: Protocol, liquidus: float) -> Step | None:
    """The ramp during which ice grows outside the cells, if the schedule freezes the sample slowly.

    Seeded schedules: the first cooling ramp after the seed step. Unseeded: the first ramp that cools to
    -20 C or colder (ice forms on the way). ``None`` when a plunge comes first (vitrification or rapid
    cooling) or nothing cools below the liquidus.
    """
    seed_at = next((i for i, s in enumerate(protocol.schedule.steps) if s.kind == "seed"), None)
    temp = protocol.schedule.start_temperature
    for i, step in enumerate(protocol.schedule.steps):
        if step.kind == "plunge":
            return None
        if step.kind != "ramp":
            continue
        cools = step.target_temperature < temp and step.target_temperature < liquidus
        if cools and seed_at is not None and i > seed_at:
            return step
        if cools and seed_at is None and step.target_temperature <= FREEZING_RAMP_TARGET:
            return step
        temp = step.target_temperature
    return None


def _sample_rate(context: dict[str, SectionOutput], liquidus: float, t_from: float = 0.0) -> float | None:
    """Mean cooling rate [K/s] of the sample's coldest point on its first pass through the 10 K below the liquidus.

    Only the history from ``t_from`` [s] on counts (the start of the ramp on which ice grows outside the
    cells), and only the first continuous pass down through the band: a hold inside it or
    a later warming back through it is not cooling with ice outside [ref:mazur-1963].
    """
    thermal = context.get("thermal")
    state = getattr(thermal, "state", None) if thermal is not None else None
    t = getattr(state, "time", None)
    temp = getattr(state, "coldest_temperature_history", None)
    if t is None or temp is None:
        return None
    t, temp = np.asarray(t, dtype=float), np.asarray(temp, dtype=float)
    later = t >= t_from
    t, temp = t[later], temp[later]
    inside = (temp <= liquidus) & (temp >= liquidus - 10.0)
    if not inside.any():
        return None
    first = int(np.argmax(inside))
    # the pass ends where the sample leaves the band or stops cooling
    stop = first
    while stop + 1 < t.size and inside[stop + 1] and temp[stop + 1] <= temp[stop]:
        stop += 1
    if stop == first or t[stop] <= t[first]:
        return None
    rate = (temp[first] - temp[stop]) / (t[stop] - t[first])
    return float(rate) if rate > 0 else None


def build(protocol: Protocol, context: dict[str, SectionOutput]) -> SectionOutput | None:
    """Build the ``cells`` section, or ``None`` when the protocol has no ``cells:`` section.

    Parameters
    ----------
    protocol : Protocol
        The validated protocol.
    context : dict
        Sections already built; ``thermal`` (if present) supplies the sample's cooling rate.

    Returns
    -------
    SectionOutput or None

    Raises
    ------
    InputError
        Bad or insufficient cell parameters, naming the ``cells.`` key (see
        :func:`planner.cells.resolve_cell` and :func:`planner.cells.permeating_agents`).
    """
    if protocol.cells is None:
        return None
    from planner import cells as cellmodel

    cells = protocol.cells
    cell = cellmodel.resolve_cell(cells)
    model = cellmodel.default_solution_model()
    flags: list[Flag] = []
    stage_solutions = [(f"cells.loading[{s.index}].solution", s.solution) for s in cells.loading]
    stage_solutions += [(f"cells.unloading[{s.index}].solution", s.solution) for s in cells.unloading]
    agents = cellmodel.permeating_agents(cell, [*stage_solutions, ("solution", protocol.solution)])

    report = CellsReport(model="two-parameter", source="kleinhans-1998", cell_type=cell.name,
                         preset=cells.preset, entered=list(cell.entered),
                         tolerance_min_volume_fraction=cell.min_volume_fraction,
                         tolerance_max_volume_fraction=cell.max_volume_fraction, solution_model=model.name,
                         parameters={
                             "isotonic_volume_um3": _r(cell.isotonic_volume * 1e18, 2),
                             "membrane_area_um2": _r(cell.membrane_area * 1e12, 2),
                             "inactive_fraction": cell.inactive_fraction,
                             "lp_um_per_min_atm": _r(cell.hydraulic_conductivity / cellmodel.UM_PER_MIN_ATM, 4),
                             "lp_reference_c": _r(cell.reference_temperature - CELSIUS_OFFSET, 2),
                             "lp_activation_kj_per_mol": None if cell.hydraulic_activation_energy is None
                             else _r(cell.hydraulic_activation_energy / 1000.0, 2),
                             "permeability_um_per_s": {a: _r(p / cellmodel.UM_PER_S, 4)
                                                       for a, p in cell.solute_permeability.items()},
                             "sources": dict(cell.sources),
                         })

    loading = unloading = None
    if cells.loading:
        plan = [cellmodel.PlannedStep("loading", s.index, s.solution, s.temperature, s.duration) for s in cells.loading]
        loading = cellmodel.simulate_steps(cell, plan, model, agents)
        flags.extend(loading.flags)
    sample_outside = model.outside(protocol.solution, "solution")
    if cells.unloading:
        plan = [cellmodel.PlannedStep("unloading", s.index, s.solution, s.temperature, s.duration)
                for s in cells.unloading]
        start = cellmodel.equilibrium_state(cell, model, sample_outside, agents)
        unloading = cellmodel.simulate_steps(cell, plan, model, agents, start)
        flags.extend(unloading.flags)
    histories = [h for h in (loading, unloading) if h is not None]
    if histories:
        report.min_volume_fraction = _r(min(h.min_volume_fraction for h in histories))
        report.max_volume_fraction = _r(max(h.max_volume_fraction for h in histories))
        report.toxicity_cost = _r(sum(h.toxicity_cost for h in histories), 3)
        report.steps = [_step_dict(e) for h in histories for e in h.steps]
        flags.append(Flag("indicative", "toxicity cost: Benson et al. form with alpha = 1.6 and k = 1 (relative); "
                          "not a viability", "benson-2012"))
        if any(not e.equilibrated for h in histories for e in h.steps):
            flags.append(Flag("missing-data", "a step ends before the cell is within 5 % of osmotic equilibrium; "
                              "the next step starts from where it is", "kleinhans-1998"))
    else:
        flags.append(Flag("missing-data", "no cells.loading or cells.unloading steps: volume excursions not "
                          "computed", None))

    margins: list[MarginValue] = []
    limits_known = cell.min_volume_fraction is not None and cell.max_volume_fraction is not None
    if histories and limits_known:
        report.within_tolerance = bool(report.min_volume_fraction >= cell.min_volume_fraction
                                       and report.max_volume_fraction <= cell.max_volume_fraction)
        margins.append(MarginValue("cell_min_volume_fraction_margin", "Smallest cell volume above its lower limit",
                                   _r(report.min_volume_fraction - cell.min_volume_fraction), "1",
                                   f"smallest volume {report.min_volume_fraction:.3f} of isotonic, lower limit "
                                   f"{cell.min_volume_fraction:.3f}"))
        margins.append(MarginValue("cell_max_volume_fraction_margin", "Largest cell volume below its upper limit",
                                   _r(cell.max_volume_fraction - report.max_volume_fraction), "1",
                                   f"largest volume {report.max_volume_fraction:.3f} of isotonic, upper limit "
                                   f"{cell.max_volume_fraction:.3f}"))
        for stage, hist, steps in (("loading", loading, cells.loading), ("unloading", unloading, cells.unloading)):
            if hist is None:
                continue
            if hist.min_volume_fraction >= cell.min_volume_fraction and hist.max_volume_fraction <= cell.max_volume_fraction:
                continue
            last = steps[-1] if stage == "loading" else steps[0]
            target = last.solution if stage == "loading" else protocol.solution
            if not any(c.agent in agents for c in target.cryoprotectants):
                continue
            sug = cellmodel.suggest_steps(cell, model, target, last.temperature, stage=stage)
            if stage == "loading":
                report.suggestion = _suggestion_dict(sug)
            else:
                report.unloading_suggestion = _suggestion_dict(sug)
    elif histories:
        flags.append(Flag("missing-data", "no osmotic tolerance limits (cells.min_volume_fraction, "
                          "cells.max_volume_fraction): volume excursions are not judged", None))

    # cooling with ice outside: the Mazur model
    cooling = tradeoff = None
    liquidus = model.liquidus_temperature(sample_outside.osmolality)
    ramp = _freezing_ramp(protocol, liquidus)
    report.ice_forms_outside_c = _r(liquidus - CELSIUS_OFFSET, 3)
    if ramp is None:
        report.cooling_note = ("no slow freezing with ice outside in the schedule (no seed step, no ramp to -20 C "
                               "or colder before any plunge): the Mazur model does not apply")
    else:
        ramp_seg = next(g for g in segments(protocol.schedule) if g.step_index == ramp.index)
        rate = _sample_rate(context, liquidus, ramp_seg.t_start)
        report.cooling_rate_from = (f"sample's coldest point on schedule.steps[{ramp.index}], first 10 K below the "
                                    "liquidus (heat-transfer model; the latent heat of the sample's own ice left out)")
        if rate is None:
            rate = ramp.rate
            report.cooling_rate_from = f"schedule.steps[{ramp.index}].rate_c_per_min (bath program)"
        t_n = cell.nucleation_temperature
        end = max(ramp.target_temperature, MAZUR_LOWEST_END if t_n is None else min(MAZUR_LOWEST_END, t_n - 1.0))
        end = max(end, cellmodel.MAZUR_1963.ranges["temperature"].low)
        start = loading.end_state if loading is not None else None
        if end >= liquidus - 1.0:
            ramp = None  # the solution's liquidus lies at or below where the cooling ends
            report.cooling_note = (f"the solution's liquidus {liquidus - CELSIUS_OFFSET:.1f} C is within 1 K of the "
                                   f"end of the run ({end - CELSIUS_OFFSET:.1f} C): no water to lose to outside ice")
    if ramp is not None:
        try:
            cooling = cellmodel.cool_with_extracellular_ice(cell, model, protocol.solution, rate, end, start, agents)
            rates = np.array(TRADEOFF_RATES_C_PER_MIN) / 60.0
            tradeoff = cellmodel.supercooling_tradeoff(cell, model, protocol.solution, rates, end, start)
        except ModelRangeError as exc:
            cooling = tradeoff = None
            flags.append(Flag("refused", f"Mazur model not computed: {exc}", "mazur-1963"))
            report.cooling_note = f"the Mazur model does not apply here: {exc}"
        if cooling is not None:
            flags.extend(cooling.flags)
            report.cooling_applies = True
            report.cooling_note = (f"ice taken to form outside at the liquidus {liquidus - CELSIUS_OFFSET:.2f} C; "
                                   f"cooled at {rate * 60:.3g} C/min to {end - CELSIUS_OFFSET:.1f} C")
            report.cooling_rate_c_per_min = _r(rate * 60.0, 4)
            report.max_intracellular_supercooling_k = _r(cooling.max_supercooling, 3)
            report.intracellular_nucleation_c = None if t_n is None else _r(t_n - CELSIUS_OFFSET, 2)
            report.supercooling_at_nucleation_k = _r(cooling.supercooling_at_nucleation, 3)
            report.intracellular_ice = cooling.intracellular_ice
            report.min_volume_fraction_cooling = _r(float(np.min(cooling.relative_volume)))
            report.tradeoff = [
                {"cooling_rate_c_per_min": _r(b * 60.0, 4), "max_intracellular_supercooling_k": _r(mx, 3),
                 "supercooling_at_nucleation_k": _r(an, 3), "min_volume_fraction": _r(vm)}
                for b, mx, an, vm in zip(tradeoff.cooling_rate, tradeoff.max_supercooling,
                                         tradeoff.supercooling_at_nucleation, tradeoff.min_volume_fraction, strict=True)
            ]
            value = cooling.supercooling_at_nucleation
            detail = (f"at the intracellular nucleation temperature {t_n - CELSIUS_OFFSET:.0f} C" if value is not None
                      else "largest over the cooling (no nucleation temperature known for this cell type)")
            margins.append(MarginValue("intracellular_supercooling_k", "Intracellular supercooling during freezing",
                                       _r(cooling.max_supercooling if value is None else value, 3), "K",
                                       f"{detail}; Mazur model at {rate * 60:.3g} C/min"))

    report.flags = cellmodel.dedupe_flags(flags)
    series = [h for h in (loading, unloading) if h is not None]
    t_parts, v_parts, st_parts = [], [], []
    offset = 0.0
    for h in series:
        t_parts.append(h.time + offset)
        v_parts.append(h.relative_volume)
        st_parts.append(np.full(h.time.size, h.steps[0].stage if h.steps else ""))
        offset += float(h.time[-1]) if h.time.size else 0.0
    mol: dict[str, np.ndarray] = {}
    for a in agents:
        mol[a] = np.concatenate([h.intracellular_molality.get(a, np.zeros(h.time.size)) for h in series]) if series \
            else np.zeros(0)
    state = CellsState(
        parameters=cell,
        time=np.concatenate(t_parts) if t_parts else np.zeros(0),
        relative_volume=np.concatenate(v_parts) if v_parts else np.zeros(0),
        stage=np.concatenate(st_parts) if st_parts else np.zeros(0, dtype=str),
        intracellular_molality=mol,
        loading=loading, unloading=unloading, cooling=cooling, tradeoff=tradeoff,
    )
    cautions = ["cryoprotectant-toxicity"] if agents else []
    return SectionOutput("cells", report, margins, cautions, state)
