"""Ice nucleation in a supercooled sample: critical nucleus, rates, and the freeze probability over a history.

Four parts, each a small set of vectorised functions on SI floats and numpy arrays (K, Pa, m, m3, s):

1. Classical nucleation theory (CNT) in plain numbers: the driving force from the IAPWS Gibbs energies of
   liquid and ice (``planner.water_ice``), the ice-water interfacial energy as a model choice with its
   uncertainty (:data:`INTERFACIAL_CONSTANT`, :data:`INTERFACIAL_LINEAR`), the critical radius, diameter,
   molecule count and barrier (:func:`critical_nucleus`), and the critical size of a sealed rigid container
   below which no ice state is favourable (:func:`critical_confinement_length`).
2. Homogeneous rates: pure water (Koop and Murray 2016) and solutions (the water-activity criterion of
   Koop et al. 2000 with the Murphy and Koop 2005 vapour pressures), each used only inside its range; where
   the temperature is warmer than the range the rate is replaced by an upper bound (:func:`homogeneous_rate`).
3. Heterogeneous rates: a stochastic rate per volume and, optionally, per liquid-air interface area and per
   wetted wall area, each
   exponential in the supercooling, with parameter distributions from presets
   (``planner/data/nucleation_presets.yaml``) or from the user's own assay (``planner.calibration``).
4. The freeze probability over a temperature history, P = 1 - exp(-integral of [V w(T) + A w_A(T) +
   A_wall w_wall(T) + V J_hom(T)] dt), with a 90 % interval from seeded Monte Carlo draws of the parameters and of the
   interfacial energy (:func:`freeze_probability`), the cumulative curve for a chart, a probability map over
   volumes x hold temperatures, and the "what would it take" answers for a target risk.

Temperatures are kelvin; "supercooling" is always the liquidus of the sample's own solution minus the
temperature [K].
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, replace
from functools import lru_cache
from importlib import resources

import numpy as np
from numpy.typing import ArrayLike

from planner import water_ice
from planner.errors import ExtrapolationWarning, InputError, ModelRangeError, choice_error
from planner.results import Flag, Result
from planner.validity import Range, Validity
from planner.yamlio import load_yaml

# --- constants --------------------------------------------------------------------------------------------
BOLTZMANN = 1.380649e-23  # J/K (exact, SI 2019)
AVOGADRO = 6.02214076e23  # 1/mol (exact, SI 2019)
PLANCK = 6.62607015e-34  # J s (exact, SI 2019)
WATER_MOLAR_MASS = 0.018015268  # kg/mol [ref:iapws-95]
WATER_MOLECULE_MASS = WATER_MOLAR_MASS / AVOGADRO  # kg
STANDARD_PRESSURE = 101325.0  # Pa
# Ice Ih melting temperature at 101325 Pa from the R14-08 melting curve [ref:iapws-r14-08]
PURE_WATER_LIQUIDUS = 273.152519  # K
CELSIUS = 273.15  # K
DEFAULT_DRAWS = 10_000
DEFAULT_SEED = 20_240_601
INTERVAL = (0.05, 0.95)  # the 90 % interval
# CNT kinetic prefactor never exceeds the molecular attempt rate n_w kT/h (3.3e28 m^-3 x 5e12 s^-1 = 1.7e41
# m^-3 s^-1 near 240 K); the bound below takes a factor of about six above it.
KINETIC_PREFACTOR_BOUND = 1e42  # 1/(m3 s)
# Heterogeneous exponential forms are not used beyond this supercooling: deeper cooling belongs to the
# homogeneous regime (pure water freezes by -38 C) or to vitrification (judged by critical rates).
MAX_SUPERCOOLING = 40.0  # K

# --- validity ranges ----------------------------------------------------------------------------------------
DRIVING_FORCE = Validity(
    "CNT driving force from IAPWS G12-15 and R10-06 at 0.1 MPa",
    "iapws-g12-15",
    {
        # refused outside: G12-15 is not evaluated below 230 K here
        "temperature": Range(230.0, water_ice.TRIPLE_POINT_TEMPERATURE, "K"),
        # flagged outside: below the homogeneous nucleation line at 0.1 MPa (235.15 K) G12-15 is extrapolated
        "temperature (fitted)": Range(235.15, water_ice.TRIPLE_POINT_TEMPERATURE, "K"),
    },
)
KOOP_MURRAY_2016 = Validity(
    "Koop-Murray 2016 homogeneous rate, pure water",
    "koop-murray-2016",
    # range from memory ("about 233-239 K", the temperatures of the droplet-freezing data it was built on)
    {"temperature": Range(233.0, 239.0, "K")},
)
KOOP_2000 = Validity(
    "Koop et al. 2000 water-activity criterion",
    "koop-2000",
    {"water_activity_difference": Range(0.26, 0.34, "1")},
)
MURPHY_KOOP_ICE = Validity(
    "Murphy-Koop 2005 vapour pressure of ice", "murphy-koop-2005", {"temperature": Range(110.0, 273.16, "K")}
)
MURPHY_KOOP_LIQUID = Validity(
    "Murphy-Koop 2005 vapour pressure of liquid water",
    "murphy-koop-2005",
    {"temperature": Range(123.0, 332.0, "K")},
)


# --- water and ice properties on a cached grid ------------------------------------------------------------
@dataclass(frozen=True)
class _PropertyTable:
    temperature: np.ndarray  # K
    chemical_potential_difference: np.ndarray  # J/kg
    ice_density: np.ndarray  # kg/m3
    liquid_density: np.ndarray  # kg/m3
    liquid_compressibility: np.ndarray  # 1/Pa


@lru_cache(maxsize=1)
def _table() -> _PropertyTable:
    """IAPWS properties at 0.1 MPa on a 0.05 K grid from 230 K to the triple point (built once)."""
    t = np.linspace(230.0, water_ice.TRIPLE_POINT_TEMPERATURE, 866)
    with warnings.catch_warnings():
        # below 235.15 K the liquid equation is extrapolated; callers flag that through DRIVING_FORCE
        warnings.simplefilter("ignore", ExtrapolationWarning)
        dmu = np.asarray(water_ice.chemical_potential_difference(t, STANDARD_PRESSURE), dtype=float)
        rho_i = np.asarray(water_ice.ice_density(t, STANDARD_PRESSURE), dtype=float)
        rho_l = np.asarray(water_ice.liquid_density(t, STANDARD_PRESSURE), dtype=float)
        kappa = np.asarray(water_ice.liquid_isothermal_compressibility(t, STANDARD_PRESSURE), dtype=float)
    return _PropertyTable(t, dmu, rho_i, rho_l, kappa)


def _interp(values: np.ndarray, temperature: np.ndarray) -> np.ndarray:
    tab = _table()
    return np.interp(temperature, tab.temperature, values)


def _out(x: np.ndarray):
    x = np.asarray(x, dtype=float)
    return float(x) if x.ndim == 0 else x


def _t(temperature: ArrayLike) -> np.ndarray:
    return np.asarray(temperature, dtype=float)


def driving_force_flags(temperature: ArrayLike, warn: bool = False) -> list[Flag]:
    """``extrapolated`` flags for CNT quantities at these temperatures (liquid below 235.15 K)."""
    return DRIVING_FORCE.flags(warn=warn, **{"temperature (fitted)": _t(temperature)})


def chemical_potential_difference(temperature: ArrayLike):
    """Gibbs energy of supercooled liquid water minus ice Ih at 0.1 MPa [J/kg] (pure water).

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 230 K to 273.16 K (flagged below 235.15 K, see :func:`driving_force_flags`).

    Returns
    -------
    float or numpy.ndarray
        Delta mu [J/kg], positive below the melting point.

    Notes
    -----
    g_liquid (IAPWS G12-15) - g_ice (IAPWS R10-06) from ``planner.water_ice``, tabulated every 0.05 K and
    interpolated linearly (interpolation error below 0.01 %). Not the linear approximation
    L_f (T_m - T)/T_m, which is about 3 % high at -10 C and 14 % high at -35 C.

    References
    ----------
    [ref:iapws-g12-15], [ref:iapws-r10-06]
    """
    t = _t(temperature)
    DRIVING_FORCE.check(temperature=t)
    return _out(_interp(_table().chemical_potential_difference, t))


def driving_force(temperature: ArrayLike, liquidus: ArrayLike = PURE_WATER_LIQUIDUS):
    """Chemical potential difference liquid - ice for water in a solution with this liquidus [J/kg].

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 230 K to 273.16 K.
    liquidus : array_like
        Liquidus (freezing point) of the solution at 0.1 MPa [K], 230 K to 273.16 K.

    Returns
    -------
    float or numpy.ndarray
        Delta mu_solution [J/kg]: zero at the liquidus, positive below it, negative above.

    Notes
    -----
    mu_w,solution - mu_ice = Delta mu_pure(T) + (R T / M_w) ln a_w. At the liquidus the two phases are in
    equilibrium, (R T_m / M_w) ln a_w = -Delta mu_pure(T_m); with the water activity of the solution taken
    as independent of temperature between T_m and T (the approximation of [ref:koop-2000]):

        Delta mu_solution(T) = Delta mu_pure(T) - (T / T_m) Delta mu_pure(T_m).

    For pure water the second term vanishes (to within 30 J/kg of the IAPWS formulations' mismatch).

    References
    ----------
    [ref:iapws-g12-15], [ref:iapws-r10-06], [ref:koop-2000]
    """
    t, tm = np.broadcast_arrays(_t(temperature), _t(liquidus))
    DRIVING_FORCE.check(temperature=t)
    DRIVING_FORCE.check(temperature=tm)
    table = _table().chemical_potential_difference
    dmu = _interp(table, t) - t / tm * _interp(table, tm)
    return _out(dmu)


def ice_density(temperature: ArrayLike):
    """Density of ice Ih at 0.1 MPa [kg/m3] (IAPWS R10-06, tabulated); temperature [K], 230-273.16 K.

    References
    ----------
    [ref:iapws-r10-06]
    """
    t = _t(temperature)
    DRIVING_FORCE.check(temperature=t)
    return _out(_interp(_table().ice_density, t))


# --- interfacial energy --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class InterfacialEnergyModel:
    """An ice-water interfacial energy sigma(T) = intercept + slope (T - 273.15 K) with a relative 1-sd spread.

    ``relative_sd`` is the standard deviation of sigma divided by sigma; the Monte Carlo draws a factor
    s ~ Normal(1, relative_sd) and multiplies sigma by it.
    """

    name: str
    source: str
    intercept: float  # J/m2 at 0 C
    slope: float  # J/(m2 K)
    relative_sd: float
    note: str = ""

    def value(self, temperature: ArrayLike):
        """sigma [J/m2] at temperature [K]."""
        return _out(self.intercept + self.slope * (_t(temperature) - CELSIUS))


# Grain-boundary groove measurement at the melting point: 29.1 +/- 0.8 mJ/m2 [ref:hardy-1977] (from memory).
INTERFACIAL_CONSTANT = InterfacialEnergyModel(
    "constant 29.1 mJ/m2", "hardy-1977", 29.1e-3, 0.0, 0.8 / 29.1,
    "measured at the melting point; the constant value is consistent with simulated critical clusters "
    "(29(3) mN/m extrapolated to the melting point [ref:sanz-2013])",
)
# Linear temperature form sigma = 28.0 + 0.25 T[C] mJ/m2 [ref:pruppacher-klett-1997] (from memory); its
# spread is taken as 10 % (1 sd), the relative spread of 29(3) mN/m [ref:sanz-2013] and of the 25-35 mJ/m2
# range of published values.
INTERFACIAL_LINEAR = InterfacialEnergyModel(
    "28.0 + 0.25 T[C] mJ/m2", "pruppacher-klett-1997", 28.0e-3, 0.25e-3, 0.10,
    "falls with supercooling; gives smaller critical nuclei than the constant value at deep supercooling",
)
INTERFACIAL_MODELS = {"constant": INTERFACIAL_CONSTANT, "linear-temperature": INTERFACIAL_LINEAR}
DEFAULT_INTERFACIAL = INTERFACIAL_CONSTANT


# --- classical nucleation theory -----------------------------------------------------------------------------
@dataclass(frozen=True)
class CriticalNucleus:
    """Critical ice nucleus at a temperature (arrays broadcast like the inputs).

    ``radius`` [m], ``diameter`` [m], ``molecules`` [1], ``barrier`` [J], ``barrier_kt`` [1] (barrier
    over kT), ``driving_force_per_volume`` [J/m3] (rho_ice x Delta mu), ``interfacial_energy`` [J/m2].
    """

    radius: np.ndarray | float
    diameter: np.ndarray | float
    molecules: np.ndarray | float
    barrier: np.ndarray | float
    barrier_kt: np.ndarray | float
    driving_force_per_volume: np.ndarray | float
    interfacial_energy: np.ndarray | float


def critical_nucleus(
    temperature: ArrayLike,
    liquidus: ArrayLike = PURE_WATER_LIQUIDUS,
    interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL,
    sigma_factor: ArrayLike = 1.0,
) -> CriticalNucleus:
    """Critical radius, molecule count and barrier of a spherical ice nucleus (CNT, Gibbs-Thomson).

    Parameters
    ----------
    temperature : array_like
        Temperature [K], below the liquidus, 230 K to 273.16 K.
    liquidus : array_like
        Liquidus of the solution [K] (pure water: 273.1525 K at 0.1 MPa).
    interfacial : InterfacialEnergyModel
        Ice-water interfacial energy model.
    sigma_factor : array_like
        Multiplier of the interfacial energy [1] (1 for the central value; the Monte Carlo draws it).

    Returns
    -------
    CriticalNucleus

    Notes
    -----
    Delta g_v = rho_ice Delta mu (J/m3); r* = 2 sigma / Delta g_v (Gibbs-Thomson);
    Delta G* = 16 pi sigma^3 / (3 Delta g_v^2); n* = (4/3) pi r*^3 rho_ice / m_w. Temperatures at or above
    the liquidus give infinite sizes (no finite critical nucleus).

    References
    ----------
    [ref:sanz-2013], [ref:hardy-1977], [ref:iapws-g12-15], [ref:iapws-r10-06]
    """
    t = _t(temperature)
    dmu = np.asarray(driving_force(t, liquidus), dtype=float)
    rho_i = _interp(_table().ice_density, t)
    sigma = np.asarray(interfacial.value(t), dtype=float) * _t(sigma_factor)
    dgv = rho_i * dmu
    with np.errstate(divide="ignore", invalid="ignore"):
        positive = dgv > 0
        radius = np.where(positive, 2.0 * sigma / np.where(positive, dgv, 1.0), np.inf)
        barrier = np.where(positive, 16.0 * np.pi * sigma**3 / (3.0 * np.where(positive, dgv, 1.0) ** 2), np.inf)
    molecules = 4.0 / 3.0 * np.pi * radius**3 * rho_i / WATER_MOLECULE_MASS
    return CriticalNucleus(
        _out(radius), _out(2 * radius), _out(molecules), _out(barrier), _out(barrier / (BOLTZMANN * t)),
        _out(dgv), _out(sigma),
    )


def _confinement_constants(temperature, liquidus, interfacial, sigma_factor=1.0):
    t = _t(temperature)
    nucleus = critical_nucleus(t, liquidus, interfacial, sigma_factor)
    tab = _table()
    rho_i = _interp(tab.ice_density, t)
    rho_l = _interp(tab.liquid_density, t)
    kappa = _interp(tab.liquid_compressibility, t)
    excess = 1.0 - rho_i / rho_l  # volume of liquid displaced per volume of ice, beyond its own
    a = 4.0 / 3.0 * np.pi * np.asarray(nucleus.driving_force_per_volume)
    b = 4.0 * np.pi * np.asarray(nucleus.interfacial_energy)
    c = (4.0 / 3.0 * np.pi * excess) ** 2 / (2.0 * kappa)
    return a, b, c, np.asarray(nucleus.radius)


def confinement_free_energy(
    radius: ArrayLike,
    container_volume: ArrayLike,
    temperature: ArrayLike,
    liquidus: ArrayLike = PURE_WATER_LIQUIDUS,
    interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL,
):
    """Free energy of a spherical ice nucleus in a sealed rigid container of liquid [J].

    Parameters
    ----------
    radius : array_like
        Nucleus radius [m].
    container_volume : array_like
        Volume of liquid sealed in the rigid container [m3] (``inf`` for an open sample).
    temperature, liquidus : array_like
        Temperature and liquidus [K].
    interfacial : InterfacialEnergyModel
        Ice-water interfacial energy model.

    Notes
    -----
    Simplified strain-energy form: the CNT free energy plus the elastic energy of the liquid compressed by
    the nucleus' excess volume dV = V_n (1 - rho_ice/rho_liquid):

        Delta G(r) = -Delta g_v (4/3) pi r^3 + 4 pi r^2 sigma + dV^2 / (2 kappa_T V),

    kappa_T the isothermal compressibility of the liquid (IAPWS G12-15). It leaves out the fall of the
    driving force with pressure that the full Helmholtz-energy treatment [ref:powell-palm-rubinsky-sun-2020]
    includes, and so gives a smaller critical container (it understates the protection by confinement).
    """
    a, b, c, _ = _confinement_constants(temperature, liquidus, interfacial)
    r = _t(radius)
    v = _t(container_volume)
    with np.errstate(divide="ignore", invalid="ignore"):
        strain = np.where(np.isinf(v), 0.0, c * r**6 / v)
    return _out(-a * r**3 + b * r**2 + strain)


def critical_confinement_volume(
    temperature: ArrayLike,
    liquidus: ArrayLike = PURE_WATER_LIQUIDUS,
    interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL,
):
    """Sealed rigid volume [m3] below which no ice nucleus of any size has lower free energy than the liquid.

    Parameters
    ----------
    temperature : array_like
        Temperature [K] below the liquidus, 230-273.16 K.
    liquidus : array_like
        Liquidus [K].
    interfacial : InterfacialEnergyModel
        Ice-water interfacial energy model.

    Notes
    -----
    With Delta G(r) = -a r^3 + b r^2 + c r^6 / V (see :func:`confinement_free_energy`), Delta G / r^2 has
    its minimum at r_m^3 = a V / (4 c), where it equals b - (3/4) a r_m. No size is favourable when that is
    positive, i.e. r_m < 4 b / (3 a) = 2 r*, so

        V_c = 32 c r*^3 / a.

    This is the simplified strain-energy form, not the full Helmholtz treatment of
    [ref:powell-palm-rubinsky-sun-2020] (which reports critical confinement volumes "on the order of
    microns"); the simplified form gives smaller (nanometre-scale) sizes, so it never overstates the
    protection. Millilitre chambers are never protected by confinement.

    References
    ----------
    [ref:powell-palm-rubinsky-sun-2020], [ref:iapws-g12-15]
    """
    a, _b, c, r_star = _confinement_constants(temperature, liquidus, interfacial)
    with np.errstate(invalid="ignore"):
        return _out(np.where(np.isfinite(r_star), 32.0 * c * r_star**3 / a, np.inf))


def critical_confinement_length(
    temperature: ArrayLike,
    liquidus: ArrayLike = PURE_WATER_LIQUIDUS,
    interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL,
):
    """Edge of a cube of the critical confinement volume [m] (see :func:`critical_confinement_volume`).

    References
    ----------
    [ref:powell-palm-rubinsky-sun-2020]
    """
    return _out(np.cbrt(np.asarray(critical_confinement_volume(temperature, liquidus, interfacial))))


# --- vapour pressures and water activity of ice ----------------------------------------------------------------
def ice_vapour_pressure(temperature: ArrayLike):
    """Vapour pressure over ice Ih [Pa], Murphy and Koop 2005 eq. (7); temperature [K], 110-273.16 K.

    Notes
    -----
    ln p = 9.550426 - 5723.265/T + 3.53068 ln T - 0.00728332 T.

    References
    ----------
    [ref:murphy-koop-2005]
    """
    t = _t(temperature)
    MURPHY_KOOP_ICE.check(temperature=t)
    return _out(np.exp(9.550426 - 5723.265 / t + 3.53068 * np.log(t) - 0.00728332 * t))


def liquid_vapour_pressure(temperature: ArrayLike):
    """Vapour pressure over liquid water, supercooled included [Pa], Murphy and Koop 2005 eq. (10).

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 123-332 K.

    Notes
    -----
    ln p = 54.842763 - 6763.22/T - 4.210 ln T + 0.000367 T
           + tanh(0.0415 (T - 218.8)) (53.878 - 1331.22/T - 9.44523 ln T + 0.014025 T).

    References
    ----------
    [ref:murphy-koop-2005]
    """
    t = _t(temperature)
    MURPHY_KOOP_LIQUID.check(temperature=t)
    ln_p = (
        54.842763 - 6763.22 / t - 4.210 * np.log(t) + 0.000367 * t
        + np.tanh(0.0415 * (t - 218.8)) * (53.878 - 1331.22 / t - 9.44523 * np.log(t) + 0.014025 * t)
    )
    return _out(np.exp(ln_p))


def ice_water_activity(temperature: ArrayLike):
    """Water activity of a solution in equilibrium with ice, a_w,ice(T) = p_ice/p_liquid [1].

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 123-273.16 K.

    References
    ----------
    [ref:koop-2000], [ref:murphy-koop-2005]
    """
    return _out(np.asarray(ice_vapour_pressure(temperature)) / np.asarray(liquid_vapour_pressure(temperature)))


# --- homogeneous rates ---------------------------------------------------------------------------------------
_KM_C = (-3020.684, -425.921, -25.9779, -0.868451, -1.66203e-2, -1.71736e-4, -7.46953e-7)
_KOOP_C = (-906.7, 8502.0, -26924.0, 29180.0)


def koop_murray_log10_rate(temperature: ArrayLike):
    """log10 of the homogeneous nucleation rate of pure water [log10(cm^-3 s^-1)], Koop and Murray 2016.

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 233-239 K (refused outside: the polynomial must not be extrapolated).

    Notes
    -----
    log10 J = sum c_i T_c^i, T_c = T - 273.15 K, c = (-3020.684, -425.921, -25.9779, -0.868451,
    -1.66203e-2, -1.71736e-4, -7.46953e-7).

    References
    ----------
    [ref:koop-murray-2016]
    """
    t = _t(temperature)
    KOOP_MURRAY_2016.check(temperature=t)
    tc = t - CELSIUS
    return _out(sum(c * tc**i for i, c in enumerate(_KM_C)))


def koop_2000_log10_rate(water_activity_difference: ArrayLike):
    """log10 of the homogeneous rate of an aqueous solution [log10(cm^-3 s^-1)], Koop et al. 2000.

    Parameters
    ----------
    water_activity_difference : array_like
        Delta a_w = a_w(solution) - a_w,ice(T) [1], 0.26-0.34 (refused outside).

    Notes
    -----
    log10 J = -906.7 + 8502 Delta a_w - 26924 Delta a_w^2 + 29180 Delta a_w^3.

    References
    ----------
    [ref:koop-2000]
    """
    d = _t(water_activity_difference)
    KOOP_2000.check(water_activity_difference=d)
    return _out(sum(c * d**i for i, c in enumerate(_KOOP_C)))


@lru_cache(maxsize=1)
def _pure_water_bound_anchor() -> tuple[float, float]:
    """(T_edge [K], beta_edge) of the warm-side bound for pure water, anchored at Koop-Murray 2016's edge."""
    t_edge = KOOP_MURRAY_2016.ranges["temperature"].high
    j_edge = 10.0 ** float(koop_murray_log10_rate(t_edge)) * 1e6  # 1/(m3 s)
    return t_edge, math.log(KINETIC_PREFACTOR_BOUND / j_edge)


def _barrier_shape(temperature: np.ndarray) -> np.ndarray:
    """1 / (T Delta g_v^2) for pure water [m6/(J2 K)]: the temperature dependence of Delta G*/kT at fixed sigma."""
    tab = _table()
    dgv = _interp(tab.ice_density, temperature) * _interp(tab.chemical_potential_difference, temperature)
    with np.errstate(divide="ignore"):
        return np.where(dgv > 0, 1.0 / (temperature * np.maximum(dgv, 1e-300) ** 2), np.inf)


def _pure_water_bound(temperature: np.ndarray, anchor_temperature: float, anchor_rate: float) -> np.ndarray:
    """Upper bound of the homogeneous rate [1/(m3 s)] at pure-water temperatures warmer than an anchor."""
    beta_edge = math.log(KINETIC_PREFACTOR_BOUND / anchor_rate)
    shape = _barrier_shape(temperature) / _barrier_shape(np.asarray(anchor_temperature))
    with np.errstate(over="ignore", invalid="ignore"):
        return KINETIC_PREFACTOR_BOUND * np.exp(-beta_edge * shape)


@lru_cache(maxsize=1)
def _activity_to_temperature() -> tuple[np.ndarray, np.ndarray]:
    """1 - a_w,ice(T) against T on the driving-force grid (for the pure-water temperature of equal Delta a_w)."""
    t = _table().temperature
    return 1.0 - np.asarray(ice_water_activity(t)), t


HOMOGENEOUS_REGIMES = ("in-range", "bounded", "colder-than-range")


@dataclass(frozen=True)
class HomogeneousRate:
    """Homogeneous nucleation rate [1/(m3 s)] with, per element, which regime produced it.

    ``regime`` indexes :data:`HOMOGENEOUS_REGIMES`: 0 the published parameterisation inside its range; 1 an
    upper bound where the temperature is warmer than the range; 2 colder than the range, where the rate at
    the cold edge is used as a lower bound. ``model`` names the parameterisation.
    """

    rate: np.ndarray | float
    regime: np.ndarray | int
    model: str
    source: str

    def flags(self) -> list[Flag]:
        regime = np.asarray(self.regime)
        out = []
        if np.any(regime == 1):
            out.append(Flag(
                "indicative",
                f"{self.model}: warmer than its range the homogeneous rate is replaced by an upper bound "
                "(CNT with a kinetic prefactor of 1e42 per m3 per s and the barrier anchored at the range's "
                "warm edge; valid because the interfacial energy does not fall as the temperature rises)",
                self.source,
            ))
        if np.any(regime == 2):
            out.append(Flag(
                "extrapolated",
                f"{self.model}: colder than its range; the rate at the cold edge is used, a lower bound",
                self.source,
            ))
        return out


def is_pure_water(liquidus: float) -> bool:
    """True when the liquidus is that of pure water (within 5 mK): then Koop-Murray 2016 applies."""
    return abs(float(liquidus) - PURE_WATER_LIQUIDUS) < 5e-3


def homogeneous_rate(temperature: ArrayLike, liquidus: float = PURE_WATER_LIQUIDUS) -> HomogeneousRate:
    """Homogeneous ice nucleation rate per volume [1/(m3 s)] in pure water or a solution.

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 123 K to 273.16 K.
    liquidus : float
        Liquidus of the solution [K]; pure water (273.1525 K) selects Koop-Murray 2016, anything else the
        water-activity criterion of Koop et al. 2000 with a_w = a_w,ice(liquidus).

    Returns
    -------
    HomogeneousRate
        Rate and, per element, the regime (published range, warm-side bound, cold side held at the edge).

    Notes
    -----
    Inside the published ranges: :func:`koop_murray_log10_rate` (233-239 K) or :func:`koop_2000_log10_rate`
    (0.26 < Delta a_w < 0.34), converted from cm^-3 to m^-3. Above the liquidus the rate is zero.

    Warmer than the range the polynomials are not evaluated. CNT gives J = A exp(-Delta G*/kT), with
    Delta G*/kT proportional to sigma^3 / (T Delta g_v^2). Taking A = 1e42 m^-3 s^-1 (above the molecular
    attempt rate n_w kT/h) and the effective barrier that reproduces the published rate at the range's warm
    edge T_e, J_bound(T) = A exp(-ln(A/J(T_e)) X(T)/X(T_e)), X = 1/(T Delta g_v^2), bounds the true rate
    from above for T > T_e as long as the kinetic prefactor is below A and the interfacial energy does not
    fall as the temperature rises (it rises: [ref:sanz-2013], [ref:pruppacher-klett-1997]). For solutions
    J depends on Delta a_w alone [ref:koop-2000], so the bound is evaluated at the pure-water temperature
    with the same Delta a_w, anchored at Delta a_w = 0.26.

    References
    ----------
    [ref:koop-murray-2016], [ref:koop-2000], [ref:murphy-koop-2005]
    """
    t = _t(temperature)
    if np.any(~np.isfinite(t)) or np.any(t < 123.0) or np.any(t > 273.16):
        raise ModelRangeError("temperature", t.ravel()[:3].tolist(), "123 to 273.16 K", "homogeneous nucleation")
    flat = np.atleast_1d(t).astype(float)
    rate = np.zeros_like(flat)
    regime = np.zeros(flat.shape, dtype=int)
    below = flat < liquidus
    if is_pure_water(liquidus):
        model, source = KOOP_MURRAY_2016.model, "koop-murray-2016"
        lo, hi = KOOP_MURRAY_2016.ranges["temperature"].low, KOOP_MURRAY_2016.ranges["temperature"].high
        inside = below & (flat >= lo) & (flat <= hi)
        warm = below & (flat > hi)
        cold = below & (flat < lo)
        if np.any(inside):
            rate[inside] = 10.0 ** np.asarray(koop_murray_log10_rate(flat[inside])) * 1e6
        if np.any(warm):
            t_edge, _ = _pure_water_bound_anchor()
            rate[warm] = _pure_water_bound(flat[warm], t_edge, 10.0 ** float(koop_murray_log10_rate(t_edge)) * 1e6)
            regime[warm] = 1
        if np.any(cold):
            rate[cold] = 10.0 ** float(koop_murray_log10_rate(lo)) * 1e6
            regime[cold] = 2
    else:
        model, source = KOOP_2000.model, "koop-2000"
        a_w = float(ice_water_activity(liquidus))
        delta = np.where(below, a_w - np.asarray(ice_water_activity(np.clip(flat, 123.0, 273.16))), 0.0)
        lo, hi = KOOP_2000.ranges["water_activity_difference"].low, KOOP_2000.ranges["water_activity_difference"].high
        inside = below & (delta >= lo) & (delta <= hi)
        warm = below & (delta < lo) & (delta > 0)
        cold = below & (delta > hi)
        if np.any(inside):
            rate[inside] = 10.0 ** np.asarray(koop_2000_log10_rate(delta[inside])) * 1e6
        if np.any(warm):
            dvals, tvals = _activity_to_temperature()
            order = np.argsort(dvals)
            t_eq = np.interp(delta[warm], dvals[order], tvals[order])
            t_anchor = float(np.interp(lo, dvals[order], tvals[order]))
            rate[warm] = _pure_water_bound(t_eq, t_anchor, 10.0 ** float(koop_2000_log10_rate(lo)) * 1e6)
            regime[warm] = 1
        if np.any(cold):
            rate[cold] = 10.0 ** float(koop_2000_log10_rate(hi)) * 1e6
            regime[cold] = 2
    if t.ndim == 0:
        return HomogeneousRate(float(rate[0]), int(regime[0]), model, source)
    return HomogeneousRate(rate.reshape(t.shape), regime.reshape(t.shape), model, source)


def _homogeneous_barrier_kt(temperature: np.ndarray, liquidus: float, interfacial: InterfacialEnergyModel):
    """Delta G*/kT from CNT where it can be evaluated (230-273.16 K), else the value at 230 K."""
    t = np.clip(temperature, 230.0, water_ice.TRIPLE_POINT_TEMPERATURE)
    nucleus = critical_nucleus(t, liquidus, interfacial)
    return np.asarray(nucleus.barrier_kt, dtype=float)


# --- heterogeneous rates ---------------------------------------------------------------------------------
@dataclass(frozen=True)
class RateTerm:
    """One heterogeneous rate, per volume [1/(m3 s)] or per interface area [1/(m2 s)].

    rate(dT) = exp(ln_rate_ref + exp(log_slope) (dT - reference_supercooling)). The parameters
    (ln_rate_ref, log_slope) are normal with ``mean`` and 2x2 ``covariance``; ``per`` is ``volume``,
    ``interface`` (liquid-air) or ``wall`` (wetted container wall).
    """

    per: str
    reference_supercooling: float  # K
    mean: tuple[float, float]  # (ln_rate_ref, log_slope)
    covariance: tuple[tuple[float, float], tuple[float, float]]

    @property
    def slope(self) -> float:
        """Central slope [1/K]."""
        return math.exp(self.mean[1])

    def rate(self, supercooling: ArrayLike):
        """Central rate [1/(m3 s) or 1/(m2 s)] at supercooling [K] (zero at or above the liquidus)."""
        x = _t(supercooling)
        r = np.exp(self.mean[0] + self.slope * (x - self.reference_supercooling))
        return _out(np.where(x > 0, r, 0.0))

    def draws(self, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
        """``n`` draws of (ln_rate_ref, slope [1/K])."""
        cov = np.asarray(self.covariance, dtype=float)
        mean = np.asarray(self.mean, dtype=float)
        if not np.any(cov):
            ln_rate = np.full(n, mean[0])
            log_slope = np.full(n, mean[1])
        else:
            z = rng.multivariate_normal(mean, cov, size=n, method="cholesky" if np.all(np.linalg.eigvalsh(cov) > 0) else "eigh")
            ln_rate, log_slope = z[:, 0], z[:, 1]
        return ln_rate, np.exp(log_slope)


def heterogeneous_rate(supercooling: ArrayLike, ln_rate_ref: ArrayLike, slope: ArrayLike, reference_supercooling: float):
    """Stochastic heterogeneous nucleation rate exp(ln_rate_ref + slope (dT - dT_ref)) [1/(m3 s) or 1/(m2 s)].

    Parameters
    ----------
    supercooling : array_like
        Liquidus minus temperature [K]; zero rate at or above the liquidus.
    ln_rate_ref : array_like
        Natural log of the rate at the reference supercooling [ln(1/(m3 s))].
    slope : array_like
        d ln(rate) / d(supercooling) [1/K], positive.
    reference_supercooling : float
        Reference supercooling [K].

    Notes
    -----
    The exponential in supercooling is the stochastic counterpart of the roughly exponential nucleus
    spectra of [ref:vali-1971] and the large-supercooling form of the volume-and-time fit of [ref:bigg-1953].
    """
    x = _t(supercooling)
    r = np.exp(_t(ln_rate_ref) + _t(slope) * (x - reference_supercooling))
    return _out(np.where(x > 0, r, 0.0))


@dataclass(frozen=True)
class NucleationModel:
    """Where a sample's heterogeneous nucleation comes from: a preset, a calibration, or none.

    ``kind``: ``prior`` (a wide preset), ``bound`` (a pessimistic bound), ``fit`` (maximum-likelihood fit of
    the user's assay), ``upper-bound`` (an assay with no frozen samples: only an upper bound is known),
    ``homogeneous-only``. ``supercooling_range`` is where the parameters come from [K].
    """

    name: str
    kind: str
    source: str
    label: str
    volume: RateTerm | None = None
    interface: RateTerm | None = None
    wall: RateTerm | None = None
    supercooling_range: Range = Range(0.0, MAX_SUPERCOOLING, "K")
    description: str = ""
    parameters: dict = field(default_factory=dict)

    def range_flags(self, supercooling: ArrayLike) -> list[Flag]:
        """``extrapolated`` when the deepest supercooling of the history lies outside the model's range.

        The ramps through small supercooling on the way to a hold add little and are not flagged; a history
        whose deepest point is colder than the range, or warmer than all of it, is.
        """
        if self.volume is None and self.interface is None and self.wall is None:
            return []
        x = _t(supercooling)
        x = x[x > 0]
        if x.size == 0:
            return []
        deepest = float(x.max())
        lo, hi = self.supercooling_range.low or 0.0, self.supercooling_range.high
        if (hi is None or deepest <= hi) and deepest >= lo:
            return []
        where = "deeper than" if hi is not None and deepest > hi else "warmer than all of"
        return [Flag(
            "extrapolated",
            f"{self.label}: the sample reaches {deepest:.1f} K of supercooling, {where} the "
            f"{self.supercooling_range.describe()} its parameters come from",
            self.source,
        )]


HOMOGENEOUS_ONLY = NucleationModel(
    "homogeneous-only", "homogeneous-only", "koop-murray-2016",
    "homogeneous nucleation only (emulsified or ultra-pure sample)",
)


def _term(node: dict, per: str, where: str) -> RateTerm:
    try:
        ref = float(node["reference_supercooling_k"])
        a, s = node["ln_rate_ref"], node["log_slope"]
        mean = (float(a["mean"]), float(s["mean"]))
        cov = ((float(a["sd"]) ** 2, 0.0), (0.0, float(s["sd"]) ** 2))
    except (KeyError, TypeError, ValueError):
        raise InputError(where, node, "reference_supercooling_k, ln_rate_ref {mean, sd}, log_slope {mean, sd}") from None
    return RateTerm(per, ref, mean, cov)


@lru_cache(maxsize=1)
def presets() -> dict[str, NucleationModel]:
    """The heterogeneous presets of ``planner/data/nucleation_presets.yaml``, by name."""
    text = resources.files("planner").joinpath("data/nucleation_presets.yaml").read_text(encoding="utf-8")
    raw = load_yaml(text, "nucleation_presets.yaml")
    out = {}
    for name, e in raw.items():
        lo, hi = e["supercooling_range_k"]
        out[name] = NucleationModel(
            name=name, kind=e["kind"], source=e["source"], label=e["label"],
            volume=_term(e["volume"], "volume", f"{name}.volume") if "volume" in e else None,
            interface=_term(e["interface"], "interface", f"{name}.interface") if "interface" in e else None,
            wall=_term(e["wall"], "wall", f"{name}.wall") if "wall" in e else None,
            supercooling_range=Range(float(lo), float(hi), "K"),
            description=" ".join(str(e.get(k, "")) for k in ("conditions", "derivation")).strip(),
            parameters={"interfaces": list(e["interfaces"]), "default_for": list(e["default_for"])},
        )
    return out


def preset(name: str) -> NucleationModel:
    """A preset by name, or :data:`HOMOGENEOUS_ONLY`; an unknown name is an error naming the choices."""
    if name == "homogeneous-only":
        return HOMOGENEOUS_ONLY
    found = presets()
    if name not in found:
        raise choice_error("nucleation.preset", name, [*found, "homogeneous-only"])
    return found[name]


def default_preset(interface: str) -> NucleationModel:
    """The documented default for a liquid-air ``interface`` (``exposed`` or ``sealed``): the preset listed
    as ``default_for`` it - the most cautious prior that describes that interface."""
    candidates = [m for m in presets().values() if interface in m.parameters["default_for"]]
    if not candidates:
        raise choice_error("container.interface", interface, ["exposed", "sealed"])
    return candidates[0]


# --- histories ---------------------------------------------------------------------------------------------
def _check_history(time: ArrayLike, temperature: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(time, dtype=float).ravel()
    y = np.asarray(temperature, dtype=float).ravel()
    if t.size != y.size or t.size < 2:
        raise InputError("history", f"{t.size} times, {y.size} temperatures", "two or more (time, temperature) pairs")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(y))):
        raise InputError("history", "non-finite value", "finite times [s] and temperatures [K]")
    if np.any(np.diff(t) < 0):
        raise InputError("history.time", "decreasing", "non-decreasing times [s]")
    if np.any(y <= 0):
        raise InputError("history.temperature", float(y.min()), "temperatures above 0 K")
    return t, y


def truncate_history(time: ArrayLike, temperature: ArrayLike, until_time: float | None = None,
                     coldest: float | None = None) -> tuple[np.ndarray, np.ndarray, str | None]:
    """Cut a history at ``until_time`` [s] and at the first time it reaches ``coldest`` [K].

    Returns the cut ``time`` [s], ``temperature`` [K] and a plain reason (or None when nothing was cut).
    """
    t, y = _check_history(time, temperature)
    reason = None
    if until_time is not None and until_time < t[-1]:
        keep = t < until_time
        t_end = float(until_time)
        y_end = float(np.interp(t_end, t, y))
        t, y = np.append(t[keep], t_end), np.append(y[keep], y_end)
        reason = "until-time"
    if coldest is not None and np.any(y < coldest):
        i = int(np.argmax(y < coldest))
        if i == 0:
            return t[:1].repeat(2), np.full(2, y[0]), "starts-colder"
        t0, t1, y0, y1 = t[i - 1], t[i], y[i - 1], y[i]
        frac = (y0 - coldest) / (y0 - y1) if y0 != y1 else 1.0
        t = np.append(t[:i], t0 + frac * (t1 - t0))
        y = np.append(y[:i], coldest)
        reason = "coldest"
    return t, y, reason


def _segments(time: np.ndarray, supercooling: np.ndarray):
    """Merge a history into linear pieces: (x0, x1, dt) arrays, dropping zero-length pieces (plunges)."""
    dt = np.diff(time)
    x0, x1 = supercooling[:-1], supercooling[1:]
    keep = dt > 0
    dt, x0, x1 = dt[keep], x0[keep], x1[keep]
    if dt.size > 1:
        slope = (x1 - x0) / dt
        same = np.isclose(slope[1:], slope[:-1], rtol=1e-9, atol=1e-12) & np.isclose(x1[:-1], x0[1:])
        if np.any(same):
            starts = np.flatnonzero(np.concatenate(([True], ~same)))
            ends = np.concatenate((starts[1:] - 1, [dt.size - 1]))
            csum = np.concatenate(([0.0], np.cumsum(dt)))
            dt = csum[ends + 1] - csum[starts]
            x0, x1 = x0[starts], x1[ends]
    return x0, x1, dt


def _exposure(x0: np.ndarray, x1: np.ndarray, dt: np.ndarray, slope: ArrayLike) -> np.ndarray:
    """integral of exp(slope x(t)) dt over linear pieces, x clipped to the liquidus [s], per slope.

    Exact for linear x(t) (x(t) > 0 pieces). Pieces that cross the liquidus are split at it.
    """
    x0, x1, dt = _split_at_liquidus(x0, x1, dt)
    b = np.atleast_1d(np.asarray(slope, dtype=float))
    if x0.size == 0:
        return np.zeros(b.shape)

    def direct(bb: np.ndarray) -> np.ndarray:
        # dt exp(b x0) phi(b (x1 - x0)), phi(u) = expm1(u)/u (1 + u/2 near 0), summed over the pieces;
        # worked in place on two (draws x pieces) arrays
        u = np.multiply.outer(bb, x1 - x0)
        small = np.abs(u) < 1e-9
        with np.errstate(over="ignore", invalid="ignore"):
            phi = np.expm1(u)
            phi /= np.where(u == 0, 1.0, u)
            if small.any():
                phi[small] = 1.0 + u[small] / 2
            weight = np.multiply.outer(bb, x0)
            np.exp(weight, out=weight)
            weight *= dt
            weight *= phi
            return weight.sum(axis=1)

    # Many draws: log exposure is smooth and convex in the slope, so it is worked out on a grid of slopes
    # and interpolated. On the demo histories 1025 points keep every draw within 1e-6 of the direct sum
    # (tests/test_nucleation.py checks 5e-6 on a long varied history) at a tenth of the work.
    if b.size <= EXPOSURE_GRID or x0.size <= 8:
        return direct(b)
    grid = np.linspace(b.min(), b.max(), EXPOSURE_GRID)
    values = np.log(np.maximum(direct(grid), 1e-300))
    return np.exp(np.interp(b, grid, values))


EXPOSURE_GRID = 1025  # slopes at which the exposure is summed directly when there are more draws


def _split_at_liquidus(x0: np.ndarray, x1: np.ndarray, dt: np.ndarray):
    """Keep only the supercooled part (x > 0) of each linear piece."""
    cross = (x0 > 0) != (x1 > 0)
    if np.any(cross):
        frac = np.where(cross, x0 / np.where(x0 != x1, x0 - x1, 1.0), 0.0)
        # piece before the crossing and after it
        xa0, xa1, da = x0, np.where(cross, 0.0, x1), np.where(cross, frac * dt, dt)
        xb0, xb1, db = np.zeros_like(x0[cross]), x1[cross], (1 - frac[cross]) * dt[cross]
        x0 = np.concatenate((xa0, xb0))
        x1 = np.concatenate((xa1, xb1))
        dt = np.concatenate((da, db))
    keep = ((x0 > 0) | (x1 > 0)) & (dt > 0)
    return x0[keep], x1[keep], dt[keep]


def _refine(time: np.ndarray, temperature: np.ndarray, max_step: float = 0.1):
    """Insert points so no linear piece changes temperature by more than ``max_step`` [K]."""
    dt = np.diff(time)
    dy = np.diff(temperature)
    n = np.maximum(1, np.ceil(np.abs(dy) / max_step).astype(int))
    n[dt <= 0] = 1
    if np.all(n == 1):
        return time, temperature
    piece = np.repeat(np.arange(dt.size), n)
    # fraction 1/n, 2/n, ..., 1 within each piece
    start = np.repeat(np.cumsum(n) - n, n)
    frac = (np.arange(piece.size) - start + 1) / n[piece]
    return (np.concatenate((time[:1], time[piece] + frac * dt[piece])),
            np.concatenate((temperature[:1], temperature[piece] + frac * dy[piece])))


def _log_linear_integral(time: np.ndarray, log_rate: np.ndarray) -> float:
    """integral of exp(log_rate) dt with log_rate linear between points [rate x s]."""
    dt = np.diff(time)
    a, b = log_rate[:-1], log_rate[1:]
    keep = (dt > 0) & (np.maximum(a, b) > -700)
    if not np.any(keep):
        return 0.0
    a, b, dt = a[keep], b[keep], dt[keep]
    d = b - a
    with np.errstate(over="ignore", invalid="ignore"):
        phi = np.where(np.abs(d) < 1e-9, 1.0 + d / 2, np.expm1(d) / np.where(d == 0, 1.0, d))
    return float(np.sum(dt * np.exp(a) * phi))


# --- freeze probability -------------------------------------------------------------------------------------
@dataclass
class RiskTerms:
    """Per-draw cumulative hazards of one history, per unit size, so volume and area can be rescaled.

    ``per_volume`` [1/m3], ``per_area`` [1/m2] (liquid-air interface) and ``per_wall_area`` [1/m2]
    (heterogeneous), ``homogeneous_per_volume`` [1/m3]; each an array of the Monte Carlo draws; ``central_*``
    the same at the central parameters. The hazard of a sample is
    V (per_volume + homogeneous_per_volume) + A per_area + A_wall per_wall_area.
    """

    per_volume: np.ndarray
    per_area: np.ndarray
    homogeneous_per_volume: np.ndarray
    central_per_volume: float
    central_per_area: float
    central_homogeneous_per_volume: float
    per_wall_area: np.ndarray | float = 0.0
    central_per_wall_area: float = 0.0

    def hazard(self, volume: float, area: float, wall_area: float = 0.0) -> np.ndarray:
        return (volume * (self.per_volume + self.homogeneous_per_volume) + area * self.per_area
                + wall_area * self.per_wall_area)

    def central_hazard(self, volume: float, area: float, wall_area: float = 0.0) -> float:
        return (volume * (self.central_per_volume + self.central_homogeneous_per_volume) + area * self.central_per_area
                + wall_area * self.central_per_wall_area)


@dataclass
class FreezeProbability(Result):
    """Probability that the sample freezes over a history, with its 90 % interval.

    ``probability`` at the central parameters, ``interval`` the 5th and 95th percentiles of the Monte Carlo
    draws, ``homogeneous_probability`` the homogeneous part alone (central), ``draws`` and ``seed`` of the
    Monte Carlo. ``upper_bound_only`` is True when the model only bounds the rate (then ``probability`` is
    an upper bound and ``interval`` is [0, bound]).
    """

    probability: float = 0.0
    interval: tuple[float, float] = (0.0, 0.0)
    homogeneous_probability: float = 0.0
    heterogeneous_probability: float = 0.0
    max_supercooling: float = 0.0
    draws: int = DEFAULT_DRAWS
    seed: int = DEFAULT_SEED
    upper_bound_only: bool = False
    _terms: RiskTerms | None = None


def _sigma_factors(rng: np.random.Generator, n: int, interfacial: InterfacialEnergyModel) -> np.ndarray:
    return np.clip(rng.normal(1.0, interfacial.relative_sd, n), 0.5, 1.5)


def risk_terms(time: ArrayLike, temperature: ArrayLike, model: NucleationModel, liquidus: float = PURE_WATER_LIQUIDUS,
               interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL, draws: int = DEFAULT_DRAWS,
               seed: int = DEFAULT_SEED) -> tuple[RiskTerms, list[Flag]]:
    """Cumulative hazards per unit volume and area over a history, for every Monte Carlo draw.

    Parameters
    ----------
    time : array_like
        Times [s], non-decreasing (a repeated time is a step change).
    temperature : array_like
        Sample temperature [K] at those times, piecewise linear between them.
    model : NucleationModel
        Heterogeneous model (preset, calibration or :data:`HOMOGENEOUS_ONLY`).
    liquidus : float
        Liquidus of the sample's solution [K].
    interfacial : InterfacialEnergyModel
        Interfacial energy model whose spread perturbs the homogeneous barrier.
    draws : int
        Monte Carlo draws (1 to 1e6).
    seed : int
        Seed of the generator (results are reproducible for a given seed).

    Returns
    -------
    (RiskTerms, list of Flag)

    Notes
    -----
    Heterogeneous: integral of exp(a + b (x(t) - x_ref)) dt, exact on each linear piece. Homogeneous: the
    history is refined to 0.1 K steps and ln J integrated piecewise linearly; each draw multiplies J by
    exp(beta*(T) (1 - s^3)), beta* = Delta G*/kT from CNT and s the drawn interfacial-energy factor
    (J ~ exp(-beta*) and beta* ~ sigma^3).
    """
    if not (isinstance(draws, int | np.integer) and 1 <= draws <= 1_000_000):
        raise InputError("draws", draws, "an integer from 1 to 1000000")
    t, y = _check_history(time, temperature)
    if not (0 < liquidus <= 280.0):
        raise InputError("liquidus", liquidus, "a temperature in K, above 0 and at most 280")
    if not isinstance(seed, int | np.integer):  # a generator's own seeding: fresh draws every call
        return _risk_terms_uncached(t, y, model, liquidus, interfacial, draws, seed)
    # The same history, model and draws give the same terms: one assessment asks for them more than once
    # (the freeze probability and what it takes). The key holds every input the terms depend on, in full:
    # the arrays' bytes, the model's rate terms, range, label and source (frozen dataclasses), the
    # interfacial model. The cached arrays are read-only; each caller gets its own RiskTerms and flag list.
    key = (t.tobytes(), y.tobytes(), t.size, type(model), model.label, model.source, model.volume, model.interface,
           model.wall, model.supercooling_range, float(liquidus), interfacial, int(draws), int(seed))
    cached = _RISK_TERMS_MEMO.get(key)
    if cached is None:
        cached = _risk_terms_uncached(t, y, model, liquidus, interfacial, int(draws), int(seed))
        for name in ("per_volume", "per_area", "homogeneous_per_volume", "per_wall_area"):
            getattr(cached[0], name).flags.writeable = False
        _RISK_TERMS_MEMO[key] = cached
        while len(_RISK_TERMS_MEMO) > _RISK_TERMS_MEMO_SIZE:
            _RISK_TERMS_MEMO.pop(next(iter(_RISK_TERMS_MEMO)))
    else:
        _RISK_TERMS_MEMO[key] = _RISK_TERMS_MEMO.pop(key)  # most recently used last
    terms, flags = cached
    return replace(terms), list(flags)


_RISK_TERMS_MEMO: dict[tuple, tuple[RiskTerms, list[Flag]]] = {}
_RISK_TERMS_MEMO_SIZE = 16


def _risk_terms_uncached(t: np.ndarray, y: np.ndarray, model: NucleationModel, liquidus: float,
                         interfacial: InterfacialEnergyModel, draws: int, seed: int) -> tuple[RiskTerms, list[Flag]]:
    """:func:`risk_terms` on checked inputs, computed afresh."""
    rng = np.random.default_rng(seed)
    x = liquidus - y
    flags: list[Flag] = model.range_flags(x)
    x0, x1, dt = _segments(t, x)

    def term_hazards(term: RateTerm | None) -> tuple[np.ndarray, float]:
        if term is None:
            return np.zeros(draws), 0.0
        ln_rate, slope = term.draws(rng, draws)
        expo = _exposure(x0, x1, dt, slope)
        central = float(_exposure(x0, x1, dt, term.slope)[0])
        hz = np.exp(ln_rate - slope * term.reference_supercooling) * expo
        return hz, math.exp(term.mean[0] - term.slope * term.reference_supercooling) * central

    per_volume, c_volume = term_hazards(model.volume)
    per_area, c_area = term_hazards(model.interface)
    per_wall, c_wall = term_hazards(model.wall)

    # homogeneous
    hom = np.zeros(draws)
    c_hom = 0.0
    supercooled = y < liquidus
    if np.any(supercooled):
        tr, yr = _refine(t, y)
        yr = np.clip(yr, 123.0, 273.16)  # above 273.16 K the rate is zero anyway
        rates = homogeneous_rate(yr, liquidus)
        flags.extend(rates.flags())
        with np.errstate(divide="ignore"):
            log_j = np.log(np.maximum(np.asarray(rates.rate, dtype=float), 1e-300))
        log_j[np.asarray(rates.rate) <= 0] = -1e3
        c_hom = _log_linear_integral(tr, log_j)
        in_range = np.asarray(rates.regime) != 1
        if c_hom > 0 and np.any(log_j > -700) and not np.any(in_range & (log_j > -700)):
            hom = np.full(draws, c_hom)  # only the bound contributes: it is not perturbed
        elif c_hom > 0 and np.any(log_j > -700):
            beta = _homogeneous_barrier_kt(yr, liquidus, interfacial)
            beta = np.where(np.isfinite(beta) & (np.asarray(rates.regime) != 1), beta, 0.0)
            s = _sigma_factors(rng, draws, interfacial)
            eps = 1.0 - s**3
            grid = np.linspace(eps.min(), eps.max(), 65) if eps.size > 65 else np.sort(eps)
            values = np.array([_log_linear_integral(tr, log_j + beta * e) for e in grid])
            with np.errstate(divide="ignore"):
                log_values = np.log(np.maximum(values, 1e-300))
            hom = np.exp(np.interp(eps, grid, log_values)) if grid.size > 1 else np.full(draws, values[0])
    terms = RiskTerms(per_volume, per_area, hom, c_volume, c_area, c_hom, per_wall, c_wall)
    return terms, flags


def _constant_rate_draws(model: NucleationModel, interfacial: InterfacialEnergyModel, draws: int,
                         seed: int) -> tuple[tuple[tuple[np.ndarray, np.ndarray] | None, ...], np.ndarray]:
    """The Monte Carlo draws behind :func:`_constant_rate_terms`, in the order it takes them from the generator:
    (ln_rate_ref, slope) of the volume, interface and wall terms (None where the model has no such term),
    then the interfacial-energy factors. They do not depend on the temperature, so a search over hold
    temperatures draws them once."""
    rng = np.random.default_rng(seed)
    terms = tuple(None if term is None else term.draws(rng, draws) for term in (model.volume, model.interface, model.wall))
    return terms, _sigma_factors(rng, draws, interfacial)


def _constant_rate_terms(temperature: float, model: NucleationModel, liquidus: float,
                         interfacial: InterfacialEnergyModel, draws: int, seed: int,
                         drawn: tuple | None = None) -> RiskTerms:
    """Hazards of one second at a constant temperature, drawn exactly as :func:`risk_terms` draws them.

    ``drawn``: the output of :func:`_constant_rate_draws` for the same model, interfacial model, draws and
    seed (drawn here when not given).
    """
    term_draws, s = _constant_rate_draws(model, interfacial, draws, seed) if drawn is None else drawn
    x = liquidus - temperature

    def term_rate(term: RateTerm | None, drawn_term) -> tuple[np.ndarray, float]:
        if term is None:
            return np.zeros(draws), 0.0
        ln_rate, slope = drawn_term
        if x <= 0:
            return np.zeros(draws), 0.0
        return np.exp(ln_rate + slope * (x - term.reference_supercooling)), float(term.rate(x))

    per_volume, c_volume = term_rate(model.volume, term_draws[0])
    per_area, c_area = term_rate(model.interface, term_draws[1])
    per_wall, c_wall = term_rate(model.wall, term_draws[2])
    hom = np.zeros(draws)
    c_hom = 0.0
    if x > 0:
        rates = homogeneous_rate(float(np.clip(temperature, 123.0, 273.16)), liquidus)
        c_hom = float(rates.rate)
        if c_hom > 0:
            beta = float(_homogeneous_barrier_kt(np.asarray(np.clip(temperature, 123.0, 273.16)), liquidus, interfacial))
            if not math.isfinite(beta) or rates.regime == 1:
                beta = 0.0
            hom = c_hom * np.exp(beta * (1.0 - s**3))
    return RiskTerms(per_volume, per_area, hom, c_volume, c_area, c_hom, per_wall, c_wall)


def _dedupe(flags: list[Flag]) -> list[Flag]:
    seen, out = set(), []
    for f in flags:
        if (f.code, f.message) not in seen:
            seen.add((f.code, f.message))
            out.append(f)
    return out


def _probability(hazard):
    return -np.expm1(-np.asarray(hazard, dtype=float))


def freeze_probability(time: ArrayLike, temperature: ArrayLike, volume: float, model: NucleationModel,
                       liquidus: float = PURE_WATER_LIQUIDUS, interface_area: float = 0.0,
                       interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL, draws: int = DEFAULT_DRAWS,
                       seed: int = DEFAULT_SEED, wall_area: float = 0.0) -> FreezeProbability:
    """Probability that a sample freezes over its temperature history, with a 90 % interval.

    Parameters
    ----------
    time : array_like
        Times [s], non-decreasing.
    temperature : array_like
        Sample temperature [K] (its coldest point, or the bath when no heat-transfer model is used).
    volume : float
        Sample volume [m3], above 0.
    model : NucleationModel
        Heterogeneous model.
    liquidus : float
        Liquidus of the sample's solution [K].
    interface_area : float
        Liquid-air interface area [m2] (used by models with an interface term), 0 or more.
    interfacial : InterfacialEnergyModel
        Interfacial energy model (spread of the homogeneous term).
    draws, seed : int
        Monte Carlo draws and seed.
    wall_area : float
        Wetted container wall area [m2] (used by models with a wall term), 0 or more.

    Returns
    -------
    FreezeProbability

    Notes
    -----
    P = 1 - exp(-H), H = integral of [V w(T) + A w_A(T) + A_wall w_wall(T) + V J_hom(T)] dt (independent
    Poisson nucleation in the volume, on the interface and on the walls). The interval holds the 5th and 95th
    percentiles of P over the draws.

    References
    ----------
    [ref:vali-1971], [ref:koop-murray-2016], [ref:koop-2000], [ref:consiglio-2023]

    Examples
    --------
    >>> r = freeze_probability([0.0, 3600.0], [268.15, 268.15], 1e-6, preset("natural-water-bound"),
    ...                        draws=100)
    >>> 0.0 < r.probability < 1.0
    True
    """
    if not (isinstance(volume, int | float | np.floating) and math.isfinite(volume) and volume > 0):
        raise InputError("volume", volume, "a sample volume above 0 m3")
    if not (math.isfinite(interface_area) and interface_area >= 0):
        raise InputError("interface_area", interface_area, "0 m2 or more")
    if not (math.isfinite(wall_area) and wall_area >= 0):
        raise InputError("wall_area", wall_area, "0 m2 or more")
    terms, flags = risk_terms(time, temperature, model, liquidus, interfacial, draws, seed)
    hz = terms.hazard(volume, interface_area, wall_area)
    central = terms.central_hazard(volume, interface_area, wall_area)
    p = float(_probability(central))
    lo, hi = (float(v) for v in np.quantile(_probability(hz), INTERVAL))
    upper_only = model.kind == "upper-bound"
    if upper_only:
        lo, hi = 0.0, max(p, hi)
        flags.append(Flag("indicative", f"{model.label}: no sample of the assay froze; the probability is an "
                          "upper bound (one-sided 95 %), not an estimate", model.source))
    if model.kind == "bound":
        flags.append(Flag("indicative", f"{model.label} is a pessimistic bound, not an estimate", model.source))
    for f in _dedupe(flags):
        if f.code == "extrapolated":
            warnings.warn(f.message, ExtrapolationWarning, stacklevel=2)
    x = liquidus - np.asarray(temperature, dtype=float)
    result = FreezeProbability(
        model=model.label,
        source=model.source,
        parameters={
            "nucleation_model": model.name, "kind": model.kind, "liquidus": liquidus, "volume": volume,
            "interface_area": interface_area, "wall_area": wall_area, "interfacial_energy": interfacial.name,
        },
        flags=_dedupe(flags),
        probability=p,
        interval=(lo, hi),
        homogeneous_probability=float(_probability(volume * terms.central_homogeneous_per_volume)),
        heterogeneous_probability=float(_probability(volume * terms.central_per_volume + interface_area * terms.central_per_area
                                                     + wall_area * terms.central_per_wall_area)),
        max_supercooling=float(max(0.0, x.max())),
        draws=draws,
        seed=seed,
        upper_bound_only=upper_only,
        _terms=terms,
    )
    return result


def _piece_exposure(x0: np.ndarray, x1: np.ndarray, dt: np.ndarray, slope: np.ndarray) -> np.ndarray:
    """Per-piece integral of exp(slope x(t)) dt over the supercooled part, shape (slopes, pieces) [s]."""
    b = np.atleast_1d(slope)[:, None]
    cross = (x0 > 0) != (x1 > 0)
    frac = np.where(cross, x0 / np.where(x0 != x1, x0 - x1, 1.0), 0.0)
    # supercooled part of each piece: from lo to hi in x over duration d
    lo = np.where(cross, 0.0, x0)
    hi = np.where(cross, np.maximum(x0, x1), x1)
    d = np.where(cross, np.where(x0 > 0, frac, 1 - frac) * dt, dt)
    a0 = np.where(cross & (x0 > 0), x0, lo)
    a1 = np.where(cross & (x0 > 0), 0.0, hi)
    live = ((x0 > 0) | (x1 > 0)) & (dt > 0)
    u = b * (a1 - a0)[None, :]
    with np.errstate(over="ignore", invalid="ignore"):
        phi = np.where(np.abs(u) < 1e-9, 1.0 + u / 2, np.expm1(u) / np.where(u == 0, 1.0, u))
        out = d[None, :] * np.exp(b * a0[None, :]) * phi
    return np.where(live[None, :], out, 0.0)


def cumulative_freeze_probability(time: ArrayLike, temperature: ArrayLike, volume: float, model: NucleationModel,
                                  liquidus: float = PURE_WATER_LIQUIDUS, interface_area: float = 0.0,
                                  points: int = 200, interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL,
                                  draws: int = 2000, seed: int = DEFAULT_SEED, wall_area: float = 0.0
                                  ) -> dict[str, np.ndarray]:
    """Cumulative freeze probability against time, for a chart.

    Parameters
    ----------
    time, temperature : array_like
        History [s], [K].
    volume : float
        Sample volume [m3].
    model : NucleationModel
        Heterogeneous model.
    liquidus : float
        Liquidus [K].
    interface_area : float
        Liquid-air interface area [m2].
    points : int
        Number of output times (2 to 2000), evenly spaced over the history.
    interfacial : InterfacialEnergyModel
        Interfacial energy model.
    draws, seed : int
        Monte Carlo draws (fewer than for the headline number: a chart needs the shape) and seed.

    Returns
    -------
    dict
        ``time`` [s], ``probability`` (central), ``lower`` and ``upper`` (5th, 95th percentiles), arrays.

    Notes
    -----
    The same integrals as :func:`freeze_probability`, accumulated piece by piece over the history refined to
    0.1 K steps and to the output times; the same seed draws the same parameters as there, so the last
    point equals the headline probability.
    """
    if not (isinstance(points, int) and 2 <= points <= 2000):
        raise InputError("points", points, "an integer from 2 to 2000")
    if not (isinstance(draws, int) and 1 <= draws <= 100_000):
        raise InputError("draws", draws, "an integer from 1 to 100000")
    t, y = _check_history(time, temperature)
    out_t = np.linspace(t[0], t[-1], points)
    tr, yr = _refine(t, y)
    extra = out_t[~np.isin(out_t, tr)]
    tt = np.concatenate((tr, extra))
    yy = np.concatenate((yr, np.interp(extra, tr, yr)))
    order = np.argsort(tt, kind="stable")
    tt, yy = tt[order], yy[order]
    x = liquidus - yy
    x0, x1, dt = x[:-1], x[1:], np.diff(tt)
    # index of the last piece ending at or before each output time
    ends = np.searchsorted(tt, out_t, side="right") - 1  # point index; pieces 0..ends-1 are included
    rng = np.random.default_rng(seed)

    def term(term_: RateTerm | None, size: float):
        if term_ is None or size == 0:
            if term_ is not None:
                term_.draws(rng, draws)  # keep the draw sequence aligned with freeze_probability
            return np.zeros((draws, points)), np.zeros(points)
        ln_rate, slope = term_.draws(rng, draws)
        scale = size * np.exp(ln_rate - slope * term_.reference_supercooling)
        cen = _piece_exposure(x0, x1, dt, np.array([term_.slope]))[0] * size * math.exp(
            term_.mean[0] - term_.slope * term_.reference_supercooling)
        ccum = np.concatenate(([0.0], np.cumsum(cen)))[ends]
        if draws * x0.size <= 2_000_000 or np.ptp(slope) == 0:
            per = _piece_exposure(x0, x1, dt, slope)
            cum = np.concatenate((np.zeros((draws, 1)), np.cumsum(per, axis=1)), axis=1)[:, ends]
            return cum * scale[:, None], ccum
        # many pieces: cumulative exposure on a grid of slopes, interpolated in ln for each draw
        grid = np.linspace(slope.min(), slope.max(), 129)
        table = np.concatenate((np.zeros((grid.size, 1)), np.cumsum(_piece_exposure(x0, x1, dt, grid), axis=1)),
                               axis=1)[:, ends]
        with np.errstate(divide="ignore"):
            log_table = np.log(np.maximum(table, 1e-300))
        cum = np.empty((draws, points))
        for k in range(points):
            cum[:, k] = np.exp(np.interp(slope, grid, log_table[:, k]))
        cum[:, table[0] <= 0] = 0.0
        return cum * scale[:, None], ccum

    hv, cv = term(model.volume, volume)
    ha, ca = term(model.interface, interface_area)
    hw, cw = term(model.wall, wall_area)
    hh = np.zeros((draws, points))
    ch = np.zeros(points)
    if np.any(yy < liquidus):
        rates = homogeneous_rate(np.clip(yy, 123.0, 273.16), liquidus)
        rate = np.asarray(rates.rate, dtype=float)
        with np.errstate(divide="ignore"):
            log_j = np.where(rate > 0, np.log(np.maximum(rate, 1e-300)), -1e3)

        def pieces(lj: np.ndarray) -> np.ndarray:
            a, b = lj[:-1], lj[1:]
            dd = b - a
            with np.errstate(over="ignore", invalid="ignore"):
                phi = np.where(np.abs(dd) < 1e-9, 1.0 + dd / 2, np.expm1(dd) / np.where(dd == 0, 1.0, dd))
                val = dt * np.exp(np.minimum(a, 700)) * phi
            return np.where((dt > 0) & (np.maximum(a, b) > -700), val, 0.0)

        cum_c = np.concatenate(([0.0], np.cumsum(pieces(log_j))))
        ch = volume * cum_c[ends]
        if cum_c[-1] > 0:
            beta = _homogeneous_barrier_kt(np.clip(yy, 123.0, 273.16), liquidus, interfacial)
            beta = np.where(np.isfinite(beta) & (np.asarray(rates.regime) != 1), beta, 0.0)
            eps = 1.0 - _sigma_factors(rng, draws, interfacial) ** 3
            grid = np.linspace(eps.min(), eps.max(), 65) if draws > 65 else np.sort(eps)
            table = np.array([np.concatenate(([0.0], np.cumsum(pieces(log_j + beta * e))))[ends] for e in grid])
            with np.errstate(divide="ignore"):
                log_table = np.log(np.maximum(table, 1e-300))
            hh = np.empty((draws, points))
            for k in range(points):
                hh[:, k] = volume * np.exp(np.interp(eps, grid, log_table[:, k])) if grid.size > 1 else volume * table[0, k]
            hh[:, ends == 0] = 0.0
    total = hv + ha + hw + hh
    central = _probability(cv + ca + cw + ch)
    lower, upper = np.quantile(_probability(total), INTERVAL, axis=0)
    return {"time": out_t, "probability": central, "lower": np.maximum.accumulate(lower),
            "upper": np.maximum.accumulate(upper)}


def freeze_probability_map(volumes: ArrayLike, temperatures: ArrayLike, hold_duration: float, model: NucleationModel,
                           liquidus: float = PURE_WATER_LIQUIDUS, interface_areas: ArrayLike | None = None,
                           quantile: float | None = None, draws: int = 2000, seed: int = DEFAULT_SEED,
                           interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL,
                           wall_areas: ArrayLike | None = None) -> np.ndarray:
    """Freeze probability of an isothermal hold over a grid of volumes x hold temperatures.

    Parameters
    ----------
    volumes : array_like
        Sample volumes [m3], 1-D, above 0.
    temperatures : array_like
        Hold temperatures [K], 1-D, 123-273.16 K.
    hold_duration : float
        Hold duration [s], above 0.
    model : NucleationModel
        Heterogeneous model.
    liquidus : float
        Liquidus [K].
    interface_areas : array_like, optional
        Liquid-air interface area [m2] for each volume (same length as ``volumes``); zero when omitted.
    quantile : float, optional
        None for the central estimate; a number in (0, 1) for that quantile over ``draws`` Monte Carlo
        draws (0.95 for the upper end of the 90 % interval).
    draws, seed : int
        Draws and seed when ``quantile`` is given.
    interfacial : InterfacialEnergyModel
        Interfacial energy model.
    wall_areas : array_like, optional
        Wetted wall area [m2] for each volume (models with a wall term); zero when omitted.

    Returns
    -------
    numpy.ndarray
        Probability, shape (len(volumes), len(temperatures)).

    Notes
    -----
    P = 1 - exp(-t [V (w(x) + J_hom(T)) + A w_A(x)]), x = liquidus - T; the ramps to and from the hold
    are not included.
    """
    v = np.atleast_1d(np.asarray(volumes, dtype=float))
    temps = np.atleast_1d(np.asarray(temperatures, dtype=float))
    if v.ndim != 1 or np.any(~np.isfinite(v)) or np.any(v <= 0):
        raise InputError("volumes", "invalid", "a 1-D array of volumes above 0 m3")
    if temps.ndim != 1:
        raise InputError("temperatures", "invalid", "a 1-D array of temperatures [K]")
    if not (math.isfinite(hold_duration) and hold_duration > 0):
        raise InputError("hold_duration", hold_duration, "a duration above 0 s")
    area = np.zeros_like(v) if interface_areas is None else np.atleast_1d(np.asarray(interface_areas, dtype=float))
    if area.shape != v.shape or np.any(area < 0):
        raise InputError("interface_areas", "invalid", "one area of 0 m2 or more per volume")
    wall = np.zeros_like(v) if wall_areas is None else np.atleast_1d(np.asarray(wall_areas, dtype=float))
    if wall.shape != v.shape or np.any(wall < 0):
        raise InputError("wall_areas", "invalid", "one area of 0 m2 or more per volume")
    x = liquidus - temps
    j_hom = np.asarray(homogeneous_rate(temps, liquidus).rate, dtype=float)
    if quantile is None:
        w_v = np.asarray(model.volume.rate(x)) if model.volume is not None else np.zeros_like(temps)
        w_a = np.asarray(model.interface.rate(x)) if model.interface is not None else np.zeros_like(temps)
        w_w = np.asarray(model.wall.rate(x)) if model.wall is not None else np.zeros_like(temps)
        hz = hold_duration * (v[:, None] * (w_v + j_hom)[None, :] + area[:, None] * w_a[None, :]
                              + wall[:, None] * w_w[None, :])
        return _probability(hz)
    if not (0 < quantile < 1):
        raise InputError("quantile", quantile, "a number between 0 and 1")
    rng = np.random.default_rng(seed)

    def term_rates(term: RateTerm | None) -> np.ndarray:
        if term is None:
            return np.zeros((draws, temps.size))
        ln_rate, slope = term.draws(rng, draws)
        r = np.exp(ln_rate[:, None] + slope[:, None] * (x[None, :] - term.reference_supercooling))
        return np.where(x[None, :] > 0, r, 0.0)

    w_v = term_rates(model.volume) + j_hom[None, :]
    w_a = term_rates(model.interface)
    w_w = term_rates(model.wall)
    if (model.interface is None or not np.any(area)) and (model.wall is None or not np.any(wall)):
        # the hazard is proportional to the volume: its quantile scales with it
        return _probability(hold_duration * v[:, None] * np.quantile(w_v, quantile, axis=0)[None, :])
    out = np.empty((v.size, temps.size))
    chunk = max(1, 4_000_000 // (draws * temps.size))
    for i in range(0, v.size, chunk):
        hz = hold_duration * (v[i:i + chunk, None, None] * w_v[None] + area[i:i + chunk, None, None] * w_a[None]
                              + wall[i:i + chunk, None, None] * w_w[None])
        out[i:i + chunk] = np.quantile(hz, quantile, axis=1)
    return _probability(out)


# --- what would it take -------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TargetAnswers:
    """What would meet a target freeze probability, judged on the upper end of the 90 % interval.

    ``longest_hold`` [s] at the main hold's temperature; ``largest_volume`` [m3] for this schedule (interface
    area scaled as volume^(2/3)); ``coldest_hold_temperature`` [K]: holds at or above it meet the target
    (the warmest temperature that still needs to be avoided is just below it). Each is None when no value
    meets the target, with the reason in ``notes``.
    """

    target: float
    basis: str
    longest_hold: float | None
    largest_volume: float | None
    coldest_hold_temperature: float | None
    hold_temperature: float | None
    notes: tuple[str, ...] = ()


def main_hold(time: ArrayLike, temperature: ArrayLike, tolerance: float = 0.05) -> tuple[int, int] | None:
    """Indices (start, end) of the longest stretch at constant temperature (within ``tolerance`` [K])."""
    t, y = _check_history(time, temperature)
    best, best_len = None, 0.0
    i = 0
    while i < t.size - 1:
        j = i
        while j + 1 < t.size and abs(y[j + 1] - y[i]) <= tolerance and t[j + 1] >= t[j]:
            j += 1
        if j > i and t[j] - t[i] > best_len:
            best, best_len = (i, j), t[j] - t[i]
        i = max(j, i + 1)
    return best


def _quantile_linear(values: np.ndarray, quantile: float) -> float:
    """``numpy.quantile(values, quantile)`` (its default "linear" method), the same float, for 1-D float input.

    The bisections of :func:`what_it_takes` take a quantile of the draws a hundred times or more; the
    partition around the two order statistics is the only work done here. Order statistics do not depend on
    how they are found, and the interpolation repeats numpy's own operations (Hyndman & Fan's definition 7:
    virtual index (n - 1) q, g its fractional part, then a + (b - a) g, or b - (b - a)(1 - g) for g >= 0.5).
    """
    values = np.asarray(values, dtype=float).ravel()
    n = values.size
    if n == 0 or not (0.0 <= quantile <= 1.0):
        return float(np.quantile(values, quantile))  # numpy's own answer or error
    if np.isnan(values).any():
        return float("nan")
    virtual = (n - 1) * float(quantile)
    if virtual >= n - 1:
        return float(values.max())
    previous = math.floor(virtual)
    gamma = virtual - previous
    part = np.partition(values, (previous, previous + 1))
    a, b = float(part[previous]), float(part[previous + 1])
    diff = b - a
    return b - diff * (1.0 - gamma) if gamma >= 0.5 else a + diff * gamma


def _bisect(f, lo: float, hi: float, iterations: int = 60) -> float:
    """Largest x in [lo, hi] with f(x) True, for f True at lo and monotone (True then False)."""
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        if f(mid):
            lo = mid
        else:
            hi = mid
    return lo


def what_it_takes(time: ArrayLike, temperature: ArrayLike, volume: float, model: NucleationModel, target: float,
                  liquidus: float = PURE_WATER_LIQUIDUS, interface_area: float = 0.0,
                  interfacial: InterfacialEnergyModel = DEFAULT_INTERFACIAL, draws: int = DEFAULT_DRAWS,
                  seed: int = DEFAULT_SEED, quantile: float = INTERVAL[1], wall_area: float = 0.0) -> TargetAnswers:
    """Longest hold, largest volume and coldest hold temperature that keep the freeze probability at ``target``.

    Parameters
    ----------
    time, temperature : array_like
        History [s], [K].
    volume : float
        Sample volume [m3].
    model : NucleationModel
        Heterogeneous model.
    target : float
        Target freeze probability (0 to 0.5, exclusive of 0).
    liquidus : float
        Liquidus [K].
    interface_area : float
        Liquid-air interface area [m2].
    interfacial : InterfacialEnergyModel
        Interfacial energy model.
    draws, seed : int
        Monte Carlo draws and seed.
    quantile : float
        The probability judged against the target is this quantile of the draws (0.95: the upper end of the
        90 % interval; the central estimate would be optimistic for a planning answer).
    wall_area : float
        Wetted wall area [m2] (models with a wall term).

    Notes
    -----
    The main hold is the longest stretch of constant temperature (see :func:`main_hold`). The hold length
    and the hold temperature are changed with the rest of the history kept as scheduled; volume scaling
    keeps the sample's shape (interface area ~ V^(2/3)). Each answer is found by bisection on the
    ``quantile`` of the per-draw hazards, which rise monotonically with hold length and volume and fall
    with hold temperature.
    """
    if not (0 < target <= 0.5):
        raise InputError("target", target, "a probability above 0 and at most 0.5")
    t, y = _check_history(time, temperature)
    h_target = -math.log1p(-target)
    notes: list[str] = []
    basis = f"{quantile:.0%} quantile of the Monte Carlo draws"

    def q(hz: np.ndarray) -> float:
        return _quantile_linear(hz, quantile)

    full, _ = risk_terms(t, y, model, liquidus, interfacial, draws, seed)

    # largest volume
    def meets_volume(log_v: float) -> bool:
        v = math.exp(log_v)
        scale = (v / volume) ** (2 / 3)
        return q(full.hazard(v, interface_area * scale, wall_area * scale)) <= h_target

    lo_v, hi_v = math.log(1e-15), math.log(10.0)
    if not meets_volume(lo_v):
        largest = None
        notes.append("no volume down to 1e-15 m3 meets the target on this schedule")
    elif meets_volume(hi_v):
        largest = 10.0
        notes.append("every volume up to 10 m3 meets the target on this schedule")
    else:
        largest = math.exp(_bisect(meets_volume, lo_v, hi_v, iterations=44))  # ln V to 2e-12

    hold = main_hold(t, y)
    if hold is None:
        notes.append("the schedule has no hold at constant temperature")
        return TargetAnswers(target, basis, None, largest, None, None, tuple(notes))
    i, j = hold
    t_hold = float(y[i])
    # history without the hold: the hold collapsed to zero length
    shift = t[j] - t[i]
    t_rest = np.concatenate((t[: i + 1], t[j + 1 :] - shift))
    y_rest = np.concatenate((y[: i + 1], y[j + 1 :]))
    rest, _ = risk_terms(t_rest, y_rest, model, liquidus, interfacial, draws, seed)
    h_rest = rest.hazard(volume, interface_area, wall_area)

    drawn = _constant_rate_draws(model, interfacial, draws, seed)  # the same draws at every temperature

    def hold_rate(temp: float) -> np.ndarray:
        return _constant_rate_terms(temp, model, liquidus, interfacial, draws, seed, drawn).hazard(
            volume, interface_area, wall_area)

    rate_here = hold_rate(t_hold)
    if q(h_rest) > h_target:
        longest = None
        notes.append("even with no time at the hold temperature the rest of the sample's history exceeds the "
                     "target: the ramps, and the part of the hold the sample spends catching up with the bath "
                     "(a lagging sample sits just above the hold temperature for a while)")
    elif q(h_rest + rate_here * 1e9) <= h_target:
        longest = 1e9
        notes.append("any hold up to 1e9 s meets the target")
    else:
        longest = _bisect(lambda s: q(h_rest + rate_here * s) <= h_target, 0.0, 1e9)

    duration = float(shift)
    lowest = max(liquidus - MAX_SUPERCOOLING, 123.0)
    warmest = min(liquidus - 1e-3, 273.16)

    def meets_temp(temp: float) -> bool:
        return q(h_rest + hold_rate(temp) * duration) <= h_target

    if warmest <= lowest:
        coldest = None
    elif not meets_temp(warmest):
        coldest = None
        notes.append("no hold temperature below the liquidus meets the target with this hold length")
    elif meets_temp(lowest):
        coldest = lowest
        notes.append(f"every hold temperature down to {lowest - CELSIUS:.1f} C meets the target")
    else:
        # meets_temp is True at warm temperatures: bisect on -T
        coldest = -_bisect(lambda m: meets_temp(-m), -warmest, -lowest, iterations=32)  # to ~1e-8 K
    return TargetAnswers(target, basis, longest, largest, coldest, t_hold, tuple(notes))
