"""Assessment section ``thermal``: the schedule as the sample lives it.

The bath follows the schedule (``planner.schedule``); the sample lags it. This section picks the
surroundings' heat-transfer coefficient (the protocol's ``environment``, changed by plunge steps), the
model (lumped for Bi < 0.1, conduction otherwise), solves the sample's temperatures at the nominal h and at
both ends of the environment's range, and reports the lag under ramps, the time to come within 0.5 K of
each hold and the coldest and warmest points. The state carries the SI histories that the nucleation,
chamber and vitrification sections read.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from planner import heat_transfer as ht
from planner.errors import InputError
from planner.protocol import CELSIUS_OFFSET, Protocol, Sample
from planner.results import Flag, Result
from planner.schedule import Segment, bath_history, segments
from planner.sections import MarginValue, SectionOutput

HOLD_TOLERANCE = 0.5  # K: "every point within 0.5 K of the hold temperature"
LUMPED_BIOT_LIMIT = 0.1  # Bi (L = V/A) below which one temperature describes the sample [ref:incropera-dewitt]
CELLS = 16  # finite-volume cells along the shorter direction (grid error below 0.002 of the step)
MAX_OUTPUT_STEP = 60.0  # s, spacing of the reported history inside ramps


@dataclass
class ThermalReport(Result):
    """The ``thermal`` section of an assessment (keys are the JSON keys of the record).

    ``environment`` / ``h_w_per_m2_k`` / ``h_range_w_per_m2_k``: the surroundings at the start (plunge steps
    change them; all are listed in ``environments``). ``biot_number``: Bi = h (V/A) / k, the largest over
    the run. ``time_constant_min``: the lumped rho c V / (h A) at the start. ``max_lag_k``: the largest
    |sample - bath| over the sample during ramps; ``time_to_within_0p5k_min``: the slowest hold's time
    from its start until every point is within 0.5 K (``None`` when a hold is never reached; see
    ``holds``). Every ``..._range_...`` pair is [at the high end of the h range, at the low end]: the
    fast and the slow case. Temperatures in C, times in minutes. ``chamber_*`` (sealed rigid chambers
    whose wall material has thermal data): the chamber and its liquid as one lumped body - heat capacity,
    time constant C / (h A_outer) and the lag under each ramp before any seed step - a lower bound on how
    far the contents lag the bath (see :func:`chamber_lumped_lag`).
    """

    geometry: str = ""
    environment: str = ""
    environment_label: str = ""
    h_w_per_m2_k: float | None = None
    h_range_w_per_m2_k: list[float] | None = None
    biot_number: float | None = None
    time_constant_min: float | None = None
    max_lag_k: float | None = None
    max_lag_range_k: list[float] | None = None
    time_to_within_0p5k_min: float | None = None
    time_to_within_0p5k_range_min: list[float | None] | None = None
    coldest_point_min_c: float | None = None
    warmest_point_max_c: float | None = None
    property_temperature_c: float | None = None
    conductivity_w_per_m_k: float | None = None
    density_kg_per_m3: float | None = None
    specific_heat_j_per_kg_k: float | None = None
    environments: list[dict[str, Any]] = field(default_factory=list)
    ramps: list[dict[str, Any]] = field(default_factory=list)
    holds: list[dict[str, Any]] = field(default_factory=list)
    chamber_heat_capacity_j_per_k: float | None = None
    chamber_time_constant_min: float | None = None
    chamber_max_lag_k: float | None = None
    chamber_max_lag_range_k: list[float] | None = None
    curve: dict[str, list[float | None]] | None = None  # bath and coldest point vs time, for the record


@dataclass
class ThermalState:
    """What later sections read (SI: s, K, W/(m2 K)).

    ``time`` [s]; ``bath_temperature``, ``centre_temperature``, ``surface_temperature``,
    ``coldest_temperature_history``, ``warmest_temperature_history`` [K] at those times;
    ``coldest_temperature`` / ``warmest_temperature`` [K] over the whole history; ``history`` the full
    :class:`~planner.heat_transfer.ThermalHistory` at the nominal h (every point, for
    :func:`~planner.heat_transfer.cooling_rate_through`); ``bracket`` the same at the low and high ends
    of the environments' h ranges; ``frozen_from`` [s] the time of a seed step (after it the sample is
    meant to freeze and the liquid model no longer describes it), or ``None``.
    """

    time: np.ndarray
    bath_temperature: np.ndarray
    centre_temperature: np.ndarray
    surface_temperature: np.ndarray
    coldest_temperature_history: np.ndarray
    warmest_temperature_history: np.ndarray
    coldest_temperature: float
    warmest_temperature: float
    history: ht.ThermalHistory
    bracket: dict[str, ht.ThermalHistory]
    h: np.ndarray
    model: str
    frozen_from: float | None = None


@dataclass(frozen=True)
class _Environment:
    start: float  # s, from this time on
    name: str  # preset name, or "given"
    label: str
    h: float
    h_low: float
    h_high: float
    source: str
    step: int | None  # the plunge step that set it, None for the protocol's environment


def body_of(sample: Sample) -> ht.Body:
    """The conduction body of a protocol's sample (radius from the diameter, slab through its thickness)."""
    if sample.geometry == "sphere":
        return ht.Body("sphere", radius=_length(sample.diameter, "sample.diameter_mm") / 2.0)
    if sample.geometry == "cylinder":
        return ht.Body("cylinder", radius=_length(sample.diameter, "sample.diameter_mm") / 2.0,
                       height=_length(sample.height, "sample.height_mm"))
    if sample.geometry == "slab":
        return ht.Body("slab", thickness=_length(sample.thickness, "sample.thickness_mm"))
    raise InputError("sample.geometry", sample.geometry, "one of: " + ", ".join(ht.GEOMETRIES))


def _length(value: float | None, field_name: str) -> float:
    if value is None or not np.isfinite(value) or value <= 0:
        raise InputError(field_name, value, "a length above 0 mm", "needed for the heat-transfer model")
    return float(value)


def _environments(protocol: Protocol, segs: tuple[Segment, ...], flags: list[Flag]) -> list[_Environment]:
    env = protocol.environment
    if env.h is not None:
        h = ht.check_heat_transfer_coefficient(env.h, "environment.h_w_per_m2_k")
        first = _Environment(0.0, "given", "given by the protocol", h, h, h, "common-practice", None)
        flags.append(Flag(
            "indicative",
            f"h = {h:g} W/(m2 K) is given by the protocol without a range, so the lags and hold times below "
            "carry no uncertainty band from h",
            "common-practice",
        ))
    else:
        if env.preset is None or env.defaulted:
            preset = ht.default_environment()
            flags.append(Flag(
                "default-used",
                f"no environment given: {preset.label.lower()} (h = {preset.h_nominal:g} W/(m2 K), range "
                f"{preset.h_low:g}-{preset.h_high:g}) is assumed, the slowest common case, so the lag is not "
                "understated; name the surroundings under environment.heat_transfer",
                preset.source,
            ))
        else:
            preset = ht.environment_preset(env.preset, "environment.heat_transfer")
        first = _Environment(0.0, preset.name, preset.label, preset.h_nominal, preset.h_low, preset.h_high,
                             preset.source, None)
    out = [first]
    steps = {s.index: s for s in protocol.schedule.steps}
    for seg in segs:
        if seg.kind != "plunge":
            continue
        step = steps[seg.step_index]
        if step.h is not None:
            h = ht.check_heat_transfer_coefficient(step.h, f"{step.key_path}.h_w_per_m2_k")
            out.append(_Environment(seg.t_start, "given", "given for the plunge", h, h, h, "common-practice",
                                    step.index))
        elif step.heat_transfer is not None:
            p = ht.environment_preset(step.heat_transfer, f"{step.key_path}.heat_transfer")
            out.append(_Environment(seg.t_start, p.name, p.label, p.h_nominal, p.h_low, p.h_high, p.source,
                                    step.index))
        else:
            flags.append(Flag(
                "default-used",
                f"{step.key_path}: the plunge names no heat_transfer; the sample is taken to stay in the "
                f"surroundings it was in ({out[-1].label.lower()})",
                out[-1].source,
            ))
    return out


def _h_at_knots(knot_time: np.ndarray, envs: list[_Environment], which: str) -> np.ndarray:
    """The h in effect from each knot of the bath history on (a plunge's second knot carries the new h)."""
    starts = np.array([e.start for e in envs])
    values = np.array([getattr(e, which) for e in envs])
    idx = np.searchsorted(starts, knot_time, side="right") - 1
    # at a plunge time the first of the two knots is still the old surroundings (zero-length interval)
    return values[np.clip(idx, 0, len(envs) - 1)]


def _material(protocol: Protocol, flags: list[Flag]) -> ht.Material:
    """Liquid water at the coldest bath temperature (lowest k, highest c: the slowest response)."""
    coldest = protocol.schedule.coldest_temperature
    low, high = ht.WATER_TABLE.ranges["temperature"].low, ht.WATER_TABLE.ranges["temperature"].high
    material = ht.liquid_water(float(np.clip(coldest, low, high)), warn=False)
    if coldest < low:
        flags.append(Flag(
            "extrapolated",
            f"the schedule reaches {coldest - CELSIUS_OFFSET:.0f} C; the sample's thermal properties are held at "
            f"their {low - CELSIUS_OFFSET:.0f} C values (liquid water) below that, where the sample is glassy or "
            "frozen and conducts differently",
            ht.WATER_TABLE.source,
        ))
    if protocol.solution.cryoprotectants:
        flags.append(Flag(
            "indicative",
            "water's conductivity and heat capacity stand in for the cryoprotectant solution's (solutions "
            "conduct somewhat less heat, so the lag may be a little larger)",
            ht.WATER_TABLE.source,
        ))
    return material


def _chamber_flag(protocol: Protocol, flags: list[Flag]) -> None:
    """A sample inside a sealed rigid chamber: say that the chamber itself is not in the thermal model."""
    c = protocol.container
    if c.kind != "rigid":
        return
    parts = []
    if c.cavity_volume and c.cavity_volume > protocol.sample.volume * 1.001:
        parts.append(f"{(c.cavity_volume - protocol.sample.volume) * 1e6:.3g} mL of liquid around the sample")
    if c.inner_diameter and c.outer_diameter:
        parts.append(f"a {(c.outer_diameter - c.inner_diameter) / 2 * 1e3:.3g} mm thick wall")
    what = " and ".join(parts) if parts else "its wall"
    flags.append(Flag(
        "indicative",
        f"the sample is solved on its own with h at its surface; the rigid chamber ({what}) adds heat capacity "
        "and resistance between the bath and the sample that this model leaves out, so the lags and hold "
        "times shown are a lower bound: in a thick metal chamber the sample lags the bath more, and takes "
        "longer to reach each hold (chamber_* give the chamber and its liquid as one lumped body, itself a "
        "lower bound for the contents)",
        "incropera-dewitt",
    ))


def chamber_heat_capacity(protocol: Protocol, liquid: ht.Material) -> tuple[float, float] | None:
    """Heat capacity [J/K] of a rigid chamber with its liquid, and its outer surface [m2]; None if unknown.

    Wall: density x specific heat x wall volume of :func:`planner.wall.chamber_body`; contents: the
    cavity's liquid at the thermal section's water properties (trapped gas neglected).
    """
    from planner import wall

    c = protocol.container
    if c.kind != "rigid" or not (c.cavity_volume and c.inner_diameter and c.outer_diameter and c.material):
        return None
    mat = wall.material(c.material)
    if mat.density is None or mat.specific_heat is None:
        return None
    wall_volume, outer_area = wall.chamber_body(c.shape, c.inner_diameter / 2, c.outer_diameter / 2, c.cavity_volume)
    liquid_volume = c.cavity_volume - (c.trapped_gas_volume or 0.0)
    return mat.density * mat.specific_heat * wall_volume + liquid.volumetric_heat_capacity * liquid_volume, outer_area


def chamber_lumped_lag(rate: float, duration: float, time_constant: float) -> float:
    """Lag [K] of a lumped body behind a bath ramping at ``rate`` [K/s] for ``duration`` [s], starting level.

    Notes
    -----
    Lumped capacitance, dT/dt = (T_bath - T)/tau with T_bath = T0 - B t: the lag is
    B tau (1 - exp(-t/tau)), largest at the end of the ramp [ref:incropera-dewitt]. For a chamber the
    liquid inside lags the wall further (its own conduction), so this is a lower bound for the contents.
    """
    if time_constant <= 0 or duration <= 0:
        return 0.0
    return float(rate * time_constant * -math.expm1(-duration / time_constant))


def _model_for(body: ht.Body, material: ht.Material, hs: np.ndarray) -> tuple[str, float]:
    bi = float(np.max(ht.biot_number(hs, body.characteristic_length, material.conductivity)))
    return ("lumped" if bi < LUMPED_BIOT_LIMIT else "conduction"), bi


def _minutes(seconds: float | None, digits: int = 2) -> float | None:
    return None if seconds is None else round(seconds / 60.0, digits)


def _celsius(kelvin: float, digits: int = 3) -> float:
    return round(float(kelvin) - CELSIUS_OFFSET, digits)


def build(protocol: Protocol, context: dict[str, SectionOutput]) -> SectionOutput:
    """Build the ``thermal`` section (it always applies).

    Parameters
    ----------
    protocol : Protocol
        The validated protocol (sample geometry, environment, schedule; SI units).
    context : dict
        Sections built so far (not read here).

    Returns
    -------
    SectionOutput
        ``report`` :class:`ThermalReport`, margin ``thermal_lag_k`` (when the schedule has ramps),
        ``state`` :class:`ThermalState`.

    Notes
    -----
    The sample starts equilibrated at the schedule's start temperature. Thermal properties: liquid water
    at the coldest bath temperature of the schedule (within -30..40 C), the choice that gives the slowest
    response. Model: lumped when Bi = h (V/A) / k < 0.1 at the largest h of the run, else conduction
    [ref:incropera-dewitt].
    """
    flags: list[Flag] = []
    body = body_of(protocol.sample)
    segs = segments(protocol.schedule)
    bath = bath_history(protocol.schedule)
    envs = _environments(protocol, segs, flags)
    material = _material(protocol, flags)
    flags.extend(material.flags)
    _chamber_flag(protocol, flags)

    knots = [0.0] + [s.t_end for s in segs]
    out_t = ht.refined_times(np.concatenate((knots, [bath.duration])), MAX_OUTPUT_STEP)
    runs: dict[str, ht.ThermalHistory] = {}
    biots: dict[str, float] = {}
    for which, attr in (("nominal", "h"), ("low", "h_low"), ("high", "h_high")):
        h_knots = _h_at_knots(bath.time, envs, attr)
        model, bi = _model_for(body, material, np.unique(h_knots))
        biots[which] = bi
        runs[which] = ht.solve(body, material, bath.time, bath.temperature, h_knots, output_time=out_t,
                               model=model, cells=CELLS)
        ht.check_output_within_model(runs[which])
    hist = runs["nominal"]

    seeds = [s for s in segs if s.kind == "seed"]
    frozen_from = seeds[0].t_start if seeds else None
    if frozen_from is not None:
        flags.append(Flag(
            "refused",
            f"ice is seeded at {frozen_from / 60:.1f} min (schedule.steps[{seeds[0].step_index}]); after that the "
            "sample freezes and releases latent heat, which this liquid model leaves out: lags and hold times "
            "after the seed are not reported",
            "incropera-dewitt",
        ))

    def after_seed(t: float) -> bool:
        return frozen_from is not None and t >= frozen_from

    ramps = []
    for seg in segs:
        if seg.kind != "ramp":
            continue
        rate = abs(seg.temperature_end - seg.temperature_start) / (seg.t_end - seg.t_start)
        entry: dict[str, Any] = {
            "step": seg.step_index,
            "from_c": _celsius(seg.temperature_start, 2),
            "to_c": _celsius(seg.temperature_end, 2),
            "rate_c_per_min": round(rate * 60.0, 4),
        }
        if after_seed(seg.t_start):
            entry["max_lag_k"] = None
        else:
            entry["max_lag_k"] = round(ht.max_lag(hist, seg.t_start, seg.t_end), 3)
            entry["max_lag_range_k"] = [round(ht.max_lag(runs[w], seg.t_start, seg.t_end), 3)
                                        for w in ("high", "low")]
        ramps.append(entry)

    holds = []
    for seg in segs:
        if seg.kind != "hold":
            continue
        entry = {"step": seg.step_index, "hold_c": _celsius(seg.temperature_start, 2),
                 "duration_min": round((seg.t_end - seg.t_start) / 60.0, 2)}
        if after_seed(seg.t_start):
            entry.update(time_to_within_0p5k_min=None, reached=None)
            holds.append(entry)
            continue
        times = {w: ht.time_to_within(runs[w], seg.t_start, seg.t_end, seg.temperature_start, HOLD_TOLERANCE)
                 for w in runs}
        entry["time_to_within_0p5k_min"] = _minutes(times["nominal"])
        entry["time_to_within_0p5k_range_min"] = [_minutes(times["high"]), _minutes(times["low"])]
        entry["reached"] = times["nominal"] is not None
        if times["nominal"] is None:
            dev = float(np.max(np.abs(hist.field_at([seg.t_end])[0] - seg.temperature_start)))
            entry["deviation_at_end_k"] = round(dev, 3)
            flags.append(Flag(
                "missing-data",
                f"schedule.steps[{seg.step_index}]: the sample is not within {HOLD_TOLERANCE} K of the "
                f"{_celsius(seg.temperature_start, 1)} C hold by its end ({dev:.2f} K off at the end)",
                "incropera-dewitt",
            ))
        holds.append(entry)

    judged_ramps = [r for r in ramps if r["max_lag_k"] is not None]
    max_lag = max((r["max_lag_k"] for r in judged_ramps), default=None)
    max_lag_range = None
    if judged_ramps:
        max_lag_range = [max(r["max_lag_range_k"][0] for r in judged_ramps),
                         max(r["max_lag_range_k"][1] for r in judged_ramps)]
    judged_holds = [h for h in holds if h.get("reached") is not None]
    worst_hold = None
    if judged_holds:
        # the slowest hold; a hold never reached counts as the worst
        unreached = [h for h in judged_holds if not h["reached"]]
        worst_hold = unreached[0] if unreached else max(judged_holds, key=lambda h: h["time_to_within_0p5k_min"])

    first = envs[0]
    tau = float(ht.lumped_time_constant(material.volumetric_heat_capacity, body.volume, first.h, body.area))

    chamber = chamber_heat_capacity(protocol, material)
    chamber_tau = chamber_lag = chamber_lag_range = None
    if chamber is not None:
        capacity, outer_area = chamber
        chamber_tau = capacity / (first.h * outer_area)
        lags = {"nominal": [], "high": [], "low": []}
        for seg in segs:
            if seg.kind != "ramp" or after_seed(seg.t_start):
                continue
            duration = seg.t_end - seg.t_start
            rate = abs(seg.temperature_end - seg.temperature_start) / duration
            for which, h in (("nominal", first.h), ("high", first.h_high), ("low", first.h_low)):
                lags[which].append(chamber_lumped_lag(rate, duration, capacity / (h * outer_area)))
        if lags["nominal"]:
            chamber_lag = round(max(lags["nominal"]), 3)
            chamber_lag_range = [round(max(lags["high"]), 3), round(max(lags["low"]), 3)]
    report = ThermalReport(
        model=hist.model,
        source="incropera-dewitt",
        parameters={"cells": CELLS if hist.model == "conduction" else 1, "hold_tolerance_k": HOLD_TOLERANCE,
                    "lumped_biot_limit": LUMPED_BIOT_LIMIT,
                    "initial_state": "equilibrated at the schedule's start temperature"},
        flags=flags,
        geometry=body.geometry,
        environment=first.name,
        environment_label=first.label,
        h_w_per_m2_k=first.h,
        h_range_w_per_m2_k=[first.h_low, first.h_high],
        biot_number=round(biots["nominal"], 4),
        time_constant_min=round(tau / 60.0, 2),
        max_lag_k=max_lag,
        max_lag_range_k=max_lag_range,
        time_to_within_0p5k_min=None if worst_hold is None else worst_hold["time_to_within_0p5k_min"],
        time_to_within_0p5k_range_min=None if worst_hold is None else worst_hold["time_to_within_0p5k_range_min"],
        coldest_point_min_c=_celsius(hist.coldest_temperature.min()),
        warmest_point_max_c=_celsius(hist.warmest_temperature.max()),
        property_temperature_c=_celsius(material.temperature, 2),
        conductivity_w_per_m_k=round(material.conductivity, 4),
        density_kg_per_m3=round(material.density, 2),
        specific_heat_j_per_kg_k=round(material.specific_heat, 1),
        environments=[
            {"from_min": round(e.start / 60.0, 3), "step": e.step, "environment": e.name, "label": e.label,
             "h_w_per_m2_k": e.h, "h_range_w_per_m2_k": [e.h_low, e.h_high], "source": e.source,
             "biot_number": round(float(ht.biot_number(e.h, body.characteristic_length, material.conductivity)), 4)}
            for e in envs
        ],
        ramps=ramps,
        holds=holds,
        chamber_heat_capacity_j_per_k=None if chamber is None else round(chamber[0], 1),
        chamber_time_constant_min=None if chamber_tau is None else round(chamber_tau / 60.0, 2),
        chamber_max_lag_k=chamber_lag,
        chamber_max_lag_range_k=chamber_lag_range,
    )
    margins = []
    if max_lag is not None:
        detail = (f"largest |sample - bath| over the sample during ramps, {first.label.lower()} "
                  f"h = {first.h:g} W/(m2 K); {max_lag_range[0]:.2f}-{max_lag_range[1]:.2f} K over the h range")
        value = max_lag
        if chamber_lag is not None and chamber_lag > max_lag:
            value = chamber_lag
            detail = (f"the rigid chamber with its liquid, as one lumped body (time constant {chamber_tau / 60:.3g} "
                      f"min at h = {first.h:g} W/(m2 K)), lags the bath by {chamber_lag:.2f} K under the ramps "
                      f"({chamber_lag_range[0]:.2f}-{chamber_lag_range[1]:.2f} K over the h range), more than the "
                      f"sample alone ({max_lag:.2f} K); the contents lag further")
        margins.append(MarginValue("thermal_lag_k", "Sample lag behind the bath under ramps", value, "K", detail))
    state = ThermalState(
        time=hist.time,
        bath_temperature=hist.bath_temperature,
        centre_temperature=hist.centre_temperature,
        surface_temperature=hist.surface_temperature,
        coldest_temperature_history=hist.coldest_temperature,
        warmest_temperature_history=hist.warmest_temperature,
        coldest_temperature=float(hist.coldest_temperature.min()),
        warmest_temperature=float(hist.warmest_temperature.max()),
        history=hist,
        bracket={"low": runs["low"], "high": runs["high"]},
        h=hist.h,
        model=hist.model,
        frozen_from=frozen_from,
    )
    report.curve = _record_curve(state)
    return SectionOutput("thermal", report, margins, [], state)


CURVE_POINTS = 80  # points of the temperature curve carried in the record (the app draws every point)


def _record_curve(state: ThermalState) -> dict[str, list[float | None]]:
    """Bath and coldest-point temperature against time, thinned for the record; cut where ice is seeded,
    since this liquid model does not describe the sample after that."""
    t = np.asarray(state.time, dtype=float)
    end = t.size if state.frozen_from is None else int(np.searchsorted(t, state.frozen_from, side="right"))
    idx = np.unique(np.linspace(0, max(end - 1, 0), min(CURVE_POINTS, max(end, 1))).round().astype(int))

    def celsius(a):
        return [round(float(x) - CELSIUS_OFFSET, 3) for x in np.asarray(a, dtype=float)[idx]]

    return {"time_h": [round(float(x) / 3600.0, 4) for x in t[idx]],
            "bath_c": celsius(state.bath_temperature),
            "coldest_point_c": celsius(state.coldest_temperature_history)}
