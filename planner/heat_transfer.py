"""Heat transfer into the sample: what the sample lives through when the bath follows its schedule.

A bath (freezer air, coolant, nitrogen) follows a piecewise-linear program; the sample lags it. This module
gives:

- environment presets (``planner/data/heat_transfer.yaml``): the surface coefficient ``h`` [W/(m2 K)] of
  still air, forced air, a stirred bath, nitrogen vapour and liquid nitrogen, each with a range;
- liquid sample properties (water, IAPWS; ``planner/data/sample_properties.yaml``) as data next to the
  model;
- the Biot number and the lumped model (one temperature, exact exponential response);
- transient conduction in a sphere, a finite cylinder (axisymmetric, 2-D) or a slab with a convective
  surface, under any piecewise-linear bath temperature and a piecewise-constant ``h``;
- the time until every point is within a tolerance of a hold, the lag under ramps, and the slowest
  point's mean cooling and warming rate through a temperature band.

What nucleation does to the curve (recalescence: the jump to the liquidus and the ice formed at once)
is ``planner.isochoric.recalescence`` (open containers and rigid chambers alike).

Numerical method
----------------
Space: vertex-centred finite volumes (nodes at the centre and on the surface, so both temperatures are
nodes, second order). Time: exact. The semi-discrete system ``C dT/dt = -(K + H) T + H 1 T_bath(t)`` is
linear with constant coefficients between changes of ``h``; with ``C`` diagonal and ``K + H`` symmetric
it is diagonalised once per ``h`` (generalised symmetric eigenproblem). The finite cylinder's grid is the
product of a radial and an axial line, so its modes are products of the two lines' modes (rates add):
two small tridiagonal eigenproblems instead of one large dense one. Each mode is integrated in closed
form over every linear piece of the bath history. There is no time step: output times are free
and the result is exact in time for the discretised body. The grid error is second order in the cell size
and is checked against the series solutions [ref:carslaw-jaeger-1959].

All temperatures in kelvin, lengths in metres, times in seconds, SI throughout.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from typing import Any

import numpy as np
import scipy.linalg

from planner.errors import InputError, ModelRangeError, choice_error
from planner.results import Flag, Result
from planner.validity import Range, Validity
from planner.yamlio import load_yaml

GEOMETRIES = ("sphere", "cylinder", "slab")

# Heat-transfer coefficients a planner accepts at all [W/(m2 K)]: above zero, and no more than the top of
# the boiling/condensation band of Incropera & DeWitt Table 1.1 (from memory) [ref:incropera-dewitt].
H_RANGE = Range(1e-3, 1e5, "W/(m2 K)")

# Liquid-water property table: valid over its rows; outside it the end row is used and flagged.
WATER_TABLE = Validity(
    "liquid water properties (IAPWS-95, G12-15, IAPWS 2011 conductivity)",
    "iapws-95",
    {"temperature": Range(243.15, 313.15, "K")},
)



# --------------------------------------------------------------------------------------------- data


@dataclass(frozen=True)
class EnvironmentPreset:
    """One documented surroundings of the sample: its h range [W/(m2 K)] and what it stands for."""

    name: str
    label: str
    stands_for: str
    h_low: float
    h_nominal: float
    h_high: float
    source: str
    note: str = ""


@lru_cache(maxsize=2)
def _data(filename: str) -> dict[str, Any]:
    text = resources.files("planner").joinpath(f"data/{filename}").read_text(encoding="utf-8")
    return load_yaml(text, filename)


@lru_cache(maxsize=1)
def environment_presets() -> dict[str, EnvironmentPreset]:
    """All environment presets of ``planner/data/heat_transfer.yaml``, keyed by name."""
    out = {}
    for name, e in _data("heat_transfer.yaml").items():
        out[name] = EnvironmentPreset(
            name, e["label"], " ".join(e["stands_for"].split()), float(e["h_low"]), float(e["h_nominal"]),
            float(e["h_high"]), e["source"], " ".join(e.get("note", "").split()),
        )
    return out


def default_environment() -> EnvironmentPreset:
    """The environment used when a protocol names none: still air, the slowest common case."""
    defaults = [name for name, e in _data("heat_transfer.yaml").items() if e.get("default")]
    if len(defaults) != 1:
        raise ModelRangeError("default", defaults, "exactly one preset marked default", "heat_transfer.yaml")
    return environment_presets()[defaults[0]]


def environment_preset(name: str, field: str = "environment.heat_transfer") -> EnvironmentPreset:
    """The preset called ``name``; an unknown name is an :class:`InputError` naming ``field``.

    >>> environment_preset("stirred-bath").h_nominal
    150.0
    """
    presets = environment_presets()
    if name not in presets:
        raise choice_error(field, name, presets)
    return presets[name]


def check_heat_transfer_coefficient(h: float, field: str = "environment.h_w_per_m2_k") -> float:
    """Return ``h`` [W/(m2 K)] as a float, or raise :class:`InputError` naming ``field``.

    ``h`` must be a finite number above zero and at most 1e5 W/(m2 K) (the top of the boiling band).
    """
    try:
        value = float(h)
    except (TypeError, ValueError):
        raise InputError(field, h, f"a number, {H_RANGE.describe()}") from None
    if not bool(H_RANGE.contains(value)):
        raise InputError(field, h, H_RANGE.describe(), "the surface coefficient must be above zero")
    return value


@dataclass(frozen=True)
class Material:
    """Thermal properties of the sample at one temperature.

    ``density`` [kg/m3], ``specific_heat`` [J/(kg K)], ``conductivity`` [W/(m K)], evaluated at
    ``temperature`` [K].
    """

    name: str
    density: float
    specific_heat: float
    conductivity: float
    temperature: float
    source: str
    flags: tuple[Flag, ...] = ()

    @property
    def diffusivity(self) -> float:
        """Thermal diffusivity k/(rho c) [m2/s]."""
        return self.conductivity / (self.density * self.specific_heat)

    @property
    def volumetric_heat_capacity(self) -> float:
        """rho c [J/(m3 K)]."""
        return self.density * self.specific_heat


@lru_cache(maxsize=1)
def _water_table() -> np.ndarray:
    rows = np.asarray(_data("sample_properties.yaml")["water_properties"]["rows"], dtype=float)
    rows[:, 0] += 273.15
    return rows


def water_properties(temperature) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Density, isobaric heat capacity and thermal conductivity of liquid water at 0.101325 MPa.

    Parameters
    ----------
    temperature : float or array_like
        Temperature [K], 243.15 to 313.15 K (supercooled to warm); outside, the end values are returned
        (hold the value, never extrapolate) and :func:`liquid_water` flags it.

    Returns
    -------
    density : ndarray [kg/m3]
    specific_heat : ndarray [J/(kg K)]
    conductivity : ndarray [W/(m K)]

    Notes
    -----
    Linear interpolation in a 5 K table of IAPWS-95 (at and above 0 C) and IAPWS G12-15 (supercooled)
    densities and heat capacities, with the IAPWS 2011 thermal conductivity; the table is regenerated by
    ``tests/data/make_water_table.py``.

    References
    ----------
    [ref:iapws-95], [ref:iapws-g12-15], [ref:iapws-r15-11]

    >>> round(float(water_properties(273.15)[2]), 4)
    0.5556
    """
    t = np.asarray(temperature, dtype=float)
    tab = _water_table()
    return (np.interp(t, tab[:, 0], tab[:, 1]), np.interp(t, tab[:, 0], tab[:, 2]),
            np.interp(t, tab[:, 0], tab[:, 3]))


def liquid_water(temperature: float, warn: bool = True) -> Material:
    """Liquid water as the sample material at ``temperature`` [K], flagged outside the table's range."""
    rho, c, k = water_properties(temperature)
    flags = tuple(WATER_TABLE.flags(warn=warn, temperature=temperature))
    return Material("liquid water", float(rho), float(c), float(k), float(temperature), "iapws-95", flags)


# ----------------------------------------------------------------------------------- simple forms


def biot_number(h, characteristic_length, conductivity) -> np.ndarray:
    """Biot number Bi = h L / k [-].

    Parameters
    ----------
    h : float or array_like
        Surface heat-transfer coefficient [W/(m2 K)].
    characteristic_length : float or array_like
        Length [m]: V/A for the lumped criterion (Bi < 0.1), the radius or half-thickness for the
        one-term series.
    conductivity : float or array_like
        Thermal conductivity of the sample [W/(m K)].

    Notes
    -----
    Bi compares the resistance to conduction inside the body with the resistance at its surface; for
    Bi < 0.1 (with L = V/A) the body's temperature is uniform to within about 5 % and the lumped model
    applies (Incropera & DeWitt, eq. 5.10) [ref:incropera-dewitt].

    >>> float(biot_number(5.0, 0.005, 0.5))
    0.05
    """
    return np.asarray(h, dtype=float) * np.asarray(characteristic_length, dtype=float) / np.asarray(
        conductivity, dtype=float
    )


def lumped_time_constant(volumetric_heat_capacity, volume, h, area) -> np.ndarray:
    """Time constant of the lumped body tau = rho c V / (h A) [s].

    Parameters
    ----------
    volumetric_heat_capacity : float or array_like
        rho c [J/(m3 K)].
    volume : float or array_like
        Sample volume [m3].
    h : float or array_like
        Surface coefficient [W/(m2 K)].
    area : float or array_like
        Surface area [m2].

    Notes
    -----
    Incropera & DeWitt eq. 5.7 [ref:incropera-dewitt].
    """
    return (np.asarray(volumetric_heat_capacity, dtype=float) * np.asarray(volume, dtype=float)
            / (np.asarray(h, dtype=float) * np.asarray(area, dtype=float)))


def lumped_step_response(time, initial_temperature, bath_temperature, time_constant) -> np.ndarray:
    """Temperature [K] of a lumped body a time [s] after the bath stepped to ``bath_temperature`` [K].

    Notes
    -----
    T(t) = T_bath + (T_0 - T_bath) exp(-t / tau), Incropera & DeWitt eq. 5.6 [ref:incropera-dewitt].
    """
    t = np.asarray(time, dtype=float)
    return bath_temperature + (np.asarray(initial_temperature, dtype=float) - bath_temperature) * np.exp(
        -t / np.asarray(time_constant, dtype=float)
    )


def lumped_ramp_lag(time, rate, time_constant) -> np.ndarray:
    """Lag [K] of a lumped body behind a bath ramping at ``rate`` [K/s], from equilibrium at t = 0.

    Notes
    -----
    With T_bath = T_0 - B t, the exact solution gives T - T_bath = B tau (1 - exp(-t / tau)): the lag
    settles at B tau [ref:incropera-dewitt].
    """
    t = np.asarray(time, dtype=float)
    tau = np.asarray(time_constant, dtype=float)
    return np.asarray(rate, dtype=float) * tau * -np.expm1(-t / tau)


# ---------------------------------------------------------------------------------- the body


@dataclass(frozen=True)
class Body:
    """The sample's shape for conduction.

    ``geometry`` sphere (``radius``), cylinder (``radius`` and ``height``; all surfaces exposed) or slab
    (``thickness``, heat through both faces, edges neglected). Lengths [m].
    """

    geometry: str
    radius: float | None = None
    height: float | None = None
    thickness: float | None = None

    def __post_init__(self):
        if self.geometry not in GEOMETRIES:
            raise choice_error("sample.geometry", self.geometry, GEOMETRIES)
        need = {"sphere": ("radius",), "cylinder": ("radius", "height"), "slab": ("thickness",)}
        for name in need[self.geometry]:
            value = getattr(self, name)
            if value is None or not np.isfinite(value) or value <= 0:
                raise InputError(f"sample.{name}", value, "a length above 0 m", f"needed for a {self.geometry}")

    @property
    def volume(self) -> float:
        """Volume [m3] (per unit face area [m] for a slab)."""
        if self.geometry == "sphere":
            return 4.0 / 3.0 * np.pi * self.radius**3
        if self.geometry == "cylinder":
            return np.pi * self.radius**2 * self.height
        return self.thickness

    @property
    def area(self) -> float:
        """Exposed surface [m2] (per unit face area, i.e. 2, for a slab)."""
        if self.geometry == "sphere":
            return 4.0 * np.pi * self.radius**2
        if self.geometry == "cylinder":
            return 2.0 * np.pi * self.radius * self.height + 2.0 * np.pi * self.radius**2
        return 2.0

    @property
    def characteristic_length(self) -> float:
        """V/A [m], the length of the lumped criterion."""
        return self.volume / self.area

    @property
    def conduction_length(self) -> float:
        """The shortest distance from surface to centre [m]: radius, half-height or half-thickness."""
        if self.geometry == "sphere":
            return self.radius
        if self.geometry == "cylinder":
            return min(self.radius, self.height / 2.0)
        return self.thickness / 2.0


@dataclass(frozen=True)
class _Axis:
    """One direction of a vertex-centred finite-volume grid (the body is a product of one or two axes).

    ``x`` nodes [m]; ``measure`` each node's share of the body along this axis (its control volume's
    factor); ``link`` conductance factor between neighbours (face measure / distance); ``exposed`` the
    surface factor of each node (non-zero at the surface end only).
    """

    x: np.ndarray
    measure: np.ndarray
    link: np.ndarray
    exposed: np.ndarray


@dataclass(frozen=True)
class _Grid:
    """The body's grid: one axis (sphere, slab, lumped) or two (cylinder: r then z; nodes r-major)."""

    axes: tuple[_Axis, ...]
    centre: int
    surface: int  # the reported surface point: sphere/slab surface, cylinder side at mid-height

    @property
    def volume(self) -> np.ndarray:
        """Control volume of every node [m3] (one symmetric part of the body)."""
        return _kron_vectors([a.measure for a in self.axes])

    @property
    def surface_area(self) -> np.ndarray:
        """Exposed surface of every node [m2] (one symmetric part of the body)."""
        if len(self.axes) == 1:
            return self.axes[0].exposed
        r, z = self.axes
        return np.kron(r.exposed, z.measure) + np.kron(r.measure, z.exposed)

    @property
    def points(self) -> np.ndarray:
        if len(self.axes) == 1:
            x = self.axes[0].x
            return np.column_stack((x, np.zeros_like(x)))
        rr, zz = np.meshgrid(self.axes[0].x, self.axes[1].x, indexing="ij")
        return np.column_stack((rr.ravel(), zz.ravel()))


def _kron_vectors(vectors: list[np.ndarray]) -> np.ndarray:
    out = vectors[0]
    for v in vectors[1:]:
        out = np.kron(out, v)
    return out


def _line(length: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    """n+1 evenly spaced nodes on 0..length and their control-volume faces (clipped at both ends)."""
    return _faces(np.linspace(0.0, length, n + 1))


def _graded_line(length: float, step: float, growth: float = 1.1) -> tuple[np.ndarray, np.ndarray]:
    """Nodes on 0..length, ``step`` apart at the surface end (x = length), growing by ``growth`` inwards.

    Used along the longer direction of a cylinder: fine where the surface is, coarse in the middle where
    the temperature varies slowly along it.
    """
    n = max(2, int(np.ceil(np.log1p(length / step * (growth - 1.0)) / np.log(growth))))
    spacing = step * growth ** np.arange(n)
    spacing *= length / spacing.sum()
    x = length - np.concatenate(([0.0], np.cumsum(spacing)))
    x[-1] = 0.0
    return _faces(x[::-1])


def _faces(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    faces = np.concatenate(([x[0]], 0.5 * (x[1:] + x[:-1]), [x[-1]]))
    return x, faces


def _axis(x: np.ndarray, faces: np.ndarray, kind: str) -> _Axis:
    """Axis factors: ``kind`` sphere (radial, r^2), cylinder-r (radial, r), line (planar)."""
    dx = np.diff(x)
    f_in = faces[1:-1]
    end = x[-1]
    if kind == "sphere":
        measure = 4.0 / 3.0 * np.pi * (faces[1:] ** 3 - faces[:-1] ** 3)
        link = 4.0 * np.pi * f_in**2 / dx
        exposed_end = 4.0 * np.pi * end**2
    elif kind == "cylinder-r":
        measure = np.pi * (faces[1:] ** 2 - faces[:-1] ** 2)
        link = 2.0 * np.pi * f_in / dx
        exposed_end = 2.0 * np.pi * end
    else:
        measure = faces[1:] - faces[:-1]
        link = 1.0 / dx
        exposed_end = 1.0
    exposed = np.zeros(x.size)
    exposed[-1] = exposed_end
    return _Axis(x, measure, link, exposed)


def _grid(body: Body, cells: int) -> _Grid:
    if body.geometry == "sphere":
        return _Grid((_axis(*_line(body.radius, cells), "sphere"),), 0, cells)
    if body.geometry == "slab":  # half the slab per unit face area: mid-plane adiabatic by symmetry
        return _Grid((_axis(*_line(body.thickness / 2.0, cells), "line"),), 0, cells)
    # cylinder, axisymmetric; upper half (mid-plane adiabatic by symmetry)
    radius, half = body.radius, body.height / 2.0
    step = min(radius, half) / cells  # `cells` along the shorter direction, graded along the longer
    r = _line(radius, cells) if radius <= half else _graded_line(radius, step)
    z = _graded_line(half, step) if radius <= half else _line(half, cells)
    ax_r, ax_z = _axis(*r, "cylinder-r"), _axis(*z, "line")
    nz1 = ax_z.x.size
    return _Grid((ax_r, ax_z), 0, (ax_r.x.size - 1) * nz1)


def _lumped_grid(body: Body) -> _Grid:
    axis = _Axis(np.zeros(1), np.array([body.volume]), np.zeros(0), np.array([body.area]))
    return _Grid((axis,), 0, 0)


@dataclass
class _Modes:
    """Modes of one (body, material, h): T = Phi q, dq/dt = -rate q + beta T_bath.

    Phi is the Kronecker product of the axes' mode shapes ``shapes`` (one or two); modes are ordered like
    the nodes (r-major). ``rate`` [1/s], ``beta`` [1/s], ``conductance`` h A per node [W/K].
    """

    rate: np.ndarray
    shapes: tuple[np.ndarray, ...]
    beta: np.ndarray
    conductance: np.ndarray
    measures: tuple[np.ndarray, ...]

    def project(self, q: np.ndarray) -> np.ndarray:
        """Node temperatures (m, nodes) from modal amplitudes q (modes, m)."""
        if len(self.shapes) == 1:
            return (self.shapes[0] @ q).T
        a, b = self.shapes
        m = q.shape[1]
        qq = q.reshape(a.shape[1], b.shape[1], m)
        t1 = np.tensordot(a, qq, axes=(1, 0))  # (nr, nb, m)
        t2 = np.tensordot(t1, b, axes=(1, 1))  # (nr, m, nz)
        return t2.transpose(1, 0, 2).reshape(m, -1)

    def amplitudes(self, temperature: np.ndarray) -> np.ndarray:
        """Modal amplitudes of a node temperature field (nodes,)."""
        if len(self.shapes) == 1:
            return self.shapes[0].T @ (self.measures[0] * temperature)
        a, b = self.shapes
        wa, wb = self.measures
        tt = temperature.reshape(wa.size, wb.size) * wa[:, None] * wb[None, :]
        return (a.T @ tt @ b).ravel()


def _axis_modes(axis: _Axis, conductivity: float, rho_c: float, h: float) -> tuple[np.ndarray, np.ndarray]:
    """Rates [1/s] and measure-orthonormal shapes of one axis: (k L + h E) phi = rate rho c W phi."""
    w = axis.measure
    diag = np.zeros(w.size)
    diag[:-1] += axis.link
    diag[1:] += axis.link
    diag = (conductivity * diag + h * axis.exposed) / rho_c
    s = 1.0 / np.sqrt(w)
    if w.size == 1:
        return diag * s * s, s[:, None]
    off = -conductivity * axis.link / rho_c * s[:-1] * s[1:]
    rate, v = scipy.linalg.eigh_tridiagonal(diag * s * s, off)
    return np.maximum(rate, 0.0), v * s[:, None]


def _modes(grid: _Grid, material: Material, h: float) -> _Modes:
    rho_c = material.volumetric_heat_capacity
    k = material.conductivity
    if len(grid.axes) == 1:
        axis = grid.axes[0]
        rate, shape = _axis_modes(axis, k, rho_c, h)
        conductance = h * axis.exposed
        beta = shape.T @ conductance / rho_c
        return _Modes(rate, (shape,), beta, conductance, (axis.measure,))
    ax_r, ax_z = grid.axes
    rate_r, shape_r = _axis_modes(ax_r, k, rho_c, h)
    rate_z, shape_z = _axis_modes(ax_z, k, rho_c, h)
    rate = (rate_r[:, None] + rate_z[None, :]).ravel()
    conductance = h * grid.surface_area
    beta = h * (np.kron(shape_r.T @ ax_r.exposed, shape_z.T @ ax_z.measure)
                + np.kron(shape_r.T @ ax_r.measure, shape_z.T @ ax_z.exposed)) / rho_c
    return _Modes(rate, (shape_r, shape_z), beta, conductance, (ax_r.measure, ax_z.measure))


def _advance(modes: _Modes, q0: np.ndarray, t0: float, slope: float, tau: np.ndarray) -> np.ndarray:
    """Modal amplitudes at elapsed times ``tau`` (m,) of a piece with bath T0 + slope*tau: (n, m).

    q(tau) = exp(-w tau) q0 + beta [T0 E1 + slope E2], E1 = (1 - exp(-w tau)) / w, E2 = (tau - E1) / w;
    series forms where w tau is small (E1 = tau (1 - x/2 + x^2/6), E2 = tau^2 (1/2 - x/6 + x^2/24)).
    """
    rate = modes.rate[:, None]
    x = rate * tau[None, :]
    em1 = np.expm1(-x)  # exp(-x) - 1
    e1 = -em1 / rate
    q = (em1 + 1.0) * q0[:, None]
    forcing = t0 * e1
    small = x < 1e-3
    if slope != 0.0:
        e2 = (tau[None, :] - e1) / rate
        if small.any():
            xs = x[small]
            tt = np.broadcast_to(tau[None, :], x.shape)[small]
            e2[small] = tt * tt * (0.5 - xs / 6.0 + xs * xs / 24.0)
        forcing += slope * e2
    if small.any():
        xs = x[small]
        tt = np.broadcast_to(tau[None, :], x.shape)[small]
        forcing[small] = t0 * tt * (1.0 - xs / 2.0 + xs * xs / 6.0) + (
            slope * tt * tt * (0.5 - xs / 6.0 + xs * xs / 24.0))
    q += modes.beta[:, None] * forcing
    return q


@dataclass(frozen=True)
class _Piece:
    start: float  # s
    end: float  # s
    bath_start: float  # K
    slope: float  # K/s
    modes: _Modes
    q0: np.ndarray


class _Solution:
    """The exact-in-time solution for one body: evaluates the node temperatures at any time."""

    def __init__(self, pieces: list[_Piece]):
        self.pieces = pieces
        self.starts = np.array([p.start for p in pieces])

    def field(self, time) -> np.ndarray:
        """Node temperatures [K] at ``time`` [s], shape (len(time), n_nodes); a plunge time gives after."""
        t = np.atleast_1d(np.asarray(time, dtype=float))
        which = np.clip(np.searchsorted(self.starts, t, side="right") - 1, 0, len(self.pieces) - 1)
        out = np.empty((t.size, self.pieces[0].modes.conductance.size))
        for k in np.unique(which):
            p = self.pieces[k]
            sel = which == k
            q = _advance(p.modes, p.q0, p.bath_start, p.slope, t[sel] - p.start)
            out[sel] = p.modes.project(q)
        return out

    def heat_flow(self, time, field: np.ndarray) -> np.ndarray:
        """Heat flow into the body [W] (its symmetric part) at ``time`` given the node ``field``."""
        t = np.atleast_1d(np.asarray(time, dtype=float))
        which = np.clip(np.searchsorted(self.starts, t, side="right") - 1, 0, len(self.pieces) - 1)
        out = np.empty(t.size)
        for k in np.unique(which):
            p = self.pieces[k]
            sel = which == k
            bath = p.bath_start + p.slope * (t[sel] - p.start)
            out[sel] = (bath[:, None] - field[sel]) @ p.modes.conductance
        return out


# --------------------------------------------------------------------------------- the history


@dataclass
class ThermalHistory(Result):
    """What the sample lived through: temperatures of every point at every output time.

    ``time`` [s] (n,), ``bath_temperature`` [K] (n,), ``h`` [W/(m2 K)] in effect at each time (n,),
    ``temperature`` [K] (n, points) the temperature of every grid point (the centre and surface points
    included), ``points`` (points, 2) their coordinates (r or x, z) [m], ``weights`` (points,) their share
    of the sample volume, ``centre`` / ``surface`` the indices of the centre and the reported surface
    point, ``heat_flow`` [W] into the whole sample and ``energy`` [J] stored since the start. At a plunge
    time the values are those just after the plunge (the heat flow jumps there).
    """

    time: np.ndarray = field(default_factory=lambda: np.zeros(0))
    bath_temperature: np.ndarray = field(default_factory=lambda: np.zeros(0))
    h: np.ndarray = field(default_factory=lambda: np.zeros(0))
    temperature: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    points: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))
    weights: np.ndarray = field(default_factory=lambda: np.zeros(0))
    centre: int = 0
    surface: int = 0
    heat_flow: np.ndarray = field(default_factory=lambda: np.zeros(0))
    energy: np.ndarray = field(default_factory=lambda: np.zeros(0))
    _solution: _Solution | None = None

    @property
    def centre_temperature(self) -> np.ndarray:
        """[K] (n,)"""
        return self.temperature[:, self.centre]

    @property
    def surface_temperature(self) -> np.ndarray:
        """[K] (n,)"""
        return self.temperature[:, self.surface]

    @property
    def coldest_temperature(self) -> np.ndarray:
        """Coldest point of the sample at each time [K] (n,)."""
        return self.temperature.min(axis=1)

    @property
    def warmest_temperature(self) -> np.ndarray:
        """Warmest point of the sample at each time [K] (n,)."""
        return self.temperature.max(axis=1)

    @property
    def mean_temperature(self) -> np.ndarray:
        """Volume-mean temperature [K] (n,)."""
        return self.temperature @ self.weights

    def field_at(self, time) -> np.ndarray:
        """Temperatures of every point [K] at any ``time`` [s] (exact in time): (len(time), points)."""
        return self._solution.field(time)


def _pieces_of(bath_time: np.ndarray, bath_temperature: np.ndarray, h: np.ndarray):
    """Merge a sampled piecewise-linear bath into linear pieces of constant h: (start, end, T0, slope, h).

    Zero-length intervals (a plunge: two temperatures at one time) end a piece and start the next.
    """
    dt = np.diff(bath_time)
    valid = dt > 0
    slope = np.divide(np.diff(bath_temperature), dt, out=np.zeros_like(dt), where=valid)
    hi = h[:-1]
    new = np.ones(dt.size, dtype=bool)
    same_slope = np.abs(slope[1:] - slope[:-1]) <= 1e-12 + 1e-9 * np.abs(slope[:-1])
    new[1:] = ~(valid[:-1] & same_slope & (hi[1:] == hi[:-1]))
    new &= valid
    starts = np.nonzero(new)[0]
    out = []
    for k, i in enumerate(starts):
        # the piece runs over valid intervals from i until the next start or the next zero-length interval
        stop = starts[k + 1] if k + 1 < starts.size else dt.size
        invalid = np.nonzero(~valid[i:stop])[0]
        last = i + (invalid[0] if invalid.size else stop - i)  # one past the piece's last interval
        out.append((bath_time[i], bath_time[last], bath_temperature[i], slope[i], hi[i]))
    return out


def solve(
    body: Body,
    material: Material,
    bath_time,
    bath_temperature,
    h,
    output_time=None,
    initial_temperature: float | None = None,
    model: str = "conduction",
    cells: int = 16,
) -> ThermalHistory:
    """Temperatures inside the sample under a piecewise-linear bath history.

    Parameters
    ----------
    body : Body
        Shape and size of the sample.
    material : Material
        Thermal properties of the sample (held constant).
    bath_time : array_like
        Times [s] of the bath history's knots, non-decreasing; a repeated time is a step change (plunge).
    bath_temperature : array_like
        Bath temperature [K] at each knot; linear in between.
    h : float or array_like
        Surface coefficient [W/(m2 K)]: one value, or one per knot (the value holds from that knot to the
        next).
    output_time : array_like, optional
        Times [s] at which to report (default: the knots). Within ``[bath_time[0], bath_time[-1]]``.
    initial_temperature : float, optional
        Uniform starting temperature [K]; default the bath's first temperature (sample equilibrated).
    model : {"conduction", "lumped"}
        ``lumped``: one temperature (valid for Bi < 0.1); ``conduction``: the finite-volume body.
    cells : int
        Cells from centre to surface along the shorter direction (conduction only), 2 to 200; a cylinder's
        longer direction gets cells of that size at its surface, growing by 10 % per cell inwards.

    Returns
    -------
    ThermalHistory

    Notes
    -----
    Conduction: rho c dT/dt = div(k grad T) with -k dT/dn = h (T - T_bath) on the exposed surface;
    lumped: rho c V dT/dt = h A (T_bath - T) (Incropera & DeWitt eqs. 5.2 and 2.17)
    [ref:incropera-dewitt]. Exact time integration of the semi-discrete system (see module notes). The
    liquid is treated as a solid conductor: natural convection inside a liquid sample speeds it up, so the
    lag is, if anything, overstated. No phase change: the history is that of the unfrozen sample.

    References
    ----------
    [ref:incropera-dewitt], [ref:carslaw-jaeger-1959]
    """
    bath_time = np.asarray(bath_time, dtype=float)
    bath_temperature = np.asarray(bath_temperature, dtype=float)
    if bath_time.ndim != 1 or bath_time.shape != bath_temperature.shape or bath_time.size < 2:
        raise InputError("bath_time", bath_time.shape, "one-dimensional, at least two knots, as many as temperatures")
    if np.any(np.diff(bath_time) < 0) or not np.all(np.isfinite(bath_time)):
        raise InputError("bath_time", bath_time.tolist()[:5], "finite, non-decreasing times [s]")
    if not np.all(np.isfinite(bath_temperature)) or np.any(bath_temperature <= 0):
        raise InputError("bath_temperature", bath_temperature.tolist()[:5], "finite temperatures above 0 K")
    try:
        h = np.broadcast_to(np.asarray(h, dtype=float), bath_time.shape).copy()
    except (TypeError, ValueError):
        raise InputError("h", h, f"a number or one per knot, {H_RANGE.describe()}") from None
    for value in np.unique(h):
        check_heat_transfer_coefficient(value, "h")
    if model not in ("conduction", "lumped"):
        raise choice_error("model", model, ("conduction", "lumped"))
    if not (isinstance(cells, (int, np.integer)) and 2 <= cells <= 200):
        raise InputError("cells", cells, "a whole number, 2 to 200")
    out_t = bath_time.copy() if output_time is None else np.asarray(output_time, dtype=float)
    if out_t.ndim != 1 or np.any(np.diff(out_t) < 0):
        raise InputError("output_time", out_t.shape, "a non-decreasing one-dimensional array of times [s]")
    if out_t.size and (out_t[0] < bath_time[0] - 1e-9 or out_t[-1] > bath_time[-1] + 1e-9):
        raise InputError("output_time", [float(out_t[0]), float(out_t[-1])],
                         f"within the bath history, {bath_time[0]:g} to {bath_time[-1]:g} s")

    grid = _lumped_grid(body) if model == "lumped" else _grid(body, cells)
    capacity = material.volumetric_heat_capacity * grid.volume
    weights = grid.volume / grid.volume.sum()
    scale = body.volume / grid.volume.sum()  # the grid holds one symmetric part of the body

    cache: dict[float, _Modes] = {}
    pieces: list[_Piece] = []
    start_temp = bath_temperature[0] if initial_temperature is None else float(initial_temperature)
    temps = np.full(capacity.size, start_temp)
    for t0, t1, y0, slope, hv in _pieces_of(bath_time, bath_temperature, h):
        if hv not in cache:
            cache[hv] = _modes(grid, material, hv)
        modes = cache[hv]
        q0 = modes.amplitudes(temps)
        pieces.append(_Piece(t0, t1, y0, slope, modes, q0))
        temps = modes.project(_advance(modes, q0, y0, slope, np.array([t1 - t0])))[0]
    if not pieces:
        raise InputError("bath_time", bath_time.tolist()[:5], "a history that lasts longer than zero seconds")
    solution = _Solution(pieces)
    fld = solution.field(out_t)
    heat = solution.heat_flow(out_t, fld) * scale
    energy = (fld - start_temp) @ capacity * scale
    piece_idx = np.clip(np.searchsorted(solution.starts, out_t, side="right") - 1, 0, len(pieces) - 1)
    bath_out = (np.array([pieces[k].bath_start for k in piece_idx])
                + np.array([pieces[k].slope for k in piece_idx]) * (out_t - solution.starts[piece_idx]))
    h_idx = np.clip(np.searchsorted(bath_time, out_t, side="right") - 1, 0, len(h) - 1)
    flags = list(material.flags)
    return ThermalHistory(
        model=model,
        source="incropera-dewitt",
        parameters={
            "geometry": body.geometry,
            "conductivity_w_per_m_k": material.conductivity,
            "density_kg_per_m3": material.density,
            "specific_heat_j_per_kg_k": material.specific_heat,
            "property_temperature_k": material.temperature,
            "cells": cells if model == "conduction" else 1,
        },
        flags=flags,
        time=out_t,
        bath_temperature=bath_out,
        h=h[h_idx],
        temperature=fld,
        points=grid.points,
        weights=weights,
        centre=grid.centre,
        surface=grid.surface,
        heat_flow=heat,
        energy=energy,
        _solution=solution,
    )


# ------------------------------------------------------------------------------- reading it


def time_to_within(history: ThermalHistory, start: float, end: float, target: float,
                   tolerance: float = 0.5) -> float | None:
    """Time [s] from ``start`` until every point is and stays within ``tolerance`` [K] of ``target`` [K].

    Meant for a hold (bath constant at ``target`` from ``start`` to ``end`` [s]): with the bath constant,
    the largest deviation over the body never grows (maximum principle of the heat equation, kept by the
    exact time integration), so the first time it falls to the tolerance is found by Brent's method to
    0.1 ms and then stepped past, so the point returned is within the tolerance. Returns ``None`` when the
    sample is not within the tolerance by ``end``.
    """
    if end < start:
        raise InputError("end", end, f"at or after start ({start:g} s)")

    def deviation(t: float) -> float:
        return float(np.max(np.abs(history.field_at([t])[0] - target)))

    t_start = np.nextafter(start, np.inf)
    if deviation(t_start) <= tolerance:
        return 0.0
    if deviation(end) > tolerance:
        return None
    from scipy.optimize import brentq

    # a smooth decay: Brent's method needs ~10 evaluations where halving to 1 ms over a day needs ~27
    found = brentq(lambda t: deviation(t) - tolerance, t_start, end, xtol=1e-4)
    while found < end and deviation(found) > tolerance:  # the root may sit a hair before the crossing
        found = min(end, found + 1e-4)
    return found - start


def max_lag(history: ThermalHistory, start: float, end: float) -> float:
    """Largest |T - T_bath| [K] over the body and over output times in ``[start, end]`` [s]."""
    sel = (history.time >= start) & (history.time <= end)
    if not np.any(sel):
        return 0.0
    return float(np.max(np.abs(history.temperature[sel] - history.bath_temperature[sel, None])))


@dataclass
class BandRate(Result):
    """Mean rates through a temperature band at the sample's slowest point.

    ``cooling_rate`` / ``warming_rate`` [K/s] (positive numbers): the band's width divided by the time
    the slowest point took to cross it, over every crossing in the history; ``None`` when some point of
    the sample never crossed the band that way. ``cooling_points_crossed`` / ``warming_points_crossed``:
    the share of points that did.
    """

    upper: float = 0.0
    lower: float = 0.0
    cooling_rate: float | None = None
    warming_rate: float | None = None
    cooling_time: float | None = None
    warming_time: float | None = None
    cooling_points_crossed: float = 0.0
    warming_points_crossed: float = 0.0


def _crossings(t: np.ndarray, y: np.ndarray, level: float, downward: bool) -> np.ndarray:
    """Interpolated times at which y crosses ``level`` going down (or up)."""
    if downward:
        idx = np.nonzero((y[:-1] > level) & (y[1:] <= level))[0]
    else:
        idx = np.nonzero((y[:-1] < level) & (y[1:] >= level))[0]
    y0, y1, t0, t1 = y[idx], y[idx + 1], t[idx], t[idx + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(y1 != y0, (level - y0) / (y1 - y0), 0.0)
    return t0 + frac * (t1 - t0)


def _slowest_pass(t: np.ndarray, y: np.ndarray, first: float, second: float, downward: bool) -> float | None:
    """Longest time [s] from the last crossing of ``first`` before each crossing of ``second``."""
    enter = _crossings(t, y, first, downward)
    leave = _crossings(t, y, second, downward)
    longest = None
    for t_leave in leave:
        before = enter[enter <= t_leave]
        if before.size:
            dt = t_leave - before[-1]
            longest = dt if longest is None else max(longest, dt)
    return longest


def cooling_rate_through(history: ThermalHistory, upper: float, lower: float) -> BandRate:
    """The slowest point's mean cooling and warming rate through the band ``lower``..``upper`` [K].

    Parameters
    ----------
    history : ThermalHistory
        A solved history (see :func:`solve`); its output times set the resolution of the crossing times
        (linear interpolation between them).
    upper, lower : float
        Band limits [K], ``lower < upper`` (for vitrification: about the liquidus or -60 C down to the
        glass transition).

    Returns
    -------
    BandRate
        Cooling: for each point, each time it falls through ``lower``, the time since it last fell through
        ``upper``; warming the other way round. The rate is (upper - lower) / the longest such time over
        all points. A point that never completes a crossing makes the rate ``None`` (the sample as a whole
        did not pass through the band).
    """
    upper, lower = float(upper), float(lower)
    if not lower < upper:
        raise InputError("lower", lower, f"below upper ({upper:g} K)")
    t = history.time
    n_points = history.temperature.shape[1]
    slow = {True: [], False: []}
    for p in range(n_points):
        y = history.temperature[:, p]
        slow[True].append(_slowest_pass(t, y, upper, lower, downward=True))
        slow[False].append(_slowest_pass(t, y, lower, upper, downward=False))
    width = upper - lower
    result = {}
    for downward, name in ((True, "cooling"), (False, "warming")):
        times = slow[downward]
        crossed = [d for d in times if d is not None]
        share = len(crossed) / n_points
        longest = max(crossed) if crossed and share == 1.0 else None
        rate = (width / longest if longest and longest > 0 else (np.inf if longest == 0 else None))
        result[name] = (rate, longest, share)
    flags = []
    for name in ("cooling", "warming"):
        if result[name][0] is None and result[name][2] > 0:
            flags.append(Flag("missing-data",
                              f"only {result[name][2]:.0%} of the sample's points went through the band "
                              f"{lower - 273.15:.1f} to {upper - 273.15:.1f} C ({name})"))
    return BandRate(
        model=history.model,
        source="incropera-dewitt",
        parameters={"upper_k": upper, "lower_k": lower},
        flags=flags,
        upper=upper,
        lower=lower,
        cooling_rate=result["cooling"][0],
        warming_rate=result["warming"][0],
        cooling_time=result["cooling"][1],
        warming_time=result["warming"][1],
        cooling_points_crossed=result["cooling"][2],
        warming_points_crossed=result["warming"][2],
    )


def refined_times(knots, max_step: float = 60.0, max_points_per_span: int = 600, start_steps: int = 60,
                  first_step: float = 0.01) -> np.ndarray:
    """Output times [s] for a history whose bath changes course at ``knots`` [s].

    Between two knots: evenly spaced at ``max_step`` [s], or coarser so that a long hold gets at most
    ``max_points_per_span`` of them, plus ``start_steps`` geometric steps from ``first_step`` [s] after the
    knot (after a plunge or at the start of a hold the sample changes fastest). Every knot is included.
    """
    knots = np.unique(np.asarray(knots, dtype=float))
    if not max_step > 0:
        raise InputError("max_step", max_step, "a time above 0 s")
    parts = [knots]
    for a, b in zip(knots[:-1], knots[1:], strict=True):
        span = b - a
        n = int(np.ceil(span / max(max_step, span / max_points_per_span)))
        if n > 1:
            parts.append(a + span * np.arange(1, n) / n)
        if span > first_step:
            parts.append(a + np.geomspace(first_step, span, start_steps)[:-1])
    return np.unique(np.concatenate(parts))


def check_output_within_model(history: ThermalHistory) -> None:
    """Refuse a history with non-finite temperatures (a numerical failure must never pass as a result)."""
    if not np.all(np.isfinite(history.temperature)):
        raise ModelRangeError("temperature", "non-finite", "finite temperatures", "conduction model")
