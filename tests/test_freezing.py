"""Freezing time: Plank's equation, the enthalpy method, and the Neumann solution."""

import numpy as np
import pytest

from planner.errors import ExtrapolationWarning, InputError, ModelRangeError
from planner.freezing import (
    ICE_CONDUCTIVITY,
    ICE_HEAT_CAPACITY,
    LATENT_HEAT_FUSION,
    SHAPE_FACTORS,
    WATER_CONDUCTIVITY,
    WATER_DENSITY,
    WATER_HEAT_CAPACITY,
    FreezingMedium,
    enthalpy_freezing,
    neumann_front_coefficient,
    plank_flags,
    plank_freezing_time,
    pure_water_medium,
)
from planner.isochoric import recalescence

T0 = 273.15


# --- Plank's equation -----------------------------------------------------------------------------------------
def test_shape_factors_are_planks():
    # Plank 1913 shape factors (P, R): slab 1/2, 1/8; infinite cylinder 1/4, 1/16; sphere 1/6, 1/24 (from
    # memory, as tabulated in food-engineering texts)
    assert SHAPE_FACTORS == {"slab": (0.5, 0.125), "cylinder": (0.25, 0.0625), "sphere": (1 / 6, 1 / 24)}


@pytest.mark.parametrize(
    ("depth", "published_s"),
    [
        # Young & Freedman, University Physics (11th ed., chapter 17 problem on ice growing on a lake; edition
        # and problem number from memory), worked solution: rho = 920 kg/m3, L = 334 kJ/kg, k = 1.6 W/(m K),
        # air 10 C below freezing, surface of the ice at the air temperature: 0.25 m of ice in 6.0e5 s,
        # 40 m in 1.5e10 s. Ice growing down from one face is half of Plank's slab cooled on both faces,
        # with h -> infinity: t = rho L (2x)^2 / (8 k dT) = rho L x^2 / (2 k dT).
        pytest.param(0.25, 6.0e5, id="young-freedman-ch17-0.25m"),
        pytest.param(40.0, 1.5e10, id="young-freedman-ch17-40m"),
    ],
)
def test_plank_matches_textbook_quasi_steady_ice_growth(depth, published_s):
    t = plank_freezing_time("slab", 2 * depth, 920.0, 334e3, T0, T0 - 10.0, np.inf, 1.6)
    assert t == pytest.approx(published_s, rel=0.05)  # two significant figures
    assert float(f"{t:.2g}") == published_s


def test_plank_scalar_and_array():
    scalar = plank_freezing_time("sphere", 0.02, 1000.0, 333.4e3, T0, T0 - 10.0, 100.0, 2.2)
    array = plank_freezing_time("sphere", np.array([0.02, 0.04]), 1000.0, 333.4e3, T0, T0 - 10.0, 100.0, 2.2)
    assert isinstance(scalar, float) and array.shape == (2,)
    assert array[0] == pytest.approx(scalar)
    # t = rho L / dT (P a / h + R a^2 / k): doubling a doubles the surface term and quadruples the conduction
    surface = 1000 * 333.4e3 / 10 * (1 / 6) * np.array([0.02, 0.04]) / 100
    inner = 1000 * 333.4e3 / 10 * (1 / 24) * np.array([0.02, 0.04]) ** 2 / 2.2
    assert array == pytest.approx(surface + inner, rel=1e-12)


def test_plank_refuses_a_medium_warmer_than_the_freezing_point():
    with pytest.raises(ModelRangeError, match="medium_temperature"):
        plank_freezing_time("slab", 0.01, 1000.0, 333.4e3, T0, T0 + 1.0, 100.0, 2.2)
    with pytest.raises(InputError, match="geometry"):
        plank_freezing_time("cube", 0.01, 1000.0, 333.4e3, T0, T0 - 1.0, 100.0, 2.2)


def test_plank_flags_large_stefan_numbers():
    assert plank_flags(T0, T0 - 10.0, LATENT_HEAT_FUSION) == []
    with pytest.warns(ExtrapolationWarning, match="stefan_number"):
        flags = plank_flags(T0, T0 - 100.0, LATENT_HEAT_FUSION)  # Ste = 2050 * 100 / 333400 = 0.61
    assert [f.code for f in flags] == ["extrapolated"]


# --- the enthalpy method against Plank ---------------------------------------------------------------------------
@pytest.mark.parametrize("geometry", ["slab", "cylinder", "sphere"])
@pytest.mark.parametrize("h", [50.0, 500.0])
def test_enthalpy_method_agrees_with_plank_at_small_stefan_number(geometry, h):
    # Pure water starting at its freezing point, bath 5 K below (Ste = 0.031): Plank neglects the sensible
    # heat of the frozen layer, so the numerical time is longer, by a few percent; the enthalpy method's own
    # grid error is first order in the cell size (about 2 % at 48 shells, from the mushy cell's conductivity).
    a = 0.02  # slab thickness / diameter [m]
    bath = T0 - 5.0
    plank = plank_freezing_time(geometry, a, WATER_DENSITY, LATENT_HEAT_FUSION, T0, bath, h, ICE_CONDUCTIVITY)
    path = enthalpy_freezing(geometry, a / 2, pure_water_medium(), T0, bath, h, duration=2 * plank,
                             n_cells=48, stop_at_centre_ice_fraction=0.999)
    numerical = path.time_to_centre_ice_fraction(0.999)
    assert plank * 0.99 <= numerical <= plank * 1.07


# --- the enthalpy method against Neumann -------------------------------------------------------------------------
def test_neumann_root_matches_published_table():
    # Alexiades & Solomon 1993, one-phase Stefan problem, lambda exp(lambda^2) erf(lambda) = St/sqrt(pi):
    # St = 0.1 -> 0.2200, 0.5 -> 0.4648, 1.0 -> 0.6201 (from memory)
    assert neumann_front_coefficient(0.1) == pytest.approx(0.2200, abs=5e-5)
    assert neumann_front_coefficient(0.5) == pytest.approx(0.4648, abs=5e-5)
    assert neumann_front_coefficient(1.0) == pytest.approx(0.6201, abs=5e-5)


@pytest.mark.parametrize("superheat", [0.0, 5.0])
def test_enthalpy_front_follows_neumann_solution(superheat):
    # Half-space of water at T_f + superheat, surface held 10 K below freezing from t = 0 (Carslaw & Jaeger
    # section 11.2): front at 2 lambda sqrt(alpha_s t). A 5 cm slab is a half-space for 30 min here.
    surface = T0 - 10.0
    alpha_s = ICE_CONDUCTIVITY / (WATER_DENSITY * ICE_HEAT_CAPACITY)
    alpha_l = WATER_CONDUCTIVITY / (WATER_DENSITY * WATER_HEAT_CAPACITY)
    lam = neumann_front_coefficient(ICE_HEAT_CAPACITY * 10.0 / LATENT_HEAT_FUSION,
                                    WATER_HEAT_CAPACITY * superheat / LATENT_HEAT_FUSION, alpha_s / alpha_l)
    path = enthalpy_freezing("slab", 0.05, pure_water_medium(), T0 + superheat, surface, np.inf, duration=1800.0,
                             n_cells=200, record_interval=300.0, time_step=2.0)
    for i in (2, 4, len(path.time) - 1):  # 10, 20 and 30 min
        exact = 2 * lam * np.sqrt(alpha_s * path.time[i])
        assert path.front_depth(i) == pytest.approx(exact, rel=0.02)
    assert path.centre_ice_fraction[-1] < 1e-9  # the far side never froze: a half-space indeed


# --- seeding, recalescence, freeze-concentration -------------------------------------------------------------
def test_seeded_supercooled_water_recalesces_to_the_adiabatic_fraction():
    # Latent heat of the first ice warms the rest to 0 C: x = c_l dT / L (REFERENCES section 6). The
    # recalescence model computes the same from the IAPWS enthalpies of liquid and ice: agree within 2 %.
    path = enthalpy_freezing("slab", 0.005, pure_water_medium(), T0 - 5.0, T0 - 5.0, 1e-3, duration=10.0, n_cells=8)
    assert path.centre_temperature[-1] == pytest.approx(T0, abs=1e-3)
    iapws = recalescence(T0 - 5.0, None).ice_fraction_of_water
    assert path.centre_ice_fraction[-1] == pytest.approx(iapws, rel=0.02)


def _dilute_solution(depression: float) -> FreezingMedium:
    liquidus = T0 - depression

    def ice(T):
        T = np.asarray(T, dtype=float)
        return np.where(T < liquidus, 1.0 - depression / np.maximum(T0 - T, 1e-12), 0.0)

    return FreezingMedium(liquidus=liquidus, ice_fraction=ice, water_mass_fraction=0.9)


def test_solution_plateaus_at_its_liquidus_and_ends_at_equilibrium():
    # Ideal dilute freeze-concentration (the unfrozen liquid concentrates so that its freezing point is the
    # temperature): ice fraction of water f = 1 - dT_f / (T_m - T) below the liquidus.
    medium = _dilute_solution(2.0)
    path = enthalpy_freezing("cylinder", 0.005, medium, T0 - 5.0, T0 - 20.0, 25.0, duration=4 * 3600.0, n_cells=16)
    # seeded 3 K below its liquidus, the first ice concentrates the rest a little: the plateau sits just below
    assert T0 - 2.1 < path.plateau_temperature < T0 - 2.0
    assert path.centre_temperature[-1] == pytest.approx(T0 - 20.0, abs=0.05)
    assert path.centre_ice_fraction[-1] == pytest.approx(1 - 2.0 / 20.0, abs=2e-3)
    assert np.all(np.diff(path.centre_ice_fraction[1:]) >= -1e-9)  # ice only grows while the bath is constant
    assert path.unfrozen_fraction[-1] == pytest.approx(0.1, abs=2e-3)


def test_bath_and_h_may_follow_a_programme():
    ramp = lambda t: T0 - 2.0 - t / 60.0  # 1 K/min from -2 C  # noqa: E731
    path = enthalpy_freezing("sphere", 0.004, _dilute_solution(1.0), T0 - 2.0, ramp, lambda t: 25.0,
                             duration=1800.0, n_cells=12)
    assert path.bath_temperature[-1] == pytest.approx(T0 - 32.0, abs=1e-6)
    assert path.centre_temperature[-1] > path.bath_temperature[-1]  # the centre lags the ramp
    assert np.all(np.diff(path.mean_temperature) <= 1e-9)


def test_bad_enthalpy_inputs_are_refused():
    with pytest.raises(ModelRangeError, match="half_dimension"):
        enthalpy_freezing("slab", 0.0, pure_water_medium(), T0, T0 - 5, 100.0, duration=10.0)
    with pytest.raises(ModelRangeError, match="heat_transfer_coefficient"):
        enthalpy_freezing("slab", 0.01, pure_water_medium(), T0, T0 - 5, 0.0, duration=10.0)
    with pytest.raises(ModelRangeError, match="ice_fraction"):
        rising = FreezingMedium(liquidus=T0, ice_fraction=lambda T: np.where(np.asarray(T) < T0, 0.5 + (np.asarray(T) - T0) / 100, 0.0))
        enthalpy_freezing("slab", 0.01, rising, T0, T0 - 60, 100.0, duration=10.0)


def test_latent_heat_agrees_with_iapws():
    # 333.4 kJ/kg (Incropera & DeWitt, from memory) against the IAPWS value the water-and-ice module computes
    # (IAPWS-95 liquid minus R10-06 ice enthalpy at the melting point, 0.101325 MPa): agree to 0.1 %.
    from planner.water_ice import latent_heat

    assert LATENT_HEAT_FUSION == pytest.approx(float(latent_heat(273.152519, 101325.0)), rel=1e-3)


# --- speed-ups that must not change a number ----------------------------------------------------------------
def test_sample_in_time_takes_an_array_answer_only_when_it_matches_one_by_one_calls():
    from planner.freezing import sample_in_time

    times = np.linspace(0.0, 100.0, 11)

    def ramp(t):
        return 270.0 - 0.1 * np.asarray(t)

    def scalar_only(t):
        return float(270.0 - 0.1 * t)  # float() of an array of 11 raises TypeError

    def array_blind(t):
        return float(np.max(np.asarray(t)))  # answers an array with one number: not accepted

    def wrong_for_arrays(t):
        t = np.asarray(t)
        return np.full(t.shape, 1.0) if t.ndim else 270.0 - 0.1 * float(t)  # array answer disagrees

    one_by_one = np.array([270.0 - 0.1 * t for t in times])
    assert np.array_equal(sample_in_time(ramp, times), one_by_one)
    assert np.array_equal(sample_in_time(scalar_only, times), one_by_one)
    assert np.array_equal(sample_in_time(array_blind, times), times)
    assert np.array_equal(sample_in_time(wrong_for_arrays, times), one_by_one)
    assert sample_in_time(ramp, 5.0) == pytest.approx(269.5, rel=1e-15)  # scalar in, 0-d array out


def test_enthalpy_freezing_gives_the_same_path_for_array_and_scalar_only_inputs():
    def bath_array(t):
        return T0 - 5.0 - 0.002 * np.asarray(t)

    def bath_scalar(t):
        if np.ndim(t):
            raise TypeError("scalar times only")
        return float(T0 - 5.0 - 0.002 * t)

    def h_array(t):
        return np.where(np.asarray(t) < 600.0, 40.0, 80.0)

    def h_scalar(t):
        if np.ndim(t):
            raise TypeError("scalar times only")
        return 40.0 if t < 600.0 else 80.0

    a = enthalpy_freezing("cylinder", 0.005, pure_water_medium(), T0 - 3.0, bath_array, h_array, duration=1800.0,
                          n_cells=12, initial_ice="equilibrium")
    b = enthalpy_freezing("cylinder", 0.005, pure_water_medium(), T0 - 3.0, bath_scalar, h_scalar, duration=1800.0,
                          n_cells=12, initial_ice="equilibrium")
    for name in ("time", "bath_temperature", "centre_temperature", "mean_ice_fraction", "profile_temperature"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name


def test_lapack_tridiagonal_solve_equals_solve_banded():
    from scipy.linalg import solve_banded
    from scipy.linalg.lapack import dgtsv

    rng = np.random.default_rng(11)
    n = 32
    lower, upper = -rng.uniform(0.0, 1.0, n - 1), -rng.uniform(0.0, 1.0, n - 1)
    diag, rhs = rng.uniform(2.0, 3.0, n), rng.normal(0.0, 1.0, n)
    banded = np.zeros((3, n))
    banded[0, 1:], banded[1], banded[2, :-1] = upper, diag, lower
    assert np.array_equal(dgtsv(lower, diag, upper, rhs)[3], solve_banded((1, 1), banded, rhs))


def test_enthalpy_freezing_refuses_a_bath_or_h_that_fails_between_probe_times():
    def bath(t):  # invented: finite at the 257 probe times only
        t = np.asarray(t, dtype=float)
        probe = np.isclose(np.remainder(t, 1800.0 / 256), 0.0) | np.isclose(np.remainder(t, 1800.0 / 256), 1800.0 / 256)
        return np.where(probe | (t < 100.0), T0 - 10.0, np.nan)

    with pytest.raises(ModelRangeError, match="bath"):
        enthalpy_freezing("slab", 0.005, pure_water_medium(), T0 - 3.0, bath, 50.0, duration=1800.0, n_cells=8,
                          time_step=1.0)

    def h(t):
        t = np.asarray(t, dtype=float)
        return np.where((t > 100.0) & (t < 101.5), -1.0, 50.0)

    with pytest.raises(ModelRangeError, match="heat_transfer_coefficient"):
        enthalpy_freezing("slab", 0.005, pure_water_medium(), T0 - 3.0, T0 - 10.0, h, duration=1800.0, n_cells=8,
                          time_step=1.0)


def test_runs_solved_together_equal_runs_solved_alone():
    # several surface coefficients in one stacked solve (uncoupled blocks, each run's Newton iteration
    # stopping on its own residual): every path must be the one the run gives alone, to the last bit
    from planner.freezing import enthalpy_freezing_runs

    medium = _dilute_solution(2.0)
    bath = lambda t: T0 - 5.0 - np.asarray(t) / 120.0  # 0.5 K/min from -5 C  # noqa: E731
    coefficients = [25.0, lambda t: np.where(np.asarray(t) < 900.0, 60.0, 120.0), np.inf]
    stops = [None, 0.5, 0.8]
    together = enthalpy_freezing_runs("cylinder", 0.005, medium, T0 - 4.0, bath, coefficients, duration=3600.0,
                                      n_cells=12, stop_at_centre_ice_fraction=stops)
    assert len(together) == 3
    assert together[2].time[-1] < together[1].time[-1] < together[0].time[-1]  # the early stops took effect
    for h, stop, path in zip(coefficients, stops, together, strict=True):
        alone = enthalpy_freezing("cylinder", 0.005, medium, T0 - 4.0, bath, h, duration=3600.0, n_cells=12,
                                  stop_at_centre_ice_fraction=stop)
        for name in ("time", "bath_temperature", "centre_temperature", "surface_temperature", "mean_temperature",
                     "centre_ice_fraction", "mean_ice_fraction", "profile_temperature", "profile_ice_fraction"):
            assert np.array_equal(getattr(path, name), getattr(alone, name)), name
        assert path.parameters == alone.parameters


def test_runs_refuse_a_stop_list_of_the_wrong_length():
    from planner.freezing import enthalpy_freezing_runs

    with pytest.raises(ModelRangeError, match="stop_at_centre_ice_fraction"):
        enthalpy_freezing_runs("slab", 0.005, pure_water_medium(), T0, T0 - 5.0, [50.0, 100.0], duration=60.0,
                               n_cells=8, stop_at_centre_ice_fraction=[0.5])


@pytest.mark.parametrize(
    ("geometry", "initial", "h", "kwargs"),
    [
        # the Plank comparison's sphere at h = 50 W/(m2 K), run until its centre has frozen
        pytest.param("sphere", T0, 50.0, {"n_cells": 48, "stop_at_centre_ice_fraction": 0.999}, id="sphere-h50"),
        # the Neumann comparison with 5 K of superheat, surface held at the bath
        pytest.param("slab", T0 + 5.0, np.inf, {"n_cells": 200, "record_interval": 300.0, "time_step": 2.0},
                     id="slab-surface-held"),
    ],
)
def test_enthalpy_temperatures_stay_between_bath_and_start(geometry, initial, h, kwargs):
    # Maximum principle of heat conduction (a standard property of the heat equation, from memory): with
    # the bath held constant below a sample that starts at or above its freezing point, no point of the
    # sample ever falls below the bath nor rises above its start. Every implicit step must also converge
    # (no "not-converged" flag for an energy residual left behind).
    bath = T0 - 5.0 if geometry == "sphere" else T0 - 10.0
    # as long as in the comparisons above: twice Plank's time for the sphere, 30 min for the slab
    duration = (2 * plank_freezing_time("sphere", 0.02, WATER_DENSITY, LATENT_HEAT_FUSION, T0, bath, h,
                                        ICE_CONDUCTIVITY) if geometry == "sphere" else 1800.0)
    path = enthalpy_freezing(geometry, 0.01 if geometry == "sphere" else 0.05, pure_water_medium(), initial, bath,
                             h, duration=duration, **kwargs)
    assert [f.code for f in path.flags] == []
    assert path.profile_temperature.min() >= bath - 1e-6
    assert path.profile_temperature.max() <= initial + 1e-6


# --- the Newton iteration converges from any start, or says that it did not ------------------------------------
# Invented hard cases: long steps, a large or infinite h, starts far above the liquidus or deep in supercooled
# liquid. Each run's first implicit step starts its Newton iteration from the previous step's enthalpies; a
# plain Newton iteration from there left energy residuals of 5e7-1e10 J/kg and temperatures 5 K beyond the
# bath (the end of its table), and in three cases shells 14-95 K away from the bath at the end, in all but
# the second case. The second
# defeats stopping the updates at the kinks of T(H) without halving them: that iteration cycles there.
HARD_CASES = [
    pytest.param("slab", pure_water_medium(), 20.0, -30.0, np.inf, 300.0, 32, id="slab-water-held-surface-300s"),
    pytest.param("slab", pure_water_medium(), 30.0, -60.0, 100.0, 100.0, 8, id="slab-water-h100-100s"),
    pytest.param("sphere", pure_water_medium(), 30.0, -60.0, 1e5, 300.0, 24, id="sphere-water-h1e5-300s"),
    pytest.param("sphere", pure_water_medium(), 30.0, -60.0, 1e4, 100.0, 64, id="sphere-water-h1e4-100s-64"),
    pytest.param("cylinder", _dilute_solution(2.0), 30.0, -60.0, 1e4, 300.0, 24, id="cylinder-solution-300s"),
    pytest.param("cylinder", _dilute_solution(0.3), -8.0, -60.0, np.inf, 1000.0, 24,
                 id="cylinder-supercooled-solution-1000s"),
]


@pytest.mark.parametrize(("geometry", "medium", "start_c", "bath_c", "h", "step", "cells"), HARD_CASES)
def test_newton_converges_where_the_previous_enthalpies_are_a_poor_start(geometry, medium, start_c, bath_c, h,
                                                                         step, cells):
    start, bath = T0 + start_c, T0 + bath_c
    path = enthalpy_freezing(geometry, 0.005, medium, start, bath, h, duration=20 * step, n_cells=cells,
                             time_step=step)
    assert [f.code for f in path.flags] == []
    assert path.parameters["unconverged_steps"] == 0
    assert path.parameters["worst_energy_residual_j_per_kg"] < path.parameters["energy_tolerance_j_per_kg"]
    # maximum principle (a standard property of the heat equation, from memory): with the bath constant, no
    # shell falls below the bath nor rises above the warmer of the start and (recalescence) the liquidus.
    # Allowance: the energy tolerance, 1e-7 L = 0.033 J/kg per step, is 1.6e-5 K of ice; 1e-4 K is a few steps'.
    assert path.profile_temperature.min() >= bath - 1e-4
    assert path.profile_temperature.max() <= max(start, medium.liquidus) + 1e-6
    # after 20 long steps the whole sample sits at the bath, with its equilibrium ice there: all of pure
    # water, 1 - dT_f / (T_m - T) of an ideal dilute solution (Blagden's law: the depression is proportional
    # to the molality, which the ice concentrates by 1 / (1 - f); from memory)
    assert path.profile_temperature[-1] == pytest.approx(np.full(cells, bath), abs=0.01)
    equilibrium = float(medium.ice_fraction(np.array([bath]))[0])
    assert path.profile_ice_fraction[-1] == pytest.approx(np.full(cells, equilibrium), abs=1e-3)


def test_hard_runs_solved_together_equal_runs_solved_alone():
    # the halving of an update is decided run by run: a run that needs it leaves the others' updates alone
    from planner.freezing import enthalpy_freezing_runs

    coefficients, stops = [100.0, 1e4, np.inf], [None, 0.9, None]
    together = enthalpy_freezing_runs("sphere", 0.005, pure_water_medium(), T0 + 30.0, T0 - 60.0, coefficients,
                                      duration=2000.0, n_cells=16, time_step=100.0, stop_at_centre_ice_fraction=stops)
    for h, stop, path in zip(coefficients, stops, together, strict=True):
        alone = enthalpy_freezing("sphere", 0.005, pure_water_medium(), T0 + 30.0, T0 - 60.0, h, duration=2000.0,
                                  n_cells=16, time_step=100.0, stop_at_centre_ice_fraction=stop)
        assert [f.code for f in path.flags] == []
        for name in ("time", "centre_temperature", "mean_temperature", "profile_temperature", "profile_ice_fraction"):
            assert np.array_equal(getattr(path, name), getattr(alone, name)), name
        assert path.parameters == alone.parameters


def test_a_step_that_does_not_converge_is_flagged_with_its_time_and_residual():
    # no Newton update allowed: the first step keeps its start, far from the solution
    path = enthalpy_freezing("slab", 0.005, pure_water_medium(), T0 + 5.0, T0 - 20.0, 500.0, duration=600.0,
                             n_cells=12, time_step=10.0, max_iterations=0)
    flags = [f for f in path.flags if f.code == "not-converged"]
    assert len(flags) == 1
    assert "t = 10 s" in flags[0].message and "0 Newton updates" in flags[0].message
    assert f"{path.parameters['worst_energy_residual_j_per_kg']:.3g} J/kg" in flags[0].message
    assert path.parameters["first_unconverged_step_time_s"] == pytest.approx(10.0)
    assert path.parameters["unconverged_steps"] >= 1
    assert path.parameters["worst_energy_residual_j_per_kg"] > path.parameters["energy_tolerance_j_per_kg"]
    # the same case with the default allowance converges and carries no flag
    solved = enthalpy_freezing("slab", 0.005, pure_water_medium(), T0 + 5.0, T0 - 20.0, 500.0, duration=600.0,
                               n_cells=12, time_step=10.0)
    assert solved.flags == [] and solved.parameters["first_unconverged_step_time_s"] is None


def test_stacked_runs_flag_only_the_run_that_did_not_converge():
    from planner.freezing import enthalpy_freezing_runs

    # one update per step: enough for a slow surface (a small change per step), not for a held surface
    slow, held = enthalpy_freezing_runs("slab", 0.005, pure_water_medium(), T0 + 5.0, T0 - 20.0, [5.0, np.inf],
                                        duration=600.0, n_cells=12, time_step=10.0, max_iterations=1)
    assert [f.code for f in held.flags] == ["not-converged"]
    assert "not-converged" not in [f.code for f in slow.flags]


def test_max_iterations_must_be_a_whole_number_of_updates():
    with pytest.raises(ModelRangeError, match="max_iterations"):
        enthalpy_freezing("slab", 0.005, pure_water_medium(), T0, T0 - 5.0, 100.0, duration=60.0, max_iterations=-1)
    with pytest.raises(ModelRangeError, match="max_iterations"):
        enthalpy_freezing("slab", 0.005, pure_water_medium(), T0, T0 - 5.0, 100.0, duration=60.0, max_iterations=2.5)


def test_the_solver_interpolates_exactly_as_numpy_interp():
    # the enthalpy method calls numpy's compiled interpolation directly: on real arrays it must equal
    # np.interp to the last bit, inside, at the nodes of and beyond the table
    from planner.freezing import _interp

    rng = np.random.default_rng(5)
    xp = np.cumsum(rng.uniform(0.01, 1.0, 200))
    fp = rng.normal(0.0, 1.0, 200)
    x = np.concatenate([rng.uniform(xp[0] - 5.0, xp[-1] + 5.0, 500), xp, [xp[0] - 1.0, xp[-1] + 1.0]])
    assert np.array_equal(_interp(x, xp, fp), np.interp(x, xp, fp))
