"""Ice in a sealed rigid (isochoric) chamber: equilibrium pressure, ice fraction and liquid concentration.

A chamber filled with liquid at the fill state (T0, p0) and cooled below the liquidus: if ice forms and
the contents reach equilibrium, ice (less dense than the liquid) compresses the remaining liquid until the
liquid's freezing point at that pressure and concentration equals the chamber temperature
[ref:rubinsky-perez-carlson-2005].

Per kilogram of water at fill, with x the frozen fraction of that water, the volume balance is

    x v_i(T, p) + (1 - x) v_w(T, p) + V_s + G0 (p0/p)(T/T0) = V_c0 (1 + beta (p - p0))

(V_s the solutes' volume, taken as constant; G0 the trapped gas at fill, an ideal gas at the chamber
temperature; V_c0 = v_w(T0, p0) + V_s + G0 the cavity; beta the cavity compliance). Pure water has one
degree of freedom less: with ice present p is the melting pressure p_melt(T) of IAPWS R14-08
[ref:iapws-r14-08]. A solution also needs the liquidus under pressure: the liquid is in equilibrium with
ice when it has the water activity of ice at (T, p): its depression below the pure-ice melting point at p,
T_melt(p) - T, corresponds at the fill pressure to the depression (T_melt(p) - T) K(p0)/K(p), K the
cryoscopic constant on the melting curve (:func:`equivalent_depression`; the plain shift by the pure-ice
melting curve overstates the depression by up to 5 % near 200 MPa). Measured liquidus lines of NaCl and
sucrose solutions under pressure [ref:guignon-2005] are the outside check this still lacks. Both
conditions are solved together for (x, p).

Water and ice volumes come from IAPWS G12-15 [ref:iapws-g12-15] and R10-06 [ref:iapws-r10-06] through
:mod:`planner.water_ice`, tabulated once on a (T, p) grid and interpolated by bicubic splines (within
1e-8 relative of the direct evaluation, tested), so that maps of many states solve at once.

Model assumptions (stated in every result): equilibrium (no kinetics); solute volume independent of T, p
and concentration; the liquid's compressibility that of water; solutes stay in the liquid; gas does not
dissolve; wall elastic. Below the ice Ih-III-liquid triple point (251.165 K, 208.566 MPa) the chamber
would follow the ice III line: refused here.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy.interpolate import CubicSpline, RectBivariateSpline

from planner import water_ice as wi
from planner.errors import ExtrapolationWarning, InputError, ModelRangeError
from planner.results import Flag, Result

MODEL = "isochoric equilibrium (IAPWS R14-08, R10-06, G12-15; volume balance)"
SOURCE = "rubinsky-perez-carlson-2005"
MAX_CONCENTRATION_FACTOR = 8.0  # liquid concentration over fill concentration the solver accepts
MODEL_ASSUMPTIONS = (
    "equilibrium state (no kinetics); solute volume constant; liquid compressibility that of water; "
    "trapped gas ideal, not dissolved; wall linear elastic"
)

# --- tables of water and ice volumes -----------------------------------------------------------------
_T_LOW, _T_HIGH = 250.0, 274.0  # K
TABLE_TEMPERATURE_HIGH = _T_HIGH  # K: warmest chamber temperature the equilibrium is computed for
_P_LOW, _P_HIGH = 0.0, 210e6  # Pa


@lru_cache(maxsize=1)
def _tables() -> tuple[RectBivariateSpline, RectBivariateSpline, CubicSpline, CubicSpline]:
    """Splines built once: v_w(T, p), v_i(T, p) [m3/kg], T_melt(p) [K], cryoscopic ratio K(p0)/K(p) [-]."""
    import warnings

    t = np.linspace(_T_LOW, _T_HIGH, 49)
    p = np.linspace(_P_LOW, _P_HIGH, 71)
    tt, pp = np.meshgrid(t, p, indexing="ij")
    with warnings.catch_warnings():  # superheated ice above 273.16 K is only a table margin
        warnings.simplefilter("ignore", ExtrapolationWarning)
        vw = wi.liquid_specific_volume(tt, pp)
        vi = wi.ice_specific_volume(tt, pp)
    pm = np.linspace(wi.TRIPLE_POINT_PRESSURE, float(wi.melting_pressure(wi.TRIPLE_POINT_IH_III_TEMPERATURE)), 801)
    tm = wi.melting_temperature(pm)
    # ratio of the cryoscopic constant at the fill pressure to that at p, K = R T_m^2 / L_f (per kg)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ExtrapolationWarning)
        k = tm**2 / wi.latent_heat(tm, pm)
        k0 = float(wi.melting_temperature(wi.STANDARD_PRESSURE)) ** 2 / float(
            wi.latent_heat(wi.melting_temperature(wi.STANDARD_PRESSURE), wi.STANDARD_PRESSURE))
    return RectBivariateSpline(t, p, vw), RectBivariateSpline(t, p, vi), CubicSpline(pm, tm), CubicSpline(pm, k0 / k)


def tabulated_volumes(temperature: ArrayLike, pressure: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Specific volumes of liquid water and ice Ih [m3/kg] from the cached tables.

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 250 to 274 K.
    pressure : array_like
        Pressure [Pa], 0 to 210 MPa.

    Returns
    -------
    tuple of numpy.ndarray
        (v_water, v_ice) [m3/kg], interpolated from IAPWS G12-15 and R10-06 evaluations.

    References
    ----------
    [ref:iapws-g12-15], [ref:iapws-r10-06]
    """
    t, p = np.broadcast_arrays(np.asarray(temperature, dtype=float), np.asarray(pressure, dtype=float))
    if np.any((t < _T_LOW) | (t > _T_HIGH)) or np.any((p < _P_LOW) | (p > _P_HIGH)):
        raise ModelRangeError("temperature/pressure", "outside", f"{_T_LOW}-{_T_HIGH} K, 0-210 MPa", MODEL)
    vw, vi = _tables()[:2]
    return vw.ev(t.ravel(), p.ravel()).reshape(t.shape), vi.ev(t.ravel(), p.ravel()).reshape(t.shape)


def _melting_temperature(p: np.ndarray) -> np.ndarray:
    return _tables()[2](p)


def equivalent_depression(pressure: ArrayLike, undercooling: ArrayLike):
    """Freezing-point depression at the fill pressure equivalent to a depression at pressure p [K].

    Parameters
    ----------
    pressure : array_like
        Pressure [Pa], up to the Ih-III triple point.
    undercooling : array_like
        T_melt(p) - T [K]: how far below the pure-ice melting point at p the liquid's liquidus lies.

    Returns
    -------
    numpy.ndarray or float
        The depression at 0.101325 MPa of a liquid with the same water activity [K].

    Notes
    -----
    A liquid in equilibrium with ice at (T, p) has the water activity of ice there,
    ln a_w = -Delta mu(T, p)/(R_w T); to first order in the depression, Delta T_0 = Delta T_p K(p0)/K(p),
    with K = R T_m^2/L_f the cryoscopic constant on the melting curve (R14-08 melting point, L_f from
    G12-15 and R10-06). The solute's activity coefficient is taken as independent of pressure. At
    200 MPa the ratio is 0.951: shifting the liquidus by the pure-ice melting shift alone would overstate
    the depression there by 5 %.

    References
    ----------
    [ref:iapws-r14-08], [ref:iapws-g12-15], [ref:iapws-r10-06]
    """
    p = np.asarray(pressure, dtype=float)
    out = np.asarray(undercooling, dtype=float) * _tables()[3](p)
    return out[()] if out.ndim == 0 else out


# --- the chamber at fill -----------------------------------------------------------------------------
@dataclass(frozen=True)
class Fill:
    """Chamber contents at fill, per kilogram of water.

    Attributes: ``temperature`` [K] and ``pressure`` [Pa] at fill; ``water_volume`` v_w(T0, p0) [m3/kg];
    ``solute_volume`` V_s [m3 per kg water]; ``solute_mass`` [kg per kg water]; ``gas_volume`` G0 [m3 per kg
    water at fill]; ``compliance`` beta [1/Pa]; ``cavity_volume`` V_c0 [m3 per kg water].
    """

    temperature: float
    pressure: float
    water_volume: float
    solute_volume: float = 0.0
    solute_mass: float = 0.0
    gas_volume: float = 0.0
    compliance: float = 0.0

    @property
    def cavity_volume(self) -> float:
        return self.water_volume + self.solute_volume + self.gas_volume

    @property
    def gas_fraction(self) -> float:
        """Trapped gas over cavity volume at fill [-]."""
        return self.gas_volume / self.cavity_volume


def fill_water_volume(temperature: float, pressure: float = wi.STANDARD_PRESSURE) -> float:
    """Specific volume of liquid water at the fill state [m3/kg].

    Parameters
    ----------
    temperature : float
        Fill temperature [K], 251.165 to 320 K.
    pressure : float
        Fill pressure [Pa], 0.05 to 1 MPa.

    Notes
    -----
    IAPWS G12-15 up to 300 K; above (warm fills, up to 320 K) IAPWS-95 through the `iapws` package
    [ref:iapws-python] (the two agree to 4e-7 at 300 K, 0.1 MPa).

    References
    ----------
    [ref:iapws-g12-15], [ref:iapws-95]
    """
    if not (np.isfinite(temperature) and wi.TRIPLE_POINT_IH_III_TEMPERATURE <= temperature <= 320.0):
        raise InputError("schedule.start_c", _celsius(temperature), "-21.985 to 46.85 C for a rigid chamber fill")
    if not (np.isfinite(pressure) and 0.05e6 <= pressure <= 1e6):
        raise InputError("fill pressure", pressure, "0.05 to 1 MPa")
    if temperature <= 300.0:
        return float(wi.liquid_specific_volume(temperature, pressure))
    import iapws

    return 1.0 / iapws.IAPWS95(T=float(temperature), P=float(pressure) / 1e6).rho


def _celsius(t: float) -> float:
    return round(float(t) - 273.15, 3)


def make_fill(
    temperature: float,
    pressure: float = wi.STANDARD_PRESSURE,
    *,
    compliance: float = 0.0,
    gas_fraction: float = 0.0,
    solute_volume: float = 0.0,
    solute_mass: float = 0.0,
) -> Fill:
    """Build the fill state from lab quantities.

    Parameters
    ----------
    temperature : float
        Fill temperature [K].
    pressure : float
        Fill pressure [Pa].
    compliance : float
        Cavity compliance (1/V) dV/dp [1/Pa], 0 for an ideally rigid cavity.
    gas_fraction : float
        Trapped gas volume over cavity volume at fill [-], 0 to below 1.
    solute_volume : float
        Volume of the solutes [m3 per kg water].
    solute_mass : float
        Mass of the solutes [kg per kg water].
    """
    for name, value, lo, hi in (
        ("compliance", compliance, 0.0, 1e-7),
        ("gas_fraction", gas_fraction, 0.0, 0.999),
        ("solute_volume", solute_volume, 0.0, 5e-3),
        ("solute_mass", solute_mass, 0.0, 5.0),
    ):
        if not (np.isfinite(value) and lo <= value <= hi):
            raise InputError(name, value, f"{lo:g} to {hi:g}")
    vw = fill_water_volume(temperature, pressure)
    liquid = vw + solute_volume
    gas = liquid * gas_fraction / (1.0 - gas_fraction)
    return Fill(float(temperature), float(pressure), vw, float(solute_volume), float(solute_mass), gas, float(compliance))


# --- the liquid: how osmolality depends on freeze-concentration --------------------------------------
@dataclass(frozen=True)
class Liquid:
    """How the liquid's osmolality responds to freezing, as two vectorised functions.

    ``osmolality_of_factor(f)``: osmolality [osmol/kg] of the liquid when its water is 1/f of the water at
    fill (f = 1/(1 - x)); ``osmolality_at_freezing(T)``: osmolality [osmol/kg] of a liquid whose freezing
    point at 0.1 MPa is T [K]; ``freezing_point_of_osmolality(pi)`` its inverse [K].
    ``freezing_temperature``: the fill liquid's freezing point at 0.1 MPa [K].
    """

    osmolality_of_factor: Callable[[np.ndarray], np.ndarray]
    osmolality_at_freezing: Callable[[np.ndarray], np.ndarray]
    freezing_point_of_osmolality: Callable[[np.ndarray], np.ndarray]
    freezing_temperature: float
    description: str = ""
    source: str = ""


def ideal_dilute_liquid(osmolality: float, cryoscopic_constant: float = 1.86) -> Liquid:
    """An ideal dilute liquid: osmolality proportional to concentration, freezing-point depression K*pi.

    Parameters
    ----------
    osmolality : float
        Osmolality at fill [osmol/kg].
    cryoscopic_constant : float
        K [K kg/osmol], 1.86 for water.

    Notes
    -----
    pi(f) = pi_0 f; T_f = T_m - K pi. A limiting law for dilute solutions; use the solution module's
    osmotic virial model for real solutions.

    References
    ----------
    [ref:elliott-2007]
    """
    tm = float(wi.melting_temperature(wi.STANDARD_PRESSURE))
    if not (np.isfinite(osmolality) and osmolality >= 0):
        raise InputError("osmolality", osmolality, "0 or more osmol/kg")
    return Liquid(
        lambda f: osmolality * np.asarray(f, dtype=float),
        lambda t: np.maximum(tm - np.asarray(t, dtype=float), 0.0) / cryoscopic_constant,
        lambda pi: tm - cryoscopic_constant * np.asarray(pi, dtype=float),
        tm - cryoscopic_constant * osmolality,
        f"ideal dilute liquid, {osmolality:g} osmol/kg",
        "elliott-2007",
    )


def liquid_from_composition(composition: Any) -> Liquid:
    """The :class:`Liquid` of a solution, from the osmotic virial model of :mod:`planner.solution`.

    Parameters
    ----------
    composition : planner.solution.Composition
        Molalities of the solution at fill [mol/kg water].

    Notes
    -----
    pi(f) = :func:`planner.solution.osmolality` of the composition scaled by f; pi_freeze(T) =
    :func:`planner.solution.osmolality_at_freezing_point` (osmometer convention, T_m = 273.15 K;
    temperatures above T_m give 0).

    References
    ----------
    [ref:elliott-2007]
    """
    from planner import solution as sol

    t_m = sol.melting_temperature_water()
    return Liquid(
        lambda f: np.asarray(sol.osmolality(composition, np.asarray(f, dtype=float)), dtype=float),
        lambda t: np.asarray(sol.osmolality_at_freezing_point(np.minimum(np.asarray(t, dtype=float), t_m)), dtype=float),
        lambda pi: np.asarray(sol.freezing_point_from_osmolality(np.asarray(pi, dtype=float)), dtype=float),
        float(sol.freezing_point(composition)),
        "solution: " + ", ".join(f"{a} {m:.4g} mol/kg" for a, m in zip(composition.agents, composition.molality, strict=True)),
        "elliott-2007",
    )


def solute_volume_and_mass(composition: Any) -> tuple[float, float]:
    """Volume [m3] and mass [kg] of the solutes per kg of water, from the solution module's data.

    The volume is the sum of each agent's apparent molar volume at its molality (20 C values, taken as
    constant over T and p here) [ref:melinder-2010].
    """
    volume = sum(m * float(d.apparent_molar_volume(m)) for m, d in zip(composition.molality, composition.data, strict=True))
    return float(volume), float(composition.solution_mass_per_water_mass - 1.0)


# --- the equilibrium state ---------------------------------------------------------------------------
@dataclass
class IsochoricState(Result):
    """Equilibrium of a rigid chamber at temperature(s) T (arrays broadcast together).

    ``pressure`` [Pa]; ``ice_fraction_of_water``: frozen fraction of the water [-];
    ``ice_mass_fraction``: ice over the contents' mass (water and solutes) [-]; ``ice_volume_fraction``:
    ice over the cavity volume at that state [-]; ``liquid_osmolality`` [osmol/kg]; ``concentration_factor``:
    solute concentration in the liquid over that at fill [-]; ``frozen``: whether ice is present at
    equilibrium (False where T is above the liquidus: liquid only).
    """

    temperature: Any = None
    pressure: Any = None
    ice_fraction_of_water: Any = None
    ice_mass_fraction: Any = None
    ice_volume_fraction: Any = None
    liquid_osmolality: Any = None
    concentration_factor: Any = None
    frozen: Any = None


@dataclass
class OpenState(Result):
    """Equilibrium freeze-concentration in an open container (at the fill pressure) at T."""

    temperature: Any = None
    ice_fraction_of_water: Any = None
    ice_mass_fraction: Any = None
    liquid_osmolality: Any = None
    concentration_factor: Any = None


@dataclass(frozen=True)
class _Contents:
    """Per-point cavity, solute and gas volumes [m3 per kg water] and solute mass [kg/kg] (scaled fill)."""

    cavity: np.ndarray
    solute_volume: np.ndarray
    gas: np.ndarray
    solute_mass: np.ndarray

    def take(self, mask: np.ndarray) -> _Contents:
        return _Contents(self.cavity[mask], self.solute_volume[mask], self.gas[mask], self.solute_mass[mask])


def _contents(fill: Fill, scale: np.ndarray) -> _Contents:
    """The fill with its solutes scaled by ``scale`` (same gas fraction of the cavity)."""
    vs = fill.solute_volume * scale
    liquid = fill.water_volume + vs
    gas = fill.gas_volume * liquid / (fill.water_volume + fill.solute_volume)
    return _Contents(liquid + gas, vs, gas, fill.solute_mass * scale)


def _available_volume(fill: Fill, c: _Contents, t: np.ndarray, p: np.ndarray) -> np.ndarray:
    """Cavity volume minus solute and gas volume at (T, p), per kg water [m3/kg]."""
    gas = c.gas * (fill.pressure / np.maximum(p, 1.0)) * (t / fill.temperature) if fill.gas_volume > 0 else 0.0
    return c.cavity * (1.0 + fill.compliance * (p - fill.pressure)) - c.solute_volume - gas


def _ice_fraction_at(fill: Fill, c: _Contents, t: np.ndarray, p: np.ndarray) -> np.ndarray:
    vw, vi = tabulated_volumes(t, p)
    return (_available_volume(fill, c, t, p) - vw) / (vi - vw)


def _check_temperature(t: np.ndarray) -> None:
    if np.any(~np.isfinite(t)):
        raise InputError("temperature", "not finite", "a finite temperature in K")
    if np.any(t < wi.TRIPLE_POINT_IH_III_TEMPERATURE):
        wi.require_ice_ih(t)
    if np.any(t > _T_HIGH):
        raise ModelRangeError("temperature", float(np.max(t)), f"at most {_T_HIGH} K", MODEL)


def isochoric_state(
    temperature: ArrayLike, fill: Fill, liquid: Liquid | None = None, scale: ArrayLike = 1.0
) -> IsochoricState:
    """Equilibrium pressure, ice fraction and liquid concentration of a rigid chamber at T.

    Parameters
    ----------
    temperature : array_like
        Chamber temperature [K], 251.165 (the Ih-III-liquid triple point) to 274 K.
    fill : Fill
        The contents at fill (:func:`make_fill`).
    liquid : Liquid, optional
        How the liquid's osmolality responds to freezing; ``None`` for pure water.
    scale : array_like
        Solute concentration at fill relative to ``liquid`` and ``fill`` [-], broadcast with
        ``temperature`` (maps over concentration); solute volume and mass scale with it. 1 for pure water.

    Returns
    -------
    IsochoricState
        Arrays shaped like ``temperature`` broadcast with ``scale`` (floats for scalars).

    Notes
    -----
    Pure water: p = p_melt(T) (R14-08), x from the volume balance in the module docstring. Solution: the
    residual R(p) = pi(1/(1 - x(p))) - pi_freeze(T_melt(p0) - (T_melt(p) - T) K(p0)/K(p)) (see
    :func:`equivalent_depression`) rises monotonically with p,
    so (x, p) is its root between p0 and p_melt(T), found by bracketed secant (Illinois) iteration to
    1 Pa. Where R(p0) >= 0 the temperature is above the liquidus: no ice, and the liquid-only pressure
    solves the balance with x = 0. Above the R14-08 curve's upper end the same holds for pure water.

    References
    ----------
    [ref:rubinsky-perez-carlson-2005], [ref:iapws-r14-08], [ref:guignon-2005]

    Examples
    --------
    >>> s = isochoric_state(263.15, make_fill(273.15))
    >>> round(float(s.pressure) / 1e6, 1), round(float(s.ice_fraction_of_water), 2)
    (110.0, 0.39)
    """
    t0, s0 = np.broadcast_arrays(np.asarray(temperature, dtype=float), np.asarray(scale, dtype=float))
    _check_temperature(t0)
    if np.any(~np.isfinite(s0)) or np.any(s0 < 0):
        raise InputError("scale", s0.ravel()[:3].tolist(), "0 or more (finite)")
    if liquid is None and np.any(s0 != 1.0):
        raise InputError("scale", s0.ravel()[:3].tolist(), "1 for pure water (no solutes to scale)")
    shape = t0.shape
    t, sc = t0.ravel().copy(), s0.ravel().copy()
    contents = _contents(fill, sc)
    p = np.empty_like(t)
    x = np.zeros_like(t)
    flags: list[Flag] = []
    if liquid is None:
        tm0 = float(wi.melting_temperature(fill.pressure))
        cold = t < tm0
        if np.any(cold):
            p[cold] = wi.melting_pressure(np.minimum(t[cold], wi.TRIPLE_POINT_TEMPERATURE))
            x[cold] = _ice_fraction_at(fill, contents.take(cold), t[cold], p[cold])
        osm0 = np.zeros_like(t)
    else:
        osm0 = np.asarray(liquid.osmolality_of_factor(sc), dtype=float)
        cold = t < liquid.freezing_point_of_osmolality(osm0)
        if np.any(cold):
            p[cold], x[cold] = _solve_solution(t[cold], sc[cold], fill, contents.take(cold), liquid)
    # liquid only where no ice can form (above the liquidus) or the balance leaves no room for ice
    warm = ~cold | (x <= 0)
    if np.any(warm):
        p[warm], tension = _liquid_only_pressure(t[warm], fill, contents.take(warm))
        x[warm] = 0.0
        if np.any(tension):
            flags.append(Flag("refused", "liquid-only chamber would be under tension (the warm fill contracts "
                              "on cooling): pressure shown as 0 Pa; a real chamber may cavitate or leak", SOURCE))
    factor = 1.0 / (1.0 - x)
    if np.any(factor > MAX_CONCENTRATION_FACTOR):
        raise ModelRangeError("concentration_factor", float(factor.max()), f"at most {MAX_CONCENTRATION_FACTOR}", MODEL)
    osm = osm0 if liquid is None else np.asarray(liquid.osmolality_of_factor(sc * factor), dtype=float)
    vw, vi = tabulated_volumes(t, np.clip(p, _P_LOW, _P_HIGH))
    cavity = contents.cavity * (1.0 + fill.compliance * (p - fill.pressure))
    phi = x * vi / cavity
    if fill.gas_volume > 0:
        flags.append(Flag("indicative", f"trapped gas ({100 * fill.gas_fraction:.2g} % of the cavity) taken as an "
                          "ideal gas that does not dissolve", SOURCE))

    def r(a):
        a = np.asarray(a).reshape(shape)
        return a[()] if a.ndim == 0 else a

    return IsochoricState(
        model=MODEL,
        source=SOURCE,
        parameters={
            "fill_temperature_k": fill.temperature,
            "fill_pressure_pa": fill.pressure,
            "compliance_per_pa": fill.compliance,
            "gas_fraction": fill.gas_fraction,
            "liquid": "pure water" if liquid is None else liquid.description,
            "assumptions": MODEL_ASSUMPTIONS,
        },
        flags=flags,
        temperature=r(t),
        pressure=r(p),
        ice_fraction_of_water=r(x),
        ice_mass_fraction=r(x / (1.0 + contents.solute_mass)),
        ice_volume_fraction=r(phi),
        liquid_osmolality=r(osm),
        concentration_factor=r(factor),
        frozen=r(x > 0),
    )


def _solve_solution(
    t: np.ndarray, sc: np.ndarray, fill: Fill, c: _Contents, liquid: Liquid
) -> tuple[np.ndarray, np.ndarray]:
    """(p, x) of a freezing solution at each T: root of the residual R(p) (see :func:`isochoric_state`)."""
    tm0 = float(_melting_temperature(np.array(fill.pressure)))
    lo = np.full_like(t, fill.pressure)
    hi = np.asarray(wi.melting_pressure(np.minimum(t, wi.TRIPLE_POINT_TEMPERATURE)), dtype=float)
    hi = np.minimum(hi, _P_HIGH)

    def residual(p):
        x = np.clip(_ice_fraction_at(fill, c, t, p), 0.0, 1.0 - 1.0 / MAX_CONCENTRATION_FACTOR)
        t_equivalent = tm0 - (_melting_temperature(p) - t) * _tables()[3](p)
        return liquid.osmolality_of_factor(sc / (1.0 - x)) - liquid.osmolality_at_freezing(t_equivalent)

    r_lo, r_hi = residual(lo), residual(hi)
    bad = (r_lo > 0) | (r_hi < 0)  # no ice at equilibrium (returned as x <= 0 and handled by the caller)
    side = np.zeros_like(t)
    p = lo.copy()
    for _ in range(80):
        p = np.where(bad, lo, (lo * r_hi - hi * r_lo) / np.where(r_hi - r_lo == 0, 1.0, r_hi - r_lo))
        p = np.clip(p, lo, hi)
        r = residual(p)
        up = r < 0
        # Illinois: halve the residual of the end that stays twice in a row
        r_hi = np.where(up & (side == 1), r_hi / 2, r_hi)
        r_lo = np.where(~up & (side == -1), r_lo / 2, r_lo)
        lo, r_lo = np.where(up, p, lo), np.where(up, r, r_lo)
        hi, r_hi = np.where(up, hi, p), np.where(up, r_hi, r)
        side = np.where(up, 1, -1)
        if np.all(bad | (hi - lo < 1.0) | (np.abs(r) < 1e-12)):
            break
    else:
        raise ModelRangeError("pressure", "did not converge", "a root of the isochoric balance", MODEL)
    x = np.where(bad, 0.0, _ice_fraction_at(fill, c, t, p))
    return p, x


def _liquid_only_pressure(t: np.ndarray, fill: Fill, c: _Contents | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Pressure [Pa] of the chamber holding liquid only at T; second array: True where under tension.

    Solves cavity(p) - solutes - gas(p) = v_w(T, p) by Newton iteration from the fill pressure (the
    residual is smooth and nearly linear in p), to 1e-3 Pa.
    """
    tt = np.clip(t, _T_LOW, _T_HIGH)
    c = _contents(fill, np.ones_like(tt)) if c is None else c
    vw_spline = _tables()[0]

    def residual(p):
        return _available_volume(fill, c, tt, p) - vw_spline.ev(tt, p)

    def slope(p):
        gas = c.gas * fill.pressure / np.maximum(p, 1.0) ** 2 * (tt / fill.temperature) if fill.gas_volume > 0 else 0.0
        return c.cavity * fill.compliance + gas - vw_spline.ev(tt, p, dy=1)

    tension = residual(np.full_like(tt, 1.0)) > 0
    p = np.full_like(tt, fill.pressure)
    for _ in range(30):
        step = residual(p) / slope(p)
        p = np.clip(p - step, 1.0, _P_HIGH)
        if np.all(tension | (np.abs(step) < 1e-3)):
            break
    else:
        raise ModelRangeError("pressure", "did not converge", "a root of the liquid-only balance", MODEL)
    return np.where(tension, 0.0, p), tension


def open_state(temperature: ArrayLike, liquid: Liquid, solute_mass: float = 0.0) -> OpenState:
    """Freeze-concentration of the same liquid in an open container at its fill pressure.

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    liquid : Liquid
        The liquid (:func:`ideal_dilute_liquid` or :func:`liquid_from_composition`).
    solute_mass : float
        Solutes [kg per kg water], for the ice fraction of the whole contents.

    Notes
    -----
    The liquid's osmolality equals pi_freeze(T); the concentration factor f solves pi(f) = pi_freeze(T)
    (bisection on ln f up to 10^4), and x = 1 - 1/f.

    References
    ----------
    [ref:rubinsky-perez-carlson-2005]
    """
    t0 = np.asarray(temperature, dtype=float)
    t = t0.ravel()
    target = np.asarray(liquid.osmolality_at_freezing(t), dtype=float)
    frozen = t < liquid.freezing_temperature
    # Bisection needs osmolality rising with f: fitted virial sets with a negative third coefficient turn
    # over at high concentration, so search only up to the first factor where it stops rising, and refuse
    # (NaN) a liquidus the liquid cannot reach before that.
    grid = np.linspace(0.0, np.log(1e4), 400)
    along = np.asarray(liquid.osmolality_of_factor(np.exp(grid)), dtype=float)
    rising = np.diff(along) > 0
    peak = len(grid) - 1 if rising.all() else int(np.argmin(rising))
    lo, hi = np.zeros_like(t), np.full_like(t, grid[peak])
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        above = np.asarray(liquid.osmolality_of_factor(np.exp(mid)), dtype=float) > target
        hi, lo = np.where(above, mid, hi), np.where(above, lo, mid)
    reachable = target <= along[peak]
    f = np.where(frozen, np.where(reachable, np.exp(0.5 * (lo + hi)), np.nan), 1.0)
    x = 1.0 - 1.0 / f
    shape = t0.shape

    def r(a):
        a = np.asarray(a).reshape(shape)
        return a[()] if a.ndim == 0 else a

    return OpenState(
        model="open-container freeze-concentration (liquid on its liquidus)",
        source=SOURCE,
        parameters={"liquid": liquid.description},
        temperature=r(t),
        ice_fraction_of_water=r(x),
        ice_mass_fraction=r(x / (1.0 + solute_mass)),
        liquid_osmolality=r(np.asarray(liquid.osmolality_of_factor(f), dtype=float)),
        concentration_factor=r(f),
    )


# --- recalescence ------------------------------------------------------------------------------------
@dataclass
class Recalescence(Result):
    """What nucleation at a supercooled temperature does at once (adiabatic, to equilibrium).

    ``ice_fraction_of_water`` frozen at once [-]; ``final_temperature`` [K] the contents warm to;
    ``initial_pressure`` and ``final_pressure`` [Pa] (rigid chamber; fill pressure in an open container);
    ``pressure_step`` [Pa].
    """

    supercooled_temperature: float = float("nan")
    final_temperature: float = float("nan")
    ice_fraction_of_water: float = float("nan")
    ice_mass_fraction: float = float("nan")
    initial_pressure: float = float("nan")
    final_pressure: float = float("nan")
    pressure_step: float = float("nan")
    rigid: bool = False
    extra: dict[str, Any] = field(default_factory=dict)


def _u_water(t, p):
    return wi.liquid_specific_enthalpy(t, p) - p * wi.liquid_specific_volume(t, p)


def _u_ice(t, p):
    return wi.ice_specific_enthalpy(t, p) - p * wi.ice_specific_volume(t, p)


def recalescence(
    supercooled_temperature: float, fill: Fill | None, liquid: Liquid | None = None, *, pressure: float = wi.STANDARD_PRESSURE
) -> Recalescence:
    """Ice formed at once when a supercooled sample nucleates, warming adiabatically to the liquidus.

    Parameters
    ----------
    supercooled_temperature : float
        Temperature of the supercooled contents at nucleation [K]: 251.165 K or warmer in a rigid chamber,
        230 K or warmer in an open container.
    fill : Fill or None
        The rigid chamber's fill state, or ``None`` for an open container at ``pressure``.
    liquid : Liquid, optional
        The liquid; ``None`` for pure water.
    pressure : float
        Open container pressure [Pa].

    Returns
    -------
    Recalescence

    Notes
    -----
    Open container, per kg water: h_w(T_s, p) = x h_i(T_f, p) + (1 - x) h_w(T_f, p) with T_f the liquidus of
    the liquid concentrated by 1/(1 - x). Rigid chamber: internal energy instead of enthalpy, u = h - p v,
    with the final state on the isochoric equilibrium surface at T_f and the initial pressure the
    liquid-only pressure at T_s. The root in T_f is bracketed on grids of candidate temperatures. Heat
    capacity of the solutes, heat of dilution, work on a compliant wall and heat lost to the wall during
    the event are neglected (the wall's heat capacity makes the real fraction smaller, so this is the
    upper estimate).

    References
    ----------
    [ref:iapws-g12-15], [ref:iapws-r10-06], [ref:rubinsky-perez-carlson-2005]
    """
    ts = float(supercooled_temperature)
    if not np.isfinite(ts):
        raise InputError("supercooled_temperature", ts, "a finite temperature in K")
    rigid = fill is not None
    if rigid:
        wi.require_ice_ih(ts, "supercooled_temperature")
    elif ts < wi.LIQUID.ranges["temperature"].low:
        raise ModelRangeError("supercooled_temperature", ts, "230 K or warmer (liquid-water equation)", MODEL)
    t_liq = liquid.freezing_temperature if liquid is not None else float(wi.melting_temperature(
        fill.pressure if rigid else pressure))
    solute_mass = fill.solute_mass if rigid else 0.0
    if ts >= t_liq:
        p_s = float(_liquid_only_pressure(np.array([ts]), fill)[0][0]) if rigid else pressure
        return Recalescence(model="recalescence (adiabatic)", source=SOURCE, supercooled_temperature=ts,
                            final_temperature=ts, ice_fraction_of_water=0.0, ice_mass_fraction=0.0,
                            initial_pressure=p_s, final_pressure=p_s, pressure_step=0.0, rigid=rigid,
                            flags=[Flag("refused", "not supercooled: at or above the liquidus, nothing freezes", SOURCE)])
    if rigid:
        p_s = float(_liquid_only_pressure(np.array([ts]), fill)[0][0])
        e_s = float(_u_water(ts, max(p_s, 1.0)))
    else:
        p_s = pressure
        e_s = float(wi.liquid_specific_enthalpy(ts, pressure))

    def energy_excess(tf: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if rigid:
            st = isochoric_state(tf, fill, liquid)
            x, p = np.asarray(st.ice_fraction_of_water), np.asarray(st.pressure)
            e = x * _u_ice(tf, p) + (1 - x) * _u_water(tf, p)
        else:
            if liquid is None:
                x = (float(wi.liquid_specific_enthalpy(ts, pressure)) - wi.liquid_specific_enthalpy(tf, pressure)) / (
                    wi.ice_specific_enthalpy(tf, pressure) - wi.liquid_specific_enthalpy(tf, pressure))
                return np.zeros_like(tf), x, np.full_like(tf, pressure)
            x = np.asarray(open_state(tf, liquid).ice_fraction_of_water)
            p = np.full_like(tf, pressure)
            e = x * wi.ice_specific_enthalpy(tf, p) + (1 - x) * wi.liquid_specific_enthalpy(tf, p)
        return e - e_s, x, p

    if not rigid and liquid is None:
        # pure water, open: the liquid warms to the melting point; x from the enthalpy balance directly
        tf = float(wi.melting_temperature(pressure))
        _, x, p = energy_excess(np.array([tf]))
        x_f, p_f = float(x[0]), pressure
    else:
        # the energy of the equilibrium state rises with its temperature: bracket the root on a grid of
        # candidate temperatures, refine the bracket four times (to about 1e-6 of the supercooling)
        lo, hi = ts, t_liq - 1e-9
        for _ in range(4):
            grid = np.linspace(lo, hi, 33)
            ex, _, _ = energy_excess(grid)
            i = int(np.clip(np.searchsorted(ex, 0.0), 1, grid.size - 1))
            lo, hi = grid[i - 1], grid[i]
        tf = 0.5 * (lo + hi)
        _, x, p = energy_excess(np.array([tf]))
        x_f, p_f = float(x[0]), float(p[0])
    return Recalescence(
        model="recalescence (adiabatic, to equilibrium)",
        source=SOURCE,
        parameters={"rigid": rigid, "assumptions": "solute heat capacity, heat of dilution and the wall neglected"},
        flags=wi.liquid_flags(ts, max(p_s, 1.0)),
        supercooled_temperature=ts,
        final_temperature=tf,
        ice_fraction_of_water=x_f,
        ice_mass_fraction=x_f / (1.0 + solute_mass),
        initial_pressure=p_s,
        final_pressure=p_f,
        pressure_step=p_f - p_s,
        rigid=rigid,
    )


# --- curves ------------------------------------------------------------------------------------------
def curves(fill: Fill, liquid: Liquid | None, coldest: float, warmest: float | None = None, n: int = 60) -> dict[str, np.ndarray]:
    """Pressure, ice fraction and liquid osmolality against temperature, rigid and open, for charts.

    Parameters
    ----------
    fill : Fill
        Rigid chamber fill state.
    liquid : Liquid or None
        The liquid (None: pure water).
    coldest : float
        Coldest temperature [K] (not below 251.165 K).
    warmest : float, optional
        Warmest temperature [K]; default the liquidus at fill pressure.
    n : int
        Number of points.

    Returns
    -------
    dict
        ``temperature`` [K], ``pressure`` [Pa], ``ice_fraction_of_water``, ``ice_volume_fraction``,
        ``liquid_osmolality`` [osmol/kg] (rigid), ``open_ice_fraction_of_water``, ``open_liquid_osmolality``.
    """
    t_liq = liquid.freezing_temperature if liquid is not None else float(wi.melting_temperature(fill.pressure))
    top = t_liq if warmest is None else warmest
    t = np.linspace(max(coldest, wi.TRIPLE_POINT_IH_III_TEMPERATURE), top, n)
    st = isochoric_state(t, fill, liquid)
    out = {
        "temperature": t,
        "pressure": st.pressure,
        "ice_fraction_of_water": st.ice_fraction_of_water,
        "ice_volume_fraction": st.ice_volume_fraction,
        "liquid_osmolality": st.liquid_osmolality,
    }
    if liquid is not None:
        op = open_state(t, liquid)
        out["open_ice_fraction_of_water"] = op.ice_fraction_of_water
        out["open_liquid_osmolality"] = op.liquid_osmolality
    return out
