"""Assessment section ``chamber``: what happens if ice forms in the container, and does the wall hold.

Evaluated at the coldest temperature the sample reaches (the heat-transfer section's coldest point when it
was built, else the schedule's coldest bath temperature):

- rigid chambers: equilibrium pressure, ice mass and volume fraction and liquid osmolality if the contents
  freeze (:mod:`planner.isochoric`); Lamé bore stresses, von Mises stress and safety factor of the wall
  (:mod:`planner.wall`) at that pressure and in the worst case, a fault that takes the chamber to the ice
  Ih-III-liquid triple point (208.566 MPa, the highest pressure ice Ih can produce); the outer diameter a
  target factor needs; the same solution in an open container for comparison; the ice formed at once on
  nucleation (recalescence) and the pressure step;
- open containers: ice fraction and liquid osmolality at the coldest point if the sample freezes, and the
  recalescence fraction.

The numbers support, and never replace, a vessel designed and rated by a qualified engineer to a
pressure-equipment code [ref:asme-bpvc-viii].
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from planner import isochoric as iso
from planner import wall
from planner import water_ice as wi
from planner.errors import InputError, ModelRangeError
from planner.protocol import CELSIUS_OFFSET, Protocol
from planner.results import Flag, Result
from planner.sections import MarginValue, SectionOutput

# Default targets for the outer diameter a wall needs (the watch thresholds of planner/data/policy.yaml)
PLANNED_TARGET = ("chamber_safety_factor", 3.0)
# outer/inner ratio past which the needed wall is reported as near the elastic limit: the Lamé bore von Mises
# stress goes as 1/(1 - (a/b)^2) (cylinder) or 1/(1 - (a/b)^3) (sphere), so at b/a = 4 it is within 7 % and
# 2 % of its infinite-wall value [ref:lame-timoshenko]
THICK_WALL_RATIO = 4.0
WORST_CASE_TARGET = ("chamber_worst_case_safety_factor", 1.5)
AMBIENT_PRESSURE = wi.STANDARD_PRESSURE  # Pa outside the chamber, and the fill pressure
CURVE_POINTS = 21


@dataclass
class ChamberReport(Result):
    """The ``chamber`` section (keys are the JSON keys of the record; lab units in their names)."""

    kind: str = ""
    temperature_c: float | None = None
    temperature_basis: str = ""
    liquidus_c: float | None = None
    frozen_at_equilibrium: bool | None = None
    pressure_if_frozen_mpa: float | None = None
    ice_mass_fraction_if_frozen: float | None = None
    ice_volume_fraction_if_frozen: float | None = None
    liquid_osmolality_if_frozen_osmol_per_kg: float | None = None
    material: str | None = None
    shape: str | None = None
    yield_strength_mpa: float | None = None
    cavity_compliance_per_gpa: float | None = None
    compliance_basis: str | None = None
    trapped_gas_ml: float | None = None
    hoop_stress_mpa: float | None = None
    axial_stress_mpa: float | None = None
    von_mises_mpa: float | None = None
    safety_factor: float | None = None
    worst_case: dict[str, Any] | None = None
    outer_diameter_needed_mm: list[dict[str, Any]] = field(default_factory=list)
    open_container: dict[str, Any] | None = None
    recalescence_ice_fraction: float | None = None
    recalescence_from_c: float | None = None
    recalescence_pressure_step_mpa: float | None = None
    curve: dict[str, list[float | None]] | None = None


@dataclass
class ChamberState:
    """SI objects for later sections and the app (not serialised)."""

    temperature: float  # K
    state: Any  # IsochoricState (rigid) or FreezeConcentration (open)
    fill: iso.Fill | None = None
    liquid: iso.Liquid | None = None
    stress: wall.BoreStress | None = None
    worst_case_stress: wall.BoreStress | None = None
    recalescence: iso.Recalescence | None = None
    curves: dict[str, np.ndarray] | None = None


def _r(x: Any, digits: int = 4) -> float | None:
    if x is None:
        return None
    x = float(x)
    if not np.isfinite(x):
        return None
    return float(f"{x:.{digits}g}")


def _celsius(kelvin: float | None, digits: int = 3) -> float | None:
    return None if kelvin is None else round(float(kelvin) - CELSIUS_OFFSET, digits)


def _coldest(protocol: Protocol, context: dict[str, SectionOutput]) -> tuple[float, str]:
    thermal = context.get("thermal")
    coldest = getattr(getattr(thermal, "state", None), "coldest_temperature", None) if thermal else None
    if coldest is not None:
        return float(coldest), "sample's coldest point (heat-transfer model)"
    return float(protocol.schedule.coldest_temperature), "coldest bath temperature of the schedule"


def _composition(protocol: Protocol, context: dict[str, SectionOutput]):
    solution = context.get("solution")
    comp = getattr(getattr(solution, "state", None), "composition", None) if solution else None
    if comp is not None:
        return comp
    from planner.solution import composition

    given = protocol.solution.cryoprotectants
    return composition(protocol.solution.carrier, [(c.agent, c.unit, c.value) for c in given], "solution")


def _target(protocol: Protocol, name: str, default: float) -> float:
    override = protocol.policy.margins.get(name)
    if override and "watch" in override:
        return float(override["watch"])
    try:
        from planner.assessment import default_policy

        return float(default_policy().get(name, {}).get("watch", default))
    except (ImportError, KeyError, TypeError, ValueError):
        return default


def _recalescence_temperature(protocol: Protocol, coldest: float) -> tuple[float, str]:
    seeds = [s.target_temperature for s in protocol.schedule.steps if s.kind == "seed" and s.target_temperature]
    if seeds:
        return float(min(seeds)), "seeding temperature"
    return coldest, "coldest point (nucleation there is the largest release)"


def build(protocol: Protocol, context: dict[str, SectionOutput]) -> SectionOutput:
    """Build the ``chamber`` section (it applies to every protocol).

    Parameters
    ----------
    protocol : Protocol
        The validated protocol.
    context : dict
        Sections already built; ``solution`` (composition) and ``thermal`` (coldest point) are read when
        present.

    Returns
    -------
    SectionOutput
        Report, margins ``chamber_safety_factor`` and ``chamber_worst_case_safety_factor`` (rigid only),
        caution ``trapped-gas`` when gas is sealed in, and a :class:`ChamberState`.
    """
    coldest, basis = _coldest(protocol, context)
    comp = _composition(protocol, context)
    if protocol.container.kind == "rigid":
        return _rigid(protocol, comp, coldest, basis)
    return _open(protocol, comp, coldest, basis)


def _liquid(comp) -> iso.Liquid | None:
    return iso.liquid_from_composition(comp) if comp.agents else None


def _recalescence(protocol, fill, liquid, coldest, flags) -> tuple[iso.Recalescence | None, float, str]:
    t_rec, why = _recalescence_temperature(protocol, coldest)
    try:
        rec = iso.recalescence(t_rec, fill, liquid)
    except ModelRangeError as exc:
        flags.append(Flag("refused", f"recalescence not computed at {_celsius(t_rec)} C: {exc}", iso.SOURCE))
        return None, t_rec, why
    flags.extend(rec.flags)
    return rec, t_rec, why


def _open(protocol: Protocol, comp, coldest: float, basis: str) -> SectionOutput:
    from planner.solution import freeze_concentration, freezing_point

    flags: list[Flag] = []
    liquidus = float(freezing_point(comp)) if comp.agents else float(wi.melting_temperature(AMBIENT_PRESSURE))
    fc = freeze_concentration(comp, coldest)
    flags.extend(getattr(fc, "flags", []))
    liquid = _liquid(comp)
    rec, t_rec, why = _recalescence(protocol, None, liquid, coldest, flags)
    report = ChamberReport(
        model="open container: equilibrium freeze-concentration at the coldest point",
        source=getattr(fc, "source", "elliott-2007"),
        parameters={"recalescence_at": why},
        flags=flags,
        kind="open",
        temperature_c=_celsius(coldest),
        temperature_basis=basis,
        liquidus_c=_celsius(liquidus),
        frozen_at_equilibrium=bool(coldest < liquidus),
        pressure_if_frozen_mpa=None,
        ice_mass_fraction_if_frozen=_r(fc.ice_mass_fraction, 3),
        ice_volume_fraction_if_frozen=None,
        liquid_osmolality_if_frozen_osmol_per_kg=_r(fc.liquid_osmolality, 4),
        recalescence_ice_fraction=None if rec is None else _r(rec.ice_mass_fraction, 3),
        recalescence_from_c=_celsius(t_rec),
    )
    return SectionOutput("chamber", report, [], [], ChamberState(coldest, fc, None, liquid, recalescence=rec))


def _rigid(protocol: Protocol, comp, coldest: float, basis: str) -> SectionOutput:
    c = protocol.container
    flags: list[Flag] = []
    if coldest < wi.TRIPLE_POINT_IH_III_TEMPERATURE:
        # the protocol loader refuses such schedules; a heat-transfer coldest point cannot be colder than the bath
        raise InputError("schedule.steps", _celsius(coldest), "-21.985 C or warmer in a rigid chamber (ice Ih-III-liquid "
                         "triple point: the ice Ih equations end there)")
    mat = wall.material(c.material)
    a, b = c.inner_diameter / 2, c.outer_diameter / 2
    if c.cavity_compliance is not None:
        beta, beta_basis = float(c.cavity_compliance), "cavity_compliance_per_gpa given in the protocol"
    else:
        beta = float(wall.cavity_compliance(c.shape, a, b, mat))
        body = "cylinder of" if c.shape == "cylinder" else "thick sphere of"
        ends = ", closed ends" if c.shape == "cylinder" else ""
        beta_basis = f"Lamé {body} {mat.key}{ends} (wall only; closures and seals not included)"
    gas_fraction = c.trapped_gas_volume / c.cavity_volume
    liquid = _liquid(comp)
    v_s, m_s = iso.solute_volume_and_mass(comp)
    fill = iso.make_fill(protocol.schedule.start_temperature, AMBIENT_PRESSURE, compliance=beta,
                         gas_fraction=gas_fraction, solute_volume=v_s, solute_mass=m_s)
    liquidus = liquid.freezing_temperature if liquid is not None else float(wi.melting_temperature(AMBIENT_PRESSURE))
    if coldest > iso.TABLE_TEMPERATURE_HIGH:
        return _rigid_warm(protocol, comp, coldest, basis, liquidus, mat, fill, beta, beta_basis)
    st = iso.isochoric_state(coldest, fill, liquid)
    flags.extend(st.flags)
    if not st.frozen:
        flags.append(Flag("refused", f"the coldest point ({_celsius(coldest)} C) is above the liquidus "
                          f"({_celsius(liquidus)} C): no ice at equilibrium; the pressure shown is that of the "
                          "liquid alone", iso.SOURCE))
    if liquid is not None:
        from planner.solution import composition_flags

        flags.extend(composition_flags(comp, float(st.concentration_factor)))
    p = float(st.pressure)
    stress = wall.bore_stresses(c.shape, max(p - AMBIENT_PRESSURE, 0.0), a, b)
    sf = float(wall.safety_factor(mat.yield_strength, stress.von_mises)) if stress.von_mises > 0 else None
    p_worst = wi.TRIPLE_POINT_IH_III_PRESSURE
    at_triple = iso.isochoric_state(wi.TRIPLE_POINT_IH_III_TEMPERATURE, fill, liquid)
    worst = wall.bore_stresses(c.shape, p_worst - AMBIENT_PRESSURE, a, b)
    sf_worst = float(wall.safety_factor(mat.yield_strength, worst.von_mises))
    needed = []
    for case, pressure, (name, default) in (("planned", p, PLANNED_TARGET), ("worst_case", p_worst, WORST_CASE_TARGET)):
        target = _target(protocol, name, default)
        r_out = float(wall.required_outer_radius(c.shape, max(pressure - AMBIENT_PRESSURE, 0.0), a, mat.yield_strength, target))
        note = "" if np.isfinite(r_out) else ("no wall thickness of this material reaches the target (elastic "
                                               "limit); a stronger material or a smaller bore is needed")
        if np.isfinite(r_out) and r_out > THICK_WALL_RATIO * a:
            note = (f"a wall more than {THICK_WALL_RATIO:g} times the bore: close to the elastic limit, where more "
                    "thickness buys little strength; a stronger material or a smaller bore is the practical way")
        needed.append({"case": case, "target_safety_factor": target,
                       "outer_diameter_mm": _r(2e3 * r_out, 4) if np.isfinite(r_out) else None, "note": note})
    open_cmp = None
    if liquid is not None and st.frozen:
        from planner.solution import freeze_concentration, osmolality

        fc = freeze_concentration(comp, coldest)
        pi0 = float(osmolality(comp))
        rise_rigid = float(st.liquid_osmolality) - pi0
        rise_open = float(fc.liquid_osmolality) - pi0
        open_cmp = {
            "ice_mass_fraction": _r(fc.ice_mass_fraction, 3),
            "liquid_osmolality_osmol_per_kg": _r(fc.liquid_osmolality, 4),
            "concentration_rise_open_over_rigid": _r(rise_open / rise_rigid, 3) if rise_rigid > 0 else None,
        }
    rec, t_rec, why = _recalescence(protocol, fill, liquid, coldest, flags)
    curves = iso.curves(fill, liquid, coldest if st.frozen else wi.TRIPLE_POINT_IH_III_TEMPERATURE, n=CURVE_POINTS)
    cautions = []
    if c.trapped_gas_volume > 0:
        cautions.append("trapped-gas")
        flags.append(Flag("indicative", f"{c.trapped_gas_volume * 1e6:g} mL of gas is sealed in: it is compressed "
                          "as ice forms, so the chamber is no longer isochoric and more ice forms", iso.SOURCE))
    report = ChamberReport(
        model=iso.MODEL + "; Lamé thick wall",
        source=iso.SOURCE,
        parameters={
            "fill_temperature_c": _celsius(fill.temperature),
            "fill_pressure_mpa": AMBIENT_PRESSURE / 1e6,
            "solute_volume_ml_per_kg_water": _r(v_s * 1e6, 4),
            "assumptions": iso.MODEL_ASSUMPTIONS,
            "wall_source": mat.source,
            "wall_yield_basis": mat.yield_basis,
            "worst_case_basis": "a fault that takes the chamber to the ice Ih-III-liquid triple point: the wall is "
            "judged at 208.566 MPa, the highest pressure ice Ih produces (a solution reaches it a few kelvin "
            "colder than pure water; contents_* give this solution's state at -21.985 C)",
            "recalescence_at": why,
        },
        flags=flags,
        kind="rigid",
        temperature_c=_celsius(coldest),
        temperature_basis=basis,
        liquidus_c=_celsius(liquidus),
        frozen_at_equilibrium=bool(st.frozen),
        pressure_if_frozen_mpa=_r(p / 1e6, 4),
        ice_mass_fraction_if_frozen=_r(st.ice_mass_fraction, 3),
        ice_volume_fraction_if_frozen=_r(st.ice_volume_fraction, 3),
        liquid_osmolality_if_frozen_osmol_per_kg=_r(st.liquid_osmolality, 4),
        material=mat.key,
        shape=c.shape,
        yield_strength_mpa=_r(mat.yield_strength / 1e6, 4),
        cavity_compliance_per_gpa=_r(beta * 1e9, 4),
        compliance_basis=beta_basis,
        trapped_gas_ml=_r(c.trapped_gas_volume * 1e6, 4),
        hoop_stress_mpa=_r(stress.hoop / 1e6, 4),
        axial_stress_mpa=_r(stress.axial / 1e6, 4) if c.shape == "cylinder" else None,  # a sphere has no axis
        von_mises_mpa=_r(stress.von_mises / 1e6, 4),
        safety_factor=_r(sf, 3),
        worst_case={
            "temperature_c": _celsius(wi.TRIPLE_POINT_IH_III_TEMPERATURE),
            "pressure_mpa": _r(p_worst / 1e6, 5),
            "hoop_stress_mpa": _r(worst.hoop / 1e6, 4),
            "von_mises_mpa": _r(worst.von_mises / 1e6, 4),
            "safety_factor": _r(sf_worst, 3),
            "contents_pressure_mpa": _r(float(at_triple.pressure) / 1e6, 4),
            "contents_ice_mass_fraction": _r(float(at_triple.ice_mass_fraction), 3),
            "contents_liquid_osmolality_osmol_per_kg": _r(float(at_triple.liquid_osmolality), 4),
        },
        outer_diameter_needed_mm=needed,
        open_container=open_cmp,
        recalescence_ice_fraction=None if rec is None else _r(rec.ice_mass_fraction, 3),
        recalescence_from_c=_celsius(t_rec),
        recalescence_pressure_step_mpa=None if rec is None else _r(rec.pressure_step / 1e6, 4),
        curve={
            "temperature_c": [_celsius(t, 3) for t in curves["temperature"]],
            "pressure_mpa": [_r(x / 1e6, 4) for x in curves["pressure"]],
            "ice_fraction_of_water": [_r(x, 3) for x in curves["ice_fraction_of_water"]],
            "liquid_osmolality_osmol_per_kg": [_r(x, 4) for x in curves["liquid_osmolality"]],
            "open_liquid_osmolality_osmol_per_kg": [_r(x, 4) for x in curves.get("open_liquid_osmolality", [])],
        },
    )
    margins = [
        MarginValue("chamber_safety_factor", "Chamber wall safety factor if the contents freeze at the coldest point",
                    _r(sf, 3), "1", f"yield {mat.yield_strength / 1e6:.0f} MPa over bore von Mises "
                    f"{stress.von_mises / 1e6:.1f} MPa at {p / 1e6:.1f} MPa"),
        MarginValue("chamber_worst_case_safety_factor", "Chamber wall safety factor at the ice Ih-III triple point",
                    _r(sf_worst, 3), "1", f"yield {mat.yield_strength / 1e6:.0f} MPa over bore von Mises "
                    f"{worst.von_mises / 1e6:.1f} MPa at {p_worst / 1e6:.1f} MPa"),
    ]
    state = ChamberState(coldest, st, fill, liquid, stress, worst, rec, curves)
    return SectionOutput("chamber", report, margins, cautions, state)


def _rigid_warm(protocol, comp, coldest, basis, liquidus, mat, fill, beta, beta_basis) -> SectionOutput:
    """A rigid chamber that stays above 1 C: no ice can form as planned; only the worst case is judged."""
    c = protocol.container
    a, b = c.inner_diameter / 2, c.outer_diameter / 2
    worst = wall.bore_stresses(c.shape, wi.TRIPLE_POINT_IH_III_PRESSURE - AMBIENT_PRESSURE, a, b)
    sf_worst = float(wall.safety_factor(mat.yield_strength, worst.von_mises))
    flags = [Flag("refused", f"the coldest point ({_celsius(coldest)} C) is above the liquidus ({_celsius(liquidus)} C): "
                  "no ice can form as planned; only the worst case (a fault to the triple point) is evaluated", iso.SOURCE)]
    report = ChamberReport(
        model=iso.MODEL + "; Lamé thick wall", source=iso.SOURCE, flags=flags, kind="rigid",
        temperature_c=_celsius(coldest), temperature_basis=basis, liquidus_c=_celsius(liquidus),
        frozen_at_equilibrium=False, ice_mass_fraction_if_frozen=0.0, material=mat.key, shape=c.shape,
        yield_strength_mpa=_r(mat.yield_strength / 1e6, 4), cavity_compliance_per_gpa=_r(beta * 1e9, 4),
        compliance_basis=beta_basis, trapped_gas_ml=_r(c.trapped_gas_volume * 1e6, 4),
        worst_case={"temperature_c": _celsius(wi.TRIPLE_POINT_IH_III_TEMPERATURE),
                    "pressure_mpa": _r(wi.TRIPLE_POINT_IH_III_PRESSURE / 1e6, 5),
                    "hoop_stress_mpa": _r(worst.hoop / 1e6, 4), "von_mises_mpa": _r(worst.von_mises / 1e6, 4),
                    "safety_factor": _r(sf_worst, 3)},
    )
    margins = [
        MarginValue("chamber_safety_factor", "Chamber wall safety factor if the contents freeze at the coldest point",
                    None, "1", "not judged: no ice can form above the liquidus"),
        MarginValue("chamber_worst_case_safety_factor", "Chamber wall safety factor at the ice Ih-III triple point",
                    _r(sf_worst, 3), "1", f"yield {mat.yield_strength / 1e6:.0f} MPa over bore von Mises "
                    f"{worst.von_mises / 1e6:.1f} MPa at {wi.TRIPLE_POINT_IH_III_PRESSURE / 1e6:.1f} MPa"),
    ]
    cautions = ["trapped-gas"] if c.trapped_gas_volume > 0 else []
    return SectionOutput("chamber", report, margins, cautions, ChamberState(coldest, None, fill, None, None, worst))
