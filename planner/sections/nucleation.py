"""Assessment section "nucleation": the chance that this sample, in this volume, freezes during this schedule.

Reads the liquidus from the "solution" section (when built) and the sample's coldest-point history from the
"thermal" section (when built; otherwise the bath schedule, flagged ``default-used``). The freeze
probability covers the history up to a seed step (ice started on purpose) and up to the first time the
sample passes :data:`planner.nucleation.MAX_SUPERCOOLING` below its liquidus (deeper cooling is judged by the
vitrification section's critical rates). Critical sizes are evaluated at the coldest temperature the
sample reaches, measured from the solution's own liquidus.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from planner import nucleation as nuc
from planner.errors import InputError, PlannerError
from planner.protocol import Protocol
from planner.results import Flag, Result
from planner.schedule import bath_history, segments
from planner.sections import MarginValue, SectionOutput

NAME = "nucleation"


@dataclass
class NucleationReport(Result):
    """The section's JSON keys (units in their names); probabilities are fractions (0 to 1)."""

    nucleation_model: str = ""
    nucleation_kind: str = ""
    temperature_history: str = ""
    covers: str = ""
    liquidus_c: float | None = None
    coldest_temperature_c: float | None = None
    max_supercooling_k: float | None = None
    interfacial_energy_model: str = ""
    critical_radius_nm: float | None = None
    critical_radius_interval_nm: list[float] | None = None
    critical_radius_nm_by_interfacial_model: dict[str, float] | None = None
    critical_diameter_nm: float | None = None
    critical_molecules: float | None = None
    barrier_kt: float | None = None
    critical_confinement_length_nm: float | None = None
    confinement_note: str = ""
    freeze_probability: float | None = None
    freeze_probability_interval: list[float] | None = None
    freeze_probability_is_upper_bound: bool = False
    homogeneous_probability: float | None = None
    heterogeneous_probability: float | None = None
    target_probability: float = 0.01
    what_it_takes_basis: str = ""
    main_hold_c: float | None = None
    longest_hold_h_for_target: float | None = None
    largest_volume_ml_for_target: float | None = None
    coldest_hold_c_for_target: float | None = None
    what_it_takes_notes: list[str] = field(default_factory=list)
    summary: str = ""
    draws: int = nuc.DEFAULT_DRAWS
    seed: int = nuc.DEFAULT_SEED


@dataclass
class NucleationState:
    """SI objects for later sections and the app: the result, the model and the history used."""

    result: nuc.FreezeProbability
    model: nuc.NucleationModel
    liquidus: float  # K
    time: object  # s, numpy array
    temperature: object  # K, numpy array
    volume: float  # m3
    interface_area: float  # m2
    wall_area: float = 0.0  # m2


def _liquidus(protocol: Protocol, context: dict, flags: list[Flag]) -> float:
    solution = context.get("solution")
    if solution is not None and getattr(getattr(solution.state, "properties", None), "freezing_point", None) is not None:
        return float(solution.state.properties.freezing_point)
    sol = protocol.solution
    if sol.carrier == "water" and not sol.cryoprotectants:
        return nuc.PURE_WATER_LIQUIDUS
    flags.append(Flag(
        "missing-data",
        "the solution's liquidus was not available; the pure-water melting point is used, which overstates "
        "the supercooling and so the freeze probability",
        "iapws-r14-08",
    ))
    return nuc.PURE_WATER_LIQUIDUS


def _history(protocol: Protocol, context: dict, flags: list[Flag]):
    thermal = context.get("thermal")
    state = getattr(thermal, "state", None) if thermal is not None else None
    if state is not None and getattr(state, "coldest_temperature_history", None) is not None:
        return state.time, state.coldest_temperature_history, "sample's coldest point (heat-transfer model)"
    flags.append(Flag(
        "default-used",
        "no heat-transfer result: the bath schedule is used as the sample's temperature (on cooling the bath "
        "is colder than the sample, so this overstates the supercooling)",
        "common-practice",
    ))
    history = bath_history(protocol.schedule)
    return history.time, history.temperature, "bath schedule"


def _model(protocol: Protocol, flags: list[Flag]) -> nuc.NucleationModel:
    n = protocol.nucleation
    if n.calibration is not None:
        from planner.calibration import calibration_model

        try:
            model, cal = calibration_model(n.calibration)
        except InputError:
            raise
        except PlannerError as exc:
            raise InputError("nucleation.calibration", str(n.calibration), "a usable assay or calibration", str(exc)) from None
        flags.extend(cal.flags)
        return model
    if n.preset is not None:
        return nuc.preset(n.preset)
    model = nuc.default_preset(protocol.container.interface)
    flags.append(Flag(
        "default-used",
        f"no nucleation key: the documented default for a liquid-air interface that is {protocol.container.interface}, "
        f"{model.name} ({model.label}), is used; a calibration of your own medium would replace it",
        model.source,
    ))
    return model


def interface_area(protocol: Protocol) -> float:
    """Free liquid-air surface [m2]: the top disc of a cylinder, one face of a slab, a whole sphere (a drop)."""
    s = protocol.sample
    if s.geometry == "cylinder" and s.diameter:
        return math.pi * s.diameter**2 / 4
    if s.geometry == "slab" and s.thickness:
        return s.volume / s.thickness
    return s.surface_area


def liquid_at_risk(protocol: Protocol) -> tuple[float, float, float, str]:
    """The liquid in which ice can nucleate: volume [m3], liquid-gas interface [m2], wetted wall [m2], basis.

    An open container: the sample itself (its free surface from :func:`interface_area` when exposed, its
    other faces wetted). A sealed rigid chamber is filled with the solution, and ice nucleating anywhere
    in it pressurises the chamber: the whole cavity's liquid counts (cavity less trapped gas), its wall is
    the bore and the end faces (a cylinder of the bore diameter) or the sphere, and trapped gas meets the
    liquid over at least the larger of the bore's cross-section and a bubble's surface.
    """
    c = protocol.container
    if c.kind == "rigid" and c.cavity_volume:
        gas = c.trapped_gas_volume or 0.0
        liquid = c.cavity_volume - gas
        bubble = math.pi ** (1 / 3) * (6 * gas) ** (2 / 3) if gas > 0 else 0.0
        if c.shape == "sphere":
            d = c.inner_diameter or (6 * c.cavity_volume / math.pi) ** (1 / 3)
            wetted = math.pi * d**2
            free = bubble
        else:
            d = c.inner_diameter or protocol.sample.diameter or (4 * c.cavity_volume / math.pi) ** (1 / 3)
            length = c.cavity_volume / (math.pi * d**2 / 4)
            wetted = math.pi * d * length + math.pi * d**2 / 2
            free = max(bubble, math.pi * d**2 / 4) if gas > 0 else 0.0
        return liquid, free, max(wetted - free, 0.0), "the chamber's whole cavity of liquid (sealed rigid chamber)"
    s = protocol.sample
    free = interface_area(protocol) if c.interface == "exposed" else 0.0
    return s.volume, free, max(s.surface_area - free, 0.0), "the sample"


def _seed_time(protocol: Protocol) -> float | None:
    for seg in segments(protocol.schedule):
        if seg.kind == "seed":
            return seg.t_start
    return None


def _round(x: float | None, digits: int = 4) -> float | None:
    if x is None or not math.isfinite(x):
        return None
    if x == 0:
        return 0.0
    return float(f"{x:.{digits}g}")


def build(protocol: Protocol, context: dict[str, SectionOutput]) -> SectionOutput:
    """Build the nucleation section (see the module docstring)."""
    flags: list[Flag] = []
    liquidus = _liquidus(protocol, context, flags)
    time, temperature, history_word = _history(protocol, context, flags)
    model = _model(protocol, flags)
    interfacial = nuc.DEFAULT_INTERFACIAL
    volume, free, wetted, basis = liquid_at_risk(protocol)
    area = free if model.interface is not None else 0.0
    wall = wetted if model.wall is not None else 0.0

    seed_at = _seed_time(protocol)
    coldest_allowed = liquidus - nuc.MAX_SUPERCOOLING
    t_cut, y_cut, reason = nuc.truncate_history(time, temperature, until_time=seed_at, coldest=coldest_allowed)
    covers = "the whole schedule"
    if seed_at is not None and reason in ("until-time", "coldest"):
        covers = "the schedule up to the seed step (ice is started on purpose there)"
    if reason in ("coldest", "starts-colder"):
        covers = (f"the schedule until the sample first reaches {coldest_allowed - nuc.CELSIUS:.1f} C "
                  f"({nuc.MAX_SUPERCOOLING:g} K below its liquidus)")
        flags.append(Flag(
            "refused",
            f"below {coldest_allowed - nuc.CELSIUS:.1f} C the freeze probability is not computed by this model "
            "(deep cooling is judged by the critical cooling and warming rates); the probability given covers "
            "only the time before",
            "koop-2000",
        ))

    result = nuc.freeze_probability(t_cut, y_cut, volume, model, liquidus, area, interfacial, wall_area=wall)
    flags.extend(result.flags)

    # critical sizes at the coldest temperature reached
    import numpy as np

    # the coldest temperature of the part of the history the probability covers (before a seed step)
    coldest = float(np.min(y_cut))
    report = NucleationReport(
        model=f"{model.label}; homogeneous: {'Koop-Murray 2016' if nuc.is_pure_water(liquidus) else 'Koop et al. 2000'}",
        source=model.source,
        parameters={"liquidus_k": liquidus, "volume_m3": volume, "volume_basis": basis,
                    "interface_area_m2": area, "wall_area_m2": wall,
                    "nucleation_preset_or_file": model.name, "interval": "5th-95th percentile of the draws"},
        nucleation_model=model.name, nucleation_kind=model.kind, temperature_history=history_word, covers=covers,
        liquidus_c=_round(liquidus - nuc.CELSIUS, 5), coldest_temperature_c=_round(coldest - nuc.CELSIUS, 5),
        max_supercooling_k=_round(max(0.0, liquidus - coldest), 4), interfacial_energy_model=interfacial.name,
        target_probability=protocol.policy.target_freeze_probability, draws=result.draws, seed=result.seed,
    )
    if coldest >= liquidus:
        report.confinement_note = "the sample never goes below its liquidus: no ice can nucleate"
    elif coldest < 230.0:
        flags.append(Flag("refused", "critical nucleus sizes are not computed below 230 K (-43.15 C): the "
                          "liquid-water equation of state does not reach there", "iapws-g12-15"))
    else:
        flags.extend(nuc.driving_force_flags(coldest))
        nucleus = nuc.critical_nucleus(coldest, liquidus, interfacial)
        spread = 1.645 * interfacial.relative_sd
        report.critical_radius_nm = _round(nucleus.radius * 1e9)
        report.critical_radius_interval_nm = [_round(nucleus.radius * 1e9 * (1 - spread)),
                                              _round(nucleus.radius * 1e9 * (1 + spread))]
        report.critical_radius_nm_by_interfacial_model = {
            m.name: _round(float(nuc.critical_nucleus(coldest, liquidus, m).radius) * 1e9)
            for m in nuc.INTERFACIAL_MODELS.values()
        }
        report.critical_diameter_nm = _round(nucleus.diameter * 1e9)
        report.critical_molecules = _round(nucleus.molecules, 3)
        report.barrier_kt = _round(nucleus.barrier_kt, 4)
        length = float(nuc.critical_confinement_length(coldest, liquidus, interfacial))
        report.critical_confinement_length_nm = _round(length * 1e9)
        cavity = protocol.container.cavity_volume or volume
        edge = cavity ** (1 / 3)
        if protocol.container.kind == "rigid":
            ratio = edge / length
            report.confinement_note = (
                f"A cube of the critical confinement volume has an edge of {length * 1e9:.3g} nm at the coldest "
                f"point; this chamber's cavity (a cube of {edge * 1e3:.3g} mm edge) is about 10^{math.log10(ratio):.0f} "
                "times larger, so confinement gives it no protection from freezing."
            )
        else:
            report.confinement_note = (
                f"Not a sealed rigid chamber: confinement does not apply (for reference, the critical edge is "
                f"{length * 1e9:.3g} nm at the coldest point)."
            )

    report.freeze_probability = _round(result.probability)
    report.freeze_probability_interval = [_round(result.interval[0]), _round(result.interval[1])]
    report.freeze_probability_is_upper_bound = result.upper_bound_only
    report.homogeneous_probability = _round(result.homogeneous_probability)
    report.heterogeneous_probability = _round(result.heterogeneous_probability)

    if coldest < liquidus:
        answers = nuc.what_it_takes(t_cut, y_cut, volume, model, protocol.policy.target_freeze_probability,
                                    liquidus, area, interfacial, wall_area=wall)
        report.what_it_takes_basis = "upper end of the 90 % interval (" + answers.basis + ")"
        report.main_hold_c = _round(None if answers.hold_temperature is None else answers.hold_temperature - nuc.CELSIUS, 5)
        report.longest_hold_h_for_target = _round(None if answers.longest_hold is None else answers.longest_hold / 3600)
        report.largest_volume_ml_for_target = _round(None if answers.largest_volume is None else answers.largest_volume * 1e6)
        report.coldest_hold_c_for_target = _round(
            None if answers.coldest_hold_temperature is None else answers.coldest_hold_temperature - nuc.CELSIUS, 4)
        report.what_it_takes_notes = list(answers.notes)
    report.summary = _summary(report, protocol)
    report.flags = nuc._dedupe(flags)

    margins = [
        MarginValue("freeze_probability", "Chance the sample freezes during the schedule", report.freeze_probability,
                    "1", f"central estimate, {model.name}; covers {covers}"),
        MarginValue("freeze_probability_upper", "Upper end of the 90 % interval of the freeze probability",
                    report.freeze_probability_interval[1], "1", f"{model.name}; covers {covers}"),
    ]
    state = NucleationState(result, model, liquidus, t_cut, y_cut, volume, area, wall)
    return SectionOutput(NAME, report, margins, [], state)


def _percent(p: float | None) -> str:
    if p is None:
        return "n/a"
    if p < 1e-4:
        return "below 0.01 %"
    if p > 0.999:
        return "above 99.9 %"
    return f"{100 * p:.3g} %" if p >= 0.1 else f"{100 * p:.2g} %"


def _summary(r: NucleationReport, protocol: Protocol) -> str:
    lo, hi = r.freeze_probability_interval or [None, None]
    words = "at most" if r.freeze_probability_is_upper_bound else "about"
    if not r.freeze_probability_is_upper_bound and (r.freeze_probability or 0.0) < 1e-4:
        words = ""
    text = (f"With {r.parameters['volume_m3'] * 1e6:.3g} mL down to {r.coldest_temperature_c:.2f} C, the chance of ice "
            f"is {(words + ' ') if words else ''}{_percent(r.freeze_probability)} (90 % interval {_percent(lo)} to {_percent(hi)}), "
            f"using {r.nucleation_model}; this is a planning estimate, not a guarantee.")
    if r.longest_hold_h_for_target is not None and r.main_hold_c is not None:
        text += (f" To keep the upper end at or below {_percent(r.target_probability)}, keep the sample at most "
                 f"{r.longest_hold_h_for_target:.3g} h at {r.main_hold_c:.2f} C (once it has caught up with the bath).")
    return text
