"""Solution thermodynamics: composition, osmolality, water activity, liquidus, freeze concentration, glass.

A solution is water, optionally the NaCl of an isotonic-saline carrier, and cryoprotectants (the agents
of ``planner/data/agents.yaml``). In the core it is a :class:`Composition`: molalities [mol per kg water].

Concentration units (protocol words, converted once by :func:`composition`):

- ``mass_percent``: mass of the agent per mass of the **whole solution** (water, carrier NaCl and every
  agent included), times 100 (% w/w);
- ``percent_w_v``: grams of the agent per 100 mL of the final solution at 20 C;
- ``percent_v_v``: millilitres of the pure liquid agent (at 20 C, before mixing) per 100 mL of the final
  solution – liquids only (dmso, glycerol, ethylene-glycol, propylene-glycol);
- ``molar``: mol of the agent per litre of the final solution at 20 C;
- ``molal``: mol of the agent per kg of water.

Carrier ``isotonic-saline`` is 0.9 % w/v NaCl (9.0 g NaCl per litre of saline at 20 C, 0.1547 mol/kg
water). Cryoprotectants are taken as dissolved in it: the NaCl keeps its isotonic ratio to the water
(0.1547 mol per kg water), whatever else is added, and its mass counts in the whole solution's mass.
Carrier ``water`` has no NaCl (give ``nacl`` as an agent for other saline strengths).

Osmolality follows the multisolute osmotic virial equation [ref:elliott-2007] with electrolytes entered
as k·m [ref:prickett-2011]; for NaCl k depends on concentration (a Debye-Hückel-form screening term
[ref:pitzer-1973] fitted to CRC freezing points [ref:crc-handbook]), because a constant k fitted over a
wide range puts isotonic saline about 8 % low. Osmolality is in the **freezing-point osmometer
convention**, π = ΔT / 1.86 K kg/osmol: the convention the coefficients were fitted with, and the number
a lab's freezing-point osmometer displays. The liquidus at 0.1 MPa is therefore T_f = 273.15 K − 1.86 π,
which reproduces the freezing points the coefficients were fitted to. The water activity is the
thermodynamic one at the liquidus, a_w = a_w,ice = p_ice/p_liq [ref:murphy-koop-2005],
evaluated at the same depression below the triple point (273.16 K), where those vapour pressures meet. It
equals exp(−M_w π) in dilute solutions (at 40 % ethylene glycol the two differ by 0.2 %).

The stated uncertainty of a liquidus (:func:`freezing_point_uncertainty`) is each coefficient set's
estimate from its fit and checks plus, for a mixture, the spread between the multisolute virial equation
and the sum of the binary depressions [ref:kleinhans-mazur-2007] (:func:`mixing_spread`).

Three tiers of validity. Every coefficient set carries the molality range it was fitted over, and the
liquidus the range of the data (down to −51 C): a result beyond either carries an ``extrapolated`` flag,
one that rests on coefficients not checked against an outside table an ``indicative`` flag. A solution
past the point where the fitted osmolality stops rising with concentration (glycerol and the glycols near
70 % by mass, concentrated mixtures earlier: see :func:`past_turnover`), or whose liquidus would lie
below −100 C, is refused (:class:`~planner.errors.InputError` from :func:`composition`,
:class:`~planner.errors.ModelRangeError` from :func:`solution_properties`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from planner.errors import InputError, ModelRangeError, choice_error
from planner.references import cite
from planner.results import Flag, Result
from planner.validity import Range, Validity
from planner.yamlio import load_yaml

CRYOSCOPIC_CONSTANT = 1.86  # K kg/osmol, osmometer convention of the coefficients [ref:elliott-2007]
WATER_MOLAR_MASS = 0.018015268  # kg/mol [ref:iapws-95]
UNITS = ("mass_percent", "molal", "molar", "percent_w_v", "percent_v_v")
CARRIERS = ("water", "isotonic-saline")
TRIPLE_POINT = 273.16  # K, where Murphy-Koop's vapour pressures of ice and water meet [ref:iapws-r14-08]
ISOTONIC_SALINE_W_V = 9.0  # kg NaCl per m3 of saline at 20 C (0.9 % w/v)
_MISSING_GLASS_TOLERANCE = 0.02  # mass fraction of agents without glass data left out, flagged indicative
_GRID_POINTS = 1500
_GRID_MAX_SCALE = 1.0e4  # liquid molality at least up to 10^4 times the initial (99.99 % of the water frozen)

#: The liquidus: fitted data reach -51 C (60 % ethylene glycol, [ref:crc-handbook]); colder liquidus values are
#: extrapolated (flagged), and below -100 C refused (no ice liquidus of these solutions goes there).
LIQUIDUS = Validity(
    "osmometer liquidus of the osmotic virial fits",
    "crc-handbook",
    {"temperature": Range(222.0, 273.15, "K")},
)
LIQUIDUS_FLOOR = 173.15  # K

MURPHY_KOOP_2005 = Validity(
    "Murphy-Koop 2005 vapour pressures of ice and supercooled water",
    "murphy-koop-2005",
    {"temperature": Range(123.0, 273.16, "K")},
)


# --- data file ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class VirialCoefficients:
    """Osmotic virial coefficients of one agent: π = x + B x² + C x³, x = k(m) m [osmol/kg water].

    ``dissociation(m)`` = ions · (1 − A√m / (1 + b√m)); A = 0 and ions = 1 for a non-electrolyte.
    """

    second: float  # B [kg/osmol]
    third: float  # C [(kg/osmol)^2]
    ions: int
    screening_a: float  # A [(kg/mol)^0.5]
    screening_b: float  # b [(kg/mol)^0.5]
    molality_range: tuple[float, float]  # mol/kg water, of the fitted data
    uncertainty_percent: float | None  # of the freezing-point depression, inside the range
    method: str  # published | fitted | borrowed
    indicative: bool
    note: str
    source: str

    def dissociation(self, molality: ArrayLike) -> np.ndarray:
        """Concentration-dependent dissociation constant k(m) [1]."""
        root = np.sqrt(np.asarray(molality, dtype=float))
        return self.ions * (1.0 - self.screening_a * root / (1.0 + self.screening_b * root))


@dataclass(frozen=True)
class GlassData:
    """Gordon–Taylor data of an agent: anhydrous glass transition [K], constant k, and Tg' where known."""

    temperature: float  # K
    k: float
    source: str
    tg_prime: float | None = None  # K
    tg_prime_mass_fraction: float | None = None  # solute mass fraction of the freeze-concentrated glass
    tg_prime_source: str | None = None


@dataclass(frozen=True)
class FreezeConcentrateGlass:
    """The maximally freeze-concentrated glass of a binary agent-water solution: Tg' [K] and its solute
    mass fraction Cg' [1], from the ``gordon_taylor`` block or a ``freeze_concentrate`` block of the data file
    (an agent may have a published Tg' without published Gordon-Taylor constants)."""

    temperature: float  # K
    mass_fraction: float | None
    source: str


@dataclass(frozen=True)
class AgentData:
    """One entry of ``planner/data/agents.yaml`` in SI units."""

    name: str
    label: str
    electrolyte: bool
    permeating: bool
    molar_mass: float  # kg/mol
    liquid_density: float | None  # kg/m3 of the pure liquid at 20 C (None for solids)
    volume_v0: float  # m3/mol, apparent molar volume at infinite dilution
    volume_v1: float  # m3/mol per (mol/kg), linear term
    volume_sqrt: float  # m3/mol per (mol/kg)^0.5, square-root term
    solubility: float | None  # mol/kg water at about 20 C (None: miscible)
    solubility_mass_percent: float | None
    virial: VirialCoefficients
    glass: GlassData | None
    eutectic_temperature: float | None  # K
    eutectic_mass_percent: float | None = None  # liquid composition at the eutectic with ice
    sources: dict[str, str] = field(default_factory=dict)
    freeze_concentrate: FreezeConcentrateGlass | None = None  # Tg' and Cg', with or without Gordon-Taylor data

    def apparent_molar_volume(self, molality: ArrayLike) -> np.ndarray:
        """Apparent molar volume at 20 C [m3/mol]."""
        m = np.asarray(molality, dtype=float)
        return self.volume_v0 + self.volume_v1 * m + self.volume_sqrt * np.sqrt(m)


@dataclass(frozen=True)
class WaterData:
    molar_mass: float  # kg/mol
    density: float  # kg/m3 at 20 C
    melting_temperature: float  # K at 0.1 MPa
    glass_transition: float  # K
    sources: dict[str, str]


def _source(entry: dict, key: str, where: str) -> str:
    value = entry.get(key)
    cite(value)  # an unknown key is an error naming the nearest one
    return value


def parse_freeze_concentrate(name: str, entry: dict, glass: GlassData | None) -> FreezeConcentrateGlass | None:
    """Tg' and Cg' of one ``agents.yaml`` entry: from its Gordon–Taylor block, else its ``freeze_concentrate``.

    A Tg' outside 150–273.15 K or a Cg' outside 0–1 is an :class:`InputError` naming the entry.
    """
    if glass is not None and glass.tg_prime is not None:
        tg, w, source, where = glass.tg_prime, glass.tg_prime_mass_fraction, glass.tg_prime_source, "gordon_taylor"
    elif entry.get("freeze_concentrate"):
        fc = entry["freeze_concentrate"]
        tg, w, source, where = fc.get("tg_prime_k"), fc.get("tg_prime_mass_fraction"), fc.get("source"), \
            "freeze_concentrate"
    else:
        return None
    field_path = f"agents.yaml {name}.{where}"
    if not isinstance(tg, (int, float)) or isinstance(tg, bool) or not 150.0 < tg < 273.15:
        raise InputError(f"{field_path}.tg_prime_k", tg, "a glass transition between 150 and 273.15 K")
    if w is not None and (not isinstance(w, (int, float)) or isinstance(w, bool) or not 0.0 < w < 1.0):
        raise InputError(f"{field_path}.tg_prime_mass_fraction", w, "a solute mass fraction between 0 and 1, or null")
    try:
        cite(source)
    except InputError as exc:
        raise InputError(f"{field_path}.source", source, exc.allowed, exc.hint) from None
    return FreezeConcentrateGlass(float(tg), None if w is None else float(w), source)


@lru_cache(maxsize=1)
def _data() -> tuple[WaterData, dict[str, AgentData]]:
    text = resources.files("planner").joinpath("data/agents.yaml").read_text(encoding="utf-8")
    raw = load_yaml(text, "agents.yaml")
    w = raw["water"]
    water = WaterData(
        w["molar_mass_g_per_mol"] * 1e-3,
        float(w["density_kg_per_m3"]),
        float(w["melting_temperature_k"]),
        float(w["glass_transition_k"]),
        {k: _source(w, k, "water") for k in w if k.endswith("_source")},
    )
    agents: dict[str, AgentData] = {}
    for name, e in raw["agents"].items():
        v = e["osmotic_virial"]
        vol = e["apparent_molar_volume"]
        molar_mass = e["molar_mass_g_per_mol"] * 1e-3
        solubility_pct = e.get("solubility_mass_percent")
        solubility = None
        if solubility_pct is not None:
            solubility = solubility_pct / (100.0 - solubility_pct) / molar_mass
        glass = None
        if e.get("gordon_taylor"):
            g = e["gordon_taylor"]
            glass = GlassData(
                float(g["tg_k"]), float(g["k"]), _source(g, "source", name),
                g.get("tg_prime_k"), g.get("tg_prime_mass_fraction"),
                _source(g, "tg_prime_source", name) if g.get("tg_prime_source") else None,
            )
        freeze_concentrate = parse_freeze_concentrate(name, e, glass)
        eutectic = e.get("eutectic")
        sources = {k: _source(e, k, name) for k in e if k.endswith("_source")}
        sources["osmotic_virial"] = _source(v, "source", name)
        sources["apparent_molar_volume"] = _source(vol, "source", name)
        lo, hi = v["molality_range_mol_per_kg"]
        agents[name] = AgentData(
            name=name,
            label=e["label"],
            electrolyte=bool(e["electrolyte"]),
            permeating=bool(e["permeating"]),
            molar_mass=molar_mass,
            liquid_density=e.get("liquid_density_kg_per_m3"),
            volume_v0=vol["v0_cm3_per_mol"] * 1e-6,
            volume_v1=vol.get("v1_cm3_per_mol", 0.0) * 1e-6,
            volume_sqrt=vol.get("v_sqrt_cm3_per_mol", 0.0) * 1e-6,
            solubility=solubility,
            solubility_mass_percent=solubility_pct,
            virial=VirialCoefficients(
                second=float(v["second"]),
                third=float(v["third"]),
                ions=int(v["ions"]),
                screening_a=float(v.get("screening_a", 0.0)),
                screening_b=float(v.get("screening_b", 1.2)),
                molality_range=(float(lo), float(hi)),
                uncertainty_percent=v.get("depression_uncertainty_percent"),
                method=v["method"],
                indicative=bool(v.get("indicative", False)),
                note=str(v.get("note", "")),
                source=sources["osmotic_virial"],
            ),
            glass=glass,
            eutectic_temperature=eutectic["temperature_k"] if eutectic else None,
            eutectic_mass_percent=eutectic["mass_percent"] if eutectic else None,
            sources=sources,
            freeze_concentrate=freeze_concentrate,
        )
        if eutectic:
            _source(eutectic, "source", name)
    return water, agents


def water_data() -> WaterData:
    """The solvent's data (molar mass, density at 20 C, melting temperature, glass transition)."""
    return _data()[0]


def known_agents() -> list[str]:
    """Cryoprotectant agent words allowed in protocols (keys of ``planner/data/agents.yaml``)."""
    return list(_data()[1])


def agent_data(name: str) -> AgentData:
    """The data-file entry of one agent; an unknown word is an :class:`InputError` with a "did you mean"."""
    agents = _data()[1]
    if name not in agents:
        raise choice_error("agent", name, agents)
    return agents[name]


def melting_temperature_water() -> float:
    """Melting temperature of pure water at 0.1 MPa [K]."""
    return _data()[0].melting_temperature


# --- composition ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Composition:
    """A solution as molalities: ``molality[i]`` mol of ``agents[i]`` per kg of water."""

    agents: tuple[str, ...]
    molality: tuple[float, ...]

    def __post_init__(self):
        if len(self.agents) != len(self.molality):
            raise ValueError("Composition: agents and molality differ in length")
        if len(set(self.agents)) != len(self.agents):
            raise ValueError(f"Composition: an agent is listed twice in {self.agents}")
        for a, m in zip(self.agents, self.molality, strict=True):
            agent_data(a)
            if not (math.isfinite(m) and m >= 0.0):
                raise InputError(f"composition.{a}", m, "a molality of 0 or more [mol/kg water]")

    def scaled(self, factor: float) -> Composition:
        """The same solutes in ``1/factor`` of the water: the liquid left when a fraction ``1 − 1/factor``
        of the water has frozen out (factor = 1/(1 − x))."""
        f = float(factor)
        if not (math.isfinite(f) and f > 0):
            raise InputError("factor", factor, "a finite number above 0")
        return Composition(self.agents, tuple(m * f for m in self.molality))

    @property
    def data(self) -> tuple[AgentData, ...]:
        return tuple(agent_data(a) for a in self.agents)

    def molality_of(self, agent: str) -> float:
        """Molality of one agent [mol/kg water], 0 when absent."""
        return self.molality[self.agents.index(agent)] if agent in self.agents else 0.0

    @property
    def solution_mass_per_water_mass(self) -> float:
        """Mass of solution per mass of water [kg/kg]."""
        return 1.0 + sum(m * d.molar_mass for m, d in zip(self.molality, self.data, strict=True))

    @property
    def water_mass_fraction(self) -> float:
        """Mass fraction of water in the whole solution [1]."""
        return 1.0 / self.solution_mass_per_water_mass

    def mass_fractions(self) -> dict[str, float]:
        """Mass fraction of each agent in the whole solution [1]."""
        total = self.solution_mass_per_water_mass
        return {a: m * d.molar_mass / total for a, m, d in zip(self.agents, self.molality, self.data, strict=True)}


def _isotonic_molality() -> float:
    """NaCl molality of 0.9 % w/v saline [mol/kg water], from the density model at 20 C."""
    nacl = agent_data("nacl")
    m = ISOTONIC_SALINE_W_V / nacl.molar_mass / 1000.0  # first guess: 9 g per kg water
    for _ in range(50):
        rho = density(Composition(("nacl",), (m,)))
        mass_conc = m * nacl.molar_mass * rho / (1.0 + m * nacl.molar_mass)  # kg NaCl per m3
        new = m * ISOTONIC_SALINE_W_V / mass_conc
        if abs(new - m) < 1e-13:
            break
        m = new
    return m


@lru_cache(maxsize=1)
def isotonic_saline_molality() -> float:
    """NaCl of the isotonic-saline carrier [mol/kg water] (0.9 % w/v at 20 C)."""
    return _isotonic_molality()


def density(comp: Composition) -> float:
    """Density of the solution at about 20 C [kg/m3] (estimate).

    Parameters
    ----------
    comp : Composition
        Molalities [mol/kg water].

    Returns
    -------
    float
        ρ [kg/m3].

    Notes
    -----
    ρ = (1 + Σ mᵢMᵢ) / (1/ρ_w + Σ mᵢ V_φ,i(mᵢ)), with V_φ the apparent molar volume of each agent as if
    it were alone in the water (no cross terms). The V_φ of NaCl, glycerol and the glycols are fitted to
    Melinder's densities [ref:melinder-2010] (about 0.3 % in 2-50 % by mass); DMSO uses its pure-liquid
    molar volume (ideal mixing, about 2 % low) and the sugars a partial molar volume from memory
    [ref:crc-handbook]. Good enough for unit conversions; not a reference density.

    References
    ----------
    [ref:melinder-2010], [ref:crc-handbook], [ref:iapws-95]
    """
    water = water_data()
    volume = 1.0 / water.density
    mass = 1.0
    for m, d in zip(comp.molality, comp.data, strict=True):
        volume += m * float(d.apparent_molar_volume(m))
        mass += m * d.molar_mass
    return mass / volume


def _unit_coefficients(unit: str, value: float, data: AgentData, rho: float) -> tuple[float, float, float]:
    """(a, f, rhs) of the row a·mᵢ − f·Σ Mⱼmⱼ = f·(1 + carrier) + rhs for one concentration entry."""
    if unit == "molal":
        return 1.0, 0.0, value
    if unit == "mass_percent":
        return data.molar_mass, value / 100.0, 0.0
    if unit == "percent_w_v":
        return data.molar_mass, 10.0 * value / rho, 0.0  # g/100 mL = 10 kg/m3
    if unit == "molar":
        return 1.0, 1000.0 * value / rho, 0.0  # mol/L = 1000 mol/m3
    if unit == "percent_v_v":
        return data.molar_mass / data.liquid_density, value / (100.0 * rho), 0.0
    raise ValueError(unit)


def concentration(comp: Composition, agent: str, unit: str) -> float:
    """Concentration of one agent of ``comp`` in a protocol unit (see the module docstring).

    Parameters
    ----------
    comp : Composition
        Molalities [mol/kg water].
    agent : str
        An agent of ``comp``.
    unit : str
        One of ``mass_percent`` [%], ``molal`` [mol/kg water], ``molar`` [mol/L], ``percent_w_v``
        [g/100 mL], ``percent_v_v`` [mL/100 mL].

    Returns
    -------
    float
        The concentration in ``unit`` (20 C for the volume-based units).
    """
    if unit not in UNITS:
        raise choice_error("unit", unit, UNITS)
    d = agent_data(agent)
    m = comp.molality_of(agent)
    total = comp.solution_mass_per_water_mass  # kg per kg water
    if unit == "molal":
        return m
    if unit == "mass_percent":
        return 100.0 * m * d.molar_mass / total
    volume = total / density(comp)  # m3 per kg water
    if unit == "percent_w_v":
        return m * d.molar_mass / volume / 10.0
    if unit == "molar":
        return m / volume / 1000.0
    if d.liquid_density is None:
        raise InputError("unit", unit, "mass_percent, molal, molar or percent_w_v", f"{agent} is not a liquid")
    return 100.0 * m * d.molar_mass / d.liquid_density / volume


def _number(value: Any, path: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise InputError(path, value, "a number")
    x = float(value)
    if not math.isfinite(x):
        raise InputError(path, value, "a finite number")
    return x


_UNIT_LIMITS = {
    "mass_percent": "above 0 and below 100 (% of the whole solution's mass)",
    "percent_v_v": "above 0 and below 100 (mL of pure agent per 100 mL of solution)",
    "percent_w_v": "above 0 (g per 100 mL of solution)",
    "molal": "above 0 (mol per kg water)",
    "molar": "above 0 (mol per L of solution)",
}


def composition(
    carrier: str, cryoprotectants: Sequence[tuple[str, str, float]], field: str = "solution"
) -> Composition:
    """Validate a protocol's solution and convert it to molalities.

    Parameters
    ----------
    carrier : str
        ``water`` or ``isotonic-saline`` (0.9 % w/v NaCl; its NaCl keeps the isotonic ratio to water).
    cryoprotectants : sequence of (agent, unit, value)
        ``agent`` a word of :func:`known_agents`; ``unit`` one of ``mass_percent`` [% of the whole
        solution's mass], ``molal`` [mol/kg water], ``molar`` [mol/L], ``percent_w_v`` [g/100 mL],
        ``percent_v_v`` [mL pure liquid/100 mL]; ``value`` in that unit.
    field : str
        Key path of the solution in the protocol, for error messages.

    Returns
    -------
    Composition
        The agents in the order given, then ``nacl`` of the carrier.

    Raises
    ------
    InputError
        Naming ``{field}.carrier`` or ``{field}.cryoprotectants[i].{unit}`` (``.agent``), the value and
        the valid range: unknown words, negative or non-finite values, an agent listed twice,
        percentages summing past 100, a composition that leaves no water, a concentration above the
        agent's solubility in water at about 20 C, a solution the osmotic model cannot describe (past
        its turnover, or a liquidus below −100 C; the entry named is the one nearest its fitted limit).
    """
    if carrier not in CARRIERS:
        raise choice_error(f"{field}.carrier", carrier, CARRIERS)
    names = known_agents()
    entries: list[tuple[str, str, float, str]] = []
    seen: dict[str, int] = {}
    sums = {"mass_percent": 0.0, "percent_v_v": 0.0}
    for i, item in enumerate(cryoprotectants):
        base = f"{field}.cryoprotectants[{i}]"
        try:
            agent, unit, value = item
        except (TypeError, ValueError):
            raise InputError(base, item, "an (agent, unit, value) entry") from None
        if agent not in names:
            raise choice_error(f"{base}.agent", agent, names)
        if unit not in UNITS:
            raise choice_error(f"{base}.unit", unit, UNITS)
        path = f"{base}.{unit}"
        x = _number(value, path)
        if x <= 0.0 or (unit in sums and x >= 100.0):
            raise InputError(path, value, _UNIT_LIMITS[unit])
        if agent in seen:
            raise InputError(f"{base}.agent", agent, "each agent once",
                             f"already given as cryoprotectants[{seen[agent]}]")
        if agent == "nacl" and carrier == "isotonic-saline":
            raise InputError(f"{base}.agent", agent, "an agent other than nacl with carrier isotonic-saline",
                             "for another NaCl strength use carrier water and give the total NaCl")
        data = agent_data(agent)
        if unit == "percent_v_v" and data.liquid_density is None:
            raise InputError(f"{base}.unit", unit, "mass_percent, molal, molar or percent_w_v",
                             f"{agent} is not a liquid, so % v/v does not apply")
        if unit in sums:
            if sums[unit] + x >= 100.0:
                left = 100.0 - sums[unit]
                raise InputError(path, value, f"above 0 and below {left:g} (the {unit} entries sum past 100)")
            sums[unit] += x
        seen[agent] = i
        entries.append((agent, unit, x, path))

    carrier_m = isotonic_saline_molality() if carrier == "isotonic-saline" else 0.0
    molality = _solve_molalities(entries, carrier_m)
    agents = tuple(e[0] for e in entries)
    values = tuple(float(m) for m in molality)
    if carrier_m > 0.0:
        agents += ("nacl",)
        values += (carrier_m,)
    comp = Composition(agents, values)
    _check_solubility(comp, entries)
    try:
        _check_rising(comp)
    except ModelRangeError:
        ratios = [m / agent_data(e[0]).virial.molality_range[1] for e, m in zip(entries, molality, strict=True)]
        agent, unit, value, path = entries[int(np.argmax(ratios))]
        raise InputError(path, value, "a lower concentration: past this one the fitted osmotic model of "
                         "the solution stops rising with concentration (single agents near 70 % by mass) or "
                         f"puts the liquidus below {LIQUIDUS_FLOOR - 273.15:g} C, far past its fitted ranges",
                         "the planner cannot compute a liquidus for it") from None
    return comp


def _solve_molalities(entries: list[tuple[str, str, float, str]], carrier_m: float) -> np.ndarray:
    """Solve the concentration entries for molalities; the volume-based units iterate on the density."""
    n = len(entries)
    if n == 0:
        return np.zeros(0)
    data = [agent_data(e[0]) for e in entries]
    molar_mass = np.array([d.molar_mass for d in data])
    fixed = 1.0 + carrier_m * agent_data("nacl").molar_mass
    carrier = (("nacl",), (carrier_m,)) if carrier_m > 0 else ((), ())
    rho = water_data().density
    m = np.zeros(n)
    for _ in range(100):
        a = np.empty(n)
        f = np.empty(n)
        extra = np.empty(n)
        for i, ((_agent, unit, value, _path), d) in enumerate(zip(entries, data, strict=True)):
            a[i], f[i], extra[i] = _unit_coefficients(unit, value, d, rho)
        matrix = np.diag(a) - np.outer(f, molar_mass)
        rhs = f * fixed + extra
        try:
            m_new = np.linalg.solve(matrix, rhs)
        except np.linalg.LinAlgError:
            m_new = np.full(n, np.inf)
        bad = ~np.isfinite(m_new) | (m_new <= 0.0)
        if np.any(bad):
            agent, unit, value, path = entries[int(np.argmax(bad))]
            raise InputError(path, value, "a composition that leaves water in the solution",
                             "the concentrations together exceed the whole solution")
        converged = np.allclose(m_new, m, rtol=1e-12, atol=0.0)
        m = m_new
        comp = Composition(tuple(e[0] for e in entries) + carrier[0], tuple(m) + carrier[1])
        rho_new = density(comp)
        if converged and abs(rho_new - rho) < 1e-9 * rho:
            return m
        rho = rho_new
    agent, unit, value, path = entries[-1]
    raise InputError(path, value, "a composition whose volume-based units can be solved",
                     "the density iteration did not settle")


def _check_solubility(comp: Composition, entries: list[tuple[str, str, float, str]]) -> None:
    for agent, unit, value, path in entries:
        d = agent_data(agent)
        if d.solubility is None:
            continue
        total = comp.molality_of(agent)
        if total > d.solubility * (1 + 1e-9):
            at_limit = Composition(
                comp.agents, tuple(d.solubility if a == agent else m for a, m in zip(comp.agents, comp.molality, strict=True))
            )
            limit = concentration(at_limit, agent, unit)
            raise InputError(
                path, value,
                f"above 0 and at most {limit:.4g} (solubility of {agent} in water at about 20 C, "
                f"{d.solubility_mass_percent:g} % by mass [{d.sources.get('solubility_source')}])",
            )


# --- osmolality, liquidus, water activity --------------------------------------------------------------
def _as_float(x: ArrayLike) -> np.ndarray:
    return np.asarray(x, dtype=float)


def _out(x: np.ndarray):
    return x[()] if np.ndim(x) == 0 else x


def _scale(scale: ArrayLike) -> np.ndarray:
    s = _as_float(scale)
    if not np.all(np.isfinite(s) & (s >= 0.0)):
        bad = s[~(np.isfinite(s) & (s >= 0.0))] if s.ndim else s
        raise ModelRangeError("scale", np.ravel(bad)[:3].tolist(), "0 to inf (finite)", "osmotic virial")
    return s


def _effective_molalities(comp: Composition, scale: np.ndarray) -> tuple[np.ndarray, tuple[AgentData, ...]]:
    data = comp.data
    m = np.array(comp.molality, dtype=float).reshape((-1,) + (1,) * scale.ndim) * scale
    x = np.empty_like(m)
    for i, d in enumerate(data):
        x[i] = d.virial.dissociation(m[i]) * m[i]
    return x, data


def osmolality(comp: Composition, scale: ArrayLike = 1.0):
    """Osmolality of the liquid with molalities ``comp.molality × scale`` [osmol/kg water].

    Parameters
    ----------
    comp : Composition
        Molalities [mol/kg water].
    scale : array_like
        Concentration factor [1] (1/(1 − x) when a fraction x of the water is ice); scalar or array.

    Returns
    -------
    float or numpy.ndarray
        π [osmol/kg water], osmometer convention, shaped like ``scale``.

    Notes
    -----
    Multisolute osmotic virial equation [ref:elliott-2007] with electrolytes as x = k·m
    [ref:prickett-2011]:

        π = Σᵢ xᵢ + Σᵢ Σⱼ (Bᵢ + Bⱼ)/2 · xᵢxⱼ + Σᵢ Σⱼ Σₖ (CᵢCⱼCₖ)^(1/3) · xᵢxⱼxₖ
          = S + (Σ Bᵢxᵢ)·S + (Σ Cᵢ^(1/3) xᵢ)³,   S = Σ xᵢ,

    with k(m) = ions · (1 − A√m/(1 + b√m)) for NaCl (Debye–Hückel form [ref:pitzer-1973], fitted to
    [ref:crc-handbook]) and k = 1 otherwise. For one solute it is the binary fit x + Bx² + Cx³.
    Valid for each agent over the molality range in ``planner/data/agents.yaml``; use
    :func:`composition_flags` for the flags of a given scale.

    References
    ----------
    [ref:elliott-2007], [ref:prickett-2011], [ref:pitzer-1973]
    """
    s = _scale(scale)
    if not comp.agents:
        return _out(np.zeros_like(s))
    x, data = _effective_molalities(comp, s)
    second = np.array([d.virial.second for d in data]).reshape((-1,) + (1,) * s.ndim)
    third = np.cbrt(np.array([d.virial.third for d in data])).reshape((-1,) + (1,) * s.ndim)
    total = x.sum(axis=0)
    return _out(total + (second * x).sum(axis=0) * total + ((third * x).sum(axis=0)) ** 3)


def past_turnover(comp: Composition, scale: ArrayLike = 1.0) -> np.ndarray | bool:
    """True where the model's osmolality no longer rises with concentration at ``comp × scale``: with
    more of all the solutes together, or with more of any one of them.

    Fitted sets with a negative third coefficient (glycerol, the glycols) turn over at high
    concentration (single agents near 70 % by mass, mixtures earlier); past that point the virial
    equation no longer describes the solution and its numbers must not be used.
    """
    s = _scale(scale)
    if not comp.agents:
        return _out(np.zeros_like(s, dtype=bool))
    base = np.asarray(osmolality(comp, s))
    past = np.asarray(osmolality(comp, s * (1.0 + 1e-6) + 1e-12)) <= base
    for i, m in enumerate(comp.molality):  # more of any one agent must also raise the osmolality
        richer = list(comp.molality)
        richer[i] = m * (1.0 + 1e-6) + 1e-9
        past |= np.asarray(osmolality(Composition(comp.agents, tuple(richer)), s)) <= base
    return _out(past)


def _check_rising(comp: Composition) -> None:
    """Refuse a composition past the model's turnover or with a liquidus below -100 C."""
    shown = {a: round(m, 4) for a, m in zip(comp.agents, comp.molality, strict=True)}
    if bool(past_turnover(comp, 1.0)) or bool(np.any(past_turnover(comp, np.linspace(0.05, 1.0, 60)))):
        raise ModelRangeError("molality", shown, "below the concentration where the fitted osmotic model "
                              "stops rising with concentration", "osmotic virial")
    t_m = melting_temperature_water()
    if float(osmolality(comp)) >= (t_m - LIQUIDUS_FLOOR) / CRYOSCOPIC_CONSTANT:
        raise ModelRangeError("molality", shown, f"a liquidus above {LIQUIDUS_FLOOR - 273.15:g} C",
                              "osmotic virial")


def freezing_point_from_osmolality(osmolality: ArrayLike):
    """Liquidus temperature at 0.1 MPa of a solution of given osmolality [K].

    Parameters
    ----------
    osmolality : array_like
        π [osmol/kg water], osmometer convention; 0 up to 146.8 (where the line would reach 0 K).

    Returns
    -------
    float or numpy.ndarray
        T_f [K].

    Notes
    -----
    T_f = T_m − K_f·π, T_m = 273.15 K, K_f = 1.86 K kg/osmol: the linear osmometer convention with which
    the osmotic virial coefficients were fitted [ref:elliott-2007]; with it the fitted coefficients give
    back the measured freezing points. K_f is also the thermodynamic cryoscopic constant of water,
    R T_m² M_w / Δh_fus = 1.860 K kg/mol [ref:iapws-95].

    References
    ----------
    [ref:elliott-2007]
    """
    p = _as_float(osmolality)
    t_m = melting_temperature_water()
    limit = t_m / CRYOSCOPIC_CONSTANT
    ok = np.isfinite(p) & (p >= 0.0) & (p < limit)
    if not np.all(ok):
        bad = p[~ok] if p.ndim else p
        raise ModelRangeError("osmolality", np.ravel(bad)[:3].tolist(), f"0 to {limit:.4g} osmol/kg",
                              "osmometer liquidus")
    return _out(t_m - CRYOSCOPIC_CONSTANT * p)


def osmolality_at_freezing_point(temperature: ArrayLike):
    """Osmolality whose liquidus at 0.1 MPa is ``temperature`` [osmol/kg water] (inverse of the above).

    Parameters
    ----------
    temperature : array_like
        T [K], above 0 and at most 273.15 K.

    Returns
    -------
    float or numpy.ndarray
        π = (T_m − T)/K_f [osmol/kg water], osmometer convention [ref:elliott-2007].
    """
    t = _as_float(temperature)
    t_m = melting_temperature_water()
    ok = np.isfinite(t) & (t > 0.0) & (t <= t_m)
    if not np.all(ok):
        bad = t[~ok] if t.ndim else t
        raise ModelRangeError("temperature", np.ravel(bad)[:3].tolist(), f"0 to {t_m:g} K",
                              "osmometer liquidus")
    return _out((t_m - t) / CRYOSCOPIC_CONSTANT)


def freezing_point(comp: Composition, scale: ArrayLike = 1.0):
    """Liquidus (equilibrium freezing point) at 0.1 MPa of the liquid ``comp × scale`` [K].

    Parameters
    ----------
    comp : Composition
        Molalities [mol/kg water].
    scale : array_like
        Concentration factor [1]; scalar or array.

    Returns
    -------
    float or numpy.ndarray
        T_f [K] = 273.15 K − 1.86 K kg/osmol × :func:`osmolality` (see its Notes and validity).

    References
    ----------
    [ref:elliott-2007], [ref:crc-handbook]
    """
    return freezing_point_from_osmolality(osmolality(comp, scale))


def ice_water_activity(temperature: ArrayLike):
    """Water activity of a solution in equilibrium with ice at ``temperature`` [1].

    Parameters
    ----------
    temperature : array_like
        T [K], 123 to 273.16 K.

    Returns
    -------
    float or numpy.ndarray
        a_w,ice = p_ice(T) / p_liq(T).

    Notes
    -----
    Vapour pressures of ice (eq. 7) and of supercooled water (eq. 10) of Murphy & Koop 2005:
    ln p_ice = 9.550426 − 5723.265/T + 3.53068 ln T − 0.00728332 T;
    ln p_liq = 54.842763 − 6763.22/T − 4.210 ln T + 0.000367 T
    + tanh(0.0415 (T − 218.8)) (53.878 − 1331.22/T − 9.44523 ln T + 0.014025 T)  [p in Pa].

    References
    ----------
    [ref:murphy-koop-2005]
    """
    t = _as_float(temperature)
    MURPHY_KOOP_2005.check(temperature=t)
    log_t = np.log(t)
    ln_ice = 9.550426 - 5723.265 / t + 3.53068 * log_t - 0.00728332 * t
    ln_liq = (54.842763 - 6763.22 / t - 4.210 * log_t + 0.000367 * t
              + np.tanh(0.0415 * (t - 218.8)) * (53.878 - 1331.22 / t - 9.44523 * log_t + 0.014025 * t))
    return _out(np.exp(ln_ice - ln_liq))


def water_activity(comp: Composition, scale: ArrayLike = 1.0):
    """Water activity of the liquid ``comp × scale`` at its liquidus [1].

    Parameters
    ----------
    comp : Composition
        Molalities [mol/kg water].
    scale : array_like
        Concentration factor [1]; scalar or array.

    Returns
    -------
    float or numpy.ndarray
        a_w = a_w,ice(T_f): the thermodynamic water activity at the liquidus, taken as independent of
        temperature (as in the water-activity criterion of ice nucleation [ref:koop-2000]).

    Notes
    -----
    The vapour pressures of [ref:murphy-koop-2005] are those of ice and water under their own vapour,
    which melt at the triple point, 273.16 K; at 0.1 MPa ice melts at 273.15 K. The activity is taken at
    the same depression below each melting point, a_w = a_w,ice(T_f + 0.01 K), so that pure water has
    a_w = 1 and dilute solutions follow ln a_w = −M_w π. Raises :class:`ModelRangeError` when the
    liquidus lies below 123 K (no vapour-pressure data).

    References
    ----------
    [ref:murphy-koop-2005], [ref:elliott-2007], [ref:iapws-r14-08]
    """
    return ice_water_activity(_activity_temperature(freezing_point(comp, scale)))


def _activity_temperature(liquidus: ArrayLike) -> np.ndarray:
    """The temperature at which Murphy-Koop's a_w,ice matches a liquidus at 0.1 MPa (same depression)."""
    return np.minimum(_as_float(liquidus) + (TRIPLE_POINT - melting_temperature_water()), TRIPLE_POINT)


def composition_flags(comp: Composition, scale: ArrayLike = 1.0, warn: bool = False) -> list[Flag]:
    """Flags of the osmotic model for the liquid ``comp × scale``: ``extrapolated`` per agent past its
    fitted molality range, ``indicative`` for coefficient sets not checked against an outside table."""
    s = _scale(scale)
    flags: list[Flag] = []
    if np.any(past_turnover(comp, s)):
        flags.append(Flag("refused", "the fitted osmotic model stops rising with concentration here: its "
                          "osmolality and liquidus are not valid for this liquid", "elliott-2007"))
    pi = np.asarray(osmolality(comp, s))
    t_liquidus = melting_temperature_water() - CRYOSCOPIC_CONSTANT * pi
    flags += LIQUIDUS.flags(warn=warn, temperature=t_liquidus)
    for a, m, d in zip(comp.agents, comp.molality, comp.data, strict=True):
        if m == 0.0:
            continue
        lo, hi = d.virial.molality_range
        validity = Validity(f"osmotic virial coefficients of {a}", d.virial.source,
                            {"molality": Range(lo, hi, "mol/kg")})
        flags += validity.flags(warn=warn, molality=m * s)
        if d.virial.indicative:
            flags.append(Flag("indicative", f"{a}: {d.virial.note}", d.virial.source))
    return flags


def mixing_spread(comp: Composition) -> float:
    """Difference between two published ways of combining binary data for a mixture [K].

    The multisolute virial equation [ref:elliott-2007] (used here) against the sum of the binary
    freezing-point depressions at the same molalities [ref:kleinhans-mazur-2007]; both were reported to
    agree with measured ternary diagrams at moderate concentrations. 0 for a single agent.

    Returns
    -------
    float
        |ΔT_virial − Σ ΔT_binary| [K].
    """
    present = [(a, m) for a, m in zip(comp.agents, comp.molality, strict=True) if m > 0.0]
    if len(present) < 2:
        return 0.0
    t_m = melting_temperature_water()
    summed = sum(t_m - float(freezing_point(Composition((a,), (m,)))) for a, m in present)
    return abs((t_m - float(freezing_point(comp))) - summed)


def freezing_point_uncertainty(comp: Composition) -> float | None:
    """Estimated uncertainty of the liquidus of ``comp`` inside the fitted ranges [K] (not a statistical
    bound): the largest per-agent ``depression_uncertainty_percent`` of the depression (at least 0.02 K)
    plus, for a mixture, the :func:`mixing_spread`; None when an agent has no estimate."""
    if not comp.agents:
        return 0.0
    percents = [d.virial.uncertainty_percent for d in comp.data]
    if any(p is None for p in percents):
        return None
    depression = melting_temperature_water() - float(freezing_point(comp))
    return max(0.02, max(percents) / 100.0 * depression) + mixing_spread(comp)


# --- freeze concentration --------------------------------------------------------------------------------
@dataclass
class FreezeConcentration:
    """Equilibrium freezing of an open (isobaric, 0.1 MPa) sample below its liquidus.

    Arrays are shaped like ``temperature``. Above the liquidus no ice: fraction 0, scale 1.
    """

    temperature: np.ndarray  # K
    ice_fraction_of_water: np.ndarray  # kg ice per kg of the water initially present
    ice_mass_fraction: np.ndarray  # kg ice per kg of the whole sample
    scale: np.ndarray  # liquid molality / initial molality = 1/(1 − ice fraction of water)
    liquid_osmolality: np.ndarray  # osmol/kg water of the remaining liquid
    liquid_molality: dict[str, np.ndarray]  # mol/kg water of the remaining liquid, per agent
    freezing_point: float  # K, liquidus of the initial solution
    flags: list[Flag] = field(default_factory=list)
    liquid_glass_transition: np.ndarray | None = None  # K, Gordon-Taylor Tg of the remaining liquid
    model: str = "equilibrium freeze concentration (lever rule on the osmotic-virial liquidus)"
    source: str = "elliott-2007"


def _crossing_temperature(comp: Composition, scale: float) -> float:
    """Liquidus [K] of ``comp × scale`` (where a freeze-concentrated liquid reaches that scale)."""
    try:
        return float(freezing_point(comp, scale))
    except ModelRangeError:
        return float("nan")


def _monotone_grid(comp: Composition, max_scale: float) -> tuple[np.ndarray, np.ndarray]:
    """log(scale) and π on a grid, cut at the first place π stops rising (a fit's cubic turning over)."""
    log_s = np.linspace(0.0, math.log(max_scale), _GRID_POINTS)
    pi = np.asarray(osmolality(comp, np.exp(log_s)))
    rising = np.diff(pi) > 0
    stop = len(pi) if np.all(rising) else int(np.argmin(rising)) + 1
    return log_s[:stop], pi[:stop]


def freeze_concentration(comp: Composition, temperature: ArrayLike) -> FreezeConcentration:
    """Fraction of water frozen and concentration of the remaining liquid vs temperature (open container).

    Parameters
    ----------
    comp : Composition
        The solution as prepared [mol/kg water].
    temperature : array_like
        T [K] (above 0); scalar or array.

    Returns
    -------
    FreezeConcentration
        ``ice_fraction_of_water`` x, ``ice_mass_fraction`` x·w_water, ``scale`` s = 1/(1 − x),
        ``liquid_osmolality`` [osmol/kg], ``liquid_molality`` per agent, and flags.

    Notes
    -----
    At equilibrium below the liquidus the remaining liquid sits on the liquidus: π(s·m) = (T_m − T)/K_f
    (lever rule; solutes stay in the liquid, ice is pure). s is found on a logarithmic grid of π(s) and
    refined by Newton steps. Flags: ``extrapolated`` where an agent passes its fitted molality range;
    ``extrapolated`` where a solid agent passes its solubility (the curve beyond assumes it stays
    dissolved; NaCl·2H2O and ice crystallise together at the NaCl eutectic, −21.1 C) and where the
    liquidus passes the coldest fitted data (−51 C); ``indicative`` where the liquid would lie below its
    own Gordon–Taylor glass transition (near Tg': ice stops forming there in practice); ``refused``
    (values NaN) below −100 C and where the fitted model has no liquid in equilibrium with ice (past its
    turnover). For pure water all of it is ice below 273.15 K. ``liquid_glass_transition`` is the
    Gordon–Taylor Tg of the remaining liquid where every agent has data (else None).

    References
    ----------
    [ref:elliott-2007], [ref:rubinsky-perez-carlson-2005]
    """
    t = _as_float(temperature)
    if not np.all(np.isfinite(t) & (t > 0.0)):
        bad = t[~(np.isfinite(t) & (t > 0.0))] if t.ndim else t
        raise ModelRangeError("temperature", np.ravel(bad)[:3].tolist(), "above 0 K", "freeze concentration")
    t_m = melting_temperature_water()
    w_water = comp.water_mass_fraction
    flags: list[Flag] = []
    if not comp.agents or all(m == 0.0 for m in comp.molality):
        below = t < t_m
        x = np.where(below, 1.0, 0.0)
        s = np.where(below, np.inf, 1.0)
        if np.any(below):
            flags.append(Flag("refused", "pure water: at equilibrium all of it is ice below 273.15 K", "iapws-r14-08"))
        return FreezeConcentration(
            temperature=_out(t), ice_fraction_of_water=_out(x), ice_mass_fraction=_out(x * w_water),
            scale=_out(s), liquid_osmolality=_out(np.where(below, np.nan, 0.0)),
            liquid_molality={a: _out(m * s) for a, m in zip(comp.agents, comp.molality, strict=True)},
            freezing_point=t_m, flags=flags,
        )
    _check_rising(comp)
    t_f = float(freezing_point(comp))
    target = np.where(t < t_f, (t_m - t) / CRYOSCOPIC_CONSTANT, float(osmolality(comp)))
    pi_0 = float(osmolality(comp))
    # the liquid's concentration factor needed at the coldest temperature is at most about target/pi_0
    max_scale = min(max(_GRID_MAX_SCALE, 4.0 * float(np.max(target)) / pi_0), _GRID_MAX_SCALE * 1e8)
    log_s_grid, pi_grid = _monotone_grid(comp, max_scale)
    capped = len(log_s_grid) == _GRID_POINTS  # the grid ended at the largest scale, not at a turnover
    reachable = target <= pi_grid[-1]
    too_cold = t < LIQUIDUS_FLOOR
    if np.any(too_cold):
        flags.append(Flag("refused", f"below {LIQUIDUS_FLOOR - 273.15:g} C no liquidus of the fitted osmotic "
                          "model is used: those values are not computed", "crc-handbook"))
    log_s = np.interp(np.where(reachable, target, pi_grid[0]), pi_grid, log_s_grid)
    for _ in range(4):  # Newton on log s
        s_now = np.exp(log_s)
        pi_now = np.asarray(osmolality(comp, s_now))
        slope = (np.asarray(osmolality(comp, s_now * (1 + 1e-7))) - pi_now) / 1e-7
        step = np.where(slope > 0, (target - pi_now) / np.where(slope > 0, slope, 1.0), 0.0)
        log_s = np.clip(log_s + step, 0.0, log_s_grid[-1])
    s = np.where(t < t_f, np.exp(log_s), 1.0)
    s = np.where(reachable & ~too_cold, s, np.nan)
    if not np.all(reachable | too_cold):
        edge = t_m - CRYOSCOPIC_CONSTANT * float(pi_grid[-1]) - 273.15
        if capped:
            text = (f"below {edge:.1f} C more than {100 * (1 - 1 / max_scale):.6g} % of the water is ice; "
                    "the remaining liquid is not resolved and those values are not computed")
        else:
            text = (f"below {edge:.1f} C the fitted osmotic model stops rising with concentration and has no "
                    "liquid in equilibrium with ice; those values are not computed")
        flags.append(Flag("refused", text, "elliott-2007"))
    finite_s = np.where(np.isfinite(s), s, 1.0)
    for a, m, d in zip(comp.agents, comp.molality, comp.data, strict=True):
        if m == 0.0:
            continue
        lo, hi = d.virial.molality_range
        past = finite_s * m > hi
        if np.any(past):
            warmest = _crossing_temperature(comp, hi / m)
            flags.append(Flag("extrapolated", f"{a} passes its fitted molality range ({lo:g} to {hi:g} mol/kg) "
                              f"below {warmest - 273.15:.1f} C: liquid concentrations there are extrapolated",
                              d.virial.source))
        if d.virial.indicative:
            flags.append(Flag("indicative", f"{a}: {d.virial.note}", d.virial.source))
        if d.solubility is None:
            continue
        limit = d.solubility
        if d.eutectic_mass_percent is not None:
            limit = d.eutectic_mass_percent / (100.0 - d.eutectic_mass_percent) / d.molar_mass
        over = finite_s * m > limit
        if np.any(over):
            warmest = _crossing_temperature(comp, limit / m)
            if d.eutectic_mass_percent is not None:
                text = (f"{a} reaches its eutectic composition with ice ({d.eutectic_mass_percent:g} % by mass, "
                        f"{d.eutectic_temperature - 273.15:.1f} C in water alone) below {warmest - 273.15:.1f} C: "
                        "at equilibrium it crystallises there; the curve beyond assumes it stays dissolved")
            else:
                text = (f"{a} passes its solubility ({d.solubility_mass_percent:g} % by mass at 20 C) below "
                        f"{warmest - 273.15:.1f} C; the curve beyond assumes it stays dissolved")
            flags.append(Flag("extrapolated", text, d.sources.get("solubility_source")))
    flags += LIQUIDUS.flags(warn=False, temperature=np.where(reachable & (t < t_f), t, t_f))
    liquid_tg = _liquid_glass_transition(comp, finite_s)
    if liquid_tg is not None:
        glassy = (t < liquid_tg) & reachable
        if np.any(glassy):
            grid_t = t_m - CRYOSCOPIC_CONSTANT * pi_grid
            grid_tg = _liquid_glass_transition(comp, np.exp(log_s_grid))
            first = int(np.argmax(grid_t <= grid_tg)) if np.any(grid_t <= grid_tg) else len(grid_t) - 1
            warmest = float(grid_t[first]) if first == 0 else float(np.interp(
                0.0, [grid_t[first - 1] - grid_tg[first - 1], grid_t[first] - grid_tg[first]][::-1],
                [grid_t[first - 1], grid_t[first]][::-1]))
            flags.append(Flag(
                "indicative",
                f"below {warmest - 273.15:.1f} C the freeze-concentrated liquid lies below its own glass "
                "transition (Gordon-Taylor, near Tg'): ice stops forming there in practice, and the "
                "equilibrium ice fractions below that temperature overstate the ice",
                "gordon-taylor-1952",
            ))
        liquid_tg = np.where(reachable, liquid_tg, np.nan)
    x = 1.0 - 1.0 / s
    return FreezeConcentration(
        liquid_glass_transition=None if liquid_tg is None else _out(liquid_tg),
        temperature=_out(t),
        ice_fraction_of_water=_out(x),
        ice_mass_fraction=_out(x * w_water),
        scale=_out(s),
        liquid_osmolality=_out(np.where(reachable & ~too_cold, target, np.nan)),
        liquid_molality={a: _out(m * s) for a, m in zip(comp.agents, comp.molality, strict=True)},
        freezing_point=t_f,
        flags=flags,
    )


# --- glass transition ------------------------------------------------------------------------------------
def _liquid_glass_transition(comp: Composition, scale: np.ndarray) -> np.ndarray | None:
    """Gordon-Taylor Tg [K] of the liquid ``comp × scale``; None unless every agent present has data.

    With wᵢ = s mᵢMᵢ/(1 + s Σ mⱼMⱼ): T_g = (T_g,w + s Σ mᵢMᵢT_g,i/kᵢ) / (1 + s Σ mᵢMᵢ/kᵢ).
    """
    num = 0.0
    den = 0.0
    for m, d in zip(comp.molality, comp.data, strict=True):
        if m == 0.0:
            continue
        if d.glass is None:
            return None
        num += m * d.molar_mass * d.glass.temperature / d.glass.k
        den += m * d.molar_mass / d.glass.k
    return (water_data().glass_transition + scale * num) / (1.0 + scale * den)


@dataclass
class GlassTransition:
    """Glass transition of the solution as prepared (Gordon–Taylor) and Tg' where data gives it."""

    temperature: float | None  # K, None where data is missing
    tg_prime: float | None = None  # K, maximally freeze-concentrated solution
    tg_prime_mass_fraction: float | None = None  # solute mass fraction of that glass
    flags: list[Flag] = field(default_factory=list)
    model: str = "Gordon-Taylor (multicomponent, water as reference)"
    source: str = "gordon-taylor-1952"
    parameters: dict[str, Any] = field(default_factory=dict)


def glass_transition(comp: Composition) -> GlassTransition:
    """Glass transition temperature of the solution as prepared [K] (Gordon–Taylor).

    Parameters
    ----------
    comp : Composition
        Molalities [mol/kg water].

    Returns
    -------
    GlassTransition
        ``temperature`` [K] or None (flag ``missing-data``), ``tg_prime`` [K] for a single agent with
        tabulated Tg' (else None, flagged), flags, parameters.

    Notes
    -----
    Gordon–Taylor [ref:gordon-taylor-1952], binary: T_g = (w_s T_g,s + k w_w T_g,w)/(w_s + k w_w);
    for several solutes, with water as the reference component:
    T_g = (w_w T_g,w + Σ wᵢ T_g,i/kᵢ) / (w_w + Σ wᵢ/kᵢ), T_g,w = 136 K [ref:johari-1987], mass
    fractions w of the whole solution. Agents without data that make up less than 2 % of the mass (the
    NaCl of saline) are left out with an ``indicative`` flag; otherwise the temperature is None with a
    ``missing-data`` flag. Sucrose: T_g,s = 335 K, k = 4.7 [ref:roos-karel-1991];
    Tg' = 227 K at 81 % sucrose [ref:roos-karel-1991b] (both from memory).

    Tg' (the glass of the maximally freeze-concentrated liquid, with its solute mass fraction Cg') is
    given for a solution of one agent in water wherever it is published, also when Gordon–Taylor
    constants are not: glycerol Tg' = 164 K at Cg' = 0.76 [ref:inaba-andersson-2007]. The solution's own
    T_g then stays None (flag ``missing-data``) while ``tg_prime`` is given.
    """
    water = water_data()
    fractions = comp.mass_fractions()
    flags: list[Flag] = []
    missing = [a for a in comp.agents if agent_data(a).glass is None and fractions[a] > 0]
    missing_mass = sum(fractions[a] for a in missing)
    parameters: dict[str, Any] = {"water_tg_k": water.glass_transition}
    temperature: float | None
    if missing and missing_mass >= _MISSING_GLASS_TOLERANCE:
        temperature = None
        flags.append(Flag("missing-data", "no Gordon-Taylor data for " + ", ".join(missing)
                          + "; the glass transition of this solution is not computed", "gordon-taylor-1952"))
    else:
        if missing:
            flags.append(Flag("indicative", "left out of the glass transition for lack of data: "
                              + ", ".join(f"{a} ({100 * fractions[a]:.2g} % by mass)" for a in missing),
                              "gordon-taylor-1952"))
        w_w = comp.water_mass_fraction
        num = w_w * water.glass_transition
        den = w_w
        for a in comp.agents:
            g = agent_data(a).glass
            if g is None:
                continue
            num += fractions[a] * g.temperature / g.k
            den += fractions[a] / g.k
            parameters[a] = {"tg_k": g.temperature, "k": g.k, "source": g.source}
        temperature = num / den
    tg_prime = None
    tg_prime_w = None
    present = [a for a in comp.agents if fractions[a] > 0]
    fc = agent_data(present[0]).freeze_concentrate if len(present) == 1 else None
    if fc is not None:
        tg_prime, tg_prime_w = fc.temperature, fc.mass_fraction
        parameters["tg_prime_source"] = fc.source
    elif comp.agents:
        flags.append(Flag("missing-data", "Tg' (maximally freeze-concentrated glass) is tabulated only for "
                          "single agents with data; not given for this solution", "gordon-taylor-1952"))
    return GlassTransition(temperature, tg_prime, tg_prime_w, flags, parameters=parameters)


# --- summary ---------------------------------------------------------------------------------------------
@dataclass
class SolutionProperties(Result):
    """The solution as prepared: liquidus, osmolality, water activity, glass transition, density."""

    freezing_point: float = float("nan")  # K, 0.1 MPa
    freezing_point_uncertainty: float | None = None  # K, estimate inside the fitted ranges
    osmolality: float = float("nan")  # osmol/kg water, osmometer convention
    water_activity: float | None = None  # 1, at the liquidus
    glass_transition: float | None = None  # K
    glass_transition_prime: float | None = None  # K, Tg'
    density: float = float("nan")  # kg/m3 at 20 C


def solution_properties(comp: Composition) -> SolutionProperties:
    """Freezing point, osmolality, water activity, glass transition and density of a solution.

    Parameters
    ----------
    comp : Composition
        Molalities [mol/kg water].

    Returns
    -------
    SolutionProperties
        A :class:`~planner.results.Result` with the values in SI units, the coefficient sets used (with
        sources and fitted ranges) as parameters, and every flag of the models involved.

    References
    ----------
    [ref:elliott-2007], [ref:prickett-2011], [ref:murphy-koop-2005], [ref:gordon-taylor-1952]
    """
    _check_rising(comp)
    flags = composition_flags(comp, 1.0, warn=True)
    pi = float(osmolality(comp))
    t_f = float(freezing_point_from_osmolality(pi))
    try:
        a_w: float | None = float(ice_water_activity(_activity_temperature(t_f)))
    except ModelRangeError as exc:
        a_w = None
        flags.append(Flag("refused", f"water activity not computed: {exc}", "murphy-koop-2005"))
    spread = mixing_spread(comp)
    if spread > max(0.1, 0.05 * (melting_temperature_water() - t_f)):
        flags.append(Flag("indicative", f"mixture: the multisolute virial liquidus and the sum of the binary "
                          f"depressions differ by {spread:.2f} K here (both published ways of combining binary "
                          "data); the difference is part of the stated uncertainty", "kleinhans-mazur-2007"))
    glass = glass_transition(comp)
    flags += glass.flags
    parameters: dict[str, Any] = {
        "cryoscopic_constant_k_kg_per_osmol": CRYOSCOPIC_CONSTANT,
        "agents": {
            a: {
                "molality_mol_per_kg": m,
                "second_virial": d.virial.second,
                "third_virial": d.virial.third,
                "ions": d.virial.ions,
                "screening_a": d.virial.screening_a,
                "fitted_molality_range": list(d.virial.molality_range),
                "method": d.virial.method,
                "source": d.virial.source,
            }
            for a, m, d in zip(comp.agents, comp.molality, comp.data, strict=True)
        },
    }
    return SolutionProperties(
        model="multisolute osmotic virial equation; osmometer liquidus; Gordon-Taylor glass transition",
        source="elliott-2007",
        parameters=parameters,
        flags=flags,
        freezing_point=t_f,
        freezing_point_uncertainty=freezing_point_uncertainty(comp),
        osmolality=pi,
        water_activity=a_w,
        glass_transition=glass.temperature,
        glass_transition_prime=glass.tg_prime,
        density=density(comp),
    )
