"""The chamber wall: thick-walled cylinder (closed ends) and thick sphere under internal pressure, by Lamé.

Linear elastic, small strain, homogeneous isotropic material, ends far from the section considered
(closed-end axial stress carried by the wall). Stresses are at the bore, where they are largest. The
numbers support, and never replace, a vessel design by a qualified engineer to a pressure-equipment code
[ref:asme-bpvc-viii]: no stress concentration at ports, threads or closures, no fatigue, no fracture
toughness at low temperature is included here.

Materials come from planner/data/materials.yaml, each with its source.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

import numpy as np
from numpy.typing import ArrayLike

from planner.errors import InputError, did_you_mean
from planner.yamlio import load_yaml

SHAPES = ("cylinder", "sphere")


@dataclass(frozen=True)
class Material:
    """A wall material in SI units: elastic modulus [Pa], Poisson ratio [-], yield strength [Pa]."""

    key: str
    name: str
    elastic_modulus: float
    poisson_ratio: float
    yield_strength: float
    yield_basis: str
    source: str
    note: str = ""
    density: float | None = None  # kg/m3
    specific_heat: float | None = None  # J/(kg K)
    thermal_source: str | None = None


@lru_cache(maxsize=1)
def materials() -> dict[str, Material]:
    """All wall materials of planner/data/materials.yaml, keyed by the word a protocol uses."""
    text = resources.files("planner").joinpath("data/materials.yaml").read_text(encoding="utf-8")
    raw = load_yaml(text, "materials.yaml")
    out = {}
    for key, e in raw.items():
        out[key] = Material(
            key,
            e["name"],
            float(e["elastic_modulus_gpa"]) * 1e9,
            float(e["poisson_ratio"]),
            float(e["yield_strength_mpa"]) * 1e6,
            e["yield_basis"],
            e["source"],
            e.get("note", ""),
            None if e.get("density_kg_per_m3") is None else float(e["density_kg_per_m3"]),
            None if e.get("specific_heat_j_per_kg_k") is None else float(e["specific_heat_j_per_kg_k"]),
            e.get("thermal_source"),
        )
    return out


def material(key: str, field: str = "container.material") -> Material:
    """The material named ``key``; an unknown key is an :class:`InputError` naming ``field``."""
    table = materials()
    if key not in table:
        raise InputError(field, key, "one of: " + ", ".join(table), did_you_mean(key, table))
    return table[key]


def _radii(inner_radius: ArrayLike, outer_radius: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    a, b = np.broadcast_arrays(np.asarray(inner_radius, dtype=float), np.asarray(outer_radius, dtype=float))
    if np.any(~np.isfinite(a)) or np.any(a <= 0):
        raise InputError("inner_radius", a.tolist() if a.ndim else float(a), "a positive length in m")
    if np.any(~np.isfinite(b)) or np.any(b <= a):
        raise InputError("outer_radius", b.tolist() if b.ndim else float(b), "larger than the inner radius")
    return a, b


def _out(x: np.ndarray):
    x = np.asarray(x, dtype=float)
    return x[()] if x.ndim == 0 else x


@dataclass(frozen=True)
class BoreStress:
    """Principal stresses at the bore and their von Mises equivalent [Pa] (tension positive)."""

    hoop: np.ndarray | float
    radial: np.ndarray | float
    axial: np.ndarray | float
    von_mises: np.ndarray | float


def cylinder_stresses(
    pressure: ArrayLike, inner_radius: ArrayLike, outer_radius: ArrayLike, outer_pressure: ArrayLike = 0.0
) -> BoreStress:
    """Lamé stresses at the bore of a thick-walled cylinder with closed ends.

    Parameters
    ----------
    pressure : array_like
        Internal (gauge) pressure p_i [Pa].
    inner_radius : array_like
        Bore radius a [m].
    outer_radius : array_like
        Outer radius b [m], larger than a.
    outer_pressure : array_like
        External pressure p_o [Pa], 0 for a chamber in air.

    Returns
    -------
    BoreStress
        Hoop, radial, axial and von Mises stress at r = a [Pa].

    Notes
    -----
    sigma_r = A - B/r^2, sigma_theta = A + B/r^2 with A = (p_i a^2 - p_o b^2)/(b^2 - a^2),
    B = (p_i - p_o) a^2 b^2/(b^2 - a^2); closed ends: sigma_z = A. With p_o = 0 the bore hoop stress is
    p (b^2 + a^2)/(b^2 - a^2) and the von Mises stress sqrt(3) p b^2/(b^2 - a^2).

    References
    ----------
    [ref:lame-timoshenko], [ref:hearn-1997]
    """
    a, b = _radii(inner_radius, outer_radius)
    p = np.asarray(pressure, dtype=float)
    po = np.asarray(outer_pressure, dtype=float)
    big_a = (p * a**2 - po * b**2) / (b**2 - a**2)
    big_b = (p - po) * a**2 * b**2 / (b**2 - a**2)
    hoop = big_a + big_b / a**2
    radial = big_a - big_b / a**2
    axial = big_a + 0.0 * radial
    return BoreStress(_out(hoop), _out(radial), _out(axial), _out(_von_mises(hoop, radial, axial)))


def sphere_stresses(pressure: ArrayLike, inner_radius: ArrayLike, outer_radius: ArrayLike) -> BoreStress:
    """Lamé stresses at the bore of a thick-walled sphere under internal pressure.

    Parameters
    ----------
    pressure : array_like
        Internal (gauge) pressure [Pa].
    inner_radius : array_like
        Bore radius a [m].
    outer_radius : array_like
        Outer radius b [m].

    Returns
    -------
    BoreStress
        Hoop (= meridional, reported as ``axial``), radial and von Mises stress at r = a [Pa].

    Notes
    -----
    sigma_r = A - B/r^3, sigma_theta = A + B/(2 r^3), A = p a^3/(b^3 - a^3), B = p a^3 b^3/(b^3 - a^3);
    at the bore sigma_theta = p (b^3 + 2 a^3)/(2 (b^3 - a^3)), von Mises 3 p b^3/(2 (b^3 - a^3)).

    References
    ----------
    [ref:lame-timoshenko]
    """
    a, b = _radii(inner_radius, outer_radius)
    p = np.asarray(pressure, dtype=float)
    hoop = p * (b**3 + 2 * a**3) / (2 * (b**3 - a**3))
    radial = -p + 0.0 * hoop
    return BoreStress(_out(hoop), _out(radial), _out(hoop), _out(_von_mises(hoop, radial, hoop)))


def _von_mises(s1, s2, s3):
    return np.sqrt(((s1 - s2) ** 2 + (s2 - s3) ** 2 + (s3 - s1) ** 2) / 2)


def bore_stresses(shape: str, pressure: ArrayLike, inner_radius: ArrayLike, outer_radius: ArrayLike) -> BoreStress:
    """Bore stresses of a ``cylinder`` (closed ends) or a ``sphere``; see those functions."""
    if shape == "cylinder":
        return cylinder_stresses(pressure, inner_radius, outer_radius)
    if shape == "sphere":
        return sphere_stresses(pressure, inner_radius, outer_radius)
    raise InputError("container.shape", shape, "one of: " + ", ".join(SHAPES), did_you_mean(shape, SHAPES))


def cylinder_bore_displacement(
    pressure: ArrayLike, inner_radius: ArrayLike, outer_radius: ArrayLike, elastic_modulus: float, poisson_ratio: float
) -> tuple[np.ndarray | float, np.ndarray | float]:
    """Radial displacement of the bore [m] and axial strain [-] of a closed-end cylinder under pressure.

    Parameters
    ----------
    pressure : array_like
        Internal pressure [Pa].
    inner_radius, outer_radius : array_like
        Radii a, b [m].
    elastic_modulus : float
        Young's modulus E [Pa].
    poisson_ratio : float
        Poisson ratio nu [-].

    Notes
    -----
    Hooke's law with the Lamé stresses at r = a: u_a = a (sigma_theta - nu (sigma_r + sigma_z))/E,
    epsilon_z = (sigma_z - nu (sigma_r + sigma_theta))/E.

    References
    ----------
    [ref:lame-timoshenko]
    """
    a, _ = _radii(inner_radius, outer_radius)
    s = cylinder_stresses(pressure, inner_radius, outer_radius)
    e, nu = elastic_modulus, poisson_ratio
    u = a * (s.hoop - nu * (s.radial + s.axial)) / e
    ez = (s.axial - nu * (s.radial + s.hoop)) / e
    return _out(u), _out(ez)


def cylinder_compliance(inner_radius: ArrayLike, outer_radius: ArrayLike, elastic_modulus: float, poisson_ratio: float):
    """Cavity compliance of a closed-end thick cylinder, (1/V) dV/dp [1/Pa].

    Parameters
    ----------
    inner_radius, outer_radius : array_like
        Radii a, b [m].
    elastic_modulus : float
        Young's modulus E [Pa].
    poisson_ratio : float
        Poisson ratio nu [-].

    Notes
    -----
    beta = 2 u_a/(a p) + epsilon_z/p = [3 (1 - 2 nu) a^2 + 2 (1 + nu) b^2]/[E (b^2 - a^2)]: the bore grows
    radially and the cavity lengthens with the wall's axial strain (the end closures taken as rigid
    plugs moving with the wall).

    References
    ----------
    [ref:lame-timoshenko]
    """
    a, b = _radii(inner_radius, outer_radius)
    nu = poisson_ratio
    return _out((3 * (1 - 2 * nu) * a**2 + 2 * (1 + nu) * b**2) / (elastic_modulus * (b**2 - a**2)))


def sphere_compliance(inner_radius: ArrayLike, outer_radius: ArrayLike, elastic_modulus: float, poisson_ratio: float):
    """Cavity compliance of a thick sphere, (1/V) dV/dp = 3 u_a/(a p) [1/Pa].

    Parameters
    ----------
    inner_radius, outer_radius : array_like
        Radii a, b [m].
    elastic_modulus : float
        Young's modulus E [Pa].
    poisson_ratio : float
        Poisson ratio nu [-].

    Notes
    -----
    beta = 3 [2 (1 - 2 nu) a^3 + (1 + nu) b^3]/[2 E (b^3 - a^3)].

    References
    ----------
    [ref:lame-timoshenko]
    """
    a, b = _radii(inner_radius, outer_radius)
    nu = poisson_ratio
    return _out(3 * (2 * (1 - 2 * nu) * a**3 + (1 + nu) * b**3) / (2 * elastic_modulus * (b**3 - a**3)))


def cavity_compliance(shape: str, inner_radius: ArrayLike, outer_radius: ArrayLike, mat: Material):
    """Cavity compliance [1/Pa] of a ``cylinder`` or ``sphere`` of this material."""
    if shape == "cylinder":
        return cylinder_compliance(inner_radius, outer_radius, mat.elastic_modulus, mat.poisson_ratio)
    if shape == "sphere":
        return sphere_compliance(inner_radius, outer_radius, mat.elastic_modulus, mat.poisson_ratio)
    raise InputError("container.shape", shape, "one of: " + ", ".join(SHAPES), did_you_mean(shape, SHAPES))


def safety_factor(yield_strength: float, von_mises: ArrayLike):
    """Yield strength over the bore von Mises stress [-]; infinite at zero stress.

    Parameters
    ----------
    yield_strength : float
        Yield strength [Pa].
    von_mises : array_like
        von Mises stress at the bore [Pa].
    """
    s = np.asarray(von_mises, dtype=float)
    with np.errstate(divide="ignore"):
        return _out(np.where(s > 0, yield_strength / np.where(s > 0, s, 1.0), np.inf))


def required_outer_radius(
    shape: str, pressure: ArrayLike, inner_radius: ArrayLike, yield_strength: float, target_safety_factor: float
):
    """Smallest outer radius [m] for which yield / (bore von Mises) reaches the target factor.

    Parameters
    ----------
    shape : str
        ``cylinder`` (closed ends) or ``sphere``.
    pressure : array_like
        Internal pressure [Pa].
    inner_radius : array_like
        Bore radius [m].
    yield_strength : float
        Yield strength [Pa].
    target_safety_factor : float
        Wanted factor n (> 0).

    Returns
    -------
    numpy.ndarray or float
        b [m]; ``inf`` where no wall thickness reaches the factor (elastic limit: the bore von Mises stress
        never falls below sqrt(3) p for a cylinder or 1.5 p for a sphere).

    Notes
    -----
    Cylinder: n sqrt(3) p b^2/(b^2 - a^2) = Y gives b/a = (1 - sqrt(3) n p/Y)^(-1/2); sphere:
    (b/a)^3 = 1/(1 - 1.5 n p/Y).

    References
    ----------
    [ref:lame-timoshenko]
    """
    if not np.isfinite(target_safety_factor) or target_safety_factor <= 0:
        raise InputError("target_safety_factor", target_safety_factor, "a positive number")
    p = np.asarray(pressure, dtype=float)
    a = np.asarray(inner_radius, dtype=float)
    if shape == "cylinder":
        c, power = np.sqrt(3.0), 0.5
    elif shape == "sphere":
        c, power = 1.5, 1.0 / 3.0
    else:
        raise InputError("container.shape", shape, "one of: " + ", ".join(SHAPES), did_you_mean(shape, SHAPES))
    q = 1.0 - c * target_safety_factor * p / yield_strength
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(q > 0, (1.0 / np.where(q > 0, q, 1.0)) ** power, np.inf)
    return _out(a * ratio)


def chamber_body(shape: str, inner_radius: float, outer_radius: float, cavity_volume: float) -> tuple[float, float]:
    """Volume of wall material [m3] and outer surface [m2] of a chamber, for its heat capacity and cooling.

    Parameters
    ----------
    shape : str
        ``cylinder`` or ``sphere``.
    inner_radius, outer_radius : float
        Bore radius a and outer radius b [m], a < b.
    cavity_volume : float
        Cavity volume [m3], above 0.

    Returns
    -------
    tuple of float
        (wall volume [m3], outer surface area [m2]).

    Notes
    -----
    Cylinder: the cavity is a cylinder of radius a and length L = V / (pi a^2); the body a cylinder of
    radius b and length L + 2 (b - a) - closed ends as thick as the side wall, an assumption (closures,
    threads and seals are not modelled) - so the wall volume is pi b^2 (L + 2 (b - a)) - V and the outer
    surface 2 pi b (L + 2 (b - a)) + 2 pi b^2. Sphere: 4/3 pi (b^3 - a^3) and 4 pi b^2.
    Geometry only; heat capacity = density x specific heat x wall volume [ref:incropera-dewitt].
    """
    a, b, v = float(inner_radius), float(outer_radius), float(cavity_volume)
    if not 0 < a < b:
        raise InputError("container.outer_diameter_mm", 2e3 * b, f"above the inner diameter ({2e3 * a:g} mm)")
    if not v > 0:
        raise InputError("container.cavity_ml", v * 1e6, "above 0 mL")
    if shape == "sphere":
        return 4.0 / 3.0 * math.pi * (b**3 - a**3), 4.0 * math.pi * b**2
    if shape != "cylinder":
        raise InputError("container.shape", shape, "cylinder or sphere")
    length = v / (math.pi * a**2) + 2.0 * (b - a)
    return math.pi * b**2 * length - v, 2.0 * math.pi * b * length + 2.0 * math.pi * b**2
