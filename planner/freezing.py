"""Freezing of a sample after ice is started in it: Plank's freezing time and an enthalpy-method solution.

Two methods, checked against each other and against the Neumann solution (tests/test_freezing.py):

- :func:`plank_freezing_time`: Plank's equation with its shape factors (slab, long cylinder, sphere), a
  closed form that counts only the latent heat and treats the frozen layer as quasi-steady
  [ref:plank-1913];
- :func:`enthalpy_freezing`: a 1-D finite-volume enthalpy-method solution (slab, long cylinder or
  sphere, implicit in time) that follows the temperature and the ice fraction of
  every shell while the bath follows its programme [ref:voller-cross-1981]. For a solution the ice
  fraction below the liquidus follows the freeze-concentration curve (equilibrium: the unfrozen liquid
  concentrates so that its freezing point equals the local temperature), supplied by the caller (the
  solution model, ``planner.solution.freeze_concentration``). :func:`enthalpy_freezing_runs` solves
  several surface coefficients (a nominal h and the ends of its range) in one pass.

Both work in SI units: temperature [K], length [m], time [s], W, J, kg.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike
from scipy.linalg.lapack import dgtsv

try:  # numpy's compiled linear interpolation, without np.interp's checks for complex and periodic data
    from numpy._core._multiarray_umath import interp as _interp
except ImportError:  # pragma: no cover - another numpy layout: the public function, a little slower
    _interp = np.interp

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

#: Newton updates allowed per implicit step of the enthalpy method: a base, plus a share per shell (one long
#: step may carry the freezing front through every shell, and each stop on a kink costs an update).
NEWTON_UPDATES_BASE = 40
NEWTON_UPDATES_PER_SHELL = 4
#: Energy residual accepted per shell and step, as a share of the latent heat of the sample's water.
ENERGY_TOLERANCE_SHARE = 1e-7
#: Flag code of a path with an implicit step that ended outside the energy tolerance.
NOT_CONVERGED = "not-converged"
#: Halvings of a Newton update that does not lower the residual norm.
HALVINGS = 8


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
    max_iterations: int | None = None,
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
    max_iterations : int, optional
        Newton updates allowed per time step (default 40 + 4 ``n_cells``); a step still outside the
        tolerance then is kept and the path flagged ``not-converged`` (:data:`NOT_CONVERGED`).

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
    rho V/dt + L dT/dH (conductivities lagged one step), started from the last two steps' enthalpies
    extrapolated linearly (from H_old on the first step) and stopped once every shell's energy residual,
    per kg, is below 1e-7 L x_w; T and f follow from H through a tabulated, monotone H(T), so a latent-heat
    plateau (dT/dH = 0) needs no smoothing. Conductivity k = k_l + (k_s - k_l) x_w f.

    The Newton iteration is safeguarded against a poor start (a long step, a large h, a start far above
    the liquidus): (1) no update carries a shell's enthalpy across a kink of T(H) (the liquidus, either
    end of pure water's plateau - where dT/dH jumps by more than a factor of 2 - or an end of the table):
    the update stops on the kink and the next one takes the slope of the side it was heading for, so each
    update works on a near-linear piece of T(H); (2) an update that does not lower the run's largest
    shell residual (per kg) is halved, up to 8 times (Newton's direction lowers any norm of the residual
    for a short enough step; the 8th halving is taken as it is), so the residual falls from one update to
    the next and the iteration does not cycle. A long step may carry the front through every shell, so up
    to 40 + 4 n updates are allowed. A step still outside the tolerance after them is kept and the path
    flagged ``not-converged`` with the step's time and the residual left: what follows it is not a
    solution of the model and no number should be read from it.
    Density is taken constant (no volume change on freezing).
    Validity: the sample's own liquidus and freeze-concentration curve; seeding is taken as instantaneous
    through the whole sample (ice grows through supercooled liquid far faster than heat leaves it).

    References
    ----------
    [ref:voller-cross-1981], [ref:carslaw-jaeger-1959]
    """
    paths = enthalpy_freezing_runs(
        geometry, half_dimension, medium, initial_temperature, bath, [heat_transfer_coefficient], duration,
        n_cells=n_cells, initial_ice=initial_ice, record_interval=record_interval,
        stop_at_centre_ice_fraction=[stop_at_centre_ice_fraction], time_step=time_step,
        max_iterations=max_iterations,
    )
    return paths[0]


def enthalpy_freezing_runs(
    geometry: str,
    half_dimension: float,
    medium: FreezingMedium,
    initial_temperature: float,
    bath: Callable[[float], float] | float,
    heat_transfer_coefficients: Sequence[Callable[[float], float] | float],
    duration: float,
    n_cells: int = 32,
    initial_ice: str = "none",
    record_interval: float | None = None,
    stop_at_centre_ice_fraction: Sequence[float | None] | float | None = None,
    time_step: float | None = None,
    max_iterations: int | None = None,
) -> list[FreezingPath]:
    """:func:`enthalpy_freezing` for several surface coefficients at once: one path per coefficient.

    The same body, medium, start and bath, each run with its own h (constant or a function of time) and,
    optionally, its own early stop. All runs step together: each implicit step solves one tridiagonal
    system holding every run's shells as an uncoupled block, and a run that stops leaves the system. Every
    path equals, to the last bit, what :func:`enthalpy_freezing` gives for that coefficient alone (the
    blocks share no coefficient, so the elimination of one never touches another, and each run's Newton
    iteration stops on its own residual).

    Parameters
    ----------
    heat_transfer_coefficients : sequence of callable or float
        One surface coefficient h [W/(m2 K)] per run, as ``heat_transfer_coefficient`` of
        :func:`enthalpy_freezing`.
    stop_at_centre_ice_fraction : float, None, or a sequence of them (one per run)
        Stop a run early once its centre holds this fraction of its water as ice.

    The other parameters, the method and its validity are those of :func:`enthalpy_freezing`.

    Returns
    -------
    list of FreezingPath
        In the order of ``heat_transfer_coefficients``.

    References
    ----------
    [ref:voller-cross-1981]
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
    if max_iterations is None:
        max_iterations = NEWTON_UPDATES_BASE + NEWTON_UPDATES_PER_SHELL * int(n_cells)
    if not (isinstance(max_iterations, int | np.integer) and 0 <= max_iterations <= 10000):
        raise ModelRangeError("max_iterations", max_iterations, "an integer from 0 to 10000", "enthalpy freezing")
    coefficients = list(heat_transfer_coefficients)
    runs = len(coefficients)
    if runs == 0:
        raise ModelRangeError("heat_transfer_coefficients", [], "at least one coefficient", "enthalpy freezing")
    stops = (list(stop_at_centre_ice_fraction) if isinstance(stop_at_centre_ice_fraction, Sequence)
             else [stop_at_centre_ice_fraction] * runs)
    if len(stops) != runs:
        raise ModelRangeError("stop_at_centre_ice_fraction", stops, f"one value (or None) per run, {runs} here",
                              "enthalpy freezing")
    bath_at = bath if callable(bath) else (lambda _t, _b=float(bath): _b)
    h_ats = [h if callable(h) else (lambda _t, _h=float(h): _h) for h in coefficients]
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
        H_start = np.where(
            T0 >= medium.liquidus,
            np.interp(T0, table_T, table_H),
            at_liquidus - medium.heat_capacity_liquid * (medium.liquidus - T0),
        )
    else:
        H_start = np.interp(T0, table_T, table_H)

    for h_at in h_ats:
        h_probe = sample_in_time(h_at, probe_t)
        if np.any(~(h_probe > 0)):
            raise ModelRangeError("heat_transfer_coefficient", h_probe.tolist()[:3], "above 0 W/(m2 K)",
                                  "enthalpy freezing")
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
    if not np.all(np.isfinite(bath_steps)):
        bad = bath_steps[~np.isfinite(bath_steps)]
        raise ModelRangeError("bath", bad.tolist()[:3], "finite temperatures in K", "enthalpy freezing")
    h_steps = np.empty((runs, n_steps + 1))
    for r, h_at in enumerate(h_ats):
        h_steps[r] = sample_in_time(h_at, step_times)
        if np.any(~(h_steps[r] > 0)):
            bad = h_steps[r][~(h_steps[r] > 0)]
            raise ModelRangeError("heat_transfer_coefficient", bad.tolist()[:3], "above 0 W/(m2 K)",
                                  "enthalpy freezing")
    # surface resistance 1/h of every run at every step (1/inf = 0: the surface held at the bath)
    surface_resistance = 1.0 / h_steps

    rho_v = medium.density * volume
    mass_weight = volume / volume.sum()
    dk = medium.conductivity_ice - medium.conductivity_liquid
    energy_tolerance = ENERGY_TOLERANCE_SHARE * lat * max(xw, 1e-3)  # J/kg: residual accepted per shell
    worst_residual = [0.0] * runs
    # recorded states of each run: step numbers and the shells' T and f
    records: list[dict[str, list]] = [{"step": [], "T": [], "f": []} for _ in range(runs)]

    slope_table = np.diff(table_T) / np.diff(table_H)  # dT/dH on each table interval
    # dT/dH at H: the slope of the table interval holding H, the first or last interval beyond the table;
    # padded so that the index is np.searchsorted(table_H, H) itself
    slope_padded = np.concatenate([slope_table[:1], slope_table, slope_table[-1:]])
    # Kinks of T(H): table enthalpies where the slope dT/dH changes by more than a factor of 2 between the
    # intervals either side (the liquidus; both ends of pure water's plateau), and the two ends of the table.
    # No Newton update carries a shell's enthalpy across one: it stops on it, and the next update takes the
    # slope of the side it was heading for. Between kinks T(H) is close to linear and Newton's linear model
    # holds. With -inf and +inf at the ends, so that every enthalpy in the table has a kink below and above.
    ratio = slope_table[1:] / slope_table[:-1]
    is_kink = np.concatenate([[True], (ratio > 2.0) | (ratio < 0.5), [True]])  # per table enthalpy
    kink_H = np.concatenate([[-np.inf], table_H[is_kink], [np.inf]])
    # number of kinks below an enthalpy H, by its table index np.searchsorted(table_H, H): an update that
    # leaves it unchanged crosses no kink (the common case, which needs no stop)
    kinks_below = np.concatenate([[0], np.cumsum(is_kink)])
    fraction_scale = lat * xw
    interp = _interp  # np.interp on real arrays, to the last bit (tests/test_freezing.py)
    minimum, maximum = np.minimum, np.maximum
    largest, smallest, anyof = np.maximum.reduce, np.minimum.reduce, np.logical_or.reduce

    # the ice fraction of the water at H, 1 - (H - S(T(H))) / (L x_w), and the conductivity
    # k = k_l + (k_s - k_l) x_w f are linear in H on each table interval, like T and S: tabulated on the
    # same enthalpies
    table_F = minimum(maximum(1.0 - (table_H - table_S) / fraction_scale, 0.0), 1.0)
    table_k = medium.conductivity_liquid + dk * xw * table_F

    def record(run: int, step_now: int, T_now: np.ndarray, f_now: np.ndarray) -> None:
        rec = records[run]
        rec["step"].append(step_now)
        rec["T"].append(T_now.copy())
        rec["f"].append(f_now.copy())

    # The runs still going, side by side in one flat array of len(live) * n shells (run after run, each from
    # its centre out). A face between two runs has no area: no heat crosses it, and the Newton system is
    # block-diagonal (its off-diagonal entries there are zero).
    live = list(range(runs))
    stop_live = list(stops)
    H = np.tile(H_start, runs)
    T = interp(H, table_H, table_T)
    f = interp(H, table_H, table_F)
    k = interp(H, table_H, table_k)
    for r in live:
        record(r, 0, T[r * n:(r + 1) * n], f[r * n:(r + 1) * n])
    # constants of the step loop
    storage_rate = rho_v / dt
    inner_area, surface_area = area[1:-1], area[-1]

    def stacked(count: int) -> tuple[np.ndarray, ...]:
        # per-shell constants of ``count`` runs side by side; face areas of the flat array's n * count - 1
        # inner faces (zero between runs); a buffer for the conductances with a zero at both ends
        faces_flat = np.tile(np.append(inner_area, 0.0), count)[:-1]
        return np.tile(rho_v, count), np.tile(storage_rate, count), faces_flat, np.zeros(n * count + 1)

    def stopped_at_kinks(H_at: np.ndarray, H_to: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        # H_to, stopped at the nearest kink between H_at and it; and the shells stopped on a kink from below
        above = kink_H[kink_H.searchsorted(H_at, side="right")]
        below = kink_H[kink_H.searchsorted(H_at, side="left") - 1]
        H_to = minimum(maximum(H_to, below), above)
        return H_to, H_to == above

    def halved(H_at, neg_correction, H_try, run_at, run_try, worse, system, count):
        # halve the update of each run whose largest shell residual did not fall, and only theirs, until it
        # falls (the last halving taken as it is)
        for _ in range(HALVINGS):
            shells = np.repeat(worse, n)
            neg_correction[shells] *= 0.5
            H_half, _ = stopped_at_kinks(H_at, H_at - neg_correction)
            H_try = np.where(shells, H_half, H_try)
            T_try = interp(H_try, table_H, table_T)
            residual_try, shell_try = _energy_residual(H_try, T_try, *system)
            run_half = largest(shell_try.reshape(count, n), axis=1)
            run_try = np.where(worse, run_half, run_try)
            worse &= ~(run_half < run_at)
            if not worse.any():
                break
        _, upward = stopped_at_kinks(H_at, H_try)
        return H_try, T_try, residual_try, shell_try, run_try, upward

    rho_v_flat, storage_flat, area_flat, conductance = stacked(runs)
    storage_negative = -storage_flat
    half_dr = dr / 2
    # the surface resistance 1/h of the live runs at each step (rows: steps)
    resistance_live = np.ascontiguousarray(surface_resistance.T)
    H_prev = None
    worst_shell = np.zeros(runs * n)  # largest residual each shell has been left with [J/kg]
    # per run: implicit steps that ended outside the tolerance, and the first of them (time [s], residual)
    unconverged_steps = [0] * runs
    first_unconverged: list[tuple[float, float] | None] = [None] * runs
    for step in range(1, n_steps + 1):
        count = len(live)
        half_resistance = half_dr / k  # dr / (2 k), to the last bit (halving is exact)
        g = conductance[1:-1]  # conductance of each inner face (0 between runs)
        np.divide(area_flat, half_resistance[:-1] + half_resistance[1:], out=g)
        g_s = surface_area / (half_resistance[n - 1::n] + resistance_live[step])
        # sum of the conductances of each shell's faces (the surface film's added below)
        diag_l = conductance[1:] + conductance[:-1]
        diag_l[n - 1::n] += g_s
        neg_g = -g
        surface_source = g_s * bath_steps[step]
        # Newton iterations on H, from the last two steps' values extrapolated to this one (from H_old on the
        # first step); T_new = T(H_new). ``outflow`` is minus the conduction term K T of the notes, so
        # residual = (rho V/dt) (H - H_old) + outflow, and the Newton system J (-correction) = residual gives
        # the correction negated.
        H_old = H
        if H_prev is None:
            H_try, T_try = H, T
        else:
            H_try = minimum(maximum(H + (H - H_prev), table_H[0]), table_H[-1])
            T_try = interp(H_try, table_H, table_T)
        # the part of the residual fixed through the step: -(rho V/dt) H_old, less the surface film's source
        fixed = storage_negative * H_old
        fixed[n - 1::n] -= surface_source
        system = (fixed, storage_flat, diag_l, g)
        # H_try: the start, then each Newton update in turn; H_new: the last one taken
        H_new = neg_correction = run_worst = done = None  # run_worst: largest shell residual of each run
        worst_now, some_done = math.inf, False
        piece = region = upward = None  # table index of each H, kinks below it, shells stopped on one from below
        for iteration in range(max_iterations + 1):
            # the energy residual at H_try (what _energy_residual computes, written out in this busiest loop)
            outflow = diag_l * T_try
            outflow[:-1] -= g * T_try[1:]
            outflow[1:] -= g * T_try[:-1]
            outflow += fixed
            residual_try = storage_flat * H_try
            residual_try += outflow
            shell_try = np.abs(residual_try / storage_flat)
            worst_try = float(largest(shell_try))
            if H_new is not None:
                # An update is taken whole when it lowers the run's largest shell residual; otherwise halved
                # (up to HALVINGS times, the last one taken as it is), so that the residual falls from one
                # update to the next and the iteration cannot cycle.
                if run_worst is None:
                    if not worst_try < worst_now:
                        H_try, T_try, residual_try, shell_try, _, upward = halved(
                            H_new, neg_correction, H_try, np.array([worst_now]), np.array([worst_try]),
                            np.array([True]), system, 1)
                        worst_try, piece_try = float(largest(shell_try)), None
                else:
                    run_try = largest(shell_try.reshape(count, n), axis=1)
                    worse = run_try >= run_worst  # (a NaN passes here and is refused below)
                    if some_done:
                        worse &= ~done
                    if anyof(worse):
                        H_try, T_try, residual_try, shell_try, run_try, upward = halved(
                            H_new, neg_correction, H_try, run_worst, run_try, worse, system, count)
                        worst_try, piece_try = float(largest(shell_try)), None
                    run_worst = run_try
                if piece_try is None:
                    piece_try = table_H.searchsorted(H_try)
                    region_try = kinks_below[piece_try]
                piece, region = piece_try, region_try
            H_new, T_new, residual, shell_residual, worst_now = H_try, T_try, residual_try, shell_try, worst_try
            if worst_now < energy_tolerance:  # every run converged (NaN never is)
                break
            if not math.isfinite(worst_now):
                raise ModelRangeError("medium", "energy residual not finite", "finite properties and inputs",
                                      "enthalpy freezing")
            if count > 1 and run_worst is None:
                run_worst = largest(shell_residual.reshape(count, n), axis=1)
            if iteration == max_iterations:
                for row, r in enumerate(live):
                    left = worst_now if run_worst is None else float(run_worst[row])
                    if not left < energy_tolerance:
                        unconverged_steps[r] += 1
                        if first_unconverged[r] is None:
                            first_unconverged[r] = (float(step_times[step]), left)
                break
            if piece is None:
                piece = table_H.searchsorted(H_new)
                region = kinks_below[piece]
            # dT/dH of each shell's table interval; a shell stopped on a kink from below takes the one above it
            s = slope_padded[piece if upward is None else piece + upward]
            # tridiagonal Newton system of all runs (LAPACK gtsv, what scipy.linalg.solve_banded uses for (1, 1))
            _, _, _, neg_correction, info = dgtsv(neg_g * s[:-1], storage_flat + diag_l * s, neg_g * s[1:],
                                                  residual, overwrite_b=True)
            if info != 0:
                raise ModelRangeError("medium", f"singular Newton system (LAPACK info {info})",
                                      "a solvable implicit step", "enthalpy freezing")
            some_done = run_worst is not None and smallest(run_worst) < energy_tolerance
            if some_done:
                # a run already within tolerance keeps its enthalpy (as it would if solved alone)
                done = run_worst < energy_tolerance
                neg_correction.reshape(count, n)[done] = 0.0
            # the Newton update, stopped at the nearest kink on its way when it would cross one
            H_try = H_new - neg_correction
            piece_try = table_H.searchsorted(H_try)
            region_try = kinks_below[piece_try]
            upward = None
            if anyof(region_try != region):
                H_try, upward = stopped_at_kinks(H_new, H_try)
                piece_try = None
            T_try = interp(H_try, table_H, table_T)
        maximum(worst_shell, shell_residual, out=worst_shell)
        H_prev, H, T = H, H_new, T_new
        k = interp(H, table_H, table_k)  # the next step's conductivities (lagged one step)
        if step % record_every == 0 or step == n_steps:
            f = interp(H, table_H, table_F)
            keep = []
            for row, r in enumerate(live):
                record(r, step, T[row * n:(row + 1) * n], f[row * n:(row + 1) * n])
                if stop_live[row] is None or f[row * n] < stop_live[row]:
                    keep.append(row)
            if len(keep) < count:
                for row, r in enumerate(live):
                    worst_residual[r] = float(worst_shell[row * n:(row + 1) * n].max())
                if not keep:
                    break
                shells = np.concatenate([np.arange(row * n, (row + 1) * n) for row in keep])
                live = [live[row] for row in keep]
                stop_live = [stop_live[row] for row in keep]
                H, H_prev, T, k = H[shells], H_prev[shells], T[shells], k[shells]
                worst_shell = worst_shell[shells]
                resistance_live = np.ascontiguousarray(resistance_live[:, keep])
                rho_v_flat, storage_flat, area_flat, conductance = stacked(len(live))
                storage_negative = -storage_flat

    for row, r in enumerate(live):
        worst_residual[r] = float(worst_shell[row * n:(row + 1) * n].max())
    paths = []
    for r in range(runs):
        flags = []
        if first_unconverged[r] is not None:
            at, left = first_unconverged[r]
            flags.append(Flag(
                NOT_CONVERGED,
                f"the implicit step ending at t = {at:.6g} s did not converge within {max_iterations} Newton "
                f"updates: an energy residual of {left:.3g} J/kg is left in a shell (tolerance "
                f"{energy_tolerance:.3g} J/kg); {unconverged_steps[r]} step(s) in all ended so, the worst with "
                f"{worst_residual[r]:.3g} J/kg. Temperatures and ice fractions after it are not solutions of the "
                "model and must not be used",
                "voller-cross-1981",
            ))
        rec = records[r]
        steps_done = np.asarray(rec["step"])
        profile_T, profile_f = np.asarray(rec["T"]), np.asarray(rec["f"])
        paths.append(FreezingPath(
            model="enthalpy method, 1-D finite volume, implicit",
            source="voller-cross-1981",
            parameters={
                "geometry": geometry, "half_dimension_m": half_dimension, "n_cells": n, "time_step_s": dt,
                "initial_temperature_k": float(initial_temperature), "initial_ice": initial_ice,
                "worst_energy_residual_j_per_kg": worst_residual[r],
                "energy_tolerance_j_per_kg": energy_tolerance, "newton_updates_allowed": int(max_iterations),
                "unconverged_steps": unconverged_steps[r],
                "first_unconverged_step_time_s": None if first_unconverged[r] is None else first_unconverged[r][0],
                "density_kg_m3": medium.density, "water_mass_fraction": xw, "liquidus_k": medium.liquidus,
            },
            flags=flags,
            time=step_times[steps_done],
            bath_temperature=bath_steps[steps_done],
            centre_temperature=profile_T[:, 0].copy(),
            surface_temperature=profile_T[:, -1].copy(),
            mean_temperature=profile_T @ mass_weight,
            centre_ice_fraction=profile_f[:, 0].copy(),
            mean_ice_fraction=profile_f @ mass_weight,
            radius=centres,
            profile_temperature=profile_T,
            profile_ice_fraction=profile_f,
        ))
    return paths


def _energy_residual(H: np.ndarray, T: np.ndarray, fixed: np.ndarray, storage: np.ndarray, diag_l: np.ndarray,
                     g: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Energy residual of every shell of an implicit step (a heat rate) and its size per kg of shell [J/kg].

    residual = (rho V/dt) (H - H_old) + outflow, the outflow being minus the conduction term K T of
    :func:`enthalpy_freezing`'s notes: faces' conductances ``g``, their sums ``diag_l`` (the surface film's
    included); ``fixed`` = -(rho V/dt) H_old less the surface film's source g_s T_bath at the surface shells.
    """
    outflow = diag_l * T
    outflow[:-1] -= g * T[1:]
    outflow[1:] -= g * T[:-1]
    outflow += fixed
    residual = storage * H
    residual += outflow
    return residual, np.abs(residual / storage)


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
