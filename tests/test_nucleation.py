"""Nucleation model: CNT sizes, homogeneous rates, heterogeneous presets, freeze probability over a history.

Each published check names its source beside it and asserts the published number at its published
precision.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq, minimize_scalar

from planner import nucleation as nuc
from planner.errors import ExtrapolationWarning, InputError, ModelRangeError

C = 273.15


def hold_history(temp_k, hours, start_k=277.15, rate_k_per_min=0.5):
    """Ramp from start to the hold, hold, ramp back (invented schedule)."""
    ramp = (start_k - temp_k) / (rate_k_per_min / 60)
    t = np.array([0.0, ramp, ramp + hours * 3600, 2 * ramp + hours * 3600])
    return t, np.array([start_k, temp_k, temp_k, start_k])


# --- water and ice, CNT -------------------------------------------------------------------------------------
def test_pure_water_liquidus_matches_iapws_melting_curve():
    # IAPWS R14-08 melting curve as implemented in the iapws package: T at 0.101325 MPa
    from iapws._iapws import _Melting_Pressure

    t = brentq(lambda x: _Melting_Pressure(x) - 0.101325, 273.0, 273.16, xtol=1e-9)
    assert nuc.PURE_WATER_LIQUIDUS == pytest.approx(t, abs=1e-5)


@pytest.mark.filterwarnings("ignore:Using extrapolated values")
@pytest.mark.parametrize("temp", [263.15, 253.15, 238.15])
def test_chemical_potential_difference_against_iapws95_and_r10_06(temp):
    # iapws package: IAPWS-95 liquid Gibbs energy minus IAPWS R10-06 ice, both kJ/kg on the same reference
    from iapws import IAPWS95, _Ice

    w = IAPWS95(T=temp, P=0.101325)
    expected = (w.h - temp * w.s - _Ice(temp, 0.101325)["g"]) * 1e3
    assert nuc.chemical_potential_difference(temp) == pytest.approx(expected, rel=2e-3)


def test_linear_driving_force_is_three_percent_high_at_minus_10():
    # REFERENCES.md section 3 ("the linear L_f dT/T_m is 3 % high at -10 C"), L_f = 333.4 kJ/kg (Incropera)
    linear = 333.4e3 * 10.0 / nuc.PURE_WATER_LIQUIDUS
    assert round(linear / nuc.chemical_potential_difference(263.15) - 1, 2) == 0.03


def test_critical_cluster_35_k_below_melting_sanz_2013():
    # Sanz et al. 2013 (J. Am. Chem. Soc. 135:15008), abstract: ~600 molecules, radius 1.7 nm, 35 K below melting
    n = nuc.critical_nucleus(nuc.PURE_WATER_LIQUIDUS - 35.0)
    assert float(f"{n.molecules:.1g}") == 600
    assert round(n.radius * 1e9, 1) == 1.7


def test_critical_radius_15_k_below_melting_sanz_2013():
    # Sanz et al. 2013, abstract: radius 4 nm at 15 K below melting (one significant figure)
    n = nuc.critical_nucleus(nuc.PURE_WATER_LIQUIDUS - 15.0)
    assert float(f"{n.radius * 1e9:.1g}") == 4


def test_interfacial_energy_within_sanz_2013_extrapolation():
    # Sanz et al. 2013: 29(3) mN/m extrapolated to the melting point; Hardy 1977 29.1 mJ/m2 (from memory)
    assert 26e-3 <= nuc.INTERFACIAL_CONSTANT.value(C) <= 32e-3
    assert 26e-3 <= nuc.INTERFACIAL_LINEAR.value(C) <= 32e-3


def test_cnt_closed_form_barrier_is_a_third_of_the_surface_energy():
    # CNT closed form (Gibbs): Delta G* = (1/3) sigma 4 pi r*^2 and the maximum of Delta G(r) sits at r*
    temp = 258.15
    n = nuc.critical_nucleus(temp)
    assert n.barrier == pytest.approx(n.interfacial_energy * 4 * math.pi * n.radius**2 / 3, rel=1e-12)
    res = minimize_scalar(lambda r: -nuc.confinement_free_energy(r * 1e-9, np.inf, temp), bounds=(0.1, 50), method="bounded",
                          options={"xatol": 1e-8})
    assert res.x * 1e-9 == pytest.approx(n.radius, rel=1e-5)
    assert -res.fun == pytest.approx(n.barrier, rel=1e-9)


def test_critical_nucleus_scalar_and_array():
    temps = np.array([268.15, 258.15, 248.15])
    arr = nuc.critical_nucleus(temps)
    for i, t in enumerate(temps):
        s = nuc.critical_nucleus(float(t))
        assert isinstance(s.radius, float)
        assert arr.radius[i] == pytest.approx(s.radius)
    assert np.all(np.diff(arr.radius) < 0)  # colder: smaller nucleus


def test_solution_driving_force_zero_at_its_liquidus():
    # definition of the liquidus: liquid water in the solution and ice in equilibrium
    assert nuc.driving_force(268.15, 268.15) == pytest.approx(0.0, abs=1e-9)
    vals = nuc.driving_force(np.array([266.15, 262.15]), 268.15)
    assert np.all(vals > 0)
    assert nuc.critical_nucleus(269.0, 268.15).radius == math.inf


def test_driving_force_refuses_below_230_k():
    with pytest.raises(ModelRangeError, match="temperature"):
        nuc.chemical_potential_difference(220.0)
    assert nuc.driving_force_flags(232.0)[0].code == "extrapolated"
    assert nuc.driving_force_flags(250.0) == []


def test_critical_confinement_volume_closed_form():
    # closed form V_c = 32 c r*^3 / a of the strain-energy form: at V_c the smallest Delta G over r > 0 is zero
    temp = 263.15
    vc = nuc.critical_confinement_volume(temp)
    r = np.linspace(1e-10, 20 * vc ** (1 / 3), 200_001)
    assert np.min(nuc.confinement_free_energy(r[1:], 0.95 * vc, temp)) > 0
    assert np.min(nuc.confinement_free_energy(r[1:], 1.05 * vc, temp)) < 0
    lengths = nuc.critical_confinement_length(np.array([272.15, 263.15, 253.15]))
    assert np.all(np.diff(lengths) < 0)
    assert nuc.critical_confinement_length(263.15) == pytest.approx(float(np.cbrt(vc)))


def test_confinement_sizes_stay_below_the_helmholtz_treatment():
    # Powell-Palm, Rubinsky, Sun 2020 (Commun. Phys. 3:39), abstract: critical confinement volumes "on the order
    # of microns"; the simplified strain-energy form must not claim more protection than that.
    lengths = nuc.critical_confinement_length(np.array([272.15, 268.15, 263.15, 253.15]))
    assert np.all(lengths < 1e-6)


# --- vapour pressures and homogeneous rates ------------------------------------------------------------------
@pytest.mark.parametrize("temp", [200.0, 250.0, 270.0])
def test_ice_vapour_pressure_against_iapws_sublimation_curve(temp):
    # IAPWS R14-08 sublimation curve in the iapws package [MPa]; Murphy & Koop 2005 agree within 0.1 %
    from iapws._iapws import _Sublimation_Pressure

    assert nuc.ice_vapour_pressure(temp) == pytest.approx(_Sublimation_Pressure(temp) * 1e6, rel=1e-3)


@pytest.mark.parametrize(("temp_c", "aw"), [(-5.0, 0.9526), (-10.0, 0.9073), (-20.0, 0.8227)])
def test_ice_water_activity_murphy_koop_2005(temp_c, aw):
    # REFERENCES.md section 3 [calc]: a_w,ice from the Murphy & Koop 2005 vapour pressures
    assert round(float(nuc.ice_water_activity(temp_c + C)), 4) == aw


def test_vapour_pressures_scalar_and_array():
    t = np.array([240.0, 260.0])
    assert isinstance(nuc.liquid_vapour_pressure(260.0), float)
    assert nuc.liquid_vapour_pressure(t)[1] == pytest.approx(nuc.liquid_vapour_pressure(260.0))
    assert nuc.ice_water_activity(t)[0] == pytest.approx(nuc.ice_water_activity(240.0))
    # common practice: ice's vapour pressure is below the supercooled liquid's
    assert np.all(nuc.ice_vapour_pressure(t) < nuc.liquid_vapour_pressure(t))


@pytest.mark.parametrize(("temp_c", "log10_j"), [(-35.0, 4.42), (-38.0, 8.79)])
def test_koop_murray_2016_values(temp_c, log10_j):
    # Koop & Murray 2016 (J. Chem. Phys. 145:211915) polynomial coefficients; log10 J values computed from them
    # in REFERENCES.md section 3 [calc] (the same form as eq. A9 of the paper)
    assert round(float(nuc.koop_murray_log10_rate(temp_c + C)), 2) == log10_j


def test_koop_murray_2016_scalar_array_and_range():
    vals = nuc.koop_murray_log10_rate(np.array([235.15, 238.15]))
    assert vals[1] == pytest.approx(nuc.koop_murray_log10_rate(238.15))
    with pytest.raises(ModelRangeError, match="233 to 239 K"):
        nuc.koop_murray_log10_rate(243.15)


def test_koop_2000_curve_at_delta_aw_0_305():
    # Koop et al. 2000 (Nature 406:611): the homogeneous freezing line Delta a_w = 0.305 corresponds to
    # J of about 5e9 cm^-3 s^-1 (log10 9.7; from memory)
    assert round(float(nuc.koop_2000_log10_rate(0.305)), 1) == 9.7
    arr = nuc.koop_2000_log10_rate(np.array([0.28, 0.305]))
    assert arr[1] == pytest.approx(nuc.koop_2000_log10_rate(0.305))
    with pytest.raises(ModelRangeError, match="0.26 to 0.34"):
        nuc.koop_2000_log10_rate(0.2)
    # on that line pure water (a_w = 1) freezes where a_w,ice = 0.695: about -37 C (common practice, no source:
    # micrometre droplets freeze homogeneously near -35 to -38 C)
    t = brentq(lambda x: nuc.ice_water_activity(x) - 0.695, 225.0, 250.0)
    assert -38.5 <= t - C <= -35.0


def test_micrometre_droplets_freeze_homogeneously_near_minus_36_c():
    # common practice, no source: micrometre droplets of pure water freeze near -35 to -38 C on a ramp
    volume = math.pi / 6 * (10e-6) ** 3  # 10 um droplet
    rate = 1.0 / 60  # 1 K/min
    t_end = (C - 233.15) / rate
    t = np.array([0.0, t_end])
    y = np.array([C, 233.15])
    curve = nuc.cumulative_freeze_probability(t, y, volume, nuc.HOMOGENEOUS_ONLY, points=400, draws=200)
    temps = np.interp(curve["time"], t, y)
    median = float(np.interp(0.5, curve["probability"], temps))
    assert -38.0 <= median - C <= -35.0


def test_homogeneous_rate_regimes_and_bound():
    r = nuc.homogeneous_rate(np.array([236.0, 243.15, 253.15, 230.0, 273.16]))
    assert list(r.regime) == [0, 1, 1, 2, 0]
    assert r.rate[-1] == 0.0  # above the liquidus
    assert {f.code for f in r.flags()} == {"indicative", "extrapolated"}
    # the bound joins the published rate at the warm edge of its range
    edge = 10 ** float(nuc.koop_murray_log10_rate(239.0)) * 1e6
    assert float(nuc.homogeneous_rate(239.0 + 1e-6).rate) == pytest.approx(edge, rel=1e-3)
    # Sanz et al. 2013, abstract: warmer than 20 K below melting, homogeneous nucleation is slower than one
    # critical cluster in the whole hydrosphere (1.4e18 m3) over the age of the universe (4.35e17 s)
    assert float(nuc.homogeneous_rate(nuc.PURE_WATER_LIQUIDUS - 20.0).rate) < 1 / (1.4e18 * 4.35e17)
    assert isinstance(nuc.homogeneous_rate(250.0).rate, float)


def test_homogeneous_rate_of_a_solution_uses_koop_2000():
    liquidus = 263.15  # a solution freezing at -10 C (a_w = 0.9073)
    aw = float(nuc.ice_water_activity(liquidus))
    t = brentq(lambda x: aw - nuc.ice_water_activity(x) - 0.305, 200.0, 250.0)
    r = nuc.homogeneous_rate(t, liquidus)
    assert r.model.startswith("Koop et al. 2000") and r.regime == 0
    assert math.log10(r.rate / 1e6) == pytest.approx(float(nuc.koop_2000_log10_rate(0.305)), abs=1e-6)
    # the solution freezes homogeneously colder than pure water (Koop et al. 2000, Fig. 1)
    assert t < 236.0
    warm = nuc.homogeneous_rate(np.array([255.0, 245.0]), liquidus)
    assert list(warm.regime) == [1, 1] and np.all(warm.rate < 1e-10)


# --- heterogeneous presets ------------------------------------------------------------------------------
def test_presets_are_documented_and_default_per_interface():
    found = nuc.presets()
    assert {"sealed-interface", "exposed-interface", "natural-water-bound"} <= set(found)
    for m in found.values():
        assert m.description and m.source and m.label
    assert nuc.default_preset("sealed").name == "sealed-interface"
    assert nuc.default_preset("exposed").name == "exposed-interface"
    with pytest.raises(InputError, match="exposed-interface"):
        nuc.preset("exposed-interfase")


def test_sealed_prior_allows_the_published_100_day_hold_huang_2018():
    # Huang, Yarmush, Usta 2018 (Nat. Commun. 9:3201): sealed water, 100 mL at -20 C for 100 days stayed liquid
    t = np.array([0.0, 100 * 86400.0])
    y = np.full(2, 253.15)
    r = nuc.freeze_probability(t, y, 1e-4, nuc.preset("sealed-interface"))
    assert r.interval[0] < 0.5 < r.interval[1]


def test_exposed_prior_allows_the_published_failures_huang_2018():
    # Huang et al. 2018: unsealed samples above 1 mL below -10 C for over a week are not readily achieved
    t = np.array([0.0, 7 * 86400.0])
    y = np.full(2, 263.15)
    area = math.pi * 0.005**2  # 10 mm bore
    r = nuc.freeze_probability(t, y, 1e-6, nuc.preset("exposed-interface"), interface_area=area)
    assert r.interval[1] > 0.5
    sealed = nuc.freeze_probability(t, y, 1e-6, nuc.preset("sealed-interface"))
    assert sealed.probability < r.probability


def test_natural_water_bound_is_pessimistic_bigg_1953():
    # Bigg 1953 form with B = 100 m^-3 s^-1, A = 0.66 /K (from memory): 1 mL 6 K below for 72 h freezes
    t = np.array([0.0, 72 * 3600.0])
    r = nuc.freeze_probability(t, np.full(2, C - 6.0), 1e-6, nuc.preset("natural-water-bound"), liquidus=C)
    expected = 1 - math.exp(-1e-6 * 100 * math.expm1(0.66 * 6) * 72 * 3600)
    assert r.probability >= expected
    assert r.probability == pytest.approx(expected, rel=0.05)
    assert any(f.code == "indicative" and "bound" in f.message for f in r.flags)


def test_heterogeneous_rate_scalar_and_array():
    assert nuc.heterogeneous_rate(5.0, math.log(2.0), 0.5, 5.0) == pytest.approx(2.0)
    arr = nuc.heterogeneous_rate(np.array([-1.0, 5.0, 7.0]), math.log(2.0), 0.5, 5.0)
    assert arr[0] == 0.0 and arr[2] == pytest.approx(2.0 * math.e)
    term = nuc.preset("sealed-interface").volume
    assert term.rate(20.0) == pytest.approx(math.exp(term.mean[0]))
    assert term.rate(np.array([20.0]))[0] == pytest.approx(term.rate(20.0))


def test_out_of_range_supercooling_is_flagged():
    t = np.array([0.0, 3600.0])
    with pytest.warns(ExtrapolationWarning, match="deeper than"):
        r = nuc.freeze_probability(t, np.full(2, C - 25.0), 1e-6, nuc.preset("sealed-interface"), liquidus=C, draws=200)
    assert any(f.code == "extrapolated" and "deeper than" in f.message for f in r.flags)


# --- freeze probability ----------------------------------------------------------------------------------------
def test_volume_scaling_identity_vali_1971():
    # Vali 1971 (J. Atmos. Sci. 28:402): f_V = 1 - (1 - f_ref)^(V/V_ref) for a volume-proportional rate
    t, y = hold_history(C - 8.0, 48)
    m = nuc.preset("sealed-interface")
    ref = nuc.freeze_probability(t, y, 1e-6, m, liquidus=C, draws=100).probability
    big = nuc.freeze_probability(t, y, 3.7e-6, m, liquidus=C, draws=100).probability
    assert big == pytest.approx(1 - (1 - ref) ** 3.7, rel=1e-9)


def test_monte_carlo_is_seeded_and_reproducible():
    t, y = hold_history(C - 6.0, 72)
    m = nuc.preset("exposed-interface")
    a = nuc.freeze_probability(t, y, 2e-6, m, interface_area=7.85e-5)
    b = nuc.freeze_probability(t, y, 2e-6, m, interface_area=7.85e-5)
    c = nuc.freeze_probability(t, y, 2e-6, m, interface_area=7.85e-5, seed=7)
    assert a.interval == b.interval and a.draws == 10_000
    assert a.interval != c.interval
    assert a.interval[0] <= a.probability <= a.interval[1]
    assert a.to_dict()["probability"] == a.probability  # serialisable, internal draws left out
    assert "_terms" not in a.to_dict()


def test_homogeneous_term_carries_the_interfacial_energy_spread():
    t = np.array([0.0, 60.0])
    y = np.full(2, 237.0)
    r = nuc.freeze_probability(t, y, 1e-15, nuc.HOMOGENEOUS_ONLY)
    assert r.interval[0] < r.probability < r.interval[1]
    assert r.homogeneous_probability == pytest.approx(r.probability)


def test_exposure_of_many_pieces_matches_direct_sum():
    # exact piecewise integral against a fine trapezoid sum of exp(b x(t))
    tt = np.linspace(0, 3600.0, 2001)
    x = 5 + 3 * np.sin(tt / 600.0)
    x0, x1, dt = nuc._segments(tt, x)
    slopes = np.linspace(0.2, 1.2, 3000)  # more than the direct-evaluation limit: the grid path
    got = nuc._exposure(x0, x1, dt, slopes)
    fine = np.linspace(0, 3600.0, 200_001)
    xf = np.interp(fine, tt, x)
    for i in (0, 1500, 2999):
        ref = np.trapezoid(np.exp(slopes[i] * xf), fine)
        assert got[i] == pytest.approx(ref, rel=2e-3)


def test_exposure_on_the_slope_grid_matches_the_direct_sum_for_every_draw():
    # 10 000 drawn slopes (the default Monte Carlo) go through the grid; the same slopes in chunks of at
    # most EXPOSURE_GRID are summed directly. A slope spread of 0.3 /K is wider than any preset's.
    tt = np.linspace(0, 3600.0, 2001)
    x = 5 + 3 * np.sin(tt / 600.0)
    x0, x1, dt = nuc._segments(tt, x)
    b = np.random.default_rng(7).normal(0.8, 0.3, 10_000)
    got = nuc._exposure(x0, x1, dt, b)
    direct = np.concatenate([nuc._exposure(x0, x1, dt, c) for c in np.array_split(b, 20)])
    assert np.max(np.abs(got / direct - 1)) < 5e-6


def test_cumulative_curve_ends_at_the_headline_number():
    t, y = hold_history(C - 6.0, 24)
    m = nuc.preset("sealed-interface")
    curve = nuc.cumulative_freeze_probability(t, y, 1e-5, m, liquidus=C, points=30, draws=500)
    total = nuc.freeze_probability(t, y, 1e-5, m, liquidus=C, draws=500)
    assert curve["probability"][-1] == pytest.approx(total.probability, rel=1e-9)
    assert np.all(np.diff(curve["probability"]) >= -1e-15)
    assert curve["time"].shape == (30,)


def test_history_and_input_errors_name_the_field():
    m = nuc.preset("sealed-interface")
    with pytest.raises(InputError, match="volume"):
        nuc.freeze_probability([0, 1], [270, 270], -1.0, m)
    with pytest.raises(InputError, match="history.time"):
        nuc.freeze_probability([0, 10, 5], [270, 270, 270], 1e-6, m)
    with pytest.raises(InputError, match="draws"):
        nuc.freeze_probability([0, 1], [270, 270], 1e-6, m, draws=0)
    with pytest.raises(InputError, match="hold_duration"):
        nuc.freeze_probability_map([1e-6], [265.0], -1.0, m)


def test_truncate_history_at_seed_time_and_coldest():
    t = np.array([0.0, 100.0, 200.0])
    y = np.array([273.15, 253.15, 253.15])
    ct, cy, why = nuc.truncate_history(t, y, until_time=150.0)
    assert ct[-1] == 150.0 and why == "until-time"
    ct, cy, why = nuc.truncate_history(t, y, coldest=263.15)
    assert ct[-1] == pytest.approx(50.0) and cy[-1] == 263.15 and why == "coldest"


def test_map_matches_single_holds():
    m = nuc.preset("exposed-interface")
    vols = np.array([1e-7, 1e-6, 1e-5])
    temps = np.array([271.15, 268.15, 265.15])
    areas = 7.85e-5 * (vols / 1e-6) ** (2 / 3)
    grid = nuc.freeze_probability_map(vols, temps, 3600 * 24, m, C, areas)
    single = nuc.freeze_probability([0.0, 86400.0], [268.15, 268.15], 1e-6, m, C, areas[1], draws=10)
    assert grid.shape == (3, 3)
    assert grid[1, 1] == pytest.approx(single.probability, rel=1e-9)
    upper = nuc.freeze_probability_map(vols, temps, 3600 * 24, m, C, areas, quantile=0.95)
    assert np.all(upper >= grid)


def test_what_it_takes_meets_the_target_at_its_answers():
    m = nuc.preset("sealed-interface")
    t, y = hold_history(C - 12.0, 72)
    ans = nuc.what_it_takes(t, y, 5e-6, m, 0.01, liquidus=C, draws=4000)
    assert ans.hold_temperature == pytest.approx(C - 12.0)
    # the longest hold: the upper end of the 90 % interval equals the target there
    t2, y2 = hold_history(C - 12.0, ans.longest_hold / 3600)
    r = nuc.freeze_probability(t2, y2, 5e-6, m, liquidus=C, draws=4000)
    assert r.interval[1] == pytest.approx(0.01, rel=1e-3)
    # the largest volume
    r = nuc.freeze_probability(t, y, ans.largest_volume, m, liquidus=C, draws=4000)
    assert r.interval[1] == pytest.approx(0.01, rel=1e-3)
    # the coldest hold temperature: the rest of the schedule kept as it was (ramps to -12 C and back)
    ramp = (277.15 - (C - 12.0)) / (0.5 / 60)
    t3 = np.array([0.0, ramp, ramp, ramp + 72 * 3600, ramp + 72 * 3600, 2 * ramp + 72 * 3600])
    tc = ans.coldest_hold_temperature
    y3 = np.array([277.15, C - 12.0, tc, tc, C - 12.0, 277.15])
    r = nuc.freeze_probability(t3, y3, 5e-6, m, liquidus=C, draws=4000)
    assert r.interval[1] == pytest.approx(0.01, rel=1e-2)


# --- properties -------------------------------------------------------------------------------------------
@settings(max_examples=25, deadline=None)
@given(
    vols=st.lists(st.floats(1e-9, 1e-3), min_size=2, max_size=6),
    temps=st.lists(st.floats(240.0, 273.0), min_size=2, max_size=6),
    hours=st.floats(0.01, 2000.0),
    name=st.sampled_from(["sealed-interface", "exposed-interface", "natural-water-bound", "homogeneous-only"]),
)
def test_probability_bounded_and_monotone(vols, temps, hours, name):
    m = nuc.preset(name)
    v = np.sort(np.asarray(vols))
    t = np.sort(np.asarray(temps))
    areas = 1e-4 * (v / 1e-6) ** (2 / 3)
    p = nuc.freeze_probability_map(v, t, hours * 3600, m, C, areas)
    assert np.all((p >= 0) & (p <= 1))
    assert np.all(np.diff(p, axis=0) >= 0)  # larger volume: no smaller probability
    assert np.all(np.diff(p, axis=1) <= 0)  # warmer hold: no larger probability
    longer = nuc.freeze_probability_map(v, t, 2 * hours * 3600, m, C, areas)
    assert np.all(longer >= p)


@settings(max_examples=15, deadline=None)
@given(hours=st.floats(0.1, 500.0), temp=st.floats(255.0, 272.0), vol=st.floats(1e-8, 1e-4))
def test_interval_bounded_and_monotone_in_hold_time(hours, temp, vol):
    m = nuc.preset("exposed-interface")
    t, y = hold_history(temp, hours)
    a = nuc.freeze_probability(t, y, vol, m, C, 1e-4, draws=500)
    t2, y2 = hold_history(temp, hours * 1.5)
    b = nuc.freeze_probability(t2, y2, vol, m, C, 1e-4, draws=500)
    assert 0 <= a.interval[0] <= a.interval[1] <= 1
    assert b.probability >= a.probability
    assert b.interval[1] >= a.interval[1]


def test_cumulative_curve_of_a_long_sampled_history_uses_the_slope_grid():
    # 72 h bath history sampled every 60 s: more pieces x draws than the direct path takes
    from planner.protocol import Schedule, Step
    from planner.schedule import bath_history

    h = bath_history(Schedule(C + 4.0, (Step(0, "ramp", target_temperature=C - 6.0, rate=0.5 / 60),
                                        Step(1, "hold", duration=72 * 3600.0),
                                        Step(2, "ramp", target_temperature=C + 4.0, rate=1.0 / 60))))
    m = nuc.preset("exposed-interface")
    curve = nuc.cumulative_freeze_probability(h.time, h.temperature, 2e-6, m, C, 7.85e-5, points=50, draws=2000)
    total = nuc.freeze_probability(h.time, h.temperature, 2e-6, m, C, 7.85e-5, draws=2000)
    assert curve["probability"][-1] == pytest.approx(total.probability, rel=1e-9)
    assert curve["upper"][-1] == pytest.approx(total.interval[1], rel=5e-3)
    assert curve["lower"][-1] == pytest.approx(total.interval[0], rel=5e-3)


def test_wall_term_adds_its_own_hazard():
    # Poisson processes in volume and on the walls add their hazards (stochastic description, Vali 1971)
    wall = nuc.RateTerm("wall", 5.0, (math.log(1e-3), math.log(0.5)), ((0.0, 0.0), (0.0, 0.0)))
    vol = nuc.preset("natural-water-bound").volume
    m = nuc.NucleationModel("demo-walls", "prior", "vali-1971", "invented demo model with a wall term", vol, None, wall)
    t = np.array([0.0, 86400.0])
    y = np.full(2, C - 7.0)
    r = nuc.freeze_probability(t, y, 1e-6, m, liquidus=C, draws=50, wall_area=3e-4)
    h = 86400.0 * (1e-6 * float(vol.rate(7.0)) + 3e-4 * 1e-3 * math.exp(0.5 * 2.0))
    assert r.probability == pytest.approx(-math.expm1(-h), rel=1e-9)
    grid = nuc.freeze_probability_map([1e-6], [C - 7.0], 86400.0, m, C, wall_areas=[3e-4])
    assert grid[0, 0] == pytest.approx(r.probability, rel=1e-9)
    curve = nuc.cumulative_freeze_probability(t, y, 1e-6, m, C, points=5, draws=50, wall_area=3e-4)
    assert curve["probability"][-1] == pytest.approx(r.probability, rel=1e-9)
    with pytest.raises(InputError, match="wall_area"):
        nuc.freeze_probability(t, y, 1e-6, m, liquidus=C, wall_area=-1.0)


# --- speed-ups that must not change a number ----------------------------------------------------------------
@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(min_value=-1e6, max_value=1e6, allow_nan=False), min_size=1, max_size=300),
       st.floats(min_value=0.0, max_value=1.0))
def test_quantile_linear_is_numpys_quantile_to_the_bit(values, quantile):
    x = np.asarray(values)
    assert nuc._quantile_linear(x, quantile) == float(np.quantile(x, quantile))


def test_quantile_linear_at_the_draw_counts_and_quantiles_the_planner_uses():
    rng = np.random.default_rng(5)
    for n in (1, 2, 1000, nuc.DEFAULT_DRAWS):
        x = np.exp(rng.normal(0.0, 5.0, n))
        for q in (0.05, 0.5, 0.95, 0.975):
            assert nuc._quantile_linear(x, q) == float(np.quantile(x, q))
    assert math.isnan(nuc._quantile_linear(np.array([1.0, np.nan, 2.0]), 0.5))


def _terms_equal(a, b) -> bool:
    return all(np.array_equal(getattr(a, name), getattr(b, name)) for name in
               ("per_volume", "per_area", "homogeneous_per_volume", "per_wall_area")) and (
        (a.central_per_volume, a.central_per_area, a.central_homogeneous_per_volume, a.central_per_wall_area)
        == (b.central_per_volume, b.central_per_area, b.central_homogeneous_per_volume, b.central_per_wall_area))


def test_risk_terms_memo_answers_as_a_fresh_computation_and_tells_inputs_apart():
    nuc._RISK_TERMS_MEMO.clear()
    t, y = hold_history(C - 6.0, 2.0)
    model = nuc.preset("exposed-interface")
    first, flags = nuc.risk_terms(t, y, model, C, draws=500)
    again, flags_again = nuc.risk_terms(t, y, model, C, draws=500)
    fresh, fresh_flags = nuc._risk_terms_uncached(t, y, model, C, nuc.DEFAULT_INTERFACIAL, 500, nuc.DEFAULT_SEED)
    assert _terms_equal(first, fresh) and _terms_equal(again, fresh) and flags == fresh_flags == flags_again
    # each caller owns its flag list and RiskTerms object; the shared arrays cannot be changed in place
    flags_again.append("a caller's own note")
    assert nuc.risk_terms(t, y, model, C, draws=500)[1] == fresh_flags
    assert again is not first
    with pytest.raises(ValueError):
        again.per_volume[0] = 0.0
    # every input changes the answer to that input's own fresh answer, never the remembered one
    y_nudged = y.copy()
    y_nudged[1:3] -= 1e-9
    other_model = nuc.preset("sealed-interface")
    cases = [
        ((t, y_nudged, model, C, nuc.DEFAULT_INTERFACIAL, 500, nuc.DEFAULT_SEED)),
        ((t, y, other_model, C, nuc.DEFAULT_INTERFACIAL, 500, nuc.DEFAULT_SEED)),
        ((t, y, model, C - 0.5, nuc.DEFAULT_INTERFACIAL, 500, nuc.DEFAULT_SEED)),
        ((t, y, model, C, nuc.DEFAULT_INTERFACIAL, 400, nuc.DEFAULT_SEED)),
        ((t, y, model, C, nuc.DEFAULT_INTERFACIAL, 500, nuc.DEFAULT_SEED + 1)),
        ((t * 1.5, y, model, C, nuc.DEFAULT_INTERFACIAL, 500, nuc.DEFAULT_SEED)),
    ]
    for case in cases:
        got, _ = nuc.risk_terms(*case)
        want, _ = nuc._risk_terms_uncached(*case)
        assert _terms_equal(got, want)
        assert not _terms_equal(got, fresh)
    assert len(nuc._RISK_TERMS_MEMO) <= nuc._RISK_TERMS_MEMO_SIZE


def test_constant_rate_terms_with_draws_taken_once_equal_fresh_draws():
    model = nuc.preset("exposed-interface")
    drawn = nuc._constant_rate_draws(model, nuc.DEFAULT_INTERFACIAL, 800, nuc.DEFAULT_SEED)
    for temp in (C + 1.0, C - 2.0, C - 15.0, C - 38.0):
        fresh = nuc._constant_rate_terms(temp, model, C, nuc.DEFAULT_INTERFACIAL, 800, nuc.DEFAULT_SEED)
        reused = nuc._constant_rate_terms(temp, model, C, nuc.DEFAULT_INTERFACIAL, 800, nuc.DEFAULT_SEED, drawn)
        assert _terms_equal(fresh, reused)


def test_exposure_in_place_sum_equals_the_plain_expression():
    rng = np.random.default_rng(3)
    x0 = rng.uniform(2.0, 20.0, 60)
    x1 = x0 + rng.normal(0.0, 1.0, 60)
    x1[::7] = x0[::7]  # holds
    x1[3] = x0[3] + 1e-12  # a piece with u below 1e-9
    dt = rng.uniform(1.0, 100.0, 60)
    b = np.exp(rng.normal(0.0, 0.5, 300))
    b[0] = 0.0
    u = b[:, None] * (x1 - x0)[None, :]
    with np.errstate(over="ignore", invalid="ignore"):
        phi = np.where(np.abs(u) < 1e-9, 1.0 + u / 2, np.expm1(u) / np.where(u == 0, 1.0, u))
    plain = (dt[None, :] * np.exp(b[:, None] * x0[None, :]) * phi).sum(axis=1)
    assert np.array_equal(nuc._exposure(x0, x1, dt, b), plain)
    assert nuc._exposure(x0, x1, dt, 0.7)[0] == pytest.approx(
        float(np.sum(dt * np.exp(0.7 * x0) * np.where(np.abs(0.7 * (x1 - x0)) < 1e-9, 1.0,
                                                      np.expm1(0.7 * (x1 - x0)) / np.where(x1 == x0, 1.0, 0.7 * (x1 - x0))))),
        rel=1e-12)
