"""Water and ice Ih properties: published check values and the `iapws` package on dense grids."""

import warnings

import numpy as np
import pytest
from iapws._iapws import _Ice, _Melting_Pressure, _Supercooled

from planner import water_ice as wi
from planner.errors import ExtrapolationWarning, ModelRangeError

R_TLL = wi.SPECIFIC_GAS_CONSTANT * 228.2  # J/kg: G12-15 Gibbs energy scale


# --- IAPWS R14-08, its own check value ---------------------------------------------------------------
def test_r14_08_check_value_260_k():
    # IAPWS R14-08 [ref:iapws-r14-08], check value for ice Ih: T = 260 K -> p_melt = 138.268 MPa
    assert round(float(wi.melting_pressure(260.0)) / 1e6, 3) == 138.268


def test_melting_curve_ends_at_published_triple_points():
    # R14-08 [ref:iapws-r14-08]: p = 611.657 Pa at 273.16 K; 208.566 MPa at 251.165 K (Ih-III-liquid)
    assert float(wi.melting_pressure(273.16)) == pytest.approx(611.657, abs=1e-6)
    assert round(float(wi.melting_pressure(251.165)) / 1e6, 3) == 208.567  # 208.566 published, rounded
    assert wi.TRIPLE_POINT_IH_III_TEMPERATURE == 251.165
    assert wi.TRIPLE_POINT_IH_III_PRESSURE == 208.566e6


def test_melting_curve_against_iapws_dense_scalar_and_array():
    t = np.linspace(251.165, 273.16, 400)
    ref = np.array([_Melting_Pressure(x) * 1e6 for x in t])  # iapws [ref:iapws-python]
    np.testing.assert_allclose(wi.melting_pressure(t), ref, rtol=1e-12)
    assert float(wi.melting_pressure(265.0)) == pytest.approx(_Melting_Pressure(265.0) * 1e6, rel=1e-12)


def test_melting_temperature_inverts_the_curve():
    t = np.linspace(251.2, 273.15, 300)
    np.testing.assert_allclose(wi.melting_temperature(wi.melting_pressure(t)), t, atol=1e-9)
    assert isinstance(wi.melting_temperature(50e6), float)


def test_normal_melting_point():
    # R10-06 Table 6 [ref:iapws-r10-06] uses 273.152519 K as the melting point at 101325 Pa
    assert round(float(wi.melting_temperature(101325.0)), 6) == 273.152519


@pytest.mark.parametrize("t", [250.0, 251.0, 273.2, 280.0])
def test_melting_curve_refused_outside_ih_range(t):
    # below the Ih-III-liquid triple point the Ih curve must not be extrapolated [ref:iapws-r14-08]
    with pytest.raises(ModelRangeError, match="temperature"):
        wi.melting_pressure(t)


def test_melting_temperature_refused_above_ih_iii_pressure():
    with pytest.raises(ModelRangeError, match="pressure"):
        wi.melting_temperature(250e6)


def test_require_ice_ih_names_the_field():
    with pytest.raises(ModelRangeError, match=r"schedule\.steps\[2\]"):
        wi.require_ice_ih(250.0, "schedule.steps[2]")
    wi.require_ice_ih(251.165)


# --- IAPWS R10-06 Table 6 ----------------------------------------------------------------------------
R10_06_TABLE_6 = [
    # T [K], p [Pa], quantity, published value (SI), decimals of the published value
    (273.16, 611.657, "g", 0.611784135, 9),
    (273.16, 611.657, "density", 916.709492200, 9),
    (273.16, 611.657, "enthalpy", -333444.253966, 6),
    (273.16, 611.657, "entropy", -1220.69433940, 8),
    (273.16, 611.657, "cp", 2096.78431622, 8),
    (273.16, 611.657, "kappa", 1.17793449348e-10, 21),
    (273.152519, 101325.0, "g", 101.34274069, 8),
    (100.0, 100e6, "density", 941.678203297, 9),
    (100.0, 100e6, "enthalpy", -483491.635676, 6),
    (100.0, 100e6, "entropy", -2611.95122589, 8),
]


@pytest.mark.parametrize(("t", "p", "quantity", "value", "decimals"), R10_06_TABLE_6)
def test_r10_06_table_6(t, p, quantity, value, decimals):
    # IAPWS R10-06 (2009) Table 6 [ref:iapws-r10-06], published at the precision shown
    fn = {
        "g": wi.ice_gibbs_energy,
        "density": wi.ice_density,
        "enthalpy": wi.ice_specific_enthalpy,
        "entropy": wi.ice_specific_entropy,
        "cp": wi.ice_heat_capacity,
        "kappa": wi.ice_isothermal_compressibility,
    }[quantity]
    assert round(float(fn(t, p)), decimals) == pytest.approx(value, abs=1.5 * 10.0**-decimals)


# --- IAPWS G12-15 Table 8 ----------------------------------------------------------------------------
G12_15_TABLE_8 = [
    # T [K], p [MPa], rho [kg/m3], alpha [1e-4/K], kappa_T [1e-4/MPa], c_p [J/(kg K)]
    (273.15, 0.101325, 999.84229, -0.683042, 5.088499, 4218.3002),
    (235.15, 0.101325, 968.09999, -29.633816, 11.580785, 5997.5632),
    (250.0, 200.0, 1090.45677, 3.267768, 3.361311, 3708.3902),
    (250.0, 400.0, 1151.71517, 4.929927, 2.277029, 3757.2144),
]


@pytest.mark.parametrize(("t", "p_mpa", "rho", "alpha", "kappa", "cp"), G12_15_TABLE_8)
def test_g12_15_table_8(t, p_mpa, rho, alpha, kappa, cp):
    # IAPWS G12-15 Table 8 [ref:iapws-g12-15], published at the precision shown
    p = p_mpa * 1e6
    assert round(float(wi.liquid_density(t, p)), 5) == pytest.approx(rho, abs=1e-5)
    assert round(float(wi.liquid_thermal_expansion(t, p)) * 1e4, 6) == pytest.approx(alpha, abs=1.5e-6)
    assert round(float(wi.liquid_isothermal_compressibility(t, p)) * 1e10, 6) == pytest.approx(kappa, abs=1.5e-6)
    assert round(float(wi.liquid_heat_capacity(t, p)), 4) == pytest.approx(cp, abs=1.5e-4)


def test_g12_15_table_8_row_at_200_k_is_outside_the_range_used_here():
    # Table 8 also lists 200 K, 400 MPa; this module stops at 230 K (documented narrower range)
    with pytest.raises(ModelRangeError, match="temperature"):
        wi.liquid_density(200.0, 400e6)


# --- dense grids against iapws (1e-5 relative required; observed ~1e-9) ------------------------------
def _liquid_grid():
    for t in np.linspace(230.0, 300.0, 36):
        for p in np.linspace(0.1, 400.0, 30):
            try:
                yield t, p, _Supercooled(t, p)
            except NotImplementedError:  # below the homogeneous nucleation line: iapws refuses
                continue


LIQUID_GRID = list(_liquid_grid())


def test_liquid_against_iapws_dense_grid():
    # iapws `_Supercooled` [ref:iapws-python] implements G12-15; its "g" is dimensionless (g/(R T_LL))
    t = np.array([r[0] for r in LIQUID_GRID])
    p = np.array([r[1] * 1e6 for r in LIQUID_GRID])
    ref = {k: np.array([r[2][k] for r in LIQUID_GRID]) for k in ("rho", "cp", "xkappa", "s", "g", "alfap")}
    assert len(t) > 800
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ExtrapolationWarning)
        np.testing.assert_allclose(wi.liquid_density(t, p), ref["rho"], rtol=1e-5)
        np.testing.assert_allclose(wi.liquid_heat_capacity(t, p), ref["cp"] * 1e3, rtol=1e-5)
        np.testing.assert_allclose(wi.liquid_isothermal_compressibility(t, p), ref["xkappa"] / 1e6, rtol=1e-5)
        np.testing.assert_allclose(wi.liquid_specific_entropy(t, p), ref["s"] * 1e3, rtol=1e-5, atol=1e-3)
        np.testing.assert_allclose(wi.liquid_gibbs_energy(t, p), ref["g"] * R_TLL, rtol=1e-5, atol=1e-3)
        np.testing.assert_allclose(wi.liquid_thermal_expansion(t, p), ref["alfap"], rtol=1e-5, atol=1e-10)


def test_ice_against_iapws_dense_grid():
    t = np.repeat(np.linspace(230.0, 273.16, 30), 30)
    p = np.tile(np.linspace(611.657e-6, 208.566, 30), 30)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # iapws warns about metastable ice in the liquid region
        ref = [_Ice(a, b) for a, b in zip(t, p, strict=True)]
    p = p * 1e6
    np.testing.assert_allclose(wi.ice_density(t, p), [r["rho"] for r in ref], rtol=1e-5)
    np.testing.assert_allclose(wi.ice_gibbs_energy(t, p), [r["g"] * 1e3 for r in ref], rtol=1e-5, atol=1e-3)
    np.testing.assert_allclose(wi.ice_specific_enthalpy(t, p), [r["h"] * 1e3 for r in ref], rtol=1e-5)
    np.testing.assert_allclose(wi.ice_heat_capacity(t, p), [r["cp"] * 1e3 for r in ref], rtol=1e-5)
    np.testing.assert_allclose(wi.ice_isothermal_compressibility(t, p), [r["xkappa"] / 1e6 for r in ref], rtol=1e-5)


def test_liquid_enthalpy_is_consistent_with_its_gibbs_energy():
    # h = g - T dg/dT: a numerical derivative of the Gibbs energy (independent of the analytic entropy)
    t, p, d = np.array([240.0, 260.0, 290.0]), np.array([0.2e6, 100e6, 30e6]), 1e-3
    dgdt = (wi.liquid_gibbs_energy(t + d, p) - wi.liquid_gibbs_energy(t - d, p)) / (2 * d)
    np.testing.assert_allclose(wi.liquid_specific_enthalpy(t, p), wi.liquid_gibbs_energy(t, p) - t * dgdt, rtol=1e-7)


# --- Delta mu, latent heat ---------------------------------------------------------------------------
def test_delta_mu_vanishes_on_the_melting_curve():
    # G12-15, R10-06 and R14-08 were fitted separately. Expressed as a temperature, dmu/ds, the offset is
    # below 0.03 K up to 140 MPa and below 0.2 K at the Ih-III triple point (G12-15 quotes density
    # uncertainties of 1e-4 to 1e-3 at these pressures [ref:iapws-g12-15]).
    t = np.linspace(251.2, 273.15, 40)
    p = wi.melting_pressure(t)
    offset = wi.chemical_potential_difference(t, p) / (wi.liquid_specific_entropy(t, p) - wi.ice_specific_entropy(t, p))
    assert np.max(np.abs(offset[p < 140e6])) < 0.03
    assert np.max(np.abs(offset)) < 0.2


def test_delta_mu_sign_and_linear_estimate():
    # positive below the melting point; REFERENCES.md section 3: the linear L_f dT/T_m estimate is ~3 % high at
    # -10 C and ~14 % high at -35 C (calc, iapws)
    t = np.array([263.15, 238.15])
    dmu = wi.chemical_potential_difference(t, 101325.0)
    linear = 333.4e3 * (273.15 - t) / 273.15
    assert np.all(dmu > 0)
    assert linear[0] / dmu[0] == pytest.approx(1.03, abs=0.015)
    assert linear[1] / dmu[1] == pytest.approx(1.14, abs=0.03)
    with pytest.warns(ExtrapolationWarning):  # superheated ice above 273.16 K
        assert float(wi.chemical_potential_difference(278.15, 101325.0)) < 0  # above 0 C liquid is stable


def test_delta_mu_down_to_minus_40_c_flagged_beyond_nucleation_line():
    # -40 C at 0.1 MPa lies beyond the homogeneous nucleation line bounding G12-15: computed and flagged
    with pytest.warns(ExtrapolationWarning):
        dmu = wi.chemical_potential_difference(233.15, 101325.0)
    assert 35e3 < float(dmu) < 50e3
    flags = wi.liquid_flags(233.15, 101325.0)
    assert flags and flags[0].code == "extrapolated" and flags[0].source == "iapws-g12-15"
    assert wi.liquid_flags(263.15, 101325.0) == []


def test_delta_mu_agrees_with_iapws95_where_iapws_refuses_g12_15():
    # IAPWS-95 [ref:iapws-95] metastable liquid as an independent reference at 236 K
    import iapws

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        g95 = iapws.IAPWS95(T=236.0, P=0.101325).g * 1e3
        gice = _Ice(236.0, 0.101325)["g"] * 1e3
        dmu = float(wi.chemical_potential_difference(236.0, 101325.0))
    assert dmu == pytest.approx(g95 - gice, rel=1e-3)


def test_latent_heat_near_zero_c():
    # 333.4 kJ/kg at 0 C, 0.1 MPa (REFERENCES.md section 6; Incropera [ref:incropera-dewitt])
    assert round(float(wi.latent_heat(273.152519, 101325.0)) / 1e3, 1) == 333.4
    arr = wi.latent_heat(np.array([263.15, 253.15]), np.array([0.1e6, 0.1e6]))
    assert arr.shape == (2,) and np.all(np.diff(arr) < 0)  # smaller when supercooled


def test_scalar_and_array_shapes():
    for fn in (wi.liquid_density, wi.ice_density, wi.chemical_potential_difference, wi.liquid_specific_enthalpy,
               wi.ice_specific_enthalpy, wi.liquid_heat_capacity, wi.ice_heat_capacity, wi.ice_specific_volume,
               wi.liquid_specific_volume, wi.liquid_isothermal_compressibility, wi.liquid_gibbs_energy,
               wi.ice_gibbs_energy, wi.latent_heat, wi.liquid_specific_entropy, wi.ice_specific_entropy,
               wi.ice_isothermal_compressibility, wi.liquid_thermal_expansion):
        assert isinstance(fn(263.15, 1e6), float), fn.__name__
        out = fn(np.array([[263.15, 265.0]]), np.array([1e6, 2e6]))
        assert out.shape == (1, 2), fn.__name__
    assert isinstance(wi.melting_pressure(260.0), float)
    assert wi.melting_pressure(np.array([260.0, 261.0])).shape == (2,)


@pytest.mark.parametrize(
    ("fn", "t", "p", "name"),
    [
        (wi.liquid_density, 229.0, 0.1e6, "temperature"),
        (wi.liquid_density, 301.0, 0.1e6, "temperature"),
        (wi.liquid_density, 263.0, 401e6, "pressure"),
        (wi.ice_density, 263.0, 211e6, "pressure"),
        (wi.ice_density, 281.0, 0.1e6, "temperature"),
        (wi.liquid_density, float("nan"), 0.1e6, "temperature"),
    ],
)
def test_out_of_range_refused_naming_the_quantity(fn, t, p, name):
    with pytest.raises(ModelRangeError, match=name):
        fn(t, p)


def test_superheated_ice_is_flagged():
    with pytest.warns(ExtrapolationWarning):
        wi.ice_density(276.0, 0.1e6)
    assert wi.ice_flags(276.0, 0.1e6)[0].code == "extrapolated"
    assert wi.ice_flags(270.0, 0.1e6) == []


def test_docstring_examples():
    import doctest

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ExtrapolationWarning)
        assert doctest.testmod(wi).failed == 0
