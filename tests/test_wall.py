"""Thick-walled chamber: Lamé stresses, cavity compliance, safety factor, required wall, materials."""

import numpy as np
import pytest

from planner import wall
from planner.errors import InputError
from planner.references import bibliography


def test_hearn_example_10_1_thick_cylinder():
    # Hearn 1997, Mechanics of Materials 1, Example 10.1 [ref:hearn-1997] (problem and answers from memory):
    # a = 100 mm, b = 150 mm, internal 60 MN/m2, external 30 MN/m2, closed ends ->
    # bore hoop stress 48 MN/m2, bore radial -60 MN/m2, longitudinal -6 MN/m2
    s = wall.cylinder_stresses(60e6, 0.100, 0.150, outer_pressure=30e6)
    assert s.hoop == pytest.approx(48e6, abs=0.5e6)
    assert s.radial == pytest.approx(-60e6, abs=0.5e6)
    assert s.axial == pytest.approx(-6e6, abs=0.5e6)


def test_cylinder_closed_forms_and_thin_wall_limit():
    # Lamé [ref:lame-timoshenko]: bore hoop p(b2+a2)/(b2-a2); thin-wall limit p a / t (Barlow, common practice,
    # no source)
    a, t = 0.5, 0.001
    s = wall.cylinder_stresses(1e6, a, a + t)
    assert s.hoop == pytest.approx(1e6 * a / t, rel=2e-3)
    s = wall.cylinder_stresses(10e6, 0.01, 0.03)
    assert s.hoop == pytest.approx(10e6 * (9 + 1) / (9 - 1))
    assert s.von_mises == pytest.approx(np.sqrt(3) * 10e6 * 9 / 8)


def test_sphere_thin_wall_limit():
    # thin sphere: hoop stress p d / (4 t) (Hearn 1997 chapter 9, from memory [ref:hearn-1997])
    a, t = 0.5, 0.001
    s = wall.sphere_stresses(1e6, a, a + t)
    assert s.hoop == pytest.approx(1e6 * 2 * a / (4 * t), rel=3e-3)


def test_thin_cylinder_volumetric_strain():
    # thin closed cylinder: dV/V = p d (5 - 4 nu)/(4 t E) (Hearn 1997 chapter 9, from memory [ref:hearn-1997])
    a, t, e, nu = 0.5, 0.0005, 200e9, 0.3
    beta = wall.cylinder_compliance(a, a + t, e, nu)
    assert beta == pytest.approx(2 * a * (5 - 4 * nu) / (4 * t * e), rel=2e-3)


def test_thin_sphere_volumetric_strain():
    # thin sphere: dV/V = 3 p d (1 - nu)/(4 t E) (Hearn 1997 chapter 9, from memory [ref:hearn-1997])
    a, t, e, nu = 0.5, 0.0005, 200e9, 0.3
    beta = wall.sphere_compliance(a, a + t, e, nu)
    assert beta == pytest.approx(3 * 2 * a * (1 - nu) / (4 * t * e), rel=2e-3)


@pytest.mark.parametrize(("a", "b", "e", "nu"), [(0.01, 0.03, 193e9, 0.27), (0.02, 0.025, 71e9, 0.33), (0.005, 0.05, 110e9, 0.31)])
def test_cylinder_compliance_is_the_derivative_of_the_bore_displacement(a, b, e, nu):
    # compliance formula vs a numerical derivative of the cavity volume pi (a + u_a)^2 L (1 + eps_z)
    def volume(p):
        u, ez = wall.cylinder_bore_displacement(p, a, b, e, nu)
        return np.pi * (a + u) ** 2 * (1 + ez)

    dp = 1e5
    numerical = (volume(dp) - volume(-dp)) / (2 * dp) / volume(0.0)
    assert wall.cylinder_compliance(a, b, e, nu) == pytest.approx(numerical, rel=1e-6)


def test_sphere_compliance_is_the_derivative_of_the_bore_displacement():
    # bore displacement of the sphere from Hooke's law on the Lamé stresses, then (4/3) pi (a + u)^3
    a, b, e, nu = 0.01, 0.02, 193e9, 0.27

    def volume(p):
        s = wall.sphere_stresses(p, a, b)
        u = a * ((1 - nu) * s.hoop - nu * s.radial) / e
        return (a + u) ** 3

    dp = 1e5
    numerical = (volume(dp) - volume(-dp)) / (2 * dp) / volume(0.0)
    assert wall.sphere_compliance(a, b, e, nu) == pytest.approx(numerical, rel=1e-6)


def test_stresses_against_a_numerical_solution_of_the_navier_equation():
    # independent of the closed form: solve d/dr(1/r d(r u)/dr) = 0 for u(r) with sigma_r(a) = -p,
    # sigma_r(b) = 0 (plane strain plus uniform axial strain from the closed ends) by scipy.solve_bvp
    from scipy.integrate import solve_bvp

    a, b, p, e, nu = 0.01, 0.025, 100e6, 193e9, 0.27
    lam, mu = e * nu / ((1 + nu) * (1 - 2 * nu)), e / (2 * (1 + nu))
    ez = float(wall.cylinder_bore_displacement(p, a, b, e, nu)[1])  # axial strain (end load / area)

    def sigma_r(r, u, du):
        return (lam + 2 * mu) * du + lam * u / r + lam * ez

    def fun(r, y):
        return np.vstack([y[1], -y[1] / r + y[0] / r**2])

    def bc(ya, yb):
        return np.array([sigma_r(a, ya[0], ya[1]) + p, sigma_r(b, yb[0], yb[1])])

    r = np.linspace(a, b, 50)
    sol = solve_bvp(fun, bc, r, np.zeros((2, r.size)), tol=1e-10)
    u, du = sol.sol(a)
    hoop = lam * du + (lam + 2 * mu) * u / a + lam * ez
    axial = lam * (du + u / a) + (lam + 2 * mu) * ez
    s = wall.cylinder_stresses(p, a, b)
    assert hoop == pytest.approx(s.hoop, rel=1e-6)
    assert axial == pytest.approx(s.axial, rel=1e-6)


@pytest.mark.parametrize("shape", ["cylinder", "sphere"])
def test_required_outer_radius_reaches_the_target_factor(shape):
    a, p, y, n = 0.01, 150e6, 724e6, 2.0
    b = wall.required_outer_radius(shape, p, a, y, n)
    vm = wall.bore_stresses(shape, p, a, b).von_mises
    assert wall.safety_factor(y, vm) == pytest.approx(n, rel=1e-9)
    assert wall.required_outer_radius(shape, p, a, y, n * 1.1) > b


def test_required_outer_radius_infinite_past_the_elastic_limit():
    # bore von Mises never falls below sqrt(3) p: with 316 (205 MPa) at 208 MPa no wall reaches factor 1
    assert wall.required_outer_radius("cylinder", 208e6, 0.01, 205e6, 1.0) == np.inf
    out = wall.required_outer_radius("cylinder", np.array([10e6, 208e6]), 0.01, 205e6, 1.0)
    assert np.isfinite(out[0]) and np.isinf(out[1])


def test_scalar_and_array():
    s = wall.cylinder_stresses(np.array([1e6, 2e6]), 0.01, 0.02)
    assert s.hoop.shape == (2,) and isinstance(wall.cylinder_stresses(1e6, 0.01, 0.02).hoop, float)
    assert wall.cylinder_compliance(np.array([0.01, 0.011]), 0.02, 193e9, 0.27).shape == (2,)
    assert isinstance(wall.sphere_compliance(0.01, 0.02, 193e9, 0.27), float)
    assert wall.safety_factor(200e6, np.array([100e6, 0.0])).tolist() == [2.0, np.inf]


@pytest.mark.parametrize(("a", "b", "field"), [(0.02, 0.01, "outer_radius"), (-0.01, 0.02, "inner_radius"), (0.01, 0.01, "outer_radius")])
def test_bad_geometry_names_the_field(a, b, field):
    with pytest.raises(InputError, match=field):
        wall.cylinder_stresses(1e6, a, b)


def test_unknown_shape_and_material_name_the_field():
    with pytest.raises(InputError, match=r"container\.shape.*did you mean 'sphere'"):
        wall.bore_stresses("spere", 1e6, 0.01, 0.02)
    with pytest.raises(InputError, match=r"container\.material.*did you mean 'stainless-316'"):
        wall.material("stainless-361")
    with pytest.raises(InputError, match="target_safety_factor"):
        wall.required_outer_radius("cylinder", 1e6, 0.01, 2e8, 0.0)


# --- materials data file: handbook values (from memory of the named standards) ----------------------
MATERIAL_VALUES = [
    # key, E [GPa], yield [MPa]: ASTM A240 316 annealed min 205 MPa; ASTM A564 17-4PH H1150 min 105 ksi
    # (724 MPa); ASTM B348 grade 5 min 828 MPa; MMPDS 7075-T6 ~73 ksi (503 MPa); moduli from MMPDS /
    # supplier data (all from memory)
    ("stainless-316", 193.0, 205.0),
    ("stainless-17-4ph-h1150", 196.5, 724.0),
    ("titanium-6al-4v", 110.0, 828.0),
    ("aluminium-7075-t6", 71.0, 503.0),
]


@pytest.mark.parametrize(("key", "modulus_gpa", "yield_mpa"), MATERIAL_VALUES)
def test_materials_file(key, modulus_gpa, yield_mpa):
    m = wall.material(key)
    assert m.elastic_modulus == pytest.approx(modulus_gpa * 1e9)
    assert m.yield_strength == pytest.approx(yield_mpa * 1e6)
    assert 0.2 < m.poisson_ratio < 0.4
    assert m.source in bibliography()
    assert m.yield_basis


def test_chamber_body_geometry_by_hand():
    # geometry (no source needed beyond the volume and area of a cylinder and a sphere, common practice)
    # cylinder: a = 12.5 mm, b = 27.5 mm, 20 mL: body length 40.74 + 30 = 70.74 mm (ends as thick as the side)
    v, area = wall.chamber_body("cylinder", 0.0125, 0.0275, 20e-6)
    assert v == pytest.approx(148.07e-6, rel=1e-3)
    assert area == pytest.approx(169.75e-4, rel=1e-3)
    # sphere: 4/3 pi (b^3 - a^3), 4 pi b^2 with a = 10 mm, b = 20 mm
    v, area = wall.chamber_body("sphere", 0.010, 0.020, 4.18879e-6)
    assert v == pytest.approx(29.3215e-6, rel=1e-5)
    assert area == pytest.approx(50.2655e-4, rel=1e-5)
    with pytest.raises(InputError, match="container.outer_diameter_mm"):
        wall.chamber_body("cylinder", 0.02, 0.01, 20e-6)


def test_materials_carry_heat_capacity_data():
    for m in wall.materials().values():
        assert m.density and 2000 < m.density < 9000 and m.specific_heat and 400 < m.specific_heat < 1000
        assert m.thermal_source == "incropera-dewitt"
