"""Assessment section ``freezing``: ice started on purpose (or on its own), the plateau and the freezing time.

When it applies
---------------
When :func:`planner.sections.vitrification.preservation_mode` says the protocol freezes:

- ``seeded``: a ``seed_ice`` step starts ice at its ``at_c`` (checked below the liquidus and at the
  temperature the schedule has reached, :func:`~planner.sections.vitrification.check_protocol`);
- ``unseeded``: no seed step, no vitrifying cooling, and the schedule goes more than 40 K below the
  liquidus, so ice forms on its own. The section then reports the temperature at which the medium is
  likely to nucleate on its own: where the nucleation section's freeze probability along the sample's
  coldest-point history reaches one half (with the 5-95 % band), and how deep below the liquidus that is
  - the reason protocols seed.

What it computes
----------------
From the moment ice starts, the sample's temperatures and ice fractions follow from the enthalpy method
(:func:`planner.freezing.enthalpy_freezing_runs`, 1-D: sphere, long cylinder, or slab) with the bath of the
schedule (:func:`planner.schedule.bath_history`) and the surface coefficient the ``thermal`` section
used, over the freezing leg: from the start of ice to the next plunge (or the end of the schedule).
Below the liquidus the ice fraction follows the solution's equilibrium freeze-concentration curve
(:func:`planner.solution.freeze_concentration`), so the latent-heat plateau sits at the liquidus and the
unfrozen liquid concentrates as the temperature falls; both are given on the same time axis (``state``).

- ``freezing_time_min``: from the start of ice until the centre (the slowest point) holds 90 % of the
  ice it holds at equilibrium at the bath temperature at the end of the leg; None, with a flag, when the
  leg ends first (the sample is moved on partly frozen).
  ``freezing_time_range_min`` gives it at the high and low ends of the surroundings' h ranges (the
  thermal section's bracket), None where the centre is not frozen by the end of the leg.
- ``plateau_c``: the warmest centre temperature once ice is present (the latent-heat plateau).
- ``unfrozen_fraction_at_storage``: the fraction of the water still liquid at equilibrium at the storage
  temperature (the longest hold after freezing), taken at Tg' where storage is colder and Tg' is known
  (below it the freeze-concentrated liquid is a glass and no more ice forms).
- Plank's freezing time with the bath held at its temperature at the start of ice, as a cross-check.

When an implicit step of the enthalpy method does not converge (the solver's ``not-converged`` flag), no
number is taken from that path: ``freezing_time_min``, ``frozen_by_end_of_leg``, ``plateau_c`` and
``centre_ice_fraction_at_leg_end`` are None, the flag (step time, residual left) is carried into the
report with a note, and no freezing curve is drawn or recorded (the state is None). A bracket run that
does not converge leaves its end of ``freezing_time_range_min`` None, with its flag.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from planner import freezing as frz
from planner import nucleation as nuc
from planner.protocol import CELSIUS_OFFSET, Protocol
from planner.results import Flag, Result
from planner.schedule import bath_history, segments
from planner.sections import SectionOutput
from planner.sections.vitrification import (
    _c,
    _sig,
    check_protocol,
    preservation_mode,
    solution_state,
    thermal_history,
)

NAME = "freezing"
#: Shells of the enthalpy-method solution from centre to surface.
CELLS = 24
#: Largest implicit time step [s].
MAX_TIME_STEP = 5.0
#: Newton updates allowed per implicit step (None: the solver's own allowance for ``CELLS`` shells).
NEWTON_UPDATES: int | None = None
#: Freeze probability at which the medium is said to nucleate on its own (the median).
LIKELY = 0.5


@dataclass
class FreezingReport(Result):
    """The ``freezing`` section of an assessment (keys are the JSON keys of the record)."""

    how_ice_starts: str = ""  # seeded | unseeded
    decided_by: str = ""
    liquidus_c: float | None = None
    seeded_at_c: float | None = None
    nucleation_temperature_c: float | None = None
    nucleation_temperature_range_c: list[float | None] | None = None
    supercooling_at_ice_start_k: float | None = None
    ice_starts_at_min: float | None = None
    freezing_time_min: float | None = None
    freezing_time_range_min: list[float | None] | None = None  # at the high and low ends of the h ranges
    plateau_c: float | None = None
    frozen_by_end_of_leg: bool | None = None
    leg_end_c: float | None = None
    centre_ice_fraction_at_leg_end: float | None = None
    plank_freezing_time_min: float | None = None
    storage_temperature_c: float | None = None
    unfrozen_fraction_at_storage: float | None = None
    unfrozen_liquid_osmolality_at_storage_osmol_per_kg: float | None = None
    geometry_solved: str = ""
    notes: list[str] = field(default_factory=list)
    curve: dict[str, list[float | None]] | None = None  # unfrozen water and its osmolality vs time (record)


@dataclass
class FreezingState:
    """Chart-ready series on one time axis (schedule time [s]) and the SI objects behind them.

    ``centre_unfrozen_fraction`` / ``mean_unfrozen_fraction``: fraction of the water still liquid (1);
    ``centre_liquid_osmolality``: osmolality of the unfrozen liquid at the centre [osmol/kg water].
    """

    time: np.ndarray
    bath_temperature: np.ndarray
    centre_temperature: np.ndarray
    surface_temperature: np.ndarray
    mean_temperature: np.ndarray
    centre_unfrozen_fraction: np.ndarray
    mean_unfrozen_fraction: np.ndarray
    centre_liquid_osmolality: np.ndarray
    liquidus: float
    ice_start_time: float
    path: frz.FreezingPath | None = None


def one_dimensional(protocol: Protocol) -> tuple[str, float, str]:
    """(geometry, half-thickness or radius [m], words) of the 1-D body the enthalpy method solves."""
    s = protocol.sample
    if s.geometry == "sphere":
        return "sphere", s.diameter / 2.0, "sphere"
    if s.geometry == "slab":
        return "slab", s.thickness / 2.0, "slab through both faces"
    if s.height is not None and s.height < s.diameter:
        return "slab", s.height / 2.0, "slab through its ends (a cylinder lower than it is wide)"
    return "cylinder", s.diameter / 2.0, "long cylinder of the sample's radius (heat through the ends left out)"


def _h_of(history):
    """h(t) [W/(m2 K)] of a thermal history: the step function of time the heat-transfer model used."""
    t_h, h_h = np.asarray(history.time, dtype=float), np.asarray(history.h, dtype=float)

    def h_at(t):
        # scalar in, float out; an array of times in, an array out
        i = np.clip(np.searchsorted(t_h, t, side="right") - 1, 0, h_h.size - 1)
        return float(h_h[i]) if np.ndim(i) == 0 else h_h[i]

    return h_at


def _h_programme(protocol: Protocol, context: dict[str, SectionOutput], flags: list[Flag]):
    """h(t) [W/(m2 K)]: the thermal section's own step function of time, or the environment presets."""
    history = thermal_history(context)
    if history is not None and history.h.size:
        return _h_of(history)
    from planner import heat_transfer as ht

    env = protocol.environment
    base = env.h if env.h is not None else (ht.environment_preset(env.preset).h_nominal if env.preset
                                            else ht.default_environment().h_nominal)
    changes = [(0.0, float(base))]
    for seg in segments(protocol.schedule):
        step = protocol.schedule.steps[seg.step_index]
        if seg.kind == "plunge" and (step.h is not None or step.heat_transfer is not None):
            changes.append((seg.t_start, float(step.h if step.h is not None
                                               else ht.environment_preset(step.heat_transfer).h_nominal)))
    flags.append(Flag("default-used", "no heat-transfer result: the surface coefficients are the nominal values "
                      "of the protocol's environment and plunge presets", "incropera-dewitt"))
    starts = np.array([c[0] for c in changes])
    values = np.array([c[1] for c in changes])

    def h_from_presets(t):
        i = np.searchsorted(starts, t, side="right") - 1
        return float(values[i]) if np.ndim(i) == 0 else values[i]

    return h_from_presets


def _leg_end(protocol: Protocol, start: float) -> tuple[float, float | None]:
    """End time [s] of the freezing leg (the next plunge after ``start``, or the schedule end) and the
    storage temperature [K] (longest hold after ``start``, None when there is none)."""
    segs = segments(protocol.schedule)
    end = max(s.t_end for s in segs)
    for s in segs:
        if s.kind == "plunge" and s.t_start > start:
            end = s.t_start
            break
    holds = [s for s in segs if s.kind == "hold" and s.t_end > start]
    storage = max(holds, key=lambda s: s.t_end - s.t_start).temperature_start if holds else None
    return end, storage


def _spontaneous_nucleation(protocol: Protocol, context: dict[str, SectionOutput], liquidus: float,
                            flags: list[Flag]):
    """(time [s], temperature [K], (warm, cold) band [K]) at which the medium likely nucleates on its own."""
    out = context.get("nucleation")
    if out is None or getattr(out.state, "model", None) is None:
        flags.append(Flag("missing-data", "no nucleation result: the temperature at which the medium nucleates "
                          "on its own is not computed", None))
        return None
    st = out.state
    t, y = np.asarray(st.time, dtype=float), np.asarray(st.temperature, dtype=float)
    curve = nuc.cumulative_freeze_probability(t, y, st.volume, st.model, st.liquidus, st.interface_area,
                                              points=120, draws=500)

    def reach(p: np.ndarray) -> float | None:
        hit = np.nonzero(p >= LIKELY)[0]
        if hit.size == 0:
            return None
        i = int(hit[0])
        if i == 0:
            return float(curve["time"][0])
        t0, t1 = curve["time"][i - 1], curve["time"][i]
        return float(t0 + (LIKELY - p[i - 1]) * (t1 - t0) / (p[i] - p[i - 1]))

    t50 = reach(curve["probability"])
    t_warm, t_cold = reach(curve["upper"]), reach(curve["lower"])

    def temp(tt: float | None) -> float | None:
        return None if tt is None else float(np.interp(tt, t, y))

    if t50 is None:
        coldest = float(y[-1])
        flags.append(Flag("indicative", f"the freeze probability does not reach one half before the sample reaches "
                          f"{coldest - CELSIUS_OFFSET:.1f} C, the end of what the nucleation model covers; ice is "
                          "taken to start there (homogeneous nucleation)", "koop-2000"))
        return float(t[-1]), coldest, (temp(t_warm), None)
    return t50, temp(t50), (temp(t_warm), temp(t_cold))


def _medium(comp, props, flags: list[Flag]) -> frz.FreezingMedium:
    from planner.solution import freeze_concentration

    def ice(T: np.ndarray) -> np.ndarray:
        return np.asarray(freeze_concentration(comp, T).ice_fraction_of_water, dtype=float)

    flags.append(Flag("indicative", "the sample's heat capacities and conductivities are those of water and ice "
                      "(the solutes' own are left out)", "incropera-dewitt"))
    return frz.FreezingMedium(liquidus=float(props.freezing_point), ice_fraction=ice,
                              water_mass_fraction=comp.water_mass_fraction, density=float(props.density))


@lru_cache(maxsize=64)
def _coldest_valid(comp, liquidus: float, coldest: float) -> float:
    """Coldest temperature [K] down to ``coldest`` where the freeze-concentration curve is defined.

    Kept for the compositions and ranges seen last (a frozen ``Composition`` is its own key): the app
    reassesses on every input change, and most changes leave the solution and the coldest bath alone.
    """
    from planner.solution import freeze_concentration

    grid = np.linspace(liquidus, coldest, 400)
    x = np.asarray(freeze_concentration(comp, grid).ice_fraction_of_water, dtype=float)
    bad = np.nonzero(~np.isfinite(x))[0]
    return coldest if bad.size == 0 else float(grid[max(int(bad[0]) - 1, 0)])


def build(protocol: Protocol, context: dict[str, SectionOutput]) -> SectionOutput | None:
    """Build the ``freezing`` section, or None when the protocol does not freeze (module docstring)."""
    comp, props = solution_state(protocol, context)
    liquidus = float(props.freezing_point)
    tg = props.glass_transition
    mode, why = preservation_mode(protocol, liquidus, tg)
    if mode not in ("seeded-freezing", "unseeded-freezing"):
        return None
    check_protocol(protocol, liquidus, tg)
    flags: list[Flag] = []
    notes: list[str] = []
    report = FreezingReport(model="enthalpy method with equilibrium freeze concentration", source="voller-cross-1981",
                            decided_by=why, liquidus_c=_c(liquidus, 3))

    if mode == "seeded-freezing":
        seg = next(s for s in segments(protocol.schedule) if s.kind == "seed")
        start_time = seg.t_start
        start_temperature = protocol.schedule.steps[seg.step_index].target_temperature
        report.how_ice_starts = "seeded"
        report.seeded_at_c = _c(start_temperature, 3)
        history = thermal_history(context)
        if history is not None:
            mean = float(np.interp(start_time, history.time, history.mean_temperature))
            notes.append(f"when ice is started the sample's mean temperature is {mean - CELSIUS_OFFSET:.2f} C "
                         "(thermal section); the enthalpy method starts from it, uniform")
            if mean >= liquidus:
                flags.append(Flag("missing-data", f"at the seed step the sample's mean temperature "
                                  f"({mean - CELSIUS_OFFSET:.2f} C) is still above its liquidus "
                                  f"({liquidus - CELSIUS_OFFSET:.2f} C): ice started at the surface may not "
                                  "spread; hold at the seed temperature until the sample has caught up", None))
            start_temperature = mean
        else:
            notes.append("the sample is taken as uniform at the seed temperature when ice is started")
    else:
        report.how_ice_starts = "unseeded"
        found = _spontaneous_nucleation(protocol, context, liquidus, flags)
        if found is None:
            report.flags = flags
            report.notes = notes
            return SectionOutput(NAME, report, [], [], None)
        start_time, start_temperature, (warm, cold) = found
        report.nucleation_temperature_c = _c(start_temperature, 2)
        report.nucleation_temperature_range_c = [_c(warm, 2), _c(cold, 2)]
        notes.append("without seeding, ice starts where the freeze probability reaches one half; the sample is "
                     "taken as uniform at that temperature then")
    report.supercooling_at_ice_start_k = _sig(liquidus - start_temperature, 4)
    if report.supercooling_at_ice_start_k is not None and report.supercooling_at_ice_start_k < 0:
        report.supercooling_at_ice_start_k = 0.0
    report.ice_starts_at_min = _sig(start_time / 60.0, 4)

    leg_end, storage = _leg_end(protocol, start_time)
    bath = bath_history(protocol.schedule)
    coldest_leg = float(np.min(bath.temperature_at(np.linspace(start_time, leg_end, 200))))
    valid = _coldest_valid(comp, liquidus, min(coldest_leg, start_temperature) - 5.0)
    if valid > min(coldest_leg, start_temperature) - 5.0:
        # cut the leg where the bath passes the coldest temperature the solution model covers
        times = np.linspace(start_time, leg_end, 2000)
        past = np.nonzero(bath.temperature_at(times) < valid + 5.0)[0]
        if past.size:
            leg_end = float(times[max(int(past[0]) - 1, 1)])
        flags.append(Flag("refused", f"the freeze-concentration curve of this solution ends at "
                          f"{valid - CELSIUS_OFFSET:.1f} C: the freezing path is followed only until the bath "
                          f"reaches {valid + 5.0 - CELSIUS_OFFSET:.1f} C", "elliott-2007"))
    duration = leg_end - start_time
    if duration < 60.0:
        duration = 3600.0
        flags.append(Flag("default-used", "the schedule moves on within a minute of the start of ice: the freezing "
                          "path is followed for an hour with the bath where it is then", None))
    h_at = _h_programme(protocol, context, flags)
    medium = _medium(comp, props, flags)
    geometry, half, words = one_dimensional(protocol)
    report.geometry_solved = words
    if words.startswith("long cylinder"):
        flags.append(Flag("indicative", "the vial is solved as a long cylinder: with its ends cooling too it "
                          "freezes somewhat faster, so the freezing time is an upper bound", "plank-1913"))

    def bath_at(t):
        # just before the leg's end: at a plunge's own time the bath is already the new one
        temperature = bath.temperature_at(start_time + np.minimum(t, (leg_end - start_time) * (1 - 1e-9)))
        return float(temperature) if np.ndim(temperature) == 0 else temperature

    leg_end_bath = bath_at(duration)
    from planner.solution import freeze_concentration

    fc_end = freeze_concentration(comp, leg_end_bath)
    flags.extend(_curve_flags(fc_end))
    target = frz.FROZEN_SHARE * float(fc_end.ice_fraction_of_water)
    # the nominal h and, when the thermal section bracketed it, both ends of its range (short to long): one
    # stacked solve; the bracket runs stop once their centre is frozen
    h_runs = [lambda t: h_at(start_time + np.asarray(t))]
    stops: list[float | None] = [None]
    bracket = getattr(getattr(context.get("thermal"), "state", None), "bracket", None) or {}
    bracketed = target > 0 and set(bracket) >= {"low", "high"}
    if bracketed:
        for which in ("high", "low"):
            h_which = _h_of(bracket[which])
            h_runs.append(lambda t, h=h_which: h(start_time + np.asarray(t)))
            stops.append(target)
    path, *others = frz.enthalpy_freezing_runs(
        geometry, half, medium, start_temperature, bath_at, h_runs, duration,
        n_cells=CELLS, record_interval=min(30.0, duration / 200.0), time_step=min(MAX_TIME_STEP, duration / 400.0),
        stop_at_centre_ice_fraction=stops, max_iterations=NEWTON_UPDATES,
    )
    flags.extend(path.flags)
    report.leg_end_c = _c(leg_end_bath, 2)
    converged = not _not_converged(path)
    if bracketed:
        spread = []
        for which, other in zip(("high", "low"), others, strict=True):
            t_other = other.time_to_centre_ice_fraction(target)
            if _not_converged(other):
                # that end's time is withheld, with the solver's own flag, said to be about that end
                flags.extend(Flag(f.code, f"at the {which} end of the h range: {f.message}", f.source)
                             for f in other.flags if f.code == frz.NOT_CONVERGED)
                spread.append(None)
            else:
                spread.append(_sig(t_other / 60.0, 3) if math.isfinite(t_other) else None)
        report.freezing_time_range_min = spread
    if not converged:
        # never a number from a path that is not a solution of the model: the freezing time, the plateau and
        # the centre's ice are withheld (None), the solver's ``not-converged`` flag says why, and no curve is
        # drawn or recorded
        notes.append("the enthalpy-method solution did not converge (see the not-converged flag): the freezing "
                     "time, the plateau and the centre's ice at the end of the leg are not given; a finer time "
                     "step or more shells may solve it, and Plank's time below is only a rough cross-check")
    else:
        t_frozen = path.time_to_centre_ice_fraction(target) if target > 0 else float("nan")
        report.freezing_time_min = _sig(t_frozen / 60.0, 3) if math.isfinite(t_frozen) else None
        report.frozen_by_end_of_leg = bool(math.isfinite(t_frozen))
        report.centre_ice_fraction_at_leg_end = _sig(float(path.centre_ice_fraction[-1]), 3)
        if not math.isfinite(t_frozen):
            flags.append(Flag("missing-data", f"the centre holds {path.centre_ice_fraction[-1]:.2f} of its water "
                              f"as ice when the freezing leg ends at {leg_end_bath - CELSIUS_OFFSET:.1f} C, short "
                              f"of {target:.2f} (90 % of equilibrium): the sample moves on partly frozen", None))
        report.plateau_c = _c(path.plateau_temperature, 2)

    # Plank cross-check with the bath held at its temperature when ice starts
    bath0 = bath_at(0.0)
    if bath0 < liquidus - 1.0:
        f0 = float(freeze_concentration(comp, bath0).ice_fraction_of_water)
        lat = frz.LATENT_HEAT_FUSION * comp.water_mass_fraction * f0
        k_frozen = frz.WATER_CONDUCTIVITY + (frz.ICE_CONDUCTIVITY - frz.WATER_CONDUCTIVITY) * comp.water_mass_fraction * f0
        if lat > 0:
            t_plank = frz.plank_freezing_time(geometry, 2 * half, float(props.density), lat, liquidus, bath0,
                                              h_at(start_time), k_frozen)
            report.plank_freezing_time_min = _sig(t_plank / 60.0, 3)
            notes.append("Plank's time is for the bath held at its temperature when ice starts (the ice in "
                         "equilibrium there); a falling bath freezes more, faster")
            flags.extend(frz.plank_flags(liquidus, bath0, lat))

    if storage is not None:
        report.storage_temperature_c = _c(storage, 2)
        t_eval = storage
        tg_prime = props.glass_transition_prime
        if tg_prime is not None and storage < tg_prime:
            t_eval = tg_prime
            notes.append(f"storage is below Tg' ({tg_prime - CELSIUS_OFFSET:.1f} C): the unfrozen fraction is that "
                         "of the maximally freeze-concentrated glass, taken at Tg'")
        valid_store = _coldest_valid(comp, liquidus, t_eval)
        if valid_store > t_eval:
            flags.append(Flag("indicative", f"the unfrozen fraction is given at {valid_store - CELSIUS_OFFSET:.1f} C, "
                              "the coldest the solution model reaches; colder, the liquid vitrifies and little more "
                              "ice forms", "elliott-2007"))
            t_eval = valid_store
        fc = freeze_concentration(comp, t_eval)
        flags.extend(_curve_flags(fc))
        report.unfrozen_fraction_at_storage = _sig(1.0 - float(fc.ice_fraction_of_water), 3)
        report.unfrozen_liquid_osmolality_at_storage_osmol_per_kg = _sig(float(fc.liquid_osmolality), 4)

    report.parameters = {"cells": CELLS, "frozen_share_of_equilibrium_ice": frz.FROZEN_SHARE,
                         "geometry": geometry, "half_dimension_m": half, "time_step_s": path.parameters["time_step_s"]}
    report.flags = _dedupe(flags)
    report.notes = notes
    cautions = ["ln2-handling"] if protocol.schedule.uses_liquid_nitrogen else []
    if not converged:
        return SectionOutput(NAME, report, [], cautions, None)
    centre_fc = freeze_concentration(comp, np.asarray(path.centre_temperature))
    state = FreezingState(
        time=start_time + path.time,
        bath_temperature=path.bath_temperature,
        centre_temperature=path.centre_temperature,
        surface_temperature=path.surface_temperature,
        mean_temperature=path.mean_temperature,
        centre_unfrozen_fraction=1.0 - path.centre_ice_fraction,
        mean_unfrozen_fraction=1.0 - path.mean_ice_fraction,
        centre_liquid_osmolality=np.asarray(centre_fc.liquid_osmolality, dtype=float),
        liquidus=liquidus,
        ice_start_time=start_time,
        path=path,
    )
    report.curve = _record_curve(state)
    return SectionOutput(NAME, report, [], cautions, state)


def _not_converged(path: frz.FreezingPath) -> bool:
    """Whether an implicit step of the path ended outside the solver's energy tolerance."""
    return any(f.code == frz.NOT_CONVERGED for f in path.flags)


CURVE_POINTS = 80  # points carried in the record; the app draws every point of the state


def _record_curve(state: FreezingState) -> dict[str, list[float | None]]:
    """The unfrozen fraction of the water (mean over the sample) and the unfrozen liquid's osmolality at the
    centre against schedule time, thinned for the record."""
    t = np.asarray(state.time, dtype=float)
    idx = np.unique(np.linspace(0, t.size - 1, min(CURVE_POINTS, t.size)).round().astype(int))

    def column(a, digits):
        return [round(float(x), digits) if np.isfinite(x) else None for x in np.asarray(a, dtype=float)[idx]]

    return {"time_h": column(t / 3600.0, 4), "mean_unfrozen_fraction": column(state.mean_unfrozen_fraction, 4),
            "centre_liquid_osmolality_osmol_per_kg": column(state.centre_liquid_osmolality, 3)}


def _curve_flags(fc) -> list[Flag]:
    """Flags of a freeze-concentration result that bear on the numbers used: a ``refused`` flag only where
    the ice fraction used is itself missing (pure water's infinite concentration factor is not)."""
    finite = bool(np.all(np.isfinite(np.asarray(fc.ice_fraction_of_water, dtype=float))))
    return [f for f in fc.flags if not (f.code == "refused" and finite)]


def _dedupe(flags: list[Flag]) -> list[Flag]:
    seen, out = set(), []
    for f in flags:
        if (f.code, f.message) not in seen:
            seen.add((f.code, f.message))
            out.append(f)
    return out
