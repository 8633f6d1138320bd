"""Heat transfer into the sample: checked against closed forms, series solutions and reference libraries."""

import csv
import importlib.util
import warnings
from pathlib import Path

import numpy as np
import pytest

from planner import heat_transfer as ht
from planner.errors import InputError
from planner.references import bibliography

DATA = Path(__file__).parent / "data"
SERIES = list(csv.DictReader((DATA / "conduction_series.csv").open()))


def _load_generator(name: str):
    spec = importlib.util.spec_from_file_location(name, DATA / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


GEN = _load_generator("make_conduction_series")

# A plain test material (rho c = 4 MJ/(m3 K), k = 0.5 W/(m K)); the checks are dimensionless.
MAT = ht.Material("test", 1000.0, 4000.0, 0.5, 273.15, "iapws-95")
L = 0.01  # m


def _body(geometry: str, aspect: float | None = None) -> ht.Body:
    if geometry == "slab":
        return ht.Body("slab", thickness=2 * L)
    if geometry == "sphere":
        return ht.Body("sphere", radius=L)
    if geometry == "cylinder":  # "infinite": 400 radii long; the centre sees no end effect
        return ht.Body("cylinder", radius=L, height=400 * L)
    return ht.Body("cylinder", radius=L, height=2 * L * aspect)


def _step(body: ht.Body, bi: float, fo: float, cells: int = 16, model: str = "conduction"):
    """Unit step: sample at 1 K above a bath held at 273.15 K from t = 0; returns the history at Fo."""
    h = bi * MAT.conductivity / L
    t_end = fo * L * L / MAT.diffusivity
    out_t = ht.refined_times([0.0, t_end], t_end / 400)
    return ht.solve(body, MAT, [0.0, t_end], [273.15, 273.15], h, output_time=out_t,
                    initial_temperature=274.15, cells=cells, model=model)


# --- Incropera & DeWitt Table 5.1: first eigenvalue and coefficient of the one-term series ---------------
# (from memory; Bi = hL/k for the plane wall, h r0/k for cylinder and sphere). Asserted to the table's four
# decimals; the cylinder entry at Bi = 2 (1.5995) is tied to the root 1.599449, so one unit of the last
# digit is allowed for the table's rounding throughout.
INCROPERA_TABLE_5_1 = {
    # Bi: (wall zeta1, C1), (cylinder zeta1, C1), (sphere zeta1, C1)
    0.01: ((0.0998, 1.0017), (0.1412, 1.0025), (0.1730, 1.0030)),
    0.1: ((0.3111, 1.0161), (0.4417, 1.0246), (0.5423, 1.0298)),
    0.5: ((0.6533, 1.0701), (0.9408, 1.1143), (1.1656, 1.1441)),
    1.0: ((0.8603, 1.1191), (1.2558, 1.2071), (1.5708, 1.2732)),
    2.0: ((1.0769, 1.1785), (1.5995, 1.3384), (2.0288, 1.4793)),
    5.0: ((1.3138, 1.2402), (1.9898, 1.5029), (2.5704, 1.7870)),
    10.0: ((1.4289, 1.2620), (2.1795, 1.5677), (2.8363, 1.9249)),
}


@pytest.mark.parametrize("bi", sorted(INCROPERA_TABLE_5_1))
@pytest.mark.parametrize(("column", "geometry"), [(0, "slab"), (1, "cylinder"), (2, "sphere")])
def test_incropera_table_5_1_eigenvalues_of_the_series(bi, column, geometry):
    """The series reference (Carslaw & Jaeger forms) has Incropera & DeWitt Table 5.1's first terms."""
    zeta, c1 = INCROPERA_TABLE_5_1[bi][column]
    z = GEN.roots(geometry, bi)[:1]
    assert z[0] == pytest.approx(zeta, abs=1.5e-4)
    assert GEN.coefficients(geometry, z)[0] == pytest.approx(c1, abs=1.5e-4)


@pytest.mark.parametrize(("geometry", "column"), [("slab", 0), ("cylinder", 1), ("sphere", 2)])
@pytest.mark.parametrize("bi", [0.5, 2.0])
def test_incropera_table_5_1_one_term_centre_temperature(geometry, column, bi):
    """Solver centre temperature at Fo = 0.5 against the one-term form C1 exp(-zeta1^2 Fo), Table 5.1."""
    zeta, c1 = INCROPERA_TABLE_5_1[bi][column]
    expected = c1 * np.exp(-zeta**2 * 0.5)  # one-term error < 1e-4 at Fo = 0.5
    hist = _step(_body(geometry), bi, 0.5)
    assert hist.centre_temperature[-1] - 273.15 == pytest.approx(expected, abs=3e-3)


@pytest.mark.parametrize("row", SERIES, ids=lambda r: f"{r['geometry']}-Bi{r['bi']}-Fo{r['fo']}")
def test_carslaw_jaeger_series_centre_surface_energy(row):
    """Finite volumes (16 cells) against the full series (tests/data/conduction_series.csv)."""
    aspect = float(row["aspect"]) if row["aspect"] else None
    hist = _step(_body(row["geometry"], aspect), float(row["bi"]), float(row["fo"]))
    assert hist.centre_temperature[-1] - 273.15 == pytest.approx(float(row["theta_centre"]), abs=4e-3)
    assert hist.surface_temperature[-1] - 273.15 == pytest.approx(float(row["theta_surface"]), abs=4e-3)
    body = _body(row["geometry"], aspect)
    lost = -hist.energy[-1] / (MAT.volumetric_heat_capacity * body.volume * 1.0)
    assert lost == pytest.approx(float(row["energy_fraction"]), abs=4e-3)


def test_energy_balance_heat_in_equals_heat_stored():
    """The heat that crossed the surface (integral of h A (T_bath - T_s)) equals the change in rho c V T."""
    body = ht.Body("cylinder", radius=0.0125, height=0.04)
    bt = [0.0, 1800.0, 5400.0, 5400.0, 9000.0]
    bT = [293.15, 263.15, 263.15, 250.0, 250.0]
    h = [20.0, 20.0, 20.0, 150.0, 150.0]
    out_t = ht.refined_times(bt, 5.0, 5000, 200, 1e-3)
    # a plunge is a jump in the heat flow: sample both sides of it so the trapezoid does not straddle it
    out_t = np.sort(np.concatenate((out_t[out_t != 5400.0], [5400.0 - 1e-7, 5400.0 + 1e-7])))
    hist = ht.solve(body, MAT, bt, bT, h, output_time=out_t)
    crossed = np.trapezoid(hist.heat_flow, hist.time)
    assert crossed == pytest.approx(hist.energy[-1], rel=2e-3)
    # and the stored energy of the whole body is rho c V times its mean temperature change
    assert hist.energy[-1] == pytest.approx(
        MAT.volumetric_heat_capacity * body.volume * (hist.mean_temperature[-1] - 293.15), rel=1e-9)


def test_refined_grid_converges_second_order():
    """Error against the series falls about fourfold per halving of the cell size."""
    row = next(r for r in SERIES if r["geometry"] == "sphere" and r["bi"] == "10" and r["fo"] == "0.05")
    errors = []
    for cells in (8, 16, 32):
        hist = _step(_body("sphere"), 10.0, 0.05, cells=cells)
        errors.append(abs(hist.surface_temperature[-1] - 273.15 - float(row["theta_surface"]))
                      + abs(hist.centre_temperature[-1] - 273.15 - float(row["theta_centre"])))
    assert errors[1] < errors[0] / 3 and errors[2] < errors[1] / 3


# --- lumped model against its exact exponential (Incropera & DeWitt eqs. 5.6-5.7) --------------------------

def test_lumped_step_is_the_exact_exponential():
    body = ht.Body("sphere", radius=0.005)
    tau = float(ht.lumped_time_constant(MAT.volumetric_heat_capacity, body.volume, 10.0, body.area))
    t = np.linspace(0.0, 5 * tau, 50)
    hist = ht.solve(body, MAT, [0.0, t[-1]], [263.15, 263.15], 10.0, output_time=t, initial_temperature=293.15,
                    model="lumped")
    np.testing.assert_allclose(hist.centre_temperature, ht.lumped_step_response(t, 293.15, 263.15, tau),
                               rtol=0, atol=1e-9)


def test_lumped_ramp_lag_is_b_tau():
    body = ht.Body("cylinder", radius=0.006, height=0.02)
    rate = 1.0 / 60.0  # 1 K/min
    tau = float(ht.lumped_time_constant(MAT.volumetric_heat_capacity, body.volume, 25.0, body.area))
    t = np.linspace(0.0, 3600.0, 61)
    hist = ht.solve(body, MAT, [0.0, 3600.0], [293.15, 293.15 - 60.0], 25.0, output_time=t, model="lumped")
    lag = hist.centre_temperature - hist.bath_temperature
    np.testing.assert_allclose(lag, ht.lumped_ramp_lag(t, rate, tau), rtol=1e-9, atol=1e-9)
    assert ht.max_lag(hist, 0.0, 3600.0) == pytest.approx(rate * tau * -np.expm1(-3600.0 / tau), rel=1e-9)


def test_lumped_and_conduction_agree_at_small_biot():
    body = ht.Body("sphere", radius=0.005)  # Bi (r0) = 2 * 0.005 / 0.5 = 0.02
    t = [0.0, 1800.0]
    a = ht.solve(body, MAT, t, [293.15, 263.15], 2.0, model="lumped")
    b = ht.solve(body, MAT, t, [293.15, 263.15], 2.0, model="conduction")
    assert b.mean_temperature[-1] == pytest.approx(a.centre_temperature[-1], abs=0.01 * 30)


def test_lumped_functions_scalar_and_array():
    assert float(ht.lumped_step_response(0.0, 300.0, 250.0, 10.0)) == 300.0
    arr = ht.lumped_step_response(np.array([0.0, 10.0]), 300.0, 250.0, 10.0)
    assert arr.shape == (2,) and arr[1] == pytest.approx(250.0 + 50.0 / np.e)
    assert float(ht.lumped_ramp_lag(1e9, 0.5, 4.0)) == pytest.approx(2.0)
    assert ht.lumped_ramp_lag(np.array([0.0, 1e9]), 0.5, 4.0).tolist() == pytest.approx([0.0, 2.0])
    assert float(ht.lumped_time_constant(4e6, 1e-6, 10.0, 1e-3)) == pytest.approx(400.0)
    assert ht.lumped_time_constant(4e6, np.array([1e-6, 2e-6]), 10.0, 1e-3).tolist() == pytest.approx([400.0, 800.0])


def test_biot_number_scalar_and_array():
    assert float(ht.biot_number(5.0, 0.005, 0.5)) == pytest.approx(0.05)
    assert ht.biot_number(np.array([5.0, 100.0]), 0.005, 0.5).tolist() == pytest.approx([0.05, 1.0])


# --- hold, lag and band rates -----------------------------------------------------------------------

def test_time_to_within_of_a_plunge_is_tau_ln():
    """Lumped sample plunged 20 K: within 0.5 K after tau ln(20/0.5) (exact exponential)."""
    body = ht.Body("sphere", radius=0.005)
    tau = float(ht.lumped_time_constant(MAT.volumetric_heat_capacity, body.volume, 50.0, body.area))
    bt = [0.0, 0.0, 10 * tau]
    hist = ht.solve(body, MAT, bt, [283.15, 263.15, 263.15], 50.0, model="lumped", initial_temperature=283.15)
    assert ht.time_to_within(hist, 0.0, 10 * tau, 263.15) == pytest.approx(tau * np.log(40.0), abs=2e-3)
    assert ht.time_to_within(hist, 0.0, 2 * tau, 263.15) is None  # exp(-2) * 20 K = 2.7 K off at the end


def test_time_to_within_conduction_matches_series():
    """Sphere, Bi = 1: the surface comes within first; the centre sets the time (series root-found)."""
    bi, dt0 = 1.0, 10.0
    h = bi * MAT.conductivity / L
    t_end = 2.0 * L * L / MAT.diffusivity
    body = ht.Body("sphere", radius=L)
    hist = ht.solve(body, MAT, [0.0, 0.0, t_end], [283.15, 273.15, 273.15], h, initial_temperature=283.15)
    got = ht.time_to_within(hist, 0.0, t_end, 273.15, 0.5)
    from scipy.optimize import brentq
    fo = brentq(lambda f: dt0 * GEN.theta("sphere", bi, f, 0.0) - 0.5, 0.05, 2.0)
    assert got * MAT.diffusivity / L**2 == pytest.approx(fo, rel=3e-3)


def test_cooling_rate_through_follows_the_closed_form():
    """Lumped sample on a 10 K/min ramp: crossing times from T = T0 - B t + B tau (1 - exp(-t/tau))."""
    from scipy.optimize import brentq

    body = ht.Body("sphere", radius=0.004)
    b = 10.0 / 60.0
    tau = float(ht.lumped_time_constant(MAT.volumetric_heat_capacity, body.volume, 20.0, body.area))
    bt = [0.0, 600.0, 1200.0, 2400.0]
    bT = [293.15, 193.15, 293.15, 293.15]
    hist = ht.solve(body, MAT, bt, bT, 20.0, output_time=np.linspace(0, 2400, 48001), model="lumped")

    def temp(t):
        return 293.15 - b * t + b * tau * -np.expm1(-t / tau)

    assert temp(600.0) < 243.15  # the band is crossed during the ramp down
    t_u = brentq(lambda t: temp(t) - 263.15, 0, 600)
    t_l = brentq(lambda t: temp(t) - 243.15, 0, 600)
    rates = ht.cooling_rate_through(hist, 263.15, 243.15)
    assert rates.cooling_rate == pytest.approx(20.0 / (t_l - t_u), rel=1e-4)
    assert rates.warming_rate is not None and rates.warming_rate > 0
    assert rates.cooling_points_crossed == 1.0


def test_cooling_rate_through_slowest_point_is_the_centre():
    body = ht.Body("cylinder", radius=0.006, height=0.03)
    bt = [0.0, 0.0, 1800.0]
    hist = ht.solve(body, MAT, bt, [293.15, 77.0, 77.0], 100.0, output_time=ht.refined_times(bt, 1.0, 5000))
    rates = ht.cooling_rate_through(hist, 253.15, 173.15)
    # the slowest point: the smallest of the single-point rates (the centre and the surface among them)
    single = [ht.cooling_rate_through(ht.ThermalHistory(time=hist.time, temperature=hist.temperature[:, [p]]),
                                      253.15, 173.15).cooling_rate for p in range(hist.temperature.shape[1])]
    assert rates.cooling_rate == pytest.approx(min(single), rel=1e-12)
    assert rates.cooling_rate <= single[hist.centre] < single[hist.surface]
    assert rates.warming_rate is None and rates.warming_points_crossed == 0.0


def test_cooling_rate_through_band_not_reached():
    body = ht.Body("sphere", radius=0.004)
    hist = ht.solve(body, MAT, [0.0, 600.0], [293.15, 263.15], 20.0, model="lumped")
    rates = ht.cooling_rate_through(hist, 253.15, 213.15)
    assert rates.cooling_rate is None and rates.cooling_points_crossed == 0.0
    with pytest.raises(InputError, match="lower"):
        ht.cooling_rate_through(hist, 213.15, 253.15)


def test_sample_never_leaves_the_bath_range():
    """Maximum principle: no point is colder than the coldest bath or warmer than the warmest."""
    body = ht.Body("cylinder", radius=0.01, height=0.03)
    bt = [0.0, 1200.0, 1200.0, 4000.0, 6000.0]
    bT = [293.15, 270.0, 250.0, 250.0, 300.0]
    hist = ht.solve(body, MAT, bt, bT, [30.0, 30.0, 500.0, 500.0, 500.0])
    assert hist.coldest_temperature.min() >= 250.0 - 1e-9
    assert hist.warmest_temperature.max() <= 300.0 + 1e-9


# --- data: presets and sample properties -------------------------------------------------------------

def test_presets_are_documented_and_ordered():
    presets = ht.environment_presets()
    assert set(presets) == {"still-air", "forced-air", "stirred-bath", "ln2-vapour", "ln2-immersion"}
    for p in presets.values():
        assert 0 < p.h_low <= p.h_nominal <= p.h_high, p.name
        assert p.source in bibliography() and p.stands_for and p.label
    default = ht.default_environment()
    assert default.name == "still-air"
    assert default.h_nominal == min(p.h_nominal for p in presets.values())  # the slowest common case


def test_ln2_immersion_nominal_is_film_boiling_bromley():
    """Stable film boiling, Bromley (1950) as in Incropera & DeWitt eq. 10.9 (from memory):
    h = 0.62 [k_v^3 rho_v (rho_l - rho_v) g h_fg' / (mu_v D dT)]^(1/4), h_fg' = h_fg + 0.80 c_p,v dT,
    nitrogen properties from CoolProp. A 12.5 mm container 100 K above saturation: about 110 W/(m2 K);
    the preset's nominal is the film-boiling value within 30 %, and its range holds 3-30 mm at 30-200 K."""
    cp_mod = pytest.importorskip("CoolProp.CoolProp")
    p = 101325.0
    t_sat = cp_mod.PropsSI("T", "P", p, "Q", 0, "Nitrogen")
    rho_l = cp_mod.PropsSI("D", "P", p, "Q", 0, "Nitrogen")
    h_fg = cp_mod.PropsSI("H", "P", p, "Q", 1, "Nitrogen") - cp_mod.PropsSI("H", "P", p, "Q", 0, "Nitrogen")

    def bromley(d, dt):
        tf = t_sat + dt / 2
        k, rho_v, mu, cpv = (cp_mod.PropsSI(q, "P", p, "T", tf, "Nitrogen") for q in ("L", "D", "V", "C"))
        return 0.62 * (k**3 * rho_v * (rho_l - rho_v) * 9.81 * (h_fg + 0.8 * cpv * dt) / (mu * d * dt)) ** 0.25

    preset = ht.environment_preset("ln2-immersion")
    assert preset.h_nominal == pytest.approx(bromley(0.0125, 100.0), rel=0.3)
    for d in (0.003, 0.03):
        for dt in (30.0, 200.0):
            assert preset.h_low <= bromley(d, dt) <= preset.h_high


def test_water_properties_against_iapws():
    """Packaged table against the iapws package (IAPWS-95 / G12-15 / IAPWS 2011 conductivity)."""
    iapws = pytest.importorskip("iapws")
    from iapws._iapws import _Supercooled, _ThCond

    for celsius in (-30, -10, 0, 20, 40):
        t = celsius + 273.15
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if celsius < 0:
                s = _Supercooled(t, 0.101325)
                rho, cp = float(s["rho"]), float(s["cp"]) * 1000
            else:
                w = iapws.IAPWS95(T=t, P=0.101325)
                rho, cp = w.rho, w.cp * 1000
        k = _ThCond(rho, t)
        got = ht.water_properties(t)
        assert float(got[0]) == pytest.approx(rho, abs=0.006)
        assert float(got[1]) == pytest.approx(cp, abs=0.06)
        assert float(got[2]) == pytest.approx(k, abs=6e-5)


def test_water_properties_scalar_array_and_flag():
    rho, c, k = ht.water_properties(np.array([273.15, 293.15]))
    assert rho.shape == c.shape == k.shape == (2,)
    assert float(ht.water_properties(273.15)[2]) == pytest.approx(0.5556)
    with pytest.warns(UserWarning):
        cold = ht.liquid_water(200.0)
    assert [f.code for f in cold.flags] == ["extrapolated"]
    assert cold.conductivity == pytest.approx(0.4289)  # held at the -30 C row, never extrapolated


# --- bad input ----------------------------------------------------------------------------------------

@pytest.mark.parametrize("h", [-5.0, 0.0, float("nan"), 2e5, "fast"])
def test_bad_h_is_refused_naming_the_field(h):
    with pytest.raises(InputError, match=r"environment\.h_w_per_m2_k"):
        ht.check_heat_transfer_coefficient(h)
    with pytest.raises(InputError, match=r"^h:"):
        ht.solve(ht.Body("sphere", radius=0.01), MAT, [0.0, 10.0], [273.15, 273.15], h)


def test_unknown_preset_names_the_key_and_nearest():
    with pytest.raises(InputError, match=r"environment\.heat_transfer.*did you mean 'still-air'"):
        ht.environment_preset("still-aer")
    with pytest.raises(InputError, match=r"schedule\.steps\[3\]\.heat_transfer"):
        ht.environment_preset("ln2-bath", "schedule.steps[3].heat_transfer")


@pytest.mark.parametrize(("kwargs", "field"), [
    ({"geometry": "cube", "radius": 0.01}, "sample.geometry"),
    ({"geometry": "sphere", "radius": -0.01}, "sample.radius"),
    ({"geometry": "cylinder", "radius": 0.01}, "sample.height"),
    ({"geometry": "slab"}, "sample.thickness"),
])
def test_bad_body_is_refused(kwargs, field):
    with pytest.raises(InputError, match=field.replace(".", r"\.")):
        ht.Body(**kwargs)


def test_bad_histories_are_refused():
    body = ht.Body("sphere", radius=0.01)
    with pytest.raises(InputError, match="bath_time"):
        ht.solve(body, MAT, [10.0, 0.0], [273.15, 273.15], 5.0)
    with pytest.raises(InputError, match="bath_temperature"):
        ht.solve(body, MAT, [0.0, 10.0], [273.15, -1.0], 5.0)
    with pytest.raises(InputError, match="output_time"):
        ht.solve(body, MAT, [0.0, 10.0], [273.15, 273.15], 5.0, output_time=[0.0, 20.0])
    with pytest.raises(InputError, match="cells"):
        ht.solve(body, MAT, [0.0, 10.0], [273.15, 273.15], 5.0, cells=1)
    with pytest.raises(InputError, match="model"):
        ht.solve(body, MAT, [0.0, 10.0], [273.15, 273.15], 5.0, model="lumpd")


# --- properties over random histories --------------------------------------------------------------

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=20, deadline=None)
@given(
    geometry=st.sampled_from(["sphere", "cylinder", "slab"]),
    h=st.floats(1.0, 2000.0),
    temps=st.lists(st.floats(200.0, 320.0), min_size=2, max_size=6),
    durations=st.lists(st.one_of(st.just(0.0), st.floats(1e-3, 3600.0)), min_size=5, max_size=5),
)
def test_random_histories_stay_within_the_bath_and_conserve_energy(geometry, h, temps, durations):
    """For any piecewise-linear bath (plunges included): no point leaves the bath's range (maximum
    principle), and the heat that crossed the surface equals the heat stored."""
    body = {"sphere": ht.Body("sphere", radius=0.008), "cylinder": ht.Body("cylinder", radius=0.006, height=0.02),
            "slab": ht.Body("slab", thickness=0.01)}[geometry]
    bt = np.concatenate(([0.0], np.cumsum(durations[: len(temps) - 1]) + 1.0))
    bT = np.asarray(temps)
    # sample every interval densely, stepping just inside its ends so no trapezoid straddles a plunge
    # (geometric steps after each corner of the bath, where the heat flow changes fastest)
    parts = [np.union1d(np.linspace(a + 1e-9, b - 1e-9, 400), a + np.geomspace(1e-6, b - a - 1e-9, 400))
             for a, b in zip(bt[:-1], bt[1:], strict=True) if b > a]
    out_t = np.concatenate(([0.0], *parts, [bt[-1]]))
    hist = ht.solve(body, MAT, bt, bT, h, output_time=out_t, cells=8)
    assert hist.coldest_temperature.min() >= bT.min() - 1e-6
    assert hist.warmest_temperature.max() <= bT.max() + 1e-6
    crossed = np.trapezoid(hist.heat_flow, hist.time)
    scale = MAT.volumetric_heat_capacity * body.volume * (bT.max() - bT.min() + 1.0)
    assert crossed == pytest.approx(hist.energy[-1], abs=5e-3 * scale)
