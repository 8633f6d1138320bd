"""Assessment section ``vitrification``: are the cooling and warming the sample reaches fast enough?

When a protocol vitrifies
-------------------------
A protocol is taken to vitrify when all of these hold (:func:`preservation_mode`):

1. it has no ``seed_ice`` step (seeding means ice is wanted: the ``freezing`` section applies);
2. its coldest bath temperature is below the solution's glass transition T_g (Gordon-Taylor, from the
   ``solution`` section); where T_g cannot be computed, below -130 C, colder than the glass transition of
   the solutions used for vitrification (about -120 +/- 10 C, [ref:wowk-2010]);
3. and the cooling is meant to outrun ice: the user entered a critical rate for the solution, or the
   schedule plunges the sample into the cold, or the programmed ramp into the cold is at least the
   published critical cooling rate of the solution.

A protocol with no seed step that goes more than 40 K below its liquidus without meeting (3) freezes
unseeded (the ``freezing`` section says so); one that stays above that is a supercooled hold (judged by
the ``nucleation`` section).

What it reports
---------------
The glass transition; the critical cooling and warming rates (entered by the user for their own cocktail,
or from the published binary data of ``planner/data/critical_rates.yaml``, with a flag saying which); the
mean rates the slowest point of the sample reaches through the band from the liquidus down to T_g on
cooling and back up on warming, read from the ``thermal`` section's own history with
:func:`planner.heat_transfer.cooling_rate_through` (one source of truth); the margins achieved/critical;
and how far storage sits below T_g. Cautions: ``ln2-handling`` when the schedule uses liquid nitrogen,
``vitrified-fracture`` for vitrified samples larger than 10 uL.

:func:`check_protocol` holds the physics checks of a vitrification or freezing schedule (seeding above
the liquidus, storage with no cooling into it, critical rates for a solution that names no agent); both
this section and ``freezing`` run it, and the protocol loader may call it too.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from planner import vitrification as vit
from planner.errors import InputError
from planner.protocol import CELSIUS_OFFSET, Protocol
from planner.results import Flag, Result
from planner.schedule import segments
from planner.sections import MarginValue, SectionOutput

NAME = "vitrification"

#: Fallback glass transition test when T_g cannot be computed [K] (-130 C; [ref:wowk-2010]).
FALLBACK_GLASS_TRANSITION = 143.15
#: Depth below the liquidus past which an unseeded, unvitrified sample is taken to freeze [K]: the
#: nucleation model's own limit (planner.nucleation.MAX_SUPERCOOLING) [ref:koop-2000].
UNSEEDED_FREEZE_DEPTH = 40.0
#: Largest gap between the seed temperature and the bath temperature at the seed step [K].
SEED_TOLERANCE = 0.5
#: Samples above this volume get the fracture caution when vitrified [m3] (10 uL: drops on a film or a
#: loop are left out; straws, vials and tissue are not). Common practice, no source.
FRACTURE_CAUTION_VOLUME = 1e-8


@dataclass
class VitrificationReport(Result):
    """The ``vitrification`` section of an assessment (keys are the JSON keys of the record)."""

    decided_by: str = ""
    glass_transition_c: float | None = None
    liquidus_c: float | None = None
    critical_rates_from: str = ""  # entered | published | none
    critical_cooling_rate_c_per_min: float | None = None
    critical_cooling_rate_bound: str = ""  # entered | interpolated | at-most | refused | missing
    critical_warming_rate_c_per_min: float | None = None
    critical_warming_rate_bound: str = ""
    band_upper_c: float | None = None
    band_lower_c: float | None = None
    achieved_cooling_rate_c_per_min: float | None = None
    achieved_warming_rate_c_per_min: float | None = None
    achieved_cooling_rate_range_c_per_min: list[float | None] | None = None  # low h, high h
    achieved_warming_rate_range_c_per_min: list[float | None] | None = None
    cooling_margin: float | None = None
    warming_margin: float | None = None
    cooling_margin_range: list[float | None] | None = None
    warming_margin_range: list[float | None] | None = None
    storage_temperature_c: float | None = None
    storage_below_glass_transition_k: float | None = None
    rate_sources: list[str] = field(default_factory=list)


@dataclass
class VitrificationState:
    """SI values and chart-ready series: time [s], temperatures [K], rates [K/s]."""

    time: np.ndarray
    bath_temperature: np.ndarray
    centre_temperature: np.ndarray
    surface_temperature: np.ndarray
    glass_transition: float | None
    liquidus: float
    critical_cooling_rate: float | None
    critical_warming_rate: float | None
    achieved_cooling_rate: float | None
    achieved_warming_rate: float | None
    band_rate: Any = None  # planner.heat_transfer.BandRate


# ------------------------------------------------------------------------------------------- helpers


def solution_state(protocol: Protocol, context: dict[str, SectionOutput]):
    """(composition, properties) of the solution: from the ``solution`` section, else computed here."""
    sol = context.get("solution")
    if sol is not None and getattr(sol.state, "properties", None) is not None:
        return sol.state.composition, sol.state.properties
    from planner.solution import composition, solution_properties

    given = protocol.solution.cryoprotectants
    comp = composition(protocol.solution.carrier, [(c.agent, c.unit, c.value) for c in given], "solution")
    return comp, solution_properties(comp)


def thermal_history(context: dict[str, SectionOutput]):
    """The ``thermal`` section's :class:`planner.heat_transfer.ThermalHistory`, or None when not built.

    Accepts the history as the section's state itself or as its ``history`` attribute.
    """
    from planner.heat_transfer import ThermalHistory

    thermal = context.get("thermal")
    if thermal is None:
        return None
    state = thermal.state
    if isinstance(state, ThermalHistory):
        return state
    for name in ("history", "nominal", "thermal_history"):
        candidate = getattr(state, name, None)
        if isinstance(candidate, ThermalHistory):
            return candidate
    return None


def _step_key(protocol: Protocol, index: int, default: str) -> str:
    """The key a step was written with (``hold_h`` or ``hold_min``...), from the document as entered."""
    try:
        item = protocol.entered["schedule"]["steps"][index]
        keys = [k for k in item if k in ("ramp_to_c", "hold_h", "hold_min", "plunge_to_c", "seed_ice")]
        return keys[0] if keys else default
    except (KeyError, IndexError, TypeError):
        return default


def _c(kelvin: float | None, digits: int = 2) -> float | None:
    if kelvin is None or not math.isfinite(kelvin):
        return None
    return round(kelvin - CELSIUS_OFFSET, digits)


def _sig(x: float | None, digits: int = 4) -> float | None:
    if x is None or not math.isfinite(x):
        return None
    return 0.0 if x == 0 else float(f"{x:.{digits}g}")


def check_protocol(protocol: Protocol, liquidus: float | None = None, glass_transition: float | None = None) -> None:
    """Physics checks of a freezing or vitrification schedule; raises :class:`InputError` naming the key.

    Parameters
    ----------
    protocol : Protocol
        A protocol the loader has validated.
    liquidus, glass_transition : float, optional
        The solution's liquidus and glass transition [K]; computed from the solution when not given.

    Raises
    ------
    InputError
        ``schedule.steps[i].seed_ice.at_c`` when ice is seeded at or above the liquidus (it cannot grow
        there), when the schedule has not brought the bath to the seed temperature (within 0.5 K), or for
        a second seed step; ``schedule.steps[i].hold_h`` (or ``hold_min``) for a storage hold below the
        liquidus that no cooling leads into (the schedule starts below the liquidus) in a protocol that
        freezes or vitrifies;
        ``solution.critical_cooling_rate_c_per_min`` / ``..._warming_...`` for a rate given for a solution
        that names no cryoprotectant, or a rate outside 1e-3 to 1e11 C/min.
    """
    sol = protocol.solution
    for key, rate in (("critical_cooling_rate_c_per_min", sol.critical_cooling_rate),
                      ("critical_warming_rate_c_per_min", sol.critical_warming_rate)):
        if rate is None:
            continue
        if not sol.cryoprotectants:
            raise InputError(
                f"solution.{key}", round(rate * vit.PER_MINUTE, 6),
                "a rate only for a solution that lists the cryoprotectants it was measured for",
                "solution.cryoprotectants is empty: the planner cannot tell which solution this rate belongs to",
            )
        vit.check_entered_rate(f"solution.{key}", rate)
    if liquidus is None or glass_transition is None:
        props = solution_state(protocol, {})[1]
        liquidus = float(props.freezing_point) if liquidus is None else liquidus
        glass_transition = props.glass_transition if glass_transition is None else glass_transition
    # storage is judged only where ice is wanted or vitrification is meant; a supercooled hold is not ours
    mode, _ = preservation_mode(protocol, liquidus, glass_transition)
    seeds = 0
    start = protocol.schedule.start_temperature
    for seg in segments(protocol.schedule):
        step = protocol.schedule.steps[seg.step_index]
        if seg.kind == "seed":
            at = f"{step.key_path}.seed_ice.at_c"
            seed_c = round(step.target_temperature - CELSIUS_OFFSET, 4)
            seeds += 1
            if seeds > 1:
                raise InputError(at, seed_c, "one seed_ice step per schedule",
                                 "ice was already started by an earlier seed step")
            if step.target_temperature >= liquidus:
                raise InputError(at, seed_c, f"below the solution's liquidus, {liquidus - CELSIUS_OFFSET:.2f} C",
                                 "ice cannot be started where the solution is above its freezing point")
            if abs(seg.temperature_start - step.target_temperature) > SEED_TOLERANCE:
                raise InputError(
                    at, seed_c,
                    f"the temperature the schedule has reached at this step, {seg.temperature_start - CELSIUS_OFFSET:g} C "
                    f"(within {SEED_TOLERANCE:g} K)",
                    "ramp (and hold) to the seed temperature first",
                )
        elif mode is not None and seg.kind == "hold" and seg.temperature_start < liquidus and start < liquidus:
            key = _step_key(protocol, seg.step_index, "hold_h")
            raise InputError(
                f"{step.key_path}.{key}", f"storage at {seg.temperature_start - CELSIUS_OFFSET:g} C",
                f"a storage hold reached by cooling from above the liquidus ({liquidus - CELSIUS_OFFSET:.2f} C)",
                f"schedule.start_c is {start - CELSIUS_OFFSET:g} C, already below it: no cooling into storage is "
                "in the schedule, so its rate cannot be judged; start where the sample is prepared",
            )


def _entered_or_published(protocol: Protocol, comp, quantity: str, flags: list[Flag]):
    """(rate [K/s] or None, bound word, origin, sources) of one critical rate."""
    entered = protocol.solution.critical_cooling_rate if quantity == "cooling" else protocol.solution.critical_warming_rate
    if entered is not None:
        return entered, "entered", "entered", []
    agents = [a for a, m in zip(comp.agents, comp.molality, strict=True) if m > 0]
    main = [a for a in agents if not (a == "nacl" and protocol.solution.carrier == "isotonic-saline")]
    key = f"solution.critical_{quantity}_rate_c_per_min"
    if len(main) != 1 or main[0] not in vit.known_agents():
        what = "this cocktail" if len(main) > 1 else (main[0] if main else protocol.solution.carrier)
        flags.append(Flag("missing-data", f"no published critical {quantity} rate for {what}: enter the rate "
                          f"measured for your solution as {key}", None))
        return None, "missing", "none", []
    agent = main[0]
    from planner.solution import concentration

    w = round(concentration(comp, agent, "mass_percent"), 6)  # a tabulated 50 % stays 50 %, not 49.9999999
    result = vit.critical_rate(quantity, agent, w)
    flags.extend(result.flags)
    if protocol.solution.carrier != "water":
        flags.append(Flag("indicative", f"the published critical {quantity} rate of {agent} is for the binary "
                          f"solution with water; this one is made up in {protocol.solution.carrier}", None))
    rate = float(result.rate)
    if not math.isfinite(rate):
        return None, str(result.bound), "published", result.sources
    return rate, str(result.bound), "published", result.sources


def preservation_mode(protocol: Protocol, liquidus: float, glass_transition: float | None,
                      critical_cooling_rate: float | None = None) -> tuple[str | None, str]:
    """How the protocol means to preserve: ``vitrification``, ``seeded-freezing``, ``unseeded-freezing``
    or None (a supercooled or above-zero hold), with the reason in words (see the module docstring)."""
    steps = protocol.schedule.steps
    if any(s.kind == "seed" for s in steps):
        return "seeded-freezing", "the schedule seeds ice (seed_ice step)"
    coldest = protocol.schedule.coldest_temperature
    tg = glass_transition if glass_transition is not None else FALLBACK_GLASS_TRANSITION
    tg_words = (f"the solution's glass transition ({tg - CELSIUS_OFFSET:.1f} C)" if glass_transition is not None
                else f"{tg - CELSIUS_OFFSET:.0f} C (the glass transition could not be computed)")
    if coldest < tg:
        entered = protocol.solution.critical_cooling_rate is not None or protocol.solution.critical_warming_rate is not None
        cold_plunge = any(s.kind == "plunge" and s.target_temperature < liquidus for s in steps)
        ramp_rates = [s.rate for s in steps if s.kind == "ramp" and s.target_temperature < liquidus]
        fast_ramp = critical_cooling_rate is not None and bool(ramp_rates) and max(ramp_rates) >= critical_cooling_rate
        why = []
        if entered:
            why.append("critical rates are entered for the solution")
        if cold_plunge:
            why.append("the sample is plunged into the cold")
        if fast_ramp:
            why.append("the programmed ramp reaches the published critical cooling rate")
        if why:
            return "vitrification", (f"no seed step, the schedule goes below {tg_words}, and " + "; ".join(why))
    if coldest < liquidus - UNSEEDED_FREEZE_DEPTH:
        return "unseeded-freezing", (f"no seed step and the schedule goes more than {UNSEEDED_FREEZE_DEPTH:g} K "
                                     "below the liquidus without a vitrifying cooling: ice forms on its own")
    return None, "the schedule neither seeds, vitrifies nor goes deep enough to freeze for certain"


def _storage(protocol: Protocol, liquidus: float, flags: list[Flag]) -> float:
    """Bath temperature of the longest hold below the liquidus [K] (the coldest bath if there is none)."""
    holds = [seg for seg in segments(protocol.schedule) if seg.kind == "hold" and seg.temperature_start < liquidus]
    if holds:
        return max(holds, key=lambda s: s.t_end - s.t_start).temperature_start
    flags.append(Flag("default-used", "no hold below the liquidus in the schedule: the coldest bath temperature "
                      "is taken as the storage temperature", None))
    return protocol.schedule.coldest_temperature


# --------------------------------------------------------------------------------------------- build


def build(protocol: Protocol, context: dict[str, SectionOutput]) -> SectionOutput | None:
    """Build the ``vitrification`` section, or None when the protocol does not vitrify (module docstring)."""
    comp, props = solution_state(protocol, context)
    liquidus = float(props.freezing_point)
    tg = props.glass_transition
    check_protocol(protocol, liquidus, tg)
    flags: list[Flag] = []
    scratch: list[Flag] = []
    published_ccr = _entered_or_published(protocol, comp, "cooling", scratch)[0]
    mode, why = preservation_mode(protocol, liquidus, tg, published_ccr)
    if mode != "vitrification":
        return None

    ccr, ccr_bound, origin_c, src_c = _entered_or_published(protocol, comp, "cooling", flags)
    cwr, cwr_bound, origin_w, src_w = _entered_or_published(protocol, comp, "warming", flags)
    origins = {origin_c, origin_w} - {"none"}
    origin = "entered" if origins == {"entered"} else "published" if origins == {"published"} else (
        "entered and published" if origins else "none")
    if origin == "entered and published":
        flags.append(Flag("indicative", "one critical rate is entered and the other comes from the published "
                          "binary data", None))
    if tg is None:
        flags.append(Flag("missing-data", "the glass transition of this solution could not be computed: storage "
                          "against the glass transition is not judged and the rate band ends at "
                          f"{FALLBACK_GLASS_TRANSITION - CELSIUS_OFFSET:.0f} C", "gordon-taylor-1952"))
    band_lower = tg if tg is not None else FALLBACK_GLASS_TRANSITION

    history = thermal_history(context)
    ranges: dict[str, Any] = {}
    achieved_cool = achieved_warm = None
    band = None
    series = {k: np.zeros(0) for k in ("time", "bath", "centre", "surface")}
    if history is None:
        flags.append(Flag("missing-data", "no heat-transfer result: the rates the sample reaches are not computed",
                          None))
    else:
        from planner.heat_transfer import cooling_rate_through

        band = cooling_rate_through(history, liquidus, band_lower)
        flags.extend(band.flags)
        achieved_cool, achieved_warm = band.cooling_rate, band.warming_rate
        if achieved_warm is None:
            flags.append(Flag("missing-data", "the schedule does not warm the whole sample back through the "
                              "glass-forming range: the warming margin (usually the harder limit) is not judged; "
                              "add the warming steps to judge it", None))
        series = {"time": history.time, "bath": history.bath_temperature,
                  "centre": history.centre_temperature, "surface": history.surface_temperature}
        bracket = getattr(context["thermal"].state, "bracket", None) or {}
        for which in ("low", "high"):
            if which in bracket:
                ranges[which] = cooling_rate_through(bracket[which], liquidus, band_lower)

    cooling_margin = None if ccr is None or achieved_cool is None else vit.rate_margin(achieved_cool, ccr)
    warming_margin = None if cwr is None or achieved_warm is None else vit.rate_margin(achieved_warm, cwr)
    if ccr_bound == "at-most" and cooling_margin is not None:
        flags.append(Flag("indicative", "the cooling margin is a lower bound (the solution is more concentrated "
                          "than the published rows)", None))
    if cwr_bound == "at-most" and warming_margin is not None:
        flags.append(Flag("indicative", "the warming margin is a lower bound (the solution is more concentrated "
                          "than the published rows)", None))

    storage = _storage(protocol, liquidus, flags)
    below_tg = None if tg is None else vit.glass_margin(storage, tg)
    if below_tg is not None and below_tg <= 0:
        flags.append(Flag("refused", f"storage at {storage - CELSIUS_OFFSET:.1f} C is above the glass transition "
                          f"({tg - CELSIUS_OFFSET:.1f} C): the sample is a supercooled liquid there and can form "
                          "ice during storage", "wowk-2010"))

    def spread(attr: str, critical: float | None):
        """[low-h, high-h] values of a rate [C/min] and of its margin, or None without the bracket."""
        if set(ranges) != {"low", "high"}:
            return None, None
        rates = [getattr(ranges[w], attr) for w in ("low", "high")]
        shown = [_sig(None if r is None else r * vit.PER_MINUTE) for r in rates]
        margins = [None if (r is None or critical is None) else _sig(vit.rate_margin(r, critical), 3) for r in rates]
        return shown, margins

    cool_range, cool_margin_range = spread("cooling_rate", ccr)
    warm_range, warm_margin_range = spread("warming_rate", cwr)
    sources = sorted(set(src_c) | set(src_w))
    report = VitrificationReport(
        model="critical rates vs the slowest point's mean rate through the liquidus-to-glass band",
        source=sources[0] if sources else "wowk-2010",
        parameters={"band": "liquidus down to the glass transition", "rates": "mean over the band, slowest point",
                    "ranges": "at the low and high ends of the surroundings' h ranges (thermal section)",
                    "critical_rate_interpolation": "PCHIP in log10(rate) over mass percent"},
        flags=flags,
        decided_by=why,
        glass_transition_c=_c(tg, 1),
        liquidus_c=_c(liquidus, 3),
        critical_rates_from=origin,
        critical_cooling_rate_c_per_min=_sig(None if ccr is None else ccr * vit.PER_MINUTE),
        critical_cooling_rate_bound=ccr_bound,
        critical_warming_rate_c_per_min=_sig(None if cwr is None else cwr * vit.PER_MINUTE),
        critical_warming_rate_bound=cwr_bound,
        band_upper_c=_c(liquidus, 2),
        band_lower_c=_c(band_lower, 1),
        achieved_cooling_rate_c_per_min=_sig(None if achieved_cool is None else achieved_cool * vit.PER_MINUTE),
        achieved_warming_rate_c_per_min=_sig(None if achieved_warm is None else achieved_warm * vit.PER_MINUTE),
        achieved_cooling_rate_range_c_per_min=cool_range,
        achieved_warming_rate_range_c_per_min=warm_range,
        cooling_margin=_sig(cooling_margin, 3),
        warming_margin=_sig(warming_margin, 3),
        cooling_margin_range=cool_margin_range,
        warming_margin_range=warm_margin_range,
        storage_temperature_c=_c(storage, 2),
        storage_below_glass_transition_k=_sig(below_tg, 4),
        rate_sources=sources,
    )
    margins = [
        MarginValue("vitrification_cooling_margin", "Cooling rate reached over the critical cooling rate",
                    report.cooling_margin, "1",
                    f"slowest point's mean rate {report.achieved_cooling_rate_c_per_min} C/min over critical "
                    f"{report.critical_cooling_rate_c_per_min} C/min ({origin})"),
        MarginValue("vitrification_warming_margin", "Warming rate reached over the critical warming rate",
                    report.warming_margin, "1",
                    f"slowest point's mean rate {report.achieved_warming_rate_c_per_min} C/min over critical "
                    f"{report.critical_warming_rate_c_per_min} C/min ({origin})"),
        MarginValue("storage_below_glass_transition_k", "Storage temperature below the glass transition",
                    report.storage_below_glass_transition_k, "K",
                    f"glass transition {report.glass_transition_c} C, storage {report.storage_temperature_c} C"),
    ]
    cautions = []
    if protocol.schedule.uses_liquid_nitrogen:
        cautions.append("ln2-handling")
    if protocol.sample.volume > FRACTURE_CAUTION_VOLUME:
        cautions.append("vitrified-fracture")
    state = VitrificationState(
        time=series["time"], bath_temperature=series["bath"], centre_temperature=series["centre"],
        surface_temperature=series["surface"], glass_transition=tg, liquidus=liquidus,
        critical_cooling_rate=ccr, critical_warming_rate=cwr, achieved_cooling_rate=achieved_cool,
        achieved_warming_rate=achieved_warm, band_rate=band,
    )
    return SectionOutput(NAME, report, margins, cautions, state)
