"""Freezing of a sample after ice is started in it: Plank's freezing time and an enthalpy-method solution.

Two methods, checked against each other and against the Neumann solution (tests/test_freezing.py):

- :func:`plank_freezing_time`: Plank's equation with its shape factors (slab, long cylinder, sphere), a
  closed form that counts only the latent heat and treats the frozen layer as quasi-steady
  [ref:plank-1913];
- :func:`enthalpy_freezing`: a 1-D finite-volume enthalpy-method solution (slab, long cylinder or
  sphere, explicit in time with a stable step) that follows the temperature and the ice fraction of
  every shell while the bath follows its programme [ref:voller-cross-1981]. For a solution the ice
  fraction below the liquidus follows the freeze-concentration curve (equilibrium: the unfrozen liquid
  concentrates so that its freezing point equals the local temperature), supplied by the caller (the
  solution model, ``planner.solution.freeze_concentration``).

Both work in SI units: temperature [K], length [m], time [s], W, J, kg.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike
from scipy.linalg.lapack import dgtsv

from planner.errors import ModelRangeError, choice_error
from planner.results import Flag, Result
from planner.validity import Range, Validity

#: Plank's shape factors (P, R) and the dimension ``a`` each uses [ref:plank-1913]:
#: slab of thickness a cooled on both faces; long cylinder of diameter a; sphere of diameter a.
SHAPE_FACTORS: dict[str, tuple[float, float]] = {
    "slab": (1.0 / 2.0, 1.0 / 8.0),
    "cylinder": (1.0 / 4.0, 1.0 / 16.0),
    "sphere": (1.0 / 6.0, 1.0 / 24.0),
}
#: Geometry exponent m of the 1-D heat equation (area ~ r**m).
_GEOMETRY_EXPONENT = {"slab": 0, "cylinder": 1, "sphere": 2}

# Properties of water and ice near 0 C (Incropera & DeWitt tables; [ref:incropera-dewitt], from memory):
LATENT_HEAT_FUSION = 333.4e3  # J/kg
WATER_HEAT_CAPACITY = 4180.0  # J/(kg K)
WATER_CONDUCTIVITY = 0.57  # W/(m K)
ICE_HEAT_CAPACITY = 2050.0  # J/(kg K)
ICE_CONDUCTIVITY = 2.2  # W/(m K)
WATER_DENSITY = 1000.0  # kg/m3
WATER_FREEZING_POINT = 273.15  # K at 0.101325 MPa

#: Share of its final equilibrium ice that the centre must hold for the sample to count as frozen.
FROZEN_SHARE = 0.9

#: Stefan number c_ice (T_f - T_medium) / L above which Plank's neglect of sensible heat costs more than
#: about 10 % (common practice, no source): flagged, not refused.
PLANK_STEFAN_LIMIT = 0.3
PLANK = Validity("Plank freezing time", "plank-1913", {"stefan_number": Range(0.0, PLANK_STEFAN_LIMIT, "1")})


def plank_freezing_time(
    geometry: str,
    dimension: ArrayLike,
    density: ArrayLike,
    latent_heat: ArrayLike,
    freezing_temperature: ArrayLike,
    medium_temperature: ArrayLike,
    heat_transfer_coefficient: ArrayLike,
    conductivity_frozen: ArrayLike,
) -> float | np.ndarray:
    """Plank's freezing time [s] of a body that starts at its freezing point.

    Parameters
    ----------
    geometry : {"slab", "cylinder", "sphere"}
        Slab cooled on both faces, long cylinder, or sphere.
    dimension : float or array
        Slab thickness, cylinder diameter or sphere diameter [m].
    density : float or array
        Density of the body [kg/m3].
    latent_heat : float or array
        Latent heat released per kg of body [J/kg] (for a solution: the latent heat of the water that
        freezes, L_f times the mass fraction of ice at the end).
    freezing_temperature : float or array
        Initial freezing point [K].
    medium_temperature : float or array
        Temperature of the cooling medium [K], below ``freezing_temperature``.
    heat_transfer_coefficient : float or array
        Surface heat transfer coefficient h [W/(m2 K)]; ``numpy.inf`` for a surface held at the medium
        temperature.
    conductivity_frozen : float or array
        Thermal conductivity of the frozen body [W/(m K)].

    Returns
    -------
    float or array
        t_F [s].

    Notes
    -----
    t_F = rho L / (T_f - T_m) * (P a / h + R a**2 / k), with (P, R) = (1/2, 1/8) slab, (1/4, 1/16)
    cylinder, (1/6, 1/24) sphere [ref:plank-1913]. Assumes the body is at T_f when freezing starts,
    releases its latent heat at T_f, and holds no sensible heat (quasi-steady frozen layer), so it
    underestimates the time as the Stefan number c_s (T_f - T_m)/L grows (see :func:`plank_flags`).
    A finite cylinder (a vial) freezes faster than the long cylinder of the same diameter: the long
    cylinder's time is an upper bound.

    References
    ----------
    [ref:plank-1913], [ref:carslaw-jaeger-1959]

    Examples
    --------
    Ice 0.25 m thick growing down from a lake surface held 10 K below freezing (half of a 0.5 m slab cooled
    on both faces), rho = 920 kg/m3, L = 334 kJ/kg, k = 1.6 W/(m K):

    >>> t = plank_freezing_time("slab", 0.5, 920.0, 334e3, 273.15, 263.15, float("inf"), 1.6)
    >>> f"{t:.2g} s"
    '6e+05 s'
    """
    if geometry not in SHAPE_FACTORS:
        raise choice_error("geometry", geometry, SHAPE_FACTORS)
    p_factor, r_factor = SHAPE_FACTORS[geometry]
    a = np.asarray(dimension, dtype=float)
    rho = np.asarray(density, dtype=float)
    lat = np.asarray(latent_heat, dtype=float)
    dT = np.asarray(freezing_temperature, dtype=float) - np.asarray(medium_temperature, dtype=float)
    h = np.asarray(heat_transfer_coefficient, dtype=float)
    k = np.asarray(conductivity_frozen, dtype=float)
    for name, value in (("dimension", a), ("density", rho), ("latent_heat", lat), ("conductivity_frozen", k)):
        if not np.all(np.isfinite(value) & (value > 0)):
            raise ModelRangeError(name, value.tolist(), "a positive finite number", "Plank freezing time")
    if not np.all(h > 0) or np.any(np.isnan(h)):
        raise ModelRangeError("heat_transfer_coefficient", h.tolist(), "above 0 W/(m2 K), inf allowed", "Plank freezing time")
    if not np.all(np.isfinite(dT) & (dT > 0)):
        raise ModelRangeError(
            "medium_temperature", np.asarray(medium_temperature).tolist(),
            "below the freezing temperature", "Plank freezing time",
        )
    with np.errstate(divide="ignore"):
        surface = np.where(np.isinf(h), 0.0, p_factor * a / h)
    t = rho * lat / dT * (surface + r_factor * a**2 / k)
    return float(t) if t.ndim == 0 else t


def plank_flags(
    freezing_temperature: float, medium_temperature: float, latent_heat: float,
    heat_capacity_frozen: float = ICE_HEAT_CAPACITY,
) -> list[Flag]:
    """Flags for a Plank estimate: Stefan number above :data:`PLANK_STEFAN_LIMIT` (sensible heat matters).

    The flag comes with an :class:`~planner.errors.ExtrapolationWarning`; the enthalpy-method time is the
    one to use there.
    """
    stefan = heat_capacity_frozen * (freezing_temperature - medium_temperature) / latent_heat
    return PLANK.flags(stefan_number=stefan)


@dataclass(frozen=True)
class FreezingMedium:
    """What freezes: density, water content, phase properties and the equilibrium ice curve.

    ``ice_fraction(T)`` gives the equilibrium fraction of the water that is ice at temperature T [K]
    (0 above the liquidus, rising towards 1 below it); it must accept and return numpy arrays.
    """

    liquidus: float  # K
    ice_fraction: Callable[[np.ndarray], np.ndarray]
    water_mass_fraction: float = 1.0  # kg water per kg of sample
    density: float = WATER_DENSITY  # kg/m3
    latent_heat: float = LATENT_HEAT_FUSION  # J/kg of water
    heat_capacity_liquid: float = WATER_HEAT_CAPACITY  # J/(kg K)
    heat_capacity_ice: float = ICE_HEAT_CAPACITY  # J/(kg K)
    conductivity_liquid: float = WATER_CONDUCTIVITY  # W/(m K)
    conductivity_ice: float = ICE_CONDUCTIVITY  # W/(m K)


def pure_water_medium(freezing_temperature: float = WATER_FREEZING_POINT, **properties) -> FreezingMedium:
    """Pure water: all of it freezes at one temperature (a step in the ice fraction)."""

    def step(T: np.ndarray) -> np.ndarray:
        return np.where(np.asarray(T, dtype=float) < freezing_temperature, 1.0, 0.0)

    return FreezingMedium(liquidus=freezing_temperature, ice_fraction=step, **properties)


@dataclass
class FreezingPath(Result):
    """Temperature and ice through freezing, on one time axis (SI; chart-ready arrays).

    ``ice_fraction`` arrays are fractions of the water that is ice (0..1); ``unfrozen_fraction`` =
    1 - ice fraction, at the centre (the slowest point). ``profile_*`` hold the shell values at each
    recorded time (rows: times, columns: shells from the centre out, at ``radius``).
    """

    time: np.ndarray = field(default_factory=lambda: np.zeros(0))
    bath_temperature: np.ndarray = field(default_factory=lambda: np.zeros(0))
    centre_temperature: np.ndarray = field(default_factory=lambda: np.zeros(0))
    surface_temperature: np.ndarray = field(default_factory=lambda: np.zeros(0))
    mean_temperature: np.ndarray = field(default_factory=lambda: np.zeros(0))
    centre_ice_fraction: np.ndarray = field(default_factory=lambda: np.zeros(0))
    mean_ice_fraction: np.ndarray = field(default_factory=lambda: np.zeros(0))
    radius: np.ndarray = field(default_factory=lambda: np.zeros(0))
    profile_temperature: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    profile_ice_fraction: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))

    @property
    def unfrozen_fraction(self) -> np.ndarray:
        return 1.0 - self.centre_ice_fraction

    @property
    def plateau_temperature(self) -> float:
        """Warmest centre temperature once ice is present: the latent-heat plateau (near the liquidus) [K]."""
        frozen = self.centre_ice_fraction > 1e-6
        if not np.any(frozen):
            return float("nan")
        return float(np.max(self.centre_temperature[frozen]))

    def time_to_centre_ice_fraction(self, fraction: float) -> float:
        """First recorded time [s] at which the centre holds ``fraction`` of its water as ice (NaN: never)."""
        return _first_time(self.time, self.centre_ice_fraction, fraction)

    def time_to_mean_ice_fraction(self, fraction: float) -> float:
        """First recorded time [s] at which the whole sample holds ``fraction`` of its water as ice."""
        return _first_time(self.time, self.mean_ice_fraction, fraction)

    def front_depth(self, index: int) -> float:
        """Frozen depth from the surface at record ``index`` [m]: volume-weighted frozen share (slab)."""
        r = self.radius
        edges = np.concatenate([[0.0], 0.5 * (r[1:] + r[:-1]), [r[-1] + 0.5 * (r[-1] - r[-2])]])
        return float(np.sum(self.profile_ice_fraction[index] * np.diff(edges)))


def enthalpy_freezing(
    geometry: str,
    half_dimension: float,
    medium: FreezingMedium,
    initial_temperature: float,
    bath: Callable[[float], float] | float,
    heat_transfer_coefficient: Callable[[float], float] | float,
    duration: float,
    n_cells: int = 32,
    initial_ice: str = "none",
    record_interval: float | None = None,
    stop_at_centre_ice_fraction: float | None = None,
    time_step: float | None = None,
) -> FreezingPath:
    """Freeze a 1-D body by the enthalpy method: temperatures and ice fractions vs time.

    Parameters
    ----------
    geometry : {"slab", "cylinder", "sphere"}
        Slab cooled on both faces (symmetric about its mid-plane), long cylinder, or sphere.
    half_dimension : float
        Half-thickness of the slab, or radius [m].
    medium : FreezingMedium
        Properties and equilibrium ice curve of the sample.
    initial_temperature : float
        Uniform starting temperature [K] (may be below the liquidus: a supercooled sample).
    bath : callable or float
        Medium temperature [K], constant or a function of time [s].
    heat_transfer_coefficient : callable or float
        Surface coefficient h [W/(m2 K)], constant or a function of time; ``numpy.inf`` holds the
        surface at the bath temperature.
    duration : float
        Time to simulate [s].
    n_cells : int
        Number of shells (finite volumes) from the centre to the surface.
    initial_ice : {"none", "equilibrium"}
        "none": the sample starts as liquid (supercooled if below the liquidus); once ice is present
        (seeding) it releases latent heat at once and warms to the equilibrium temperature of its
        enthalpy (recalescence). "equilibrium": it starts with its equilibrium ice.
    record_interval : float, optional
        Time between recorded states [s] (default: duration / 400).
    stop_at_centre_ice_fraction : float, optional
        Stop early once the centre holds this fraction of its water as ice.
    time_step : float, optional
        Implicit time step [s] (default: the smaller of the record interval and duration / 1000).

    Returns
    -------
    FreezingPath

    Notes
    -----
    Conservation of energy per unit volume, rho dH/dt = (1/r**m) d/dr (r**m k dT/dr), m = 0, 1, 2,
    with H(T) = int c(T) dT + L x_w (1 - f(T)) the specific enthalpy, f(T) the equilibrium ice fraction
    of the water and c = (1 - x_w f) c_l + x_w f c_s [ref:voller-cross-1981]. Finite volumes on a
    uniform grid, flux through the centre zero (symmetry), at the surface q = (T_s - T_bath) /
    (1/h + dr/(2k)). Implicit (backward Euler) in H, unconditionally stable: each step solves
    rho V (H - H_old)/dt = K T(H) by Newton iterations on H with the tridiagonal Jacobian
    rho V/dt + L dT/dH (conductivities lagged one step); T and f follow from H through a tabulated,
    monotone H(T), so a latent-heat plateau (dT/dH = 0) needs no smoothing. Conductivity k = k_l + (k_s - k_l) x_w f. Density is taken constant (no volume change
    on freezing). Validity: the sample's own liquidus and freeze-concentration curve; seeding is taken as
    instantaneous through the whole sample (ice grows through supercooled liquid far faster than heat
    leaves it).

    References
    ----------
    [ref:voller-cross-1981], [ref:carslaw-jaeger-1959]
    """
    if geometry not in _GEOMETRY_EXPONENT:
        raise choice_error("geometry", geometry, _GEOMETRY_EXPONENT)
    if not (np.isfinite(half_dimension) and half_dimension > 0):
        raise ModelRangeError("half_dimension", half_dimension, "a positive length in m", "enthalpy freezing")
    if not (np.isfinite(duration) and duration > 0):
        raise ModelRangeError("duration", duration, "a positive time in s", "enthalpy freezing")
    if not (isinstance(n_cells, int | np.integer) and 4 <= n_cells <= 400):
        raise ModelRangeError("n_cells", n_cells, "an integer from 4 to 400", "enthalpy freezing")
    if initial_ice not in ("none", "equilibrium"):
        raise choice_error("initial_ice", initial_ice, ["none", "equilibrium"])
    bath_at = bath if callable(bath) else (lambda _t, _b=float(bath): _b)
    h_at = heat_transfer_coefficient if callable(heat_transfer_coefficient) else (
        lambda _t, _h=float(heat_transfer_coefficient): _h
    )
    m = _GEOMETRY_EXPONENT[geometry]
    n = int(n_cells)
    dr = half_dimension / n
    faces = np.linspace(0.0, half_dimension, n + 1)
    centres = 0.5 * (faces[1:] + faces[:-1])
    volume = (faces[1:] ** (m + 1) - faces[:-1] ** (m + 1)) / (m + 1)
    area = faces ** m if m else np.ones(n + 1)
    area[0] = 0.0  # symmetry: no flux through the centre (or mid-plane)

    # Temperatures the solution can reach lie between the extreme initial and bath values (maximum
    # principle); sample the bath to bound the table.
    probe_t = np.linspace(0.0, duration, 257)
    bath_probe = sample_in_time(bath_at, probe_t)
    if not np.all(np.isfinite(bath_probe)):
        raise ModelRangeError("bath", bath_probe.tolist()[:3], "finite temperatures in K", "enthalpy freezing")
    t_low = min(bath_probe.min(), initial_temperature) - 5.0
    t_high = max(bath_probe.max(), initial_temperature, medium.liquidus) + 5.0
    table_T, table_S, table_H = _enthalpy_table(medium, t_low, t_high)
    xw, lat = medium.water_mass_fraction, medium.latent_heat

    T0 = np.full(n, float(initial_temperature))
    if initial_ice == "none":
        # liquid with no ice: above the liquidus the table's own value; below it the supercooled liquid,
        # which holds the liquid's heat capacity down from the liquidus (the table holds ice there)
        at_liquidus = float(np.interp(medium.liquidus, table_T, table_H))
        H = np.where(
            T0 >= medium.liquidus,
            np.interp(T0, table_T, table_H),
            at_liquidus - medium.heat_capacity_liquid * (medium.liquidus - T0),
        )
    else:
        H = np.interp(T0, table_T, table_H)

    h_probe = sample_in_time(h_at, probe_t)
    if np.any(~(h_probe > 0)):
        raise ModelRangeError("heat_transfer_coefficient", h_probe.tolist()[:3], "above 0 W/(m2 K)", "enthalpy freezing")
    record_interval = duration / 400.0 if record_interval is None else float(record_interval)
    if time_step is None:
        time_step = min(record_interval, duration / 1000.0)
    if not (np.isfinite(time_step) and time_step > 0):
        raise ModelRangeError("time_step", time_step, "a positive time in s", "enthalpy freezing")
    n_steps = int(np.ceil(duration / time_step))
    dt = duration / n_steps
    record_every = max(1, int(round(record_interval / dt)))
    # bath and h at every step time, sampled once (index = step number; 0 is the start)
    step_times = np.arange(n_steps + 1) * dt
    bath_steps = sample_in_time(bath_at, step_times)
    h_steps = sample_in_time(h_at, step_times)
    if not np.all(np.isfinite(bath_steps)):
        bad = bath_steps[~np.isfinite(bath_steps)]
        raise ModelRangeError("bath", bad.tolist()[:3], "finite temperatures in K", "enthalpy freezing")
    if np.any(~(h_steps > 0)):
        bad = h_steps[~(h_steps > 0)]
        raise ModelRangeError("heat_transfer_coefficient", bad.tolist()[:3], "above 0 W/(m2 K)", "enthalpy freezing")

    rho_v = medium.density * volume
    mass_weight = volume / volume.sum()
    dk = medium.conductivity_ice - medium.conductivity_liquid
    times, baths, centre_T, surface_T, mean_T, centre_f, mean_f, prof_T, prof_f = ([] for _ in range(9))
    energy_tolerance = 1e-7 * lat * max(xw, 1e-3)  # J/kg: residual accepted per shell
    worst_residual = 0.0

    def state(H_now: np.ndarray, T_now: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        # T_now: T(H_now) when already known
        T_now = np.interp(H_now, table_H, table_T) if T_now is None else T_now
        # np.minimum/np.maximum: the same values as np.clip, at a fraction of its call cost
        f_now = np.minimum(np.maximum(1.0 - (H_now - np.interp(T_now, table_T, table_S)) / (lat * xw), 0.0), 1.0)
        return T_now, f_now

    slope_table = np.diff(table_T) / np.diff(table_H)  # dT/dH on each table interval
    last_interval = table_H.size - 2

    def slope(H_now: np.ndarray) -> np.ndarray:
        i = np.minimum(np.maximum(np.searchsorted(table_H, H_now) - 1, 0), last_interval)
        return slope_table[i]

    def record(step_now: int, T_now: np.ndarray, f_now: np.ndarray) -> None:
        times.append(step_times[step_now] if step_now else 0.0)
        baths.append(float(bath_steps[step_now]))
        centre_T.append(T_now[0])
        surface_T.append(T_now[-1])
        mean_T.append(float(mass_weight @ T_now))
        centre_f.append(f_now[0])
        mean_f.append(float(mass_weight @ f_now))
        prof_T.append(T_now.copy())
        prof_f.append(f_now.copy())

    T, f = state(H)
    record(0, T, f)
    # constants of the step loop, hoisted (the same floating-point operations as written in the loop)
    dk_xw = dk * xw
    storage_rate = rho_v / dt
    inner_area, surface_area = area[1:-1], area[-1]
    for step in range(1, n_steps + 1):
        k = medium.conductivity_liquid + dk_xw * f  # lagged one step
        half_resistance = dr / (2 * k)
        g = inner_area / (half_resistance[:-1] + half_resistance[1:])
        h_now = float(h_steps[step])
        g_s = surface_area / (half_resistance[-1] + (0.0 if math.isinf(h_now) else 1.0 / h_now))
        t_bath = float(bath_steps[step])
        diag_l = np.zeros(n)
        diag_l[:-1] += g
        diag_l[1:] += g
        diag_l[-1] += g_s
        H_old = H_new = H  # never changed in place: each Newton update makes a new array
        converged = False
        for _ in range(40):
            T_new = np.interp(H_new, table_H, table_T)
            conduction = -diag_l * T_new
            conduction[:-1] += g * T_new[1:]
            conduction[1:] += g * T_new[:-1]
            conduction[-1] += g_s * t_bath
            residual = rho_v * (H_new - H_old) / dt - conduction
            scaled = np.abs(residual * dt / rho_v).max()
            if scaled < energy_tolerance:
                converged = True
                break
            if not np.isfinite(scaled):
                raise ModelRangeError("medium", "energy residual not finite", "finite properties and inputs",
                                      "enthalpy freezing")
            s = slope(H_new)
            # tridiagonal Newton system (LAPACK gtsv, as scipy.linalg.solve_banded uses for (1, 1))
            _, _, _, correction, info = dgtsv(-g * s[:-1], storage_rate + diag_l * s, -g * s[1:], -residual)
            if info != 0:
                raise ModelRangeError("medium", f"singular Newton system (LAPACK info {info})",
                                      "a solvable implicit step", "enthalpy freezing")
            H_new = H_new + correction
        worst_residual = max(worst_residual, float(scaled))
        H = H_new
        T, f = state(H, T_new if converged else None)
        if step % record_every == 0 or step == n_steps:
            record(step, T, f)
            if stop_at_centre_ice_fraction is not None and f[0] >= stop_at_centre_ice_fraction:
                break
    flags = []
    if worst_residual > 1e3 * energy_tolerance:
        flags.append(Flag(
            "indicative",
            f"enthalpy iterations left an energy residual of {worst_residual:.3g} J/kg in a shell",
            "voller-cross-1981",
        ))

    return FreezingPath(
        model="enthalpy method, 1-D finite volume, implicit",
        source="voller-cross-1981",
        parameters={
            "geometry": geometry, "half_dimension_m": half_dimension, "n_cells": n, "time_step_s": dt,
            "initial_temperature_k": float(initial_temperature), "initial_ice": initial_ice,
            "worst_energy_residual_j_per_kg": worst_residual,
            "density_kg_m3": medium.density, "water_mass_fraction": xw, "liquidus_k": medium.liquidus,
        },
        flags=flags,
        time=np.asarray(times),
        bath_temperature=np.asarray(baths, dtype=float),
        centre_temperature=np.asarray(centre_T),
        surface_temperature=np.asarray(surface_T),
        mean_temperature=np.asarray(mean_T),
        centre_ice_fraction=np.asarray(centre_f),
        mean_ice_fraction=np.asarray(mean_f),
        radius=centres,
        profile_temperature=np.asarray(prof_T),
        profile_ice_fraction=np.asarray(prof_f),
    )


def sample_in_time(fn: Callable[[float], float], times: ArrayLike) -> np.ndarray:
    """Values of a function of time at ``times`` [s], as a float array of the same shape.

    A function that takes an array of times and answers with an array of the same shape is called once;
    its answer is used only when it equals, exactly, calls one time at a time at the first, middle and
    last time. Any other function is called once per time.
    """
    times = np.asarray(times, dtype=float)
    try:
        values = np.asarray(fn(times), dtype=float)
    except (TypeError, ValueError):
        values = None
    if values is not None and values.shape == times.shape and times.size:
        flat = times.ravel()
        picks = sorted({0, flat.size // 2, flat.size - 1})
        spot = np.array([fn(float(flat[i])) for i in picks], dtype=float)
        if np.array_equal(values.ravel()[picks], spot, equal_nan=True):
            return values
    return np.array([fn(float(t)) for t in times.ravel()], dtype=float).reshape(times.shape)


def _enthalpy_table(medium: FreezingMedium, t_low: float, t_high: float) -> tuple[np.ndarray, ...]:
    """Tabulate T, sensible enthalpy S(T) and total equilibrium enthalpy H(T) [J/kg] on a fine grid.

    A jump of the ice fraction (pure water) is kept as a vertical step in H at the liquidus.
    """
    grid = np.linspace(t_low, t_high, 6001)
    if t_low < medium.liquidus < t_high:
        grid = np.union1d(grid, [medium.liquidus - 1e-7, medium.liquidus])
    f = np.clip(np.asarray(medium.ice_fraction(grid), dtype=float), 0.0, 1.0)
    if f.shape != grid.shape or not np.all(np.isfinite(f)):
        raise ModelRangeError("ice_fraction", "shape or value", "a finite array like its input", "enthalpy freezing")
    xw = medium.water_mass_fraction
    c = (1.0 - xw * f) * medium.heat_capacity_liquid + xw * f * medium.heat_capacity_ice
    sensible = np.concatenate([[0.0], np.cumsum(0.5 * (c[1:] + c[:-1]) * np.diff(grid))])
    total = sensible + medium.latent_heat * xw * (1.0 - f)
    if np.any(np.diff(total) <= 0):
        raise ModelRangeError(
            "ice_fraction", "rises with temperature somewhere",
            "an ice fraction that falls as the temperature rises", "enthalpy freezing",
        )
    return grid, sensible, total


def _first_time(time: np.ndarray, values: np.ndarray, level: float) -> float:
    hit = np.nonzero(values >= level)[0]
    if hit.size == 0:
        return float("nan")
    i = int(hit[0])
    if i == 0 or values[i] == values[i - 1]:
        return float(time[i])
    return float(time[i - 1] + (level - values[i - 1]) * (time[i] - time[i - 1]) / (values[i] - values[i - 1]))


def neumann_front_coefficient(
    stefan_solid: float, stefan_liquid: float = 0.0, diffusivity_ratio: float = 1.0
) -> float:
    """Root lambda of Neumann's solution for freezing a half-space: front depth X = 2 lambda sqrt(alpha_s t).

    Parameters
    ----------
    stefan_solid : float
        St_s = c_s (T_f - T_surface) / L [1], > 0.
    stefan_liquid : float
        St_l = c_l (T_initial - T_f) / L [1], >= 0 (0: the liquid starts at its freezing point, Stefan's
        one-phase case).
    diffusivity_ratio : float
        nu = alpha_s / alpha_l [1].

    Returns
    -------
    float
        lambda [1].

    Notes
    -----
    Surface held at T_surface from t = 0, liquid initially at T_initial >= T_f, equal densities
    [ref:carslaw-jaeger-1959] (section 11.2), [ref:alexiades-solomon-1993]:

        St_s exp(-l**2) / (sqrt(pi) erf l) - St_l exp(-nu l**2) / (sqrt(nu) sqrt(pi) erfc(l sqrt(nu))) = l

    (the energy balance at the front, k_s dT_s/dx - k_l dT_l/dx = rho L dX/dt, with the error-function
    profiles in both phases).
    """
    from scipy.optimize import brentq
    from scipy.special import erf, erfcx

    if not stefan_solid > 0:
        raise ModelRangeError("stefan_solid", stefan_solid, "above 0", "Neumann solution")
    if not stefan_liquid >= 0:
        raise ModelRangeError("stefan_liquid", stefan_liquid, "0 or above", "Neumann solution")
    nu = float(diffusivity_ratio)
    if not nu > 0:
        raise ModelRangeError("diffusivity_ratio", nu, "above 0", "Neumann solution")

    def residual(lam: float) -> float:
        solid = stefan_solid * np.exp(-lam**2) / (np.sqrt(np.pi) * erf(lam))
        # exp(-nu l**2) / erfc(sqrt(nu) l) = 1 / erfcx(sqrt(nu) l), the scaled form that cannot overflow
        liquid = stefan_liquid / (np.sqrt(nu * np.pi) * erfcx(np.sqrt(nu) * lam))
        return solid - liquid - lam

    return float(brentq(residual, 1e-9, 10.0))
