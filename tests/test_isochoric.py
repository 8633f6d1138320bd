"""Rigid-chamber equilibrium: pure water against `iapws`, solutions, compliance, gas, recalescence."""

import csv
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner import isochoric as iso
from planner import solution as sol
from planner import water_ice as wi
from planner.errors import InputError, ModelRangeError

DATA = Path(__file__).parent / "data" / "isochoric_pure_water.csv"
ROWS = list(csv.DictReader(DATA.open()))
COL = {k: np.array([float(r[k]) for r in ROWS]) for k in ROWS[0]}
FILL_0C = iso.make_fill(273.15)
BETA = 1.5e-11  # 1/Pa, as in tests/data/make_isochoric_reference.py


# --- pure water against iapws densities (tests/data/make_isochoric_reference.py) ---------------------
def test_pure_water_pressure_against_iapws():
    # R14-08 melting pressure via iapws [ref:iapws-python], the pressure of a pure-water chamber with ice
    s = iso.isochoric_state(COL["temperature_k"], FILL_0C)
    np.testing.assert_allclose(s.pressure, COL["pressure_pa"], rtol=2e-6)  # csv holds 7 digits


def test_pure_water_ice_fraction_against_iapws_rigid_and_compliant():
    # x from iapws G12-15 and R10-06 densities [ref:iapws-g12-15] [ref:iapws-r10-06]
    t = COL["temperature_k"]
    np.testing.assert_allclose(iso.isochoric_state(t, FILL_0C).ice_fraction_of_water, COL["ice_fraction_rigid"], atol=2e-6)
    soft = iso.make_fill(273.15, compliance=BETA)
    np.testing.assert_allclose(iso.isochoric_state(t, soft).ice_fraction_of_water, COL["ice_fraction_compliant"], atol=2e-6)


def test_pure_water_ice_fraction_against_iapws95_liquid():
    # IAPWS-95 [ref:iapws-95] as the liquid: the two liquid formulations differ by up to 5e-3 in x near -22 C
    x = iso.isochoric_state(COL["temperature_k"], FILL_0C).ice_fraction_of_water
    np.testing.assert_allclose(x, COL["ice_fraction_rigid_iapws95"], atol=5e-3)


@pytest.mark.parametrize(
    ("celsius", "pressure_mpa", "ice_fraction"),
    [(-1.0, 13.23, 0.068), (-5.0, 59.98, 0.255), (-10.0, 110.00, 0.393), (-20.0, 193.70, 0.549)],
)
def test_references_md_calc_values(celsius, pressure_mpa, ice_fraction):
    # REFERENCES.md section 2 [calc] (iapws, fill 0 C, 0.101325 MPa, beta = 0); the fractions there used
    # IAPWS-95 for the liquid, hence 5e-3 (see the test above); pressures at their published precision
    s = iso.isochoric_state(celsius + 273.15, FILL_0C)
    assert round(float(s.pressure) / 1e6, 2) == pytest.approx(pressure_mpa, abs=0.006)
    assert float(s.ice_fraction_of_water) == pytest.approx(ice_fraction, abs=5e-3)


def test_ice_volume_fraction_matches_its_definition():
    # phi = x v_i / v0 for a rigid cavity (REFERENCES.md section 2), v_i from the iapws column
    s = iso.isochoric_state(COL["temperature_k"], FILL_0C)
    np.testing.assert_allclose(s.ice_volume_fraction, COL["ice_fraction_rigid"] * COL["v_ice_m3_per_kg"] / FILL_0C.water_volume, rtol=1e-5)


def test_tables_agree_with_direct_evaluation():
    rng = np.random.default_rng(1)
    t = rng.uniform(251.0, 273.5, 300)
    p = rng.uniform(0.1e6, 209e6, 300)
    vw, vi = iso.tabulated_volumes(t, p)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        np.testing.assert_allclose(vw, wi.liquid_specific_volume(t, p), rtol=1e-8)
        np.testing.assert_allclose(vi, wi.ice_specific_volume(t, p), rtol=1e-8)


def test_trapped_gas_against_a_direct_balance():
    # with gas G0 (ideal, at the chamber temperature) x = (v0 + G0 - G0 p0 T/(p T0) - v_w)/(v_i - v_w),
    # with v_w, v_i, p from the iapws columns
    fill = iso.make_fill(273.15, gas_fraction=0.01)
    g0 = fill.gas_volume
    t, p = COL["temperature_k"], COL["pressure_pa"]
    expected = (FILL_0C.water_volume + g0 - g0 * fill.pressure * t / (p * fill.temperature) - COL["v_water_m3_per_kg"]) / (
        COL["v_ice_m3_per_kg"] - COL["v_water_m3_per_kg"])
    s = iso.isochoric_state(t, fill)
    np.testing.assert_allclose(s.ice_fraction_of_water, expected, atol=2e-6)
    assert any(f.code == "indicative" and "gas" in f.message for f in s.flags)


# --- solutions ---------------------------------------------------------------------------------------
def _saline():
    comp = sol.composition("isotonic-saline", [])
    v, m = iso.solute_volume_and_mass(comp)
    return comp, iso.liquid_from_composition(comp), iso.make_fill(277.15, solute_volume=v, solute_mass=m)


@pytest.mark.parametrize("celsius", [-2.0, -5.0, -10.0, -20.0])
def test_concentration_rise_an_order_of_magnitude_smaller_than_open(celsius):
    # Rubinsky, Perez, Carlson 2005 [ref:rubinsky-perez-carlson-2005]: solute concentration rises roughly ten
    # times less in isochoric than in isobaric freezing (qualitative, published)
    comp, liquid, fill = _saline()
    t = celsius + 273.15
    pi0 = float(sol.osmolality(comp))
    rigid = float(iso.isochoric_state(t, fill, liquid).liquid_osmolality) - pi0
    open_ = float(sol.freeze_concentration(comp, t).liquid_osmolality) - pi0
    assert rigid > 0
    assert 5.0 < open_ / rigid < 100.0


def test_open_state_agrees_with_solution_module():
    comp, liquid, _ = _saline()
    t = np.array([268.15, 263.15, 253.15])
    mine = iso.open_state(t, liquid)
    theirs = sol.freeze_concentration(comp, t)
    np.testing.assert_allclose(mine.ice_fraction_of_water, theirs.ice_fraction_of_water, atol=1e-6)
    np.testing.assert_allclose(mine.liquid_osmolality, theirs.liquid_osmolality, rtol=1e-6)


def test_dilute_solution_tends_to_pure_water():
    t = np.linspace(252.0, 272.0, 15)
    pure = iso.isochoric_state(t, FILL_0C)
    for osm, tol_p, tol_x in ((1e-3, 2e5, 2e-4), (1e-5, 2e3, 2e-6)):
        s = iso.isochoric_state(t, FILL_0C, iso.ideal_dilute_liquid(osm))
        np.testing.assert_allclose(s.pressure, pure.pressure, atol=tol_p)
        np.testing.assert_allclose(s.ice_fraction_of_water, pure.ice_fraction_of_water, atol=tol_x)


def test_solution_state_sits_on_the_liquidus_under_pressure():
    # the solved (x, p) satisfies both conditions: liquidus shifted by the pure-ice melting shift, and volume
    comp, liquid, fill = _saline()
    t = np.array([270.0, 262.0, 254.0])
    s = iso.isochoric_state(t, fill, liquid)
    tm0 = float(wi.melting_temperature(fill.pressure))
    t_eq = tm0 - iso.equivalent_depression(s.pressure, wi.melting_temperature(s.pressure) - t)
    np.testing.assert_allclose(s.liquid_osmolality, sol.osmolality_at_freezing_point(t_eq), rtol=1e-6)
    vw, vi = iso.tabulated_volumes(t, s.pressure)
    x = s.ice_fraction_of_water
    np.testing.assert_allclose(x * vi + (1 - x) * vw + fill.solute_volume, fill.cavity_volume, rtol=1e-9)
    # a solution reaches a lower pressure than pure water at the same temperature
    assert np.all(s.pressure < iso.isochoric_state(t, fill).pressure)


def test_above_the_liquidus_no_ice_and_liquid_only_pressure():
    comp, liquid, fill = _saline()
    s = iso.isochoric_state(272.9, fill, liquid)  # above -0.54 C liquidus
    assert not s.frozen and s.ice_fraction_of_water == 0.0
    # filled at 4 C, cooled to -0.25 C: water expands below 4 C, so the liquid-only pressure rises a little
    assert 0.15e6 < s.pressure < 2e6


def test_warm_fill_cooled_as_liquid_is_flagged_under_tension():
    fill = iso.make_fill(300.0)
    s = iso.isochoric_state(273.5, fill)  # above the melting point: liquid only, contracted from 27 C
    assert s.pressure == 0.0
    assert any(f.code == "refused" and "tension" in f.message for f in s.flags)


def test_below_triple_point_refused():
    with pytest.raises(ModelRangeError, match="251.165"):
        iso.isochoric_state(250.0, FILL_0C)
    with pytest.raises(ModelRangeError):
        iso.isochoric_state(np.array([260.0, 251.0]), FILL_0C)


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [({"gas_fraction": 1.2}, "gas_fraction"), ({"compliance": -1e-11}, "compliance"), ({"compliance": float("nan")}, "compliance")],
)
def test_bad_fill_names_the_field(kwargs, field):
    with pytest.raises(InputError, match=field):
        iso.make_fill(277.15, **kwargs)


def test_bad_fill_temperature_names_the_schedule_key():
    with pytest.raises(InputError, match=r"schedule\.start_c"):
        iso.make_fill(330.0)


def test_scalar_and_array():
    s = iso.isochoric_state(263.15, FILL_0C)
    assert isinstance(s.pressure, float) and isinstance(s.ice_fraction_of_water, float)
    a = iso.isochoric_state(np.array([[263.15, 260.0]]), FILL_0C)
    assert a.pressure.shape == (1, 2)
    o = iso.open_state(np.array([263.15, 260.0]), iso.ideal_dilute_liquid(0.3))
    assert o.liquid_osmolality.shape == (2,) and isinstance(iso.open_state(263.15, iso.ideal_dilute_liquid(0.3)).liquid_osmolality, float)


def test_curves_for_charts():
    comp, liquid, fill = _saline()
    c = iso.curves(fill, liquid, 253.15, n=30)
    assert c["temperature"].shape == (30,)
    assert np.all(np.diff(c["pressure"][::-1]) > 0)  # rises as temperature falls
    assert np.all(c["open_liquid_osmolality"] >= c["liquid_osmolality"] - 1e-9)


# --- recalescence ------------------------------------------------------------------------------------
def test_recalescence_open_pure_water():
    # adiabatic: x = (h_w(T_m) - h_w(T_s))/L, about 1/80 of the water per kelvin of supercooling near 0 C
    # (c_p/L = 4.2/334; REFERENCES.md section 6; common practice, no source)
    r = iso.recalescence(263.15, None)
    assert r.ice_fraction_of_water == pytest.approx(10 * 4.2 / 334, abs=0.006)
    assert r.pressure_step == 0.0
    assert r.final_temperature == pytest.approx(273.1525, abs=1e-3)


def test_recalescence_rigid_pure_water_and_solution():
    r = iso.recalescence(263.15, FILL_0C)
    assert 0.0 < r.ice_fraction_of_water < iso.recalescence(263.15, None).ice_fraction_of_water
    assert r.pressure_step > 0 and 263.15 < r.final_temperature < 273.15
    # the final state is on the isochoric equilibrium at the final temperature
    eq = iso.isochoric_state(r.final_temperature, FILL_0C)
    assert r.final_pressure == pytest.approx(float(eq.pressure), rel=1e-9)
    comp, liquid, fill = _saline()
    rs = iso.recalescence(263.15, fill, liquid)
    assert 0.0 < rs.ice_fraction_of_water < r.ice_fraction_of_water + 0.01
    assert rs.final_temperature < liquid.freezing_temperature


def test_recalescence_above_liquidus_freezes_nothing():
    r = iso.recalescence(273.5, None)
    assert r.ice_fraction_of_water == 0.0 and r.flags[0].code == "refused"


def test_recalescence_rigid_below_triple_point_refused():
    with pytest.raises(ModelRangeError, match="supercooled_temperature"):
        iso.recalescence(250.0, FILL_0C)


# --- properties (hypothesis) -------------------------------------------------------------------------
temps = st.floats(251.2, 273.1)


@settings(max_examples=40, deadline=None)
@given(t1=temps, t2=temps, osm=st.sampled_from([None, 0.3, 1.5]))
def test_pressure_and_ice_rise_as_temperature_falls(t1, t2, osm):
    lo, hi = min(t1, t2), max(t1, t2)
    if hi - lo < 1e-3:
        return
    liquid = None if osm is None else iso.ideal_dilute_liquid(osm)
    s = iso.isochoric_state(np.array([lo, hi]), FILL_0C, liquid)
    assert s.pressure[0] >= s.pressure[1]
    assert s.ice_fraction_of_water[0] >= s.ice_fraction_of_water[1]


@settings(max_examples=40, deadline=None)
@given(t=temps, beta=st.floats(1e-12, 5e-11))
def test_compliance_never_raises_pressure_and_always_raises_ice_pure_water(t, beta):
    rigid = iso.isochoric_state(t, FILL_0C)
    soft = iso.isochoric_state(t, iso.make_fill(273.15, compliance=beta))
    assert soft.pressure <= rigid.pressure
    if rigid.frozen:
        assert soft.ice_fraction_of_water > rigid.ice_fraction_of_water


@settings(max_examples=25, deadline=None)
@given(t=st.floats(251.2, 272.5), beta=st.floats(1e-12, 5e-11))
def test_compliance_lowers_pressure_of_a_solution(t, beta):
    liquid = iso.ideal_dilute_liquid(0.3)
    rigid = iso.isochoric_state(t, FILL_0C, liquid)
    soft = iso.isochoric_state(t, iso.make_fill(273.15, compliance=beta), liquid)
    assert soft.pressure <= rigid.pressure + 1.0
    assert soft.ice_fraction_of_water >= rigid.ice_fraction_of_water


def test_concentration_scale_broadcasts_like_separate_solutions():
    # a map over concentration: scale 2 of a 0.3 osmol/kg liquid is the 0.6 osmol/kg liquid with twice the
    # solute volume
    base = iso.ideal_dilute_liquid(0.3)
    fill = iso.make_fill(277.15, solute_volume=2e-5, solute_mass=0.02)
    t = np.array([[265.0], [255.0]])
    grid = iso.isochoric_state(t, fill, base, scale=np.array([1.0, 2.0]))
    assert grid.pressure.shape == (2, 2)
    twice = iso.isochoric_state(t[:, 0], iso.make_fill(277.15, solute_volume=4e-5, solute_mass=0.04),
                                iso.ideal_dilute_liquid(0.6))
    np.testing.assert_allclose(grid.pressure[:, 1], twice.pressure, rtol=1e-8)
    np.testing.assert_allclose(grid.ice_mass_fraction[:, 1], twice.ice_mass_fraction, rtol=1e-8)
    with pytest.raises(InputError, match="scale"):
        iso.isochoric_state(265.0, fill, None, scale=2.0)


def test_docstring_examples():
    import doctest

    assert doctest.testmod(iso).failed == 0


@pytest.mark.parametrize("pressure", [50e6, 100e6, 150e6, 200e6])
def test_equivalent_depression_against_ice_water_activity(pressure):
    # exact condition from IAPWS G12-15 and R10-06 Gibbs energies [ref:iapws-g12-15] [ref:iapws-r10-06]:
    # equal ice water activity, Delta mu(T, p)/T (relative to the melting point at p) = Delta mu(T0, p0)/T0
    from scipy.optimize import brentq

    tm = float(wi.melting_temperature(pressure))
    t = tm - 3.0
    y = float(wi.chemical_potential_difference(t, pressure)) / t - float(wi.chemical_potential_difference(tm, pressure)) / tm
    t0 = brentq(lambda x: float(wi.chemical_potential_difference(x, 101325.0)) / x - y, 255.0, 273.15)
    exact = float(wi.melting_temperature(101325.0)) - t0
    assert float(iso.equivalent_depression(pressure, 3.0)) == pytest.approx(exact, rel=2e-3)
    assert iso.equivalent_depression(np.array([pressure, 101325.0]), 3.0).shape == (2,)


def test_recalescence_beyond_nucleation_line_is_flagged():
    # -40 C at 0.1 MPa is beyond the homogeneous nucleation line bounding G12-15 [ref:iapws-g12-15]
    with pytest.warns(Warning):
        r = iso.recalescence(233.15, None)
    assert any(f.code == "extrapolated" for f in r.flags)
    # open pure water: x = integral of c_p dT from T_s to T_m over L_f(T_m) (G12-15 heat capacity, which rises
    # steeply when supercooled; quadrature independent of the enthalpies used in the code)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        tm = float(wi.melting_temperature(101325.0))
        grid = np.linspace(233.15, tm, 401)
        heat = np.trapezoid(wi.liquid_heat_capacity(grid, 101325.0), grid)
        expected = heat / float(wi.latent_heat(tm, 101325.0))
    assert r.ice_fraction_of_water == pytest.approx(expected, rel=1e-3)


def test_open_state_of_a_fitted_solution_sits_on_its_liquidus():
    # Open container: the remaining liquid's osmolality is the one whose liquidus is T (the
    # freeze-concentration curve, [ref:rubinsky-perez-carlson-2005]); same answer as the solution module's
    # own curve. Glycerol's fitted virial set turns over at high concentration, which once sent the
    # bisection past the turnover.
    from planner.isochoric import liquid_from_composition, open_state
    from planner.solution import composition, freeze_concentration, osmolality_at_freezing_point

    comp = composition("isotonic-saline", [("glycerol", "mass_percent", 10.0)])
    temps = np.array([269.15, 263.15, 253.15])
    st = open_state(temps, liquid_from_composition(comp))
    np.testing.assert_allclose(st.liquid_osmolality, osmolality_at_freezing_point(temps), rtol=1e-6)
    fc = freeze_concentration(comp, temps)
    np.testing.assert_allclose(st.ice_fraction_of_water, fc.ice_fraction_of_water, atol=1e-4)
