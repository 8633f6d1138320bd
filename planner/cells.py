"""Cells in cryoprotectant and in freezing solution: membrane transport, loading and unloading, Mazur cooling.

What a cell lives through is a story of water and permeating solute crossing its plasma membrane:

- **Boyle–van 't Hoff**: at osmotic equilibrium with non-permeating solute, the cell volume is linear in
  the reciprocal of the outside osmolality [ref:kleinhans-1998];
- **two-parameter model**: water flux driven by the total osmolality difference (hydraulic conductivity
  L_p), each permeating solute's flux by its own concentration difference (permeability P_s), both with
  Arrhenius temperature dependence [ref:kleinhans-1998] [ref:katkov-2000];
- **toxicity cost**: the Benson, Kearsley and Higgins form J = ∫ k·C(t)^α dt [ref:benson-2012];
- **Mazur model**: on cooling with ice outside, the outside liquid follows the liquidus and water leaves
  the cell as fast as L_p(T) allows; what has not left is supercooled [ref:mazur-1963];
- **suggestion**: the fewest equal addition (or dilution) steps that keep the volume inside the cell's
  osmotic tolerance limits.

Core units: temperature [K], time [s], volume [m3], area [m2], L_p [m/(Pa s)], P_s [m/s], activation
energy [J/mol], molality [mol/kg water], osmolality [osmol/kg water]. The cell state is dimensionless:
``x = W/W_iso`` (osmotically active water over its isotonic value) and ``s_j = n_j/(rho_w W_iso)`` (moles of
permeating solute j per kg of isotonic cell water), so the intracellular molality is ``s_j/x``.

Osmolality of both sides comes from a :class:`SolutionModel`: :class:`VirialSolution` wraps the
planner's solution thermodynamics (the non-ideal osmotic virial equation, used by the assessment);
:class:`DiluteSolution` is the van 't Hoff dilute limit with Mazur's ideal liquidus, the setting in which
the closed forms (Boyle–van 't Hoff, Katkov's invariant) hold exactly and against which the transport
equations are checked.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from typing import Any, Protocol

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq, minimize_scalar

from planner.errors import InputError, ModelRangeError, did_you_mean
from planner.protocol import CELSIUS_OFFSET, Cells, CellStep, Solution
from planner.results import Flag, Result
from planner.validity import Range, Validity
from planner.yamlio import load_yaml

GAS_CONSTANT = 8.314462618  # J/(mol K), CODATA 2018 (exact since the 2019 SI)
WATER_DENSITY = 1000.0  # kg/m3: osmolality [osmol/kg] to osmolarity [osmol/m3], dilute convention
WATER_MOLAR_MASS = 0.018015268  # kg/mol
WATER_FUSION_ENTHALPY = 6006.0  # J/mol: L_f = 333.4 kJ/kg times the molar mass
WATER_MELTING_TEMPERATURE = 273.15  # K at 0.101325 MPa
ATMOSPHERE = 101325.0  # Pa
UM_PER_MIN_ATM = 1e-6 / 60.0 / ATMOSPHERE  # m/(Pa s) in one um min-1 atm-1 (= 1.645e-13)
UM_PER_S = 1e-6  # m/s in one um/s
KJ_PER_MOL = 1000.0  # J/mol in one kJ/mol

DEFAULT_TOXICITY_EXPONENT = 1.6  # alpha of the Benson et al. 2012 cost (from memory)
# Intracellular-ice reading from the supercooling at the cell's nucleation temperature (indicative):
# below POSSIBLE "unlikely" (a working threshold, from memory), from LIKELY on "likely". LIKELY is set from
# Leibo, McGrath, Cravalho 1978 (intracellular ice in 13 %, 72 %, 100 % of mouse ova at 1.3, 2.9,
# 4.8 C/min): with the mouse-oocyte preset in 1 molal DMSO this model gives 4.8 K and 11.5 K at -40 C at
# 1.3 and 2.9 C/min, and 8 K lies between. It is a calibration on one cell type.
IIF_POSSIBLE_SUPERCOOLING_K = 2.0
# Solver tolerances of a loading/unloading step: volumes to about 1e-5 of isotonic, far inside the spread
# of published L_p and P_s (10-20 %); the extremes are refined on the dense output.
STEP_RTOL = 1e-5
STEP_ATOL = 1e-8
DEFAULT_IIF_SUPERCOOLING_K = 8.0

TWO_PARAMETER = Validity(
    "two-parameter membrane transport",
    "kleinhans-1998",
    {
        # liquid cell water; below about -60 C even loaded cells are near their glass transition
        "temperature": Range(213.15, 318.15, "K"),
        "osmolality": Range(0.0, 12.0, "osmol/kg"),
    },
)
MAZUR_1963 = Validity(
    "Mazur water-loss model",
    "mazur-1963",
    {"temperature": Range(213.15, 273.16, "K"), "cooling_rate": Range(1e-6, 20.0, "K/s")},
)
BOYLE_VAN_T_HOFF = Validity(
    "Boyle-van 't Hoff relation",
    "kleinhans-1998",
    {"inactive_fraction": Range(0.0, 0.95, "1"), "osmolality": Range(1e-6, None, "osmol/kg")},
)

# Ranges the protocol's cell parameters must lie in (lab units, as the user entered them).
INPUT_RANGES: dict[str, tuple[float, float, str]] = {
    "radius_um": (0.5, 1000.0, "um"),
    "volume_um3": (0.5, 5e9, "um3"),
    "area_um2": (1.0, 1.3e7, "um2"),
    "inactive_fraction": (0.0, 0.95, ""),
    "lp_um_per_min_atm": (1e-6, 100.0, "um/(min atm)"),
    "lp_activation_kj_per_mol": (0.0, 300.0, "kJ/mol"),
    "permeability_um_per_s": (1e-9, 1000.0, "um/s"),
    "permeability_activation_kj_per_mol": (0.0, 300.0, "kJ/mol"),
    "min_volume_fraction": (0.01, 0.999, ""),
    "max_volume_fraction": (1.0, 10.0, ""),
    "intracellular_nucleation_c": (-80.0, -1.0, "C"),
}


# --------------------------------------------------------------------------------------------------
# Small vectorised relations
# --------------------------------------------------------------------------------------------------
def arrhenius(value_at_reference, activation_energy, temperature, reference_temperature) -> np.ndarray:
    """A rate coefficient at ``temperature`` from its value at ``reference_temperature``.

    Parameters
    ----------
    value_at_reference : float or array_like
        L_p [m/(Pa s)] or P_s [m/s] (any unit; the result has the same) at the reference temperature.
    activation_energy : float or array_like
        E_a [J/mol], >= 0.
    temperature, reference_temperature : float or array_like
        [K].

    Returns
    -------
    numpy.ndarray
        The coefficient at ``temperature``, same unit as ``value_at_reference``.

    Notes
    -----
    k(T) = k_ref · exp[(E_a/R)(1/T_ref − 1/T)] [ref:mazur-1963] (Mazur, Rall, Leibo use the same form for
    L_p below 0 C). Valid over the temperatures the coefficient was measured at; beyond them it is an
    extrapolation that callers flag.

    References
    ----------
    [ref:mazur-1963] [ref:kleinhans-1998]
    """
    t = np.asarray(temperature, dtype=float)
    return np.asarray(value_at_reference, dtype=float) * np.exp(
        np.asarray(activation_energy, dtype=float) / GAS_CONSTANT * (1.0 / np.asarray(reference_temperature) - 1.0 / t)
    )


def boyle_van_t_hoff(osmolality, isotonic_osmolality, inactive_fraction) -> np.ndarray:
    """Equilibrium cell volume over isotonic volume in non-permeating solute.

    Parameters
    ----------
    osmolality : float or array_like
        Outside osmolality π [osmol/kg], > 0.
    isotonic_osmolality : float
        π_iso [osmol/kg] at which the cell has its isotonic volume.
    inactive_fraction : float
        Osmotically inactive fraction v_b of the isotonic volume, 0 ≤ v_b < 0.95.

    Returns
    -------
    numpy.ndarray
        V/V_iso [1].

    Notes
    -----
    V/V_iso = v_b + (1 − v_b)·π_iso/π (the Boyle–van 't Hoff relation, ideal dilute solutions)
    [ref:kleinhans-1998].

    References
    ----------
    [ref:kleinhans-1998]
    """
    pi = np.asarray(osmolality, dtype=float)
    BOYLE_VAN_T_HOFF.check(inactive_fraction=inactive_fraction, osmolality=pi)
    return inactive_fraction + (1.0 - inactive_fraction) * isotonic_osmolality / pi


def toxicity_rate(molality, exponent: float = DEFAULT_TOXICITY_EXPONENT, coefficient: float = 1.0) -> np.ndarray:
    """Rate of the toxicity cost at an intracellular cryoprotectant molality [cost per minute].

    Parameters
    ----------
    molality : float or array_like
        Intracellular molality of one permeating cryoprotectant [mol/kg], >= 0.
    exponent : float
        α of the cost (1.6 in Benson et al. 2012, from memory).
    coefficient : float
        k [(mol/kg)^-α per minute]; 1 makes the cost relative (comparable between protocols for one cell
        type and agent, not between agents).

    Returns
    -------
    numpy.ndarray
        k·C^α [1/min].

    Notes
    -----
    The cost of a protocol is J = ∫ k·C(t)^α dt with t in minutes [ref:benson-2012]. The form and α come
    from fits to published viability data of one cell type; the number is indicative, never a viability.

    References
    ----------
    [ref:benson-2012]
    """
    c = np.clip(np.asarray(molality, dtype=float), 0.0, None)
    return coefficient * c**exponent


# --------------------------------------------------------------------------------------------------
# Osmolality of both sides of the membrane
# --------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Outside:
    """The extracellular liquid as the membrane sees it: total osmolality and permeating molalities."""

    osmolality: float  # osmol/kg
    molality: dict[str, float]  # agent -> mol/kg water, every agent of the solution


class SolutionModel(Protocol):
    """Osmolality of the liquid on both sides of the membrane, and the liquidus for the Mazur model."""

    name: str
    source: str

    def isotonic_osmolality(self) -> float: ...

    def outside(self, solution: Solution, field: str) -> Outside: ...

    def inside_osmolality(self, water_ratio: float, molality: np.ndarray, agents: tuple[str, ...]) -> float: ...

    def liquidus_osmolality(self, temperature: float) -> float: ...

    def liquidus_temperature(self, osmolality: float) -> float: ...

    def freeze_concentrated(self, solution: Solution, temperature: float, field: str) -> Outside: ...


class DiluteSolution:
    """The van 't Hoff dilute limit: every solute counts once per mole (salt by its isotonic osmolality).

    Outside: the carrier ``isotonic-saline`` contributes ``isotonic`` osmol/kg of non-permeating solute,
    ``water`` none; cryoprotectants must be given in ``molal``. Inside: the non-permeating content is
    ``isotonic`` osmol/kg at isotonic water volume and scales as 1/x. Liquidus: Mazur's ideal relation
    ln a_w = (ΔH_f/R)(1/T_0 − 1/T) with π = −ln(a_w)/M_w [ref:mazur-1963].

    This is the setting in which the Boyle–van 't Hoff relation and the two-parameter closed forms of
    [ref:katkov-2000] are exact; the assessment uses :class:`VirialSolution`.
    """

    name = "dilute limit (van 't Hoff), Mazur liquidus"
    source = "mazur-1963"

    def __init__(self, isotonic: float = 0.29):
        # isotonic saline: 285-290 mOsm/kg (common practice, no source)
        self.isotonic = float(isotonic)

    def isotonic_osmolality(self) -> float:
        return self.isotonic

    def outside(self, solution: Solution, field: str) -> Outside:
        carrier = {"water": 0.0, "isotonic-saline": self.isotonic}
        if solution.carrier not in carrier:
            raise InputError(f"{field}.carrier", solution.carrier, "one of: " + ", ".join(carrier))
        molality: dict[str, float] = {}
        for i, c in enumerate(solution.cryoprotectants):
            if c.unit != "molal":
                raise InputError(f"{field}.cryoprotectants[{i}].unit", c.unit, "molal (dilute-limit model)")
            molality[c.agent] = molality.get(c.agent, 0.0) + float(c.value)
        return Outside(carrier[solution.carrier] + sum(molality.values()), molality)

    def inside_osmolality(self, water_ratio: float, molality, agents: tuple[str, ...]) -> float:
        return self.isotonic / water_ratio + float(sum(molality))

    def liquidus_osmolality(self, temperature: float) -> float:
        ln_aw = WATER_FUSION_ENTHALPY / GAS_CONSTANT * (1.0 / WATER_MELTING_TEMPERATURE - 1.0 / temperature)
        return -ln_aw / WATER_MOLAR_MASS

    def liquidus_temperature(self, osmolality: float) -> float:
        inv = 1.0 / WATER_MELTING_TEMPERATURE + GAS_CONSTANT * WATER_MOLAR_MASS * osmolality / WATER_FUSION_ENTHALPY
        return 1.0 / inv

    def freeze_concentrated(self, solution: Solution, temperature: float, field: str) -> Outside:
        start = self.outside(solution, field)
        target = self.liquidus_osmolality(temperature)
        scale = max(target / start.osmolality, 1.0) if start.osmolality > 0 else 1.0
        return Outside(start.osmolality * scale, {a: m * scale for a, m in start.molality.items()})


class VirialSolution:
    """Osmolality from the planner's solution thermodynamics (multisolute osmotic virial equation).

    Outside: ``planner.solution.composition`` of the step's solution and its ``osmolality``. Inside: the
    non-permeating content is taken as the isotonic carrier's NaCl, concentrated by 1/x (x = W/W_iso),
    plus the permeating agents at their intracellular molality; the same virial equation gives π_in
    [ref:elliott-2007]. Liquidus: ``planner.solution.osmolality_at_freezing_point`` (osmometer convention,
    T_f = 273.15 K − 1.86 K kg/osmol · π) and its inverse; the freeze-concentrated outside liquid is the
    prepared solution scaled until its osmolality is the liquidus value.

    For speed, π_in with no or one permeating agent is read from a table of the same equation (see
    :meth:`prepare`: exact cubic in the agent's content, linear interpolation on a fine log grid of 1/x);
    its agreement with direct evaluation is checked in the tests. With two or more agents it is evaluated
    directly.
    """

    name = "multisolute osmotic virial equation"
    source = "elliott-2007"

    def __init__(self):
        from planner import solution  # the solution-thermodynamics module

        self._sol = solution
        self._iso_comp = solution.composition("isotonic-saline", [])
        self._iso_nacl = float(self._iso_comp.molality_of("nacl"))
        self._iso_osm = float(solution.osmolality(self._iso_comp))
        self._tables: dict[tuple[str, float], Any] = {}
        self._freeze: dict[Any, tuple[np.ndarray, np.ndarray]] = {}
        self._compositions: dict[Any, Any] = {}

    def isotonic_osmolality(self) -> float:
        return self._iso_osm

    def composition(self, solution: Solution, field: str):
        """The solution module's Composition of a protocol solution (errors name ``field``)."""
        key = (solution.carrier, solution.cryoprotectants)
        comp = self._compositions.get(key)
        if comp is None:
            comp = self._sol.composition(
                solution.carrier, [(c.agent, c.unit, c.value) for c in solution.cryoprotectants], field
            )
            self._compositions[key] = comp
        return comp

    def outside(self, solution: Solution, field: str) -> Outside:
        comp = self.composition(solution, field)
        return Outside(float(self._sol.osmolality(comp)), dict(zip(comp.agents, comp.molality, strict=True)))

    def flags(self, solution: Solution, field: str) -> list[Flag]:
        """The solution module's flags (fitted ranges, indicative coefficients) for an outside solution."""
        return list(self._sol.composition_flags(self.composition(solution, field)))

    def inside_flags(self, agents: tuple[str, ...], molality: np.ndarray, water_ratio: float) -> list[Flag]:
        """Flags for the intracellular liquid at its most concentrated."""
        comp = self._sol.Composition(tuple(agents) + ("nacl",), tuple(np.asarray(molality).tolist()) +
                                     (self._iso_nacl / water_ratio,))
        return list(self._sol.composition_flags(comp))

    def _direct(self, water_ratio: float, molality: np.ndarray, agents: tuple[str, ...]) -> float:
        comp = self._sol.Composition(tuple(agents) + ("nacl",),
                                     tuple(float(m) for m in molality) + (self._iso_nacl / water_ratio,))
        return float(self._sol.osmolality(comp))

    _U_LOW, _U_HIGH, _U_POINTS = 0.02, 200.0, 4001  # 1/x from strongly swollen to strongly shrunk

    def prepare(self, agents: tuple[str, ...], solute_max: float = 1.0) -> None:
        """Build the fast table of π_in for no or one permeating agent.

        With u = 1/x and s the agent's moles per kg of isotonic water, the intracellular liquid is
        Composition((agent, nacl), (s, m_iso)) concentrated by u, and at fixed u the virial equation is a
        cubic polynomial in s (only NaCl's dissociation depends on its own molality). So π_in is tabulated
        as four coefficient curves c_i(u) on a fine log grid, obtained from the module's own osmolality at
        four values of s; the cubic form is verified at two further values and the table refused (direct
        evaluation used) if it does not hold to 1e-9.
        """
        if len(agents) > 1:
            self._current = None
            return
        key = agents
        if key in self._tables:
            self._current = self._tables[key]
            return
        u = np.geomspace(self._U_LOW, self._U_HIGH, self._U_POINTS)
        if not agents:
            coeff = np.asarray(self._sol.osmolality(self._iso_comp, u))[None, :]
        else:
            span = max(1.0, float(solute_max))
            nodes = span * np.array([0.0, 1.0 / 3.0, 2.0 / 3.0, 1.0])
            values = np.array([np.asarray(self._sol.osmolality(
                self._sol.Composition((agents[0], "nacl"), (float(sv), self._iso_nacl)), u)) for sv in nodes])
            coeff = np.linalg.solve(np.vander(nodes, 4, increasing=True), values)  # c0..c3 per u
            for sv in (0.5 * span, 1.7 * span):
                direct = np.asarray(self._sol.osmolality(
                    self._sol.Composition((agents[0], "nacl"), (float(sv), self._iso_nacl)), u))
                cubic = coeff[0] + sv * (coeff[1] + sv * (coeff[2] + sv * coeff[3]))
                if not np.allclose(cubic, direct, rtol=1e-9, atol=1e-12):
                    self._current = None
                    return
        table = (agents, math.log(self._U_LOW), (math.log(self._U_HIGH) - math.log(self._U_LOW)) / (self._U_POINTS - 1),
                 [c.tolist() for c in coeff])
        self._tables[key] = table
        self._current = table

    def inside_osmolality(self, water_ratio: float, molality, agents: tuple[str, ...]) -> float:
        cur = getattr(self, "_current", None)
        if cur is not None and cur[0] == agents:
            lu = -math.log(water_ratio)
            f = (lu - cur[1]) / cur[2]
            i = int(f)
            if 0 <= i < self._U_POINTS - 1:
                w = f - i
                c = [row[i] + w * (row[i + 1] - row[i]) for row in cur[3]]
                if len(c) == 1:
                    return c[0]
                sv = float(molality[0]) * water_ratio
                return c[0] + sv * (c[1] + sv * (c[2] + sv * c[3]))
        return self._direct(water_ratio, molality, agents)

    _LIQ_LOW, _LIQ_STEP, _LIQ_POINTS = 180.0, 0.01, 9316  # K grid of the liquidus table, to 273.15 K

    def _liquidus_table(self) -> list[float]:
        table = getattr(self, "_liq", None)
        if table is None:
            temps = self._LIQ_LOW + self._LIQ_STEP * np.arange(self._LIQ_POINTS)
            temps[-1] = min(temps[-1], self._sol.melting_temperature_water())
            table = np.asarray(self._sol.osmolality_at_freezing_point(temps)).tolist()
            self._liq = table
        return table

    def liquidus_osmolality(self, temperature: float) -> float:
        """Osmolality of the liquid in equilibrium with ice at T [osmol/kg] (the solution module's liquidus,
        read from a 0.01 K table of it: exact for its linear osmometer form)."""
        f = (temperature - self._LIQ_LOW) / self._LIQ_STEP
        i = int(f)
        if 0 <= i < self._LIQ_POINTS - 1:
            table = self._liquidus_table()
            w = f - i
            return table[i] + w * (table[i + 1] - table[i])
        return float(self._sol.osmolality_at_freezing_point(temperature))

    def liquidus_temperature(self, osmolality: float) -> float:
        return float(self._sol.freezing_point_from_osmolality(osmolality))

    def freeze_concentrated(self, solution: Solution, temperature: float, field: str) -> Outside:
        comp = self.composition(solution, field)
        grid = self._freeze.get(comp)
        if grid is None:
            log_s = np.linspace(0.0, math.log(1.0e3), 1200)
            pi = np.asarray(self._sol.osmolality(comp, np.exp(log_s)))
            rising = np.diff(pi) > 0
            stop = len(pi) if np.all(rising) else int(np.argmin(rising)) + 1
            grid = (pi[:stop].tolist(), log_s[:stop].tolist())
            self._freeze[comp] = grid
        target = self.liquidus_osmolality(temperature)
        pi, log_s = grid
        if target > pi[-1]:
            raise ModelRangeError("temperature", temperature, "where the freeze-concentrated liquid stays "
                                  "inside the osmotic virial fit", self.name)
        if target <= pi[0]:
            return Outside(pi[0], dict(zip(comp.agents, comp.molality, strict=True)))
        i = bisect.bisect_right(pi, target) - 1
        w = (target - pi[i]) / (pi[i + 1] - pi[i])
        scale = math.exp(log_s[i] + w * (log_s[i + 1] - log_s[i]))
        return Outside(target, {a: m * scale for a, m in zip(comp.agents, comp.molality, strict=True)})


def default_solution_model() -> SolutionModel:
    """The model the assessment uses: the non-ideal osmotic virial equation."""
    return VirialSolution()


# --------------------------------------------------------------------------------------------------
# Cell parameters: presets, overrides, validation
# --------------------------------------------------------------------------------------------------
@lru_cache(maxsize=1)
def cell_data() -> dict[str, Any]:
    """The packaged cell presets and agent data (planner/data/cells.yaml)."""
    text = resources.files("planner").joinpath("data/cells.yaml").read_text(encoding="utf-8")
    return load_yaml(text, "cells.yaml")


def preset_names() -> list[str]:
    """Names of the cell presets."""
    return list(cell_data())


@dataclass(frozen=True)
class CellParameters:
    """Everything the transport models need about one cell type, in SI units.

    ``solute_permeability`` and its activation energies and reference temperatures are keyed by agent;
    an agent absent from ``solute_permeability`` does not cross the membrane only if it is one of
    :func:`non_permeating_agents` (otherwise asking for it is an error naming the key).
    """

    name: str
    isotonic_volume: float  # m3
    membrane_area: float  # m2 at isotonic volume
    inactive_fraction: float
    hydraulic_conductivity: float  # m/(Pa s) at reference_temperature
    hydraulic_activation_energy: float | None  # J/mol
    reference_temperature: float  # K
    solute_permeability: dict[str, float] = field(default_factory=dict)  # m/s
    permeability_activation_energy: dict[str, float | None] = field(default_factory=dict)  # J/mol
    permeability_reference_temperature: dict[str, float] = field(default_factory=dict)  # K
    min_volume_fraction: float | None = None
    max_volume_fraction: float | None = None
    nucleation_temperature: float | None = None  # K, intracellular ice
    area_exponent: float = 0.0  # 0: constant area; 2/3: sphere
    lp_measured_range: tuple[float, float] | None = None  # K
    sources: dict[str, str] = field(default_factory=dict)
    entered: tuple[str, ...] = ()  # keys the protocol gave (overriding the preset)

    @property
    def isotonic_water_volume(self) -> float:
        """W_iso = (1 − v_b)·V_iso [m3]."""
        return (1.0 - self.inactive_fraction) * self.isotonic_volume

    def hydraulic_conductivity_at(self, temperature) -> np.ndarray:
        """L_p(T) [m/(Pa s)], Arrhenius; constant when no activation energy is known (callers flag)."""
        ea = self.hydraulic_activation_energy or 0.0
        return arrhenius(self.hydraulic_conductivity, ea, temperature, self.reference_temperature)

    def rates_at(self, temperature: float, agents: tuple[str, ...]) -> tuple[float, list[float]]:
        """L_p(T) [m/(Pa s)] and P_s(T) [m/s] of ``agents`` at one temperature (scalar fast path)."""
        inv_t = 1.0 / temperature
        lp = self.hydraulic_conductivity * math.exp(
            (self.hydraulic_activation_energy or 0.0) / GAS_CONSTANT * (1.0 / self.reference_temperature - inv_t))
        ps = []
        for a in agents:
            ea = self.permeability_activation_energy.get(a) or 0.0
            t_ref = self.permeability_reference_temperature.get(a, self.reference_temperature)
            ps.append(self.solute_permeability[a] * math.exp(ea / GAS_CONSTANT * (1.0 / t_ref - inv_t)))
        return lp, ps

    def permeability_at(self, agent: str, temperature) -> np.ndarray:
        """P_s(T) [m/s] of ``agent``, Arrhenius."""
        ea = self.permeability_activation_energy.get(agent) or 0.0
        t_ref = self.permeability_reference_temperature.get(agent, self.reference_temperature)
        return arrhenius(self.solute_permeability[agent], ea, temperature, t_ref)


def non_permeating_agents() -> frozenset[str]:
    """Agents that do not cross the membrane (``permeating: false`` in the solution module's agent data)."""
    from planner import solution

    return frozenset(a for a in solution.known_agents() if not solution.agent_data(a).permeating)


def partial_molar_volume(agent: str) -> float:
    """Volume a mole of permeating agent adds inside the cell [m3/mol]: the apparent molar volume at
    infinite dilution from the solution module's agent data (0 for an agent it does not know)."""
    from planner import solution

    if agent not in solution.known_agents():
        return 0.0
    return float(solution.agent_data(agent).apparent_molar_volume(0.0))


def _check_range(field: str, value: float, name: str) -> float:
    lo, hi, unit = INPUT_RANGES[name]
    if not (isinstance(value, (int, float)) and math.isfinite(value) and lo <= value <= hi):
        raise InputError(field, value, f"{lo:g} to {hi:g} {unit}".strip())
    return float(value)


def resolve_cell(cells: Cells) -> CellParameters:
    """Resolve the protocol's ``cells`` section: the preset's values, overridden by what was given.

    Parameters
    ----------
    cells : planner.protocol.Cells
        Typed protocol section (SI units). User-entered L_p and P_s are at 20 C.

    Returns
    -------
    CellParameters

    Raises
    ------
    InputError
        Unknown preset, a value outside its range (key named in lab units, e.g.
        ``cells.permeability_um_per_s.dmso``), or too little to compute (no size, no L_p, no v_b).
    """
    data = cell_data()
    preset: dict[str, Any] = {}
    if cells.preset is not None:
        if cells.preset not in data:
            raise InputError("cells.preset", cells.preset, "one of: " + ", ".join(data),
                             did_you_mean(cells.preset, data))
        preset = data[cells.preset]
    entered: list[str] = []
    name = cells.preset or "user-entered cell"  # used in messages about preset values
    label = str(preset.get("label", cells.preset)) if preset else "user-entered cell"

    # size: protocol radius/volume override the preset's
    radius = volume = area = None
    if cells.volume is not None:
        volume = _check_range("cells.volume_um3", cells.volume * 1e18, "volume_um3") * 1e-18
        entered.append("volume_um3")
    elif cells.radius is not None:
        r = _check_range("cells.radius_um", cells.radius * 1e6, "radius_um") * 1e-6
        volume = 4.0 / 3.0 * math.pi * r**3
        radius = r
        entered.append("radius_um")
    elif "volume_um3" in preset:
        volume = float(preset["volume_um3"]) * 1e-18
    elif "radius_um" in preset:
        radius = float(preset["radius_um"]) * 1e-6
        volume = 4.0 / 3.0 * math.pi * radius**3
    if volume is None:
        raise InputError("cells.radius_um", None, f"a cell size: radius_um ({INPUT_RANGES['radius_um'][0]:g} to "
                         f"{INPUT_RANGES['radius_um'][1]:g} um) or volume_um3, or a preset",
                         "no size given")
    sphere_area = (36.0 * math.pi) ** (1.0 / 3.0) * volume ** (2.0 / 3.0)
    if "area_um2" in preset and not entered:
        area = _check_range(f"cells.preset {name} area_um2", float(preset["area_um2"]), "area_um2") * 1e-12
    else:
        area = sphere_area
    area_exponent = 0.0 if preset.get("area_scaling", "sphere") == "constant" else 2.0 / 3.0

    def pick(attr: str, key: str, scale: float, default_key: str | None = None):
        given = getattr(cells, attr)
        if given is not None:
            entered.append(key)
            return _check_range(f"cells.{key}", given / scale, key) * scale, True
        raw = preset.get(default_key or key)
        if raw is None:
            return None, False
        return _check_range(f"cells.preset {name} {key}", float(raw), key) * scale, False

    vb, _ = pick("inactive_fraction", "inactive_fraction", 1.0)
    if vb is None:
        raise InputError("cells.inactive_fraction", None, "0 to 0.9, the osmotically inactive fraction",
                         "not given and no preset")
    lp, lp_given = pick("hydraulic_conductivity", "lp_um_per_min_atm", UM_PER_MIN_ATM)
    if lp is None:
        raise InputError("cells.lp_um_per_min_atm", None, "1e-04 to 100 um/(min atm)", "not given and no preset")
    ea_lp, _ = pick("hydraulic_activation_energy", "lp_activation_kj_per_mol", KJ_PER_MOL)
    preset_ref = float(preset.get("reference_temperature_c", 20.0)) + CELSIUS_OFFSET
    lp_ref = CELSIUS_OFFSET + 20.0 if lp_given else preset_ref

    ps: dict[str, float] = {}
    ps_ea: dict[str, float | None] = {}
    ps_ref: dict[str, float] = {}
    preset_ref_by_agent = preset.get("permeability_reference_temperature_c", {}) or {}
    for agent, value in (preset.get("permeability_um_per_s") or {}).items():
        ps[agent] = _check_range(f"cells.preset {name} permeability_um_per_s.{agent}", float(value),
                                 "permeability_um_per_s") * UM_PER_S
        ps_ref[agent] = float(preset_ref_by_agent.get(agent, preset.get("reference_temperature_c", 20.0))) + CELSIUS_OFFSET
    for agent, value in (preset.get("permeability_activation_kj_per_mol") or {}).items():
        ps_ea[agent] = float(value) * KJ_PER_MOL
    for agent, value in cells.solute_permeability.items():
        ps[agent] = _check_range(f"cells.permeability_um_per_s.{agent}", value / UM_PER_S, "permeability_um_per_s") * UM_PER_S
        ps_ref[agent] = CELSIUS_OFFSET + 20.0
        entered.append(f"permeability_um_per_s.{agent}")
    for agent, value in cells.permeability_activation_energy.items():
        ps_ea[agent] = _check_range(f"cells.permeability_activation_kj_per_mol.{agent}", value / KJ_PER_MOL,
                                    "permeability_activation_kj_per_mol") * KJ_PER_MOL
        entered.append(f"permeability_activation_kj_per_mol.{agent}")
        if agent not in ps:
            raise InputError(f"cells.permeability_activation_kj_per_mol.{agent}", value / KJ_PER_MOL,
                             "an agent that also has cells.permeability_um_per_s",
                             f"no permeability given for {agent!r}")

    vmin, _ = pick("min_volume_fraction", "min_volume_fraction", 1.0)
    vmax, _ = pick("max_volume_fraction", "max_volume_fraction", 1.0)
    if vmin is not None and vb is not None and vmin <= vb:
        raise InputError("cells.min_volume_fraction", vmin, f"above the inactive fraction {vb:g}",
                         "a cell cannot shrink below its osmotically inactive volume")
    nuc_c = preset.get("intracellular_nucleation_c")
    nucleation = None if nuc_c is None else _check_range(
        f"cells.preset {name} intracellular_nucleation_c", float(nuc_c), "intracellular_nucleation_c") + CELSIUS_OFFSET
    mr = preset.get("lp_measured_range_c")
    measured = None if (mr is None or lp_given) else (float(mr[0]) + CELSIUS_OFFSET, float(mr[1]) + CELSIUS_OFFSET)
    return CellParameters(
        name=label,
        isotonic_volume=volume,
        membrane_area=area,
        inactive_fraction=vb,
        hydraulic_conductivity=lp,
        hydraulic_activation_energy=ea_lp,
        reference_temperature=lp_ref,
        solute_permeability=ps,
        permeability_activation_energy=ps_ea,
        permeability_reference_temperature=ps_ref,
        min_volume_fraction=vmin,
        max_volume_fraction=vmax,
        nucleation_temperature=nucleation,
        area_exponent=area_exponent,
        lp_measured_range=measured,
        sources=dict(preset.get("sources", {}) or {}),
        entered=tuple(entered),
    )


def permeating_agents(cell: CellParameters, solutions: Sequence[tuple[str, Solution]]) -> tuple[str, ...]:
    """The agents of ``solutions`` that cross the membrane, in first-seen order.

    Raises :class:`InputError` naming ``cells.permeability_um_per_s.AGENT`` for an agent that is neither
    given a permeability nor known not to permeate.
    """
    out: list[str] = []
    blocked = non_permeating_agents()
    for field_name, sol in solutions:
        for i, c in enumerate(sol.cryoprotectants):
            if c.agent in cell.solute_permeability:
                if c.agent not in out:
                    out.append(c.agent)
            elif c.agent not in blocked:
                raise InputError(
                    f"cells.permeability_um_per_s.{c.agent}", None,
                    "a permeability above 0 and up to 1000 um/s for every permeating agent",
                    f"{field_name}.cryoprotectants[{i}] is {c.agent!r} and {cell.name} has no permeability for it",
                )
    return tuple(out)


# --------------------------------------------------------------------------------------------------
# The two-parameter model
# --------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class CellState:
    """Dimensionless cell state: ``water_ratio`` x = W/W_iso and ``solute`` s_j (mol per kg isotonic water)."""

    water_ratio: float
    solute: tuple[float, ...]

    def molality(self) -> np.ndarray:
        """Intracellular molality of each permeating agent [mol/kg]."""
        return np.asarray(self.solute, dtype=float) / self.water_ratio


def isotonic_state(agents: tuple[str, ...]) -> CellState:
    """The cell at isotonic volume holding no permeating agent."""
    return CellState(1.0, tuple(0.0 for _ in agents))


class _Transport:
    """Right-hand side of the two-parameter model for one cell, one set of agents and one model."""

    def __init__(self, cell: CellParameters, model: SolutionModel, agents: tuple[str, ...]):
        self.cell = cell
        self.model = model
        self.agents = agents
        self.vb = cell.inactive_fraction
        self.w_iso = cell.isotonic_water_volume
        self.solute_volume = np.array([WATER_DENSITY * partial_molar_volume(a) for a in agents])
        self.solute_volume_list = self.solute_volume.tolist()
        self.k = len(agents)
        self.area = cell.membrane_area
        self.area_exponent = cell.area_exponent
        self.rt_rho_factor = GAS_CONSTANT * WATER_DENSITY / self.w_iso

    def relative_volume(self, x, s) -> np.ndarray:
        """V/V_iso = v_b + (1 − v_b)(x + ρ_w Σ s_j v̄_j)."""
        s = np.asarray(s, dtype=float)
        solute = np.tensordot(self.solute_volume, s, axes=(0, 0)) if len(self.agents) else 0.0
        return self.vb + (1.0 - self.vb) * (np.asarray(x) + solute)

    def rates(self, temperature: float):
        return self.cell.rates_at(temperature, self.agents)

    def rhs(self, y, temperature: float, outside_osmolality: float, outside_molality, lp: float, ps) -> np.ndarray:
        """dy/dt of the state y = (x, s_1..s_k) [1/s] (scalar arithmetic: this is the hot path)."""
        k = self.k
        x = max(float(y[0]), 1e-6)  # a trial step of the solver may overshoot below zero water
        s = [max(float(y[1 + j]), 0.0) for j in range(k)]
        m_in = [sj / x for sj in s]
        v = self.vb + (1.0 - self.vb) * (x + sum(self.solute_volume_list[j] * s[j] for j in range(k)))
        area = self.area * (v**self.area_exponent if self.area_exponent else 1.0)
        pi_in = self.model.inside_osmolality(x, m_in, self.agents)
        out = np.empty(1 + k)
        out[0] = -lp * area * self.rt_rho_factor * temperature * (outside_osmolality - pi_in)
        g = area / self.w_iso
        for j in range(k):
            out[1 + j] = ps[j] * g * (outside_molality[j] - m_in[j])
        return out


def water_time_constant(cell: CellParameters, temperature: float, osmolality: float) -> float:
    """τ_w = W_iso/(L_p A R T ρ_w π) [s]: the time scale of osmotic water movement."""
    lp = float(cell.hydraulic_conductivity_at(temperature))
    return cell.isotonic_water_volume / (lp * cell.membrane_area * GAS_CONSTANT * temperature * WATER_DENSITY * osmolality)


def equilibrium_state(cell: CellParameters, model: SolutionModel, outside: Outside, agents: tuple[str, ...]) -> CellState:
    """The cell at full osmotic equilibrium with ``outside``: permeating agents at the outside molality.

    Solves inside_osmolality(x, m_out) = π_out for x (Boyle–van 't Hoff with permeating solute); with the
    dilute model x = π_iso/(π_out − Σ m_out,j) [ref:kleinhans-1998].
    """
    m = np.array([outside.molality.get(a, 0.0) for a in agents])
    f = lambda x: model.inside_osmolality(x, m, agents) - outside.osmolality  # noqa: E731
    lo, hi = 0.006, 45.0  # inside the models' fast tables first
    if f(lo) < 0 or f(hi) > 0:
        lo, hi = 1e-4, 1e4
        if f(lo) < 0 or f(hi) > 0:
            raise ModelRangeError("osmolality", outside.osmolality, "a solution the cell can equilibrate with "
                                  "(non-permeating osmolality > 0)", TWO_PARAMETER.model)
    x = float(brentq(f, lo, hi, xtol=1e-12, rtol=1e-12))
    return CellState(x, tuple((m * x).tolist()))


@dataclass(frozen=True)
class StepExtremes:
    """Extremes of one loading or unloading step (volumes as fractions of isotonic)."""

    stage: str  # loading | unloading
    index: int
    temperature_c: float
    duration_min: float
    min_volume_fraction: float
    time_of_min_s: float
    max_volume_fraction: float
    time_of_max_s: float
    end_volume_fraction: float
    end_intracellular_molality: dict[str, float]
    outside_osmolality: float
    equilibrated: bool  # water and every permeating agent within 5 % of equilibrium at the end


@dataclass
class TransportHistory(Result):
    """Cell volume and intracellular molality over a sequence of steps (time from the first step's start)."""

    time: np.ndarray = field(default_factory=lambda: np.zeros(0))  # s
    relative_volume: np.ndarray = field(default_factory=lambda: np.zeros(0))  # V/V_iso
    water_ratio: np.ndarray = field(default_factory=lambda: np.zeros(0))  # W/W_iso
    intracellular_molality: dict[str, np.ndarray] = field(default_factory=dict)  # mol/kg
    steps: list[StepExtremes] = field(default_factory=list)
    min_volume_fraction: float = float("nan")
    max_volume_fraction: float = float("nan")
    toxicity_cost: float = 0.0  # (mol/kg)^alpha min, relative
    end_state: CellState | None = None
    agents: tuple[str, ...] = ()


@dataclass(frozen=True)
class PlannedStep:
    """One step to simulate: the outside solution, its temperature [K] and duration [s]."""

    stage: str
    index: int
    solution: Solution
    temperature: float
    duration: float


def _time_grid(duration: float, tau: float, n: int = 160) -> np.ndarray:
    first = min(max(tau / 200.0, duration * 1e-7), duration / 10.0)
    geo = np.geomspace(first, duration, n)
    lin = np.linspace(0.0, duration, 40)
    return np.unique(np.concatenate([[0.0], geo, lin]))


def simulate_steps(
    cell: CellParameters,
    steps: Sequence[PlannedStep],
    model: SolutionModel,
    agents: tuple[str, ...] | None = None,
    start: CellState | None = None,
    toxicity_exponent: float = DEFAULT_TOXICITY_EXPONENT,
) -> TransportHistory:
    """Simulate the two-parameter model over a sequence of steps.

    Parameters
    ----------
    cell : CellParameters
    steps : sequence of PlannedStep
        Each step: outside solution, temperature [K] (213.15–318.15 K), duration [s] (> 0).
    model : SolutionModel
        Osmolality on both sides (the assessment uses :class:`VirialSolution`).
    agents : tuple of str, optional
        Permeating agents to track (default: those of the steps).
    start : CellState, optional
        Initial state (default: isotonic, no permeating agent).
    toxicity_exponent : float
        α of the toxicity cost.

    Returns
    -------
    TransportHistory
        Volume and molality time series, per-step extremes, overall extremes and the toxicity cost.

    Notes
    -----
    Two-parameter model [ref:kleinhans-1998] (multisolute form [ref:katkov-2000]):

    dW/dt = −L_p(T)·A·R·T·ρ_w·(π_out − π_in),   dn_j/dt = P_j(T)·A·ρ_w·(m_out,j − m_in,j),

    with π from ``model`` for both sides, L_p and P_j Arrhenius, A constant or ∝ V^(2/3). Integrated with
    ``scipy.integrate.solve_ivp`` (LSODA, which switches to a stiff method where needed); extremes are
    refined on the dense output. The toxicity cost J = ∫ Σ_j (m_in,j)^α dt [min] [ref:benson-2012]
    rides along as an extra state.

    References
    ----------
    [ref:kleinhans-1998] [ref:katkov-2000] [ref:benson-2012]
    """
    if agents is None:
        agents = permeating_agents(cell, [(f"cells.{s.stage}[{s.index}].solution", s.solution) for s in steps])
    transport = _Transport(cell, model, agents)
    state = start or isotonic_state(agents)
    flags: list[Flag] = []
    outsides = [model.outside(st.solution, f"cells.{st.stage}[{st.index}].solution") for st in steps]
    _prepare(model, agents, state, outsides)
    times: list[np.ndarray] = []
    waters: list[np.ndarray] = []
    volumes: list[np.ndarray] = []
    molal: list[np.ndarray] = []
    extremes: list[StepExtremes] = []
    t0 = 0.0
    cost = 0.0
    k = len(agents)
    for step, outside in zip(steps, outsides, strict=True):
        key = f"cells.{step.stage}[{step.index}]"
        if not (math.isfinite(step.duration) and step.duration > 0):
            raise InputError(f"{key}.duration_min", step.duration / 60.0, "more than 0 min")
        try:
            TWO_PARAMETER.check(temperature=step.temperature)
        except ModelRangeError:
            raise InputError(f"{key}.temperature_c", step.temperature - CELSIUS_OFFSET,
                             f"{TWO_PARAMETER.ranges['temperature'].low - CELSIUS_OFFSET:g} to "
                             f"{TWO_PARAMETER.ranges['temperature'].high - CELSIUS_OFFSET:g} C") from None
        if hasattr(model, "flags"):
            flags.extend(Flag(f.code, f"a step's solution: {f.message}", f.source)
                         for f in model.flags(step.solution, f"{key}.solution"))
        try:
            TWO_PARAMETER.check(osmolality=outside.osmolality)
        except ModelRangeError:
            raise InputError(f"{key}.solution", round(outside.osmolality, 3),
                             f"an outside osmolality {TWO_PARAMETER.ranges['osmolality'].describe()}") from None
        flags.extend(_rate_flags(cell, step.temperature, agents, key))
        m_out = [outside.molality.get(a, 0.0) for a in agents]
        lp, ps = transport.rates(step.temperature)

        def fun(t, y, _out=outside.osmolality, _m=m_out, _lp=lp, _ps=ps, _T=step.temperature):
            d = np.empty_like(y)
            d[:-1] = transport.rhs(y[:-1], _T, _out, _m, _lp, _ps)
            tox = 0.0
            for j in range(k):
                m_j = y[1 + j] / y[0]
                if m_j > 0.0:
                    tox += m_j**toxicity_exponent
            d[-1] = tox / 60.0
            return d

        y0 = np.array([state.water_ratio, *state.solute, 0.0])
        tau = water_time_constant(cell, step.temperature, outside.osmolality)
        grid = _time_grid(step.duration, tau)
        eq = equilibrium_state(cell, model, outside, agents)
        eq_y = [eq.water_ratio, *eq.solute]

        def settled(t, y, _eq=eq_y):
            # once the cell is at equilibrium to 1e-5 it stays there (to the solver tolerance): hold the state
            gap = max(abs(y[i] - _eq[i]) / max(abs(_eq[i]), 1e-3) for i in range(1 + k))
            return gap - 1e-5

        settled.terminal = True
        settled.direction = -1
        sol = solve_ivp(fun, (0.0, step.duration), y0, method="LSODA", dense_output=True, events=settled,
                        rtol=STEP_RTOL, atol=STEP_ATOL)
        if not sol.success:
            raise ModelRangeError("time", step.duration, f"an integrable step ({sol.message})", TWO_PARAMETER.model)
        dense = _Held(sol, toxicity_exponent, k, eq_y if sol.status == 1 else None)
        y = dense(grid)
        v = transport.relative_volume(y[0], y[1 : 1 + k])
        vmin, tmin = _refine(dense, transport, grid, v, k, int(np.argmin(v)), +1)
        vmax, tmax = _refine(dense, transport, grid, v, k, int(np.argmax(v)), -1)
        end = CellState(float(y[0, -1]), tuple(y[1 : 1 + k, -1].tolist()))
        equilibrated = abs(end.water_ratio - eq.water_ratio) <= 0.05 * eq.water_ratio and all(
            abs(a - b) <= 0.05 * max(abs(b), 1e-3) for a, b in zip(end.solute, eq.solute, strict=True)
        )
        extremes.append(StepExtremes(
            step.stage, step.index, step.temperature - CELSIUS_OFFSET, step.duration / 60.0,
            vmin, tmin, vmax, tmax, float(v[-1]),
            {a: float(m) for a, m in zip(agents, end.molality(), strict=True)}, outside.osmolality, equilibrated,
        ))
        cost += float(y[-1, -1])
        times.append(t0 + grid)
        volumes.append(v)
        waters.append(y[0])
        molal.append(y[1 : 1 + k] / y[0])
        state = end
        t0 += step.duration
    if not steps:
        return TransportHistory(model="two-parameter", source="kleinhans-1998", agents=agents, end_state=state)
    all_v = np.concatenate(volumes)
    mol = np.concatenate(molal, axis=1) if k else np.zeros((0, all_v.size))
    if hasattr(model, "inside_flags"):
        x_all = np.concatenate(waters)
        i_most = int(np.argmin(x_all))
        flags.extend(Flag(f.code, f"intracellular liquid: {f.message}", f.source)
                     for f in model.inside_flags(agents, mol[:, i_most], float(x_all[i_most])))
    return TransportHistory(
        model="two-parameter",
        source="kleinhans-1998",
        parameters={"solution_model": model.name, "toxicity_exponent": toxicity_exponent,
                    "agents": list(agents), "area": "constant" if cell.area_exponent == 0 else "sphere"},
        flags=dedupe_flags(flags),
        time=np.concatenate(times),
        relative_volume=all_v,
        water_ratio=np.concatenate(waters),
        intracellular_molality={a: mol[j] for j, a in enumerate(agents)},
        steps=extremes,
        min_volume_fraction=min(e.min_volume_fraction for e in extremes),
        max_volume_fraction=max(e.max_volume_fraction for e in extremes),
        toxicity_cost=cost,
        end_state=state,
        agents=agents,
    )


def _prepare(model: SolutionModel, agents: tuple[str, ...], start: CellState, outsides: Sequence[Outside]) -> None:
    """Let a model build its fast tables for the span of intracellular solute the steps can reach."""
    if not hasattr(model, "prepare"):
        return
    top = max([0.0, *start.solute])
    for out in outsides:
        top = max(top, 3.0 * max([out.molality.get(a, 0.0) for a in agents], default=0.0))
    model.prepare(agents, top)


class _Held:
    """Dense output of a step that may have stopped at equilibrium: after the stop the state is held and
    the toxicity cost grows at its equilibrium rate."""

    def __init__(self, sol, exponent: float, k: int, held: list[float] | None = None):
        self.sol = sol
        self.t_end = float(sol.t[-1])
        self.y_end = sol.y[:, -1].copy()
        if held is not None:  # settled: hold the equilibrium the state converges to (within 1e-5 already)
            self.y_end[:-1] = held
        x = self.y_end[0]
        self.cost_rate = sum(max(self.y_end[1 + j] / x, 0.0) ** exponent for j in range(k)) / 60.0

    def __call__(self, t):
        t_arr = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.empty((self.y_end.size, t_arr.size))
        inside = t_arr <= self.t_end
        if np.any(inside):
            out[:, inside] = self.sol.sol(t_arr[inside])
        if np.any(~inside):
            out[:, ~inside] = self.y_end[:, None]
            out[-1, ~inside] = self.y_end[-1] + self.cost_rate * (t_arr[~inside] - self.t_end)
        return out[:, 0] if np.ndim(t) == 0 else out


def _refine(sol, transport: _Transport, grid: np.ndarray, v: np.ndarray, k: int, i: int, sign: int):
    """Refine a grid extremum of the volume on the dense output (sign +1: minimum, −1: maximum)."""
    lo = grid[max(i - 1, 0)]
    hi = grid[min(i + 1, len(grid) - 1)]
    if hi <= lo:
        return float(v[i]), float(grid[i])

    def g(t):
        y = sol(t)
        return sign * float(transport.relative_volume(y[0], y[1 : 1 + k]))

    res = minimize_scalar(g, bounds=(lo, hi), method="bounded", options={"xatol": max((hi - lo) * 1e-6, 1e-12)})
    if res.fun < sign * v[i]:
        return float(sign * res.fun), float(res.x)
    return float(v[i]), float(grid[i])


def _rate_flags(cell: CellParameters, temperature: float, agents: tuple[str, ...], key: str) -> list[Flag]:
    out: list[Flag] = []
    if cell.hydraulic_activation_energy is None and abs(temperature - cell.reference_temperature) > 2.0:
        out.append(Flag("extrapolated", f"{key}: no activation energy for L_p; L_p held at its "
                        f"{cell.reference_temperature - CELSIUS_OFFSET:g} C value at "
                        f"{temperature - CELSIUS_OFFSET:g} C", cell.sources.get("hydraulic_conductivity")))
    if cell.lp_measured_range is not None:
        lo, hi = cell.lp_measured_range
        if not lo - 0.01 <= temperature <= hi + 0.01:
            out.append(Flag("extrapolated", f"{key}: L_p Arrhenius fit spans {lo - CELSIUS_OFFSET:g} to "
                            f"{hi - CELSIUS_OFFSET:g} C; used at {temperature - CELSIUS_OFFSET:g} C",
                            cell.sources.get("hydraulic_conductivity")))
    for a in agents:
        t_ref = cell.permeability_reference_temperature.get(a, cell.reference_temperature)
        if cell.permeability_activation_energy.get(a) is None and abs(temperature - t_ref) > 2.0:
            out.append(Flag("extrapolated", f"{key}: no activation energy for the {a} permeability; P_s held "
                            f"at its {t_ref - CELSIUS_OFFSET:g} C value", cell.sources.get("solute_permeability")))
    return out


def dedupe_flags(flags: list[Flag]) -> list[Flag]:
    """Flags with repeats (same code and message) dropped, first occurrence kept."""
    seen: dict[tuple, Flag] = {}
    for f in flags:
        seen.setdefault((f.code, f.message), f)
    return list(seen.values())


# --------------------------------------------------------------------------------------------------
# Suggestion: fewest equal steps inside the tolerance limits
# --------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class SuggestedStep:
    concentration_fraction: float  # of the target solution's cryoprotectant concentrations
    cryoprotectants: tuple[tuple[str, str, float], ...]  # (agent, unit, value)
    duration_min: float


@dataclass
class Suggestion(Result):
    """The fewest equal steps found that keep the volume within the limits (or the best tried)."""

    stage: str = "loading"
    feasible: bool = False
    step_count: int = 0
    steps: list[SuggestedStep] = field(default_factory=list)
    min_volume_fraction: float = float("nan")
    max_volume_fraction: float = float("nan")
    toxicity_cost: float = float("nan")
    note: str = ""


def _scaled(solution: Solution, fraction: float) -> Solution:
    from planner.protocol import Cryoprotectant

    return Solution(solution.carrier, tuple(Cryoprotectant(c.agent, c.unit, c.value * fraction)
                                            for c in solution.cryoprotectants if fraction > 0.0),
                    solution.critical_cooling_rate, solution.critical_warming_rate)


def _step_to_equilibrium(cell, model, agents, solution, temperature, start: CellState, cap: float):
    """Integrate one step until water and every permeating agent are within 5 % of equilibrium (capped).

    Returns the duration [s], the end state and the smallest and largest relative volume on the way.
    """
    outside = model.outside(solution, "suggestion")
    eq = equilibrium_state(cell, model, outside, agents)
    transport = _Transport(cell, model, agents)
    k = len(agents)
    m_out = [outside.molality.get(a, 0.0) for a in agents]
    lp, ps = transport.rates(temperature)
    tol_s = [0.05 * max(abs(eq.solute[j] - start.solute[j]), 1e-9) for j in range(k)]
    tol_x = 0.05 * max(abs(eq.water_ratio - start.water_ratio), 0.01)

    def fun(t, y):
        return transport.rhs(y, temperature, outside.osmolality, m_out, lp, ps)

    def done(t, y):
        gaps = [abs(y[1 + j] - eq.solute[j]) - tol_s[j] for j in range(k)]
        gaps.append(abs(y[0] - eq.water_ratio) - tol_x)
        return max(gaps)

    done.terminal = True
    done.direction = -1
    # a search pass: looser tolerance, extremes on the solver's own steps (the chosen plan is re-run in full)
    sol = solve_ivp(fun, (0.0, cap), np.array([start.water_ratio, *start.solute]), method="LSODA",
                    events=done, rtol=1e-5, atol=1e-9)
    t_end = float(sol.t[-1])
    v = transport.relative_volume(sol.y[0], sol.y[1 : 1 + k])
    vmin, vmax = float(v.min()), float(v.max())
    end = CellState(float(sol.y[0, -1]), tuple(sol.y[1:, -1].tolist()))
    return min(max(t_end, 1.0), cap), end, vmin, vmax


def _plan(cell, model, agents, target, temperature, stage, start, k, cap):
    """k equal steps: (feasible, suggested steps, planned steps)."""
    fractions = [j / k for j in range(1, k + 1)] if stage == "loading" else [(k - j) / k for j in range(1, k + 1)]
    planned: list[PlannedStep] = []
    suggested: list[SuggestedStep] = []
    state = start
    ok = True
    for j, frac in enumerate(fractions):
        sol = _scaled(target, frac)
        dur, state, vmin, vmax = _step_to_equilibrium(cell, model, agents, sol, temperature, state, cap)
        ok = ok and vmin >= cell.min_volume_fraction and vmax <= cell.max_volume_fraction
        dur = math.ceil(dur / 6.0) * 6.0  # round up to 0.1 min
        planned.append(PlannedStep(stage, j, sol, temperature, dur))
        suggested.append(SuggestedStep(frac, tuple((c.agent, c.unit, c.value) for c in sol.cryoprotectants),
                                       dur / 60.0))
    return ok, suggested, planned


def suggest_steps(
    cell: CellParameters,
    model: SolutionModel,
    target: Solution,
    temperature: float,
    stage: str = "loading",
    start_solution: Solution | None = None,
    max_steps: int = 16,
    max_step_duration: float = 3600.0,
) -> Suggestion:
    """The fewest equal-concentration steps that keep the cell volume within its tolerance limits.

    Parameters
    ----------
    cell : CellParameters
        Must carry ``min_volume_fraction`` and ``max_volume_fraction``.
    model : SolutionModel
    target : Solution
        Loading: the final solution; unloading: the loaded solution the cells start in.
    temperature : float
        Step temperature [K].
    stage : str
        ``loading`` (concentration rises to the target in k equal steps from the carrier) or
        ``unloading`` (falls from the target to the carrier alone in k equal steps).
    start_solution : Solution, optional
        Unloading only: the solution the cells are equilibrated with at the start (default ``target``).
    max_steps : int
        Largest number of steps tried.
    max_step_duration : float
        Longest step [s]; a step lasts until water and every permeating agent are within 5 % of equilibrium.

    Returns
    -------
    Suggestion
        ``feasible`` False (with ``max_steps`` steps) when even that many steps leave the limits.

    Notes
    -----
    Step j of k holds the target's cryoprotectant concentrations times j/k (loading) or (k − j)/k
    (unloading); each lasts until the cell is within 5 % of equilibrium, rounded up to 0.1 min. The
    excursion of each step shrinks with the concentration change per step, so the fewest steps are
    found by doubling then bisection on k. Equal steps are common practice; a toxicity-optimal path
    [ref:benson-2012] can be shorter but is not searched here.
    """
    if cell.min_volume_fraction is None or cell.max_volume_fraction is None:
        raise InputError("cells.min_volume_fraction", cell.min_volume_fraction,
                         "both osmotic tolerance limits (min_volume_fraction, max_volume_fraction)",
                         "needed for a suggestion")
    if stage not in ("loading", "unloading"):
        raise InputError("stage", stage, "one of: loading, unloading")
    if not 1 <= max_steps <= 64:
        raise InputError("max_steps", max_steps, "1 to 64")
    agents = permeating_agents(cell, [("suggestion", target)])
    if stage == "loading":
        start = isotonic_state(agents)
    else:
        start = equilibrium_state(cell, model, model.outside(start_solution or target, "suggestion"), agents)
    _prepare(model, agents, start, [model.outside(target, "suggestion")])
    tried: dict[int, tuple[bool, list[SuggestedStep], list[PlannedStep]]] = {}

    def attempt(k: int) -> bool:
        if k not in tried:
            tried[k] = _plan(cell, model, agents, target, temperature, stage, start, k, max_step_duration)
        return tried[k][0]

    lo, hi = 0, None  # lo: largest k known to fail; hi: smallest k known to pass
    k = 1
    while True:
        if attempt(k):
            hi = k
            break
        lo = k
        if k == max_steps:
            break
        k = min(2 * k, max_steps)
    if hi is not None:
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if attempt(mid):
                hi = mid
            else:
                lo = mid
    chosen = hi if hi is not None else max_steps
    while True:
        _, suggested, planned = tried[chosen]
        hist = simulate_steps(cell, planned, model, agents, start)  # the suggested steps, as they will be run
        ok = (hist.min_volume_fraction >= cell.min_volume_fraction
              and hist.max_volume_fraction <= cell.max_volume_fraction)
        if ok or chosen >= max_steps:
            break
        chosen += 1  # the full-accuracy run disagreed with the search pass: one more step
        attempt(chosen)
    note = (f"{chosen} equal step(s), each held until the cell is within 5 % of equilibrium" if ok else
            f"even {max_steps} equal steps leave the tolerance limits; consider a non-permeating osmotic "
            "buffer (e.g. sucrose) during removal, a lower temperature, or smaller final concentrations")
    return Suggestion(
        model="two-parameter", source="kleinhans-1998",
        parameters={"temperature_c": temperature - CELSIUS_OFFSET,
                    "limits": [cell.min_volume_fraction, cell.max_volume_fraction], "max_steps": max_steps,
                    "step_counts_tried": sorted(tried)},
        flags=hist.flags, stage=stage, feasible=ok, step_count=chosen, steps=suggested,
        min_volume_fraction=hist.min_volume_fraction, max_volume_fraction=hist.max_volume_fraction,
        toxicity_cost=hist.toxicity_cost, note=note,
    )


# --------------------------------------------------------------------------------------------------
# Mazur model: cooling with extracellular ice
# --------------------------------------------------------------------------------------------------
@dataclass
class CoolingHistory(Result):
    """Cell volume and intracellular supercooling vs temperature while cooling with ice outside."""

    cooling_rate: float = float("nan")  # K/s
    temperature: np.ndarray = field(default_factory=lambda: np.zeros(0))  # K, decreasing
    relative_volume: np.ndarray = field(default_factory=lambda: np.zeros(0))
    equilibrium_volume: np.ndarray = field(default_factory=lambda: np.zeros(0))
    supercooling: np.ndarray = field(default_factory=lambda: np.zeros(0))  # K, intracellular
    start_temperature: float = float("nan")  # K, where ice forms outside (the solution's liquidus)
    max_supercooling: float = float("nan")  # K
    nucleation_temperature: float | None = None  # K
    supercooling_at_nucleation: float | None = None  # K
    intracellular_ice: str = "not-assessed"  # unlikely | possible | likely | not-assessed


def cool_with_extracellular_ice(
    cell: CellParameters,
    model: SolutionModel,
    solution: Solution,
    cooling_rate: float,
    end_temperature: float,
    start: CellState | None = None,
    agents: tuple[str, ...] | None = None,
    solute_transport: bool = True,
    iif_supercooling: float = DEFAULT_IIF_SUPERCOOLING_K,
    points: int = 200,
) -> CoolingHistory:
    """The Mazur model: water leaves the cell as the outside liquid follows the liquidus.

    Parameters
    ----------
    cell : CellParameters
    model : SolutionModel
        Supplies the liquidus (osmolality of the liquid in equilibrium with ice at T).
    solution : Solution
        The solution the cells are frozen in (before ice forms).
    cooling_rate : float
        B [K/s] > 0 (1e-6 to 20 K/s).
    end_temperature : float
        Last temperature [K] (213.15 K or warmer).
    start : CellState, optional
        Cell state when ice forms outside (default: equilibrium with ``solution``).
    agents : tuple of str, optional
        Permeating agents (default: those of ``solution`` with a permeability).
    solute_transport : bool
        True: permeating agents follow the two-parameter model during cooling; False: they stay inside
        (Mazur's original assumption).
    iif_supercooling : float
        Supercooling [K] at the cell's nucleation temperature from which intracellular ice is read as likely
        (``possible`` from 2 K).
    points : int
        Number of temperatures reported.

    Returns
    -------
    CoolingHistory
        Flagged ``indicative`` for the intracellular-ice reading.

    Notes
    -----
    Ice forms outside at the solution's liquidus T_f (seeded; unseeded samples supercool first). Then
    T(t) = T_f − B·t, the outside osmolality is the liquidus π_e(T), outside permeating solute is
    freeze-concentrated in proportion, and the cell follows the two-parameter equations of
    :func:`simulate_steps`. This is Mazur's equation
    dV/dT = (L_p A R T/(B v̄_w))·[ln(a_w,in) − (ΔH_f/R)(1/T_0 − 1/T)] [ref:mazur-1963] written with the
    osmolality difference as the driving force (−ln a_w = M_w·π in dilute solution; in concentrated
    solution the two representations part, and the solution model decides which π is meant). The intracellular
    supercooling is ΔT = T_liquidus(π_in) − T. Intracellular ice (indicative): Mazur's criterion that a cell
    still holding supercooled water when it reaches its nucleation temperature T_n freezes inside
    [ref:mazur-1963]; read here as "likely" when ΔT(T_n) ≥ ``iif_supercooling`` (default 8 K, calibrated so
    that mouse ova read "likely" between 1.3 and 2.9 C/min, where the observed fraction with intracellular
    ice rose from 13 % to 72 % [ref:leibo-1978]) and "possible" from 2 K (a working threshold, from memory).
    T_n for mouse ova: about −40 C [ref:leibo-1978].

    References
    ----------
    [ref:mazur-1963] [ref:leibo-1978] [ref:kleinhans-1998]
    """
    if not (math.isfinite(cooling_rate) and cooling_rate > 0):
        raise InputError("cooling_rate", cooling_rate, "more than 0 K/s")
    MAZUR_1963.check(cooling_rate=cooling_rate)
    if agents is None:
        agents = permeating_agents(cell, [("solution", solution)])
    outside0 = model.outside(solution, "solution")
    t_f = model.liquidus_temperature(outside0.osmolality)
    if end_temperature >= t_f:
        raise InputError("end_temperature", end_temperature, f"below the solution's liquidus {t_f:.2f} K")
    MAZUR_1963.check(temperature=end_temperature)
    transport = _Transport(cell, model, agents)
    k = len(agents)
    state = start or equilibrium_state(cell, model, outside0, agents)
    _prepare(model, agents, state, [outside0])

    def outside_at(temp: float) -> Outside:
        return model.freeze_concentrated(solution, temp, "solution")

    def fun(temp, y):
        out = outside_at(temp)
        m_out = [out.molality.get(a, 0.0) for a in agents]
        lp, ps = cell.rates_at(temp, agents)
        if not solute_transport:
            ps = [0.0] * k
        return transport.rhs(y, temp, out.osmolality, m_out, lp, ps) / (-cooling_rate)

    temps = np.linspace(t_f, end_temperature, points)
    sol = solve_ivp(fun, (t_f, end_temperature), np.array([state.water_ratio, *state.solute]), method="LSODA",
                    t_eval=temps, rtol=1e-6, atol=1e-9)
    if not sol.success:
        raise ModelRangeError("temperature", end_temperature, f"an integrable cooling ({sol.message})", MAZUR_1963.model)
    x = sol.y[0]
    s = sol.y[1 : 1 + k]
    v = transport.relative_volume(x, s)
    pi_in = np.array([model.inside_osmolality(x[i], s[:, i] / x[i], agents) for i in range(x.size)])
    t_liq = np.array([model.liquidus_temperature(p) for p in pi_in])
    supercooling = t_liq - sol.t
    eq_v = np.empty_like(v)
    for i, temp in enumerate(sol.t):
        eq = equilibrium_state(cell, model, outside_at(temp), agents) if solute_transport else _water_equilibrium(
            cell, model, outside_at(temp), agents, s[:, i])
        eq_v[i] = float(transport.relative_volume(eq.water_ratio, np.asarray(eq.solute)))
    flags: list[Flag] = []
    if cell.hydraulic_activation_energy is None:
        flags.append(Flag("extrapolated", "no activation energy for L_p: L_p held at its reference value "
                          "during cooling, which overstates water loss", cell.sources.get("hydraulic_conductivity")))
    if cell.lp_measured_range is not None and end_temperature < cell.lp_measured_range[0]:
        flags.append(Flag("extrapolated", f"L_p Arrhenius fit extrapolated below "
                          f"{cell.lp_measured_range[0] - CELSIUS_OFFSET:g} C", cell.sources.get("hydraulic_conductivity")))
    t_n = cell.nucleation_temperature
    at_n: float | None = None
    reading = "not-assessed"
    if t_n is not None and end_temperature - 1e-6 <= t_n <= t_f:
        at_n = float(np.interp(t_n, sol.t[::-1], supercooling[::-1]))
        reading = ("likely" if at_n >= iif_supercooling else
                   "possible" if at_n >= min(IIF_POSSIBLE_SUPERCOOLING_K, iif_supercooling) else "unlikely")
        flags.append(Flag("indicative", f"intracellular ice read from the supercooling at "
                          f"{t_n - CELSIUS_OFFSET:g} C: likely from {iif_supercooling:g} K (calibrated on mouse ova), "
                          f"possible from {IIF_POSSIBLE_SUPERCOOLING_K:g} K", "leibo-1978"))
    elif t_n is None:
        flags.append(Flag("missing-data", "no intracellular nucleation temperature for this cell type; "
                          "intracellular ice not assessed", "mazur-1963"))
    return CoolingHistory(
        model="Mazur water loss with extracellular ice",
        source="mazur-1963",
        parameters={"solution_model": model.name, "solute_transport": solute_transport,
                    "iif_supercooling_k": iif_supercooling, "agents": list(agents)},
        flags=flags,
        cooling_rate=cooling_rate,
        temperature=sol.t,
        relative_volume=v,
        equilibrium_volume=eq_v,
        supercooling=supercooling,
        start_temperature=t_f,
        max_supercooling=float(np.max(supercooling)),
        nucleation_temperature=t_n,
        supercooling_at_nucleation=at_n,
        intracellular_ice=reading,
    )


def _water_equilibrium(cell, model, outside: Outside, agents, solute: np.ndarray) -> CellState:
    """Equilibrium water content with the permeating solute content held fixed."""
    f = lambda x: model.inside_osmolality(x, solute / x, agents) - outside.osmolality  # noqa: E731
    lo, hi = (0.006, 45.0) if f(0.006) > 0 > f(45.0) else (1e-6, 1e4)
    x = float(brentq(f, lo, hi, xtol=1e-12))
    return CellState(x, tuple(np.asarray(solute).tolist()))


@dataclass
class SupercoolingTradeOff(Result):
    """Intracellular supercooling against cooling rate: the classic slow/fast trade-off."""

    cooling_rate: np.ndarray = field(default_factory=lambda: np.zeros(0))  # K/s
    max_supercooling: np.ndarray = field(default_factory=lambda: np.zeros(0))  # K
    supercooling_at_nucleation: np.ndarray = field(default_factory=lambda: np.zeros(0))  # K (nan if none)
    min_volume_fraction: np.ndarray = field(default_factory=lambda: np.zeros(0))
    iif_onset_rate: float | None = None  # K/s: slowest rate at which intracellular ice reads likely


def supercooling_tradeoff(
    cell: CellParameters,
    model: SolutionModel,
    solution: Solution,
    cooling_rates,
    end_temperature: float,
    start: CellState | None = None,
    solute_transport: bool = True,
    iif_supercooling: float = DEFAULT_IIF_SUPERCOOLING_K,
) -> SupercoolingTradeOff:
    """Run the Mazur model at each of ``cooling_rates`` [K/s] (array) down to ``end_temperature`` [K].

    Returns the maximum supercooling, the supercooling at the cell's nucleation temperature and the
    smallest volume reached at each rate; ``iif_onset_rate`` interpolates (in log rate) where the
    supercooling at nucleation crosses ``iif_supercooling``. See :func:`cool_with_extracellular_ice`.

    References
    ----------
    [ref:mazur-1963]
    """
    rates = np.atleast_1d(np.asarray(cooling_rates, dtype=float))
    maxs, at_n, vmin = [], [], []
    flags: list[Flag] = []
    for b in rates:
        h = cool_with_extracellular_ice(cell, model, solution, float(b), end_temperature, start,
                                        solute_transport=solute_transport, iif_supercooling=iif_supercooling,
                                        points=120)
        maxs.append(h.max_supercooling)
        at_n.append(np.nan if h.supercooling_at_nucleation is None else h.supercooling_at_nucleation)
        vmin.append(float(np.min(h.relative_volume)))
        flags.extend(h.flags)
    at_n_arr = np.asarray(at_n)
    onset = None
    order = np.argsort(rates)
    r, d = rates[order], at_n_arr[order]
    for i in range(1, r.size):
        if np.isfinite(d[i - 1]) and np.isfinite(d[i]) and d[i - 1] < iif_supercooling <= d[i]:
            frac = (iif_supercooling - d[i - 1]) / (d[i] - d[i - 1])
            onset = float(np.exp(np.log(r[i - 1]) + frac * (np.log(r[i]) - np.log(r[i - 1]))))
            break
    return SupercoolingTradeOff(
        model="Mazur water loss with extracellular ice", source="mazur-1963",
        parameters={"iif_supercooling_k": iif_supercooling, "end_temperature_k": end_temperature},
        flags=dedupe_flags(flags), cooling_rate=rates, max_supercooling=np.asarray(maxs),
        supercooling_at_nucleation=at_n_arr, min_volume_fraction=np.asarray(vmin), iif_onset_rate=onset,
    )


def planned_steps(cells: Cells) -> list[PlannedStep]:
    """The protocol's loading then unloading steps as :class:`PlannedStep` objects."""
    out = [PlannedStep("loading", s.index, s.solution, s.temperature, s.duration) for s in cells.loading]
    out += [PlannedStep("unloading", s.index, s.solution, s.temperature, s.duration) for s in cells.unloading]
    return out


__all__ = [
    "CellParameters", "CellState", "CellStep", "CoolingHistory", "DiluteSolution", "Outside", "PlannedStep",
    "SolutionModel", "StepExtremes", "Suggestion", "SuggestedStep", "SupercoolingTradeOff", "TransportHistory",
    "UM_PER_MIN_ATM", "VirialSolution", "arrhenius", "boyle_van_t_hoff", "cell_data", "cool_with_extracellular_ice",
    "dedupe_flags", "default_solution_model", "equilibrium_state", "isotonic_state", "non_permeating_agents", "partial_molar_volume",
    "permeating_agents", "planned_steps", "preset_names", "resolve_cell", "simulate_steps", "suggest_steps",
    "supercooling_tradeoff", "toxicity_rate", "water_time_constant",
]
